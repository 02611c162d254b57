//! Cost of the metrics beyond Levenshtein, each against a reference in the same run.
//!
//! - Damerau–Levenshtein (ours, prepared query) vs `strsim::damerau_levenshtein`, on pairs of
//!   Debian `wamerican` words (or generated words when the list is missing).
//! - The external-program protocol: per-pair time of batches sent to
//!   `examples/metric_server.py --metric length` (a trivial distance, so the figure is the
//!   protocol: JSON encoding, the pipe, Python's JSON decoding and encoding, our parsing).
//!
//! `cargo bench --bench metrics`; `WAYMARK_BENCH_BATCH` sets the batch size (default 1000).

use std::hint::black_box;
use std::time::{Duration, Instant};

use waymark::metric::{Damerau, ExternalMetric, Metric, PreparedQuery};

fn words() -> Vec<String> {
    match std::fs::read_to_string("/usr/share/dict/american-english") {
        Ok(t) => t.lines().step_by(50).map(String::from).collect(),
        Err(_) => (0..2000)
            .map(|i| format!("word{}x{}", i * 7919 % 1000, i % 13))
            .collect(),
    }
}

/// Best of `runs` timings of `f`, in seconds.
fn best(runs: usize, mut f: impl FnMut()) -> f64 {
    (0..runs)
        .map(|_| {
            let t = Instant::now();
            f();
            t.elapsed().as_secs_f64()
        })
        .fold(f64::INFINITY, f64::min)
}

fn main() {
    let w = words();
    let queries: Vec<&String> = w.iter().step_by(41).take(50).collect();
    let pairs = (queries.len() * w.len()) as f64;
    let ours = best(3, || {
        for q in &queries {
            let p = Damerau.prepare(q.as_bytes());
            for x in &w {
                black_box(p.distance(x.as_bytes()));
            }
        }
    });
    let reference = best(3, || {
        for q in &queries {
            for x in &w {
                black_box(strsim::damerau_levenshtein(q, x));
            }
        }
    });
    println!(
        "damerau: ours {:.1} M pairs/s, strsim {:.1} M pairs/s ({:.2}x), {} words, one thread",
        pairs / ours / 1e6,
        pairs / reference / 1e6,
        reference / ours,
        w.len()
    );

    let batch: usize = std::env::var("WAYMARK_BENCH_BATCH")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(1000);
    let cmd = [
        "python3".to_string(),
        concat!(env!("CARGO_MANIFEST_DIR"), "/examples/metric_server.py").to_string(),
        "--metric".to_string(),
        "length".to_string(),
    ];
    let m = match ExternalMetric::spawn(&cmd, Duration::from_secs(60)) {
        Ok(m) => m,
        Err(e) => {
            println!("external: skipped ({e})");
            return;
        }
    };
    let items: Vec<&[u8]> = w.iter().cycle().take(batch).map(|s| s.as_bytes()).collect();
    let mut out = vec![0.0; batch];
    let q = m.prepare(b"Orvane Quay");
    let rounds = (200_000 / batch).max(5);
    let t = best(3, || {
        for _ in 0..rounds {
            q.distances(&items, &mut out);
        }
    });
    m.check().expect("the trivial server answers");
    let per_pair = t / (rounds * batch) as f64;
    println!(
        "external protocol (trivial python3 server): {:.2} µs per pair in batches of {batch} ({:.0} µs per batch)",
        per_pair * 1e6,
        per_pair * batch as f64 * 1e6
    );
}
