//! How far one machine goes: invented place names at growing sizes, built with the command
//! line (wall time and peak memory of the process), then asked typo queries in-process
//! (approximate with the index's defaults, exact, and within 2), with recall against brute force.
//!
//! Run with `cargo bench --bench scale`. The machine is shared: the load average is printed
//! at the start and the end of each size. A table goes to stdout and two SVG charts to
//! `WAYMARK_SCALE_OUT` (`docs/` of the repository by default).
//!
//! Settings through the environment (defaults in brackets):
//! - `WAYMARK_SCALE_SIZES` item counts [1000000,3000000,10000000]
//! - `WAYMARK_SCALE_QUERIES` typo queries per size (1–3 edits of random items) [1000]
//! - `WAYMARK_SCALE_OUT` folder for `scale-build.svg` and `scale-queries.svg` [docs]
//! - `WAYMARK_SCALE_TMP` folder for the generated files and indexes [the system's temp]

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use waymark::eval::plot::{line_chart, Chart, Series};
use waymark::eval::{load_or_compute_truth, measure_recall, typo_queries};
use waymark::index::Index;
use waymark::search::{Request, SearchParams, Searcher};

fn env_list(name: &str, default: &str) -> Vec<usize> {
    std::env::var(name)
        .unwrap_or_else(|_| default.to_string())
        .split(',')
        .filter_map(|s| s.trim().parse().ok())
        .collect()
}

fn load() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|s| s.split_whitespace().next().unwrap_or("?").to_string())
        .unwrap_or_else(|_| "?".into())
}

/// Invented place names of a harbour register: one to three words of two to four invented
/// syllables (a few with letters outside ASCII), and often a kind of place. Seeded: the same
/// `n` and seed give the same file.
fn invent_names(n: usize, seed: u64) -> String {
    const SYL: &[&str] = &[
        "ar", "vel", "keth", "mor", "dun", "sk", "ov", "rin", "thal", "bre", "ost", "ulm", "vask",
        "er", "nid", "hol", "gar", "ly", "tor", "fen", "sjø", "wick", "bar", "ness", "øy", "dal",
        "mir", "quen", "stav", "lo", "ran", "ev", "kvé", "pel", "dra", "sund", "ang", "tiv",
    ];
    const KIND: &[&str] = &[
        "Quay", "Lane", "Strand", "Landing", "Steps", "Holme", "Row", "Yard", "Pier", "Mole",
        "Gate", "Wharf", "Reach", "Hythe", "Ness",
    ];
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut out = String::with_capacity(n * 18);
    for _ in 0..n {
        let words = rng.gen_range(1..=3);
        for w in 0..words {
            if w > 0 {
                out.push(' ');
            }
            let syllables = rng.gen_range(2..=4);
            for s in 0..syllables {
                let syl = SYL[rng.gen_range(0..SYL.len())];
                if s == 0 {
                    let mut cs = syl.chars();
                    let first = cs.next().expect("a syllable has a letter");
                    out.extend(first.to_uppercase());
                    out.push_str(cs.as_str());
                } else {
                    out.push_str(syl);
                }
            }
        }
        if rng.gen_bool(0.6) {
            out.push(' ');
            out.push_str(KIND[rng.gen_range(0..KIND.len())]);
        }
        out.push('\n');
    }
    out
}

/// Runs `waymark ARGS` under GNU time: (wall seconds, peak RSS in bytes).
fn timed_waymark(args: &[&std::ffi::OsStr]) -> (f64, Option<u64>) {
    let t = Instant::now();
    let out = Command::new("/usr/bin/time")
        .arg("-v")
        .arg(env!("CARGO_BIN_EXE_waymark"))
        .args(args)
        .stdout(std::process::Stdio::null())
        .output()
        .expect("/usr/bin/time runs (apt-get install -y time)");
    let secs = t.elapsed().as_secs_f64();
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "waymark {args:?} failed:\n{err}");
    let kb = err.lines().find_map(|l| {
        l.trim()
            .strip_prefix("Maximum resident set size (kbytes): ")
            .and_then(|v| v.trim().parse::<u64>().ok())
    });
    (secs, kb.map(|k| k * 1024))
}

struct Row {
    n: usize,
    text_mb: f64,
    build_s: f64,
    build_peak_mb: Option<f64>,
    index_mb: f64,
    candidates: usize,
    approx_qps: f64,
    recall: f64,
    exact_qps: f64,
    within_qps: f64,
    within_found: f64,
    truth_s: f64,
    query_peak_mb: Option<f64>,
}

