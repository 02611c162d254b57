//! Cost of the metrics beyond Levenshtein, each against a reference in the same run.
//!
//! - Damerau–Levenshtein (ours, prepared query) vs `strsim::damerau_levenshtein`, on pairs of
//!   Debian `wamerican` words (or generated words when the list is missing).
//! - The external-program protocol: per-pair time of batches sent to
//!   `examples/metric_server.py --metric length` (a trivial distance, so the figure is the
//!   protocol: JSON encoding, the pipe, Python's JSON decoding and encoding, our parsing).
//!
//! - The kernels of Hamming, Jaccard and the vector metrics at every dispatch level this CPU
//!   runs (`waymark::cpu::Level`), each against a plain loop written here, in one run:
//!   Hamming on invented DNA barcodes of 12, 24 and 150 bases (a few substitutions from a
//!   common ancestor); Jaccard 2- and 3-grams on the word list (the plain loop is the sorted
//!   merge of byte-string grams); L1, L2 and angular distance on seeded random vectors of
//!   16, 100 and 768 components (the plain loop sums left to right in f64). Every level's
//!   answers are checked against the plain loop's (exactly, or within the summation error
//!   for the vectors) before they are timed.
//!
//! `cargo bench --bench metrics`; `cargo bench --bench metrics -- kernels` runs only the
//! kernels; `WAYMARK_BENCH_BATCH` sets the batch size (default 1000).

mod common;

use std::hint::black_box;
use std::time::{Duration, Instant};

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use waymark::cpu::Level;
use waymark::metric::{
    vector_bytes, Damerau, ExternalMetric, HammingQuery, Jaccard, Metric, Norm, PreparedQuery,
    Tokens, VectorMetric,
};

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

fn levels() -> Vec<Level> {
    Level::ALL.into_iter().filter(|l| l.available()).collect()
}

/// Prints one line: the plain loop's rate and each level's, with its ratio to the plain loop.
fn report(what: &str, pairs: f64, plain: f64, at: &[(Level, f64)]) {
    let mut line = format!("{what}: plain {:.1} M/s", pairs / plain / 1e6);
    for (level, t) in at {
        line += &format!(
            ", {} {:.1} M/s ({:.2}x)",
            level.name(),
            pairs / t / 1e6,
            plain / t
        );
    }
    println!("{line}");
}

/// Invented barcodes of `len` bases: a seeded ancestor with up to four substitutions each.
fn barcodes(len: usize, n: usize, seed: u64) -> Vec<Vec<u8>> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let base: Vec<u8> = (0..len).map(|_| b"ACGT"[rng.gen_range(0..4)]).collect();
    (0..n)
        .map(|_| {
            let mut b = base.clone();
            for _ in 0..rng.gen_range(0..=4) {
                let at = rng.gen_range(0..len);
                b[at] = b"ACGT"[rng.gen_range(0..4)];
            }
            b
        })
        .collect()
}

fn hamming() {
    for len in [12, 24, 150] {
        let items = barcodes(len, 200_000, len as u64);
        let query = items[7].clone();
        // The plain loop: the barcodes are ASCII, so bytes are chars.
        let plain_dist = |x: &[u8]| {
            query.iter().zip(x).filter(|(a, b)| a != b).count() + query.len().abs_diff(x.len())
        };
        let want: usize = items.iter().map(|x| plain_dist(x)).sum();
        let plain = best(5, || {
            for x in &items {
                black_box(plain_dist(black_box(x)));
            }
        });
        let mut at = Vec::new();
        for level in levels() {
            let q = HammingQuery::with_level(&query, level);
            let got: usize = items.iter().map(|x| q.dist(x)).sum();
            assert_eq!(got, want, "hamming {} disagrees", level.name());
            at.push((
                level,
                best(5, || {
                    for x in &items {
                        black_box(q.dist(black_box(x)));
                    }
                }),
            ));
        }
        report(
            &format!("hamming, {len} bases, {} pairs", items.len()),
            items.len() as f64,
            plain,
            &at,
        );
    }
}