fn main() {
    let sizes = env_list("WAYMARK_SCALE_SIZES", "1000000,3000000,10000000");
    let nq = env_list("WAYMARK_SCALE_QUERIES", "1000")[0];
    let out_dir = PathBuf::from(std::env::var("WAYMARK_SCALE_OUT").unwrap_or_else(|_| {
        Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("docs")
            .display()
            .to_string()
    }));
    let tmp = match std::env::var("WAYMARK_SCALE_TMP") {
        Ok(p) => tempfile::tempdir_in(p),
        Err(_) => tempfile::tempdir(),
    }
    .expect("temp dir");
    let k = 10;
    println!(
        "invented place names; {nq} typo queries (1-3 edits) per size; k = {k}; {} threads",
        rayon::current_num_threads()
    );
    let mut rows = Vec::new();
    for &n in &sizes {
        let load0 = load();
        let names = invent_names(n, 20261203 ^ n as u64);
        let input = tmp.path().join(format!("names-{n}.txt"));
        std::fs::write(&input, &names).expect("write names");
        let items: Vec<&str> = names.lines().collect();
        let queries = typo_queries(&items, nq, 7 ^ n as u64);
        let qfile = tmp.path().join(format!("queries-{n}.txt"));
        std::fs::write(&qfile, queries.join("\n") + "\n").expect("write queries");
        let text_mb = names.len() as f64 / 1e6;
        drop(items);
        drop(names);

        let index_path = tmp.path().join(format!("names-{n}.wmk"));
        let (build_s, build_peak) = timed_waymark(&[
            "build".as_ref(),
            input.as_os_str(),
            "-o".as_ref(),
            index_path.as_os_str(),
            "-q".as_ref(),
        ]);
        let index_mb = std::fs::metadata(&index_path).expect("index").len() as f64 / 1e6;
        let (_, query_peak) = timed_waymark(&[
            "query".as_ref(),
            index_path.as_os_str(),
            "--queries".as_ref(),
            qfile.as_os_str(),
            "-k".as_ref(),
            "10".as_ref(),
        ]);

        let index = Index::open(&index_path).expect("index opens");
        let params = SearchParams::from_index(&index, k);
        let t = Instant::now();
        let (truth, _) = load_or_compute_truth(&index, &queries, None, k, &|_| {});
        let truth_s = t.elapsed().as_secs_f64();
        let row = measure_recall(&index, &queries, &truth, &params).expect("approximate answers");
        let searcher = Searcher::new(&index);
        let t = Instant::now();
        let exact = searcher.answer_many(&queries, &Request::Exact { k });
        let exact_s = t.elapsed().as_secs_f64();
        assert!(exact.iter().all(|r| r.is_ok()), "exact answers");
        let t = Instant::now();
        let within = searcher.answer_many(
            &queries,
            &Request::Within {
                radius: 2.0,
                k: None,
            },
        );
        let within_s = t.elapsed().as_secs_f64();
        let found: usize = within
            .iter()
            .map(|r| r.as_ref().expect("range answers").neighbors.len())
            .sum();
        let r = Row {
            n,
            text_mb,
            build_s,
            build_peak_mb: build_peak.map(|b| b as f64 / 1e6),
            index_mb,
            candidates: params.candidates,
            approx_qps: row.qps,
            recall: row.recall,
            exact_qps: nq as f64 / exact_s,
            within_qps: nq as f64 / within_s,
            within_found: found as f64 / nq as f64,
            truth_s,
            query_peak_mb: query_peak.map(|b| b as f64 / 1e6),
        };
        println!(
            "n = {n}: text {:.1} MB; build {:.1} s, peak {:.0} MB, index {:.1} MB; approx C = {} {:.0} q/s recall@10 {:.4}; exact {:.1} q/s; within 2 {:.0} q/s, {:.1} found; brute force {:.1} s; query process peak {:.0} MB; load {load0} -> {}",
            r.text_mb,
            r.build_s,
            r.build_peak_mb.unwrap_or(f64::NAN),
            r.index_mb,
            r.candidates,
            r.approx_qps,
            r.recall,
            r.exact_qps,
            r.within_qps,
            r.within_found,
            r.truth_s,
            r.query_peak_mb.unwrap_or(f64::NAN),
            load()
        );
        rows.push(r);
        drop(index);
        let _ = std::fs::remove_file(&index_path);
        let _ = std::fs::remove_file(&input);
    }

    println!();
    println!("| items | text | build | build peak memory | index | approximate (C) | recall@10 | exact | within 2 (found) | query process peak |");
    println!("|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|");
    for r in &rows {
        println!(
            "| {} | {:.0} MB | {:.1} s | {:.0} MB | {:.0} MB | {:.0} q/s ({}) | {:.4} | {:.1} q/s | {:.0} q/s ({:.1}) | {:.0} MB |",
            r.n,
            r.text_mb,
            r.build_s,
            r.build_peak_mb.unwrap_or(f64::NAN),
            r.index_mb,
            r.approx_qps,
            r.candidates,
            r.recall,
            r.exact_qps,
            r.within_qps,
            r.within_found,
            r.query_peak_mb.unwrap_or(f64::NAN)
        );
    }
    let millions = |f: &dyn Fn(&Row) -> f64| -> Vec<(f64, f64)> {
        rows.iter().map(|r| (r.n as f64 / 1e6, f(r))).collect()
    };
    std::fs::create_dir_all(&out_dir).expect("chart folder");
    let build_chart = out_dir.join("scale-build.svg");
    line_chart(
        &build_chart,
        &Chart {
            title: "One machine: build of invented names",
            x_label: "items (millions, log scale)",
            y_label: "seconds / GB",
            x_log: true,
            y_range: None,
            lines: true,
        },
        &[
            Series {
                label: "build wall time (s)".into(),
                points: millions(&|r| r.build_s),
            },
            Series {
                label: "build peak memory (GB)".into(),
                points: millions(&|r| r.build_peak_mb.unwrap_or(0.0) / 1e3),
            },
            Series {
                label: "index size (GB)".into(),
                points: millions(&|r| r.index_mb / 1e3),
            },
        ],
    )
    .expect("build chart");
    let query_chart = out_dir.join("scale-queries.svg");
    line_chart(
        &query_chart,
        &Chart {
            title: "One machine: typo queries, k = 10, both cores",
            x_label: "items (millions, log scale)",
            y_label: "queries per second",
            x_log: true,
            y_range: None,
            lines: true,
        },
        &[
            Series {
                label: "approximate, defaults".into(),
                points: millions(&|r| r.approx_qps),
            },
            Series {
                label: "exact".into(),
                points: millions(&|r| r.exact_qps),
            },
            Series {
                label: "within 2".into(),
                points: millions(&|r| r.within_qps),
            },
        ],
    )
    .expect("query chart");
    println!(
        "charts: {} and {}",
        build_chart.display(),
        query_chart.display()
    );
}