fn jaccard(words: &[Vec<u8>]) {
    let queries: Vec<&Vec<u8>> = words.iter().step_by(2087).take(50).collect();
    let pairs = (queries.len() * words.len()) as f64;
    for q in [2usize, 3] {
        // The plain loop: byte-string grams (windows of bytes; of chars for the few
        // non-ASCII words), sorted, de-duplicated and merged.
        let grams = |s: &[u8]| -> Vec<Vec<u8>> {
            let mut g: Vec<Vec<u8>> = if s.is_ascii() {
                if s.len() <= q {
                    vec![s.to_vec()]
                } else {
                    s.windows(q).map(<[u8]>::to_vec).collect()
                }
            } else {
                let c: Vec<char> = String::from_utf8_lossy(s).chars().collect();
                if c.len() <= q {
                    vec![s.to_vec()]
                } else {
                    c.windows(q)
                        .map(|w| w.iter().collect::<String>().into_bytes())
                        .collect()
                }
            };
            if s.is_empty() {
                g.clear();
            }
            g.sort_unstable();
            g.dedup();
            g
        };
        let plain_dist = |a: &[Vec<u8>], b: &[u8]| {
            // Slices of the item, as a prepared query keeps its own grams.
            let b: Vec<&[u8]> = if b.is_ascii() && b.len() > q {
                let mut g: Vec<&[u8]> = b.windows(q).collect();
                g.sort_unstable();
                g.dedup();
                g
            } else {
                return plain_slow(a, &grams(b));
            };
            plain_slow(a, &b)
        };
        fn plain_slow<T: AsRef<[u8]>>(a: &[Vec<u8>], b: &[T]) -> f64 {
            let (mut i, mut j, mut shared) = (0, 0, 0);
            while i < a.len() && j < b.len() {
                match a[i].as_slice().cmp(b[j].as_ref()) {
                    std::cmp::Ordering::Less => i += 1,
                    std::cmp::Ordering::Greater => j += 1,
                    std::cmp::Ordering::Equal => {
                        shared += 1;
                        i += 1;
                        j += 1;
                    }
                }
            }
            let union = a.len() + b.len() - shared;
            if union == 0 {
                0.0
            } else {
                1.0 - shared as f64 / union as f64
            }
        }
        let prepared: Vec<Vec<Vec<u8>>> = queries.iter().map(|w| grams(w)).collect();
        let want: Vec<f64> = prepared
            .iter()
            .flat_map(|a| words.iter().map(|x| plain_dist(a, x)))
            .collect();
        let plain = best(3, || {
            for a in &prepared {
                for x in words {
                    black_box(plain_dist(a, black_box(x)));
                }
            }
        });
        let m = Jaccard::new(Tokens::QGrams(q)).expect("q ≥ 1");
        let mut at = Vec::new();
        for level in levels() {
            let ps: Vec<_> = queries
                .iter()
                .map(|w| m.prepare_with_level(w, level))
                .collect();
            let got: Vec<f64> = ps
                .iter()
                .flat_map(|p| words.iter().map(|x| p.distance(x)))
                .collect();
            assert!(got == want, "jaccard {} disagrees", level.name());
            at.push((
                level,
                best(3, || {
                    for p in &ps {
                        for x in words {
                            black_box(p.distance(black_box(x)));
                        }
                    }
                }),
            ));
        }
        report(
            &format!(
                "jaccard {q}-grams, {} words x {} queries",
                words.len(),
                queries.len()
            ),
            pairs,
            plain,
            &at,
        );
    }
}

fn vectors() {
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    for dim in [16usize, 100, 768] {
        let n = 4_000_000 / dim;
        let vs: Vec<Vec<f32>> = (0..n)
            .map(|_| (0..dim).map(|_| rng.gen_range(-1.0f32..1.0)).collect())
            .collect();
        let items: Vec<Vec<u8>> = vs.iter().map(|v| vector_bytes(v)).collect();
        let query = &vs[3];
        for norm in [Norm::L1, Norm::L2, Norm::Angular] {
            let lq = query
                .iter()
                .map(|&a| f64::from(a).powi(2))
                .sum::<f64>()
                .sqrt();
            let unit: Vec<f64> = query.iter().map(|&a| f64::from(a) / lq).collect();
            // The plain loop: decode and sum left to right in f64.
            let plain_dist = |x: &[u8]| -> f64 {
                let x = x
                    .chunks_exact(4)
                    .map(|c| f64::from(f32::from_le_bytes([c[0], c[1], c[2], c[3]])));
                let q = query.iter().map(|&v| f64::from(v));
                match norm {
                    Norm::L1 => q.zip(x).map(|(a, b)| (a - b).abs()).sum(),
                    Norm::L2 => q.zip(x).map(|(a, b)| (a - b) * (a - b)).sum::<f64>().sqrt(),
                    _ => {
                        // The library's formula, 2·atan2(|q̂ − x̂|, |q̂ + x̂|)/π, with q̂
                        // made once.
                        let lx = x.clone().map(|b| b * b).sum::<f64>().sqrt();
                        let (mut minus, mut plus) = (0.0, 0.0);
                        for (a, b) in unit.iter().zip(x) {
                            let b = b / lx;
                            minus += (a - b) * (a - b);
                            plus += (a + b) * (a + b);
                        }
                        2.0 * f64::sqrt(minus).atan2(plus.sqrt()) / std::f64::consts::PI
                    }
                }
            };
            let want: Vec<f64> = items.iter().map(|x| plain_dist(x)).collect();
            let plain = best(5, || {
                for x in &items {
                    black_box(plain_dist(black_box(x)));
                }
            });
            let m = VectorMetric::new(norm, dim).expect("dim ≥ 1");
            let mut at = Vec::new();
            for level in levels() {
                let p = m.prepare_with_level(&vector_bytes(query), level);
                for (x, w) in items.iter().zip(&want) {
                    let d = p.distance(x);
                    assert!(
                        (d - w).abs() <= 1e-9 * w.max(1.0),
                        "{norm:?} {}",
                        level.name()
                    );
                }
                at.push((
                    level,
                    best(5, || {
                        for x in &items {
                            black_box(p.distance(black_box(x)));
                        }
                    }),
                ));
            }
            report(
                &format!("{norm:?}, {dim} components, {n} vectors"),
                n as f64,
                plain,
                &at,
            );
        }
    }
}

fn main() {
    println!(
        "levels: {:?}",
        levels().iter().map(|l| l.name()).collect::<Vec<_>>()
    );
    let all: Vec<Vec<u8>> = common::words(100_000);
    hamming();
    jaccard(&all);
    vectors();
    if std::env::args().any(|a| a == "kernels") {
        return;
    }
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
