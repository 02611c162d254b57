//! The large bench: Debian's wamerican-insane list (663,473 words), every query mode and the
//! two brute forces in one run, plus build time, index size and a query process's peak RSS.
//!
//! Run with `cargo bench --bench big`. Compare ratios measured in one run: the machine is
//! shared, absolute figures are noisy. Ratios are against the reference scan (rapidfuzz's
//! parallel all-pairs scan, a general-purpose fuzzy-string library: see
//! `benches/common/reference.rs`; `scripts/bench-deps.sh` installs it), checked against
//! waymark's brute force on every query; without it the bench says so and gives ratios
//! against waymark's own full scan only.
//!
//! Each of waymark's timed batches runs until its runs last half a second in all, and the
//! mean is reported (`benches/common/timing.rs`): one batch of 1,000 fast queries lasts a
//! few milliseconds.
//!
//! Settings through the environment (defaults in brackets):
//! - `WAYMARK_BIG_WORDS` word list [/usr/share/dict/american-english-insane]
//! - `WAYMARK_BIG_QUERIES` number of typo queries [1000]
//! - `WAYMARK_BIG_SEED` seed of the typo queries, for an independent query set [20261202]
//! - `WAYMARK_BIG_CANDIDATES` extra candidate counts for the approximate path [2000]
//! - `WAYMARK_BIG_VISIT` rows compared per candidate with cells, beside the default, for
//!   every candidate count [8,32]
//! - `WAYMARK_BIG_SCAN` candidate counts measured with the whole-index scan [2000,4000]
//! - `WAYMARK_BIG_DIM` embedding dimension of the index [the default]
//! - `WAYMARK_BIG_PROFILE` `approx` (the default: char counts), `embedded` (the
//!   embedding's default), `exact` or `range`: run only that mode, three times,
//!   without brute forces or checks (for a profiler); `approx-one` and `embedded-one`
//!   ask the same one query a call (`Searcher::search`), as a script asking line by line
//!   [unset]
//! - `WAYMARK_BIG_TIMES` how many times that one mode runs [3]
//! - `WAYMARK_BIG_SMALL` radii of deletion-variant tables (`build --small-radius`): for
//!   each, a second index is built with the table, and range R = 1, R = 2 and exact
//!   queries run on it, checked against brute force [2; empty: none]

use std::path::{Path, PathBuf};
use std::time::Instant;

use rayon::prelude::*;
use waymark::eval::{scan_many, threshold_recall, typo_queries, Scan};
use waymark::index::{build_index, BuildOptions, Index};
use waymark::ingest::{read_corpus, IngestOptions};
use waymark::search::{Found, Neighbor, Request, SearchParams, Searcher};

#[path = "common/reference.rs"]
mod reference;
#[path = "common/timing.rs"]
mod timing;

/// One number from the environment, or `default` when it is unset, empty or not a number.
fn env_one<T: std::str::FromStr>(name: &str, default: T) -> T {
    env_list(name, "").into_iter().next().unwrap_or(default)
}

fn env_list<T: std::str::FromStr>(name: &str, default: &str) -> Vec<T> {
    std::env::var(name)
        .unwrap_or_else(|_| default.to_string())
        .split(',')
        .filter_map(|s| s.trim().parse().ok())
        .collect()
}

struct Row {
    name: String,
    qps: f64,
    dists: f64,
    recall: f64,
}

/// Peak resident memory (kB) of `waymark query` answering `queries`, from GNU time.
fn query_peak_rss(index: &Path, queries: &Path, extra: &[&str]) -> Option<u64> {
    let out = std::process::Command::new("/usr/bin/time")
        .arg("-v")
        .arg(env!("CARGO_BIN_EXE_waymark"))
        .arg("query")
        .arg(index)
        .arg("--queries")
        .arg(queries)
        .args(extra)
        .stdout(std::process::Stdio::null())
        .output()
        .ok()?;
    let err = String::from_utf8_lossy(&out.stderr);
    err.lines()
        .find_map(|l| {
            l.trim()
                .strip_prefix("Maximum resident set size (kbytes): ")
        })
        .and_then(|v| v.trim().parse().ok())
}

fn main() {
    let words = PathBuf::from(
        std::env::var("WAYMARK_BIG_WORDS")
            .unwrap_or_else(|_| "/usr/share/dict/american-english-insane".into()),
    );
    if !words.exists() {
        eprintln!(
            "{} is missing: install Debian's wamerican-insane (apt-get install -y wamerican-insane)",
            words.display()
        );
        return;
    }
    let nq: usize = env_one("WAYMARK_BIG_QUERIES", 1000);
    let extra_c: Vec<usize> = env_list("WAYMARK_BIG_CANDIDATES", "2000");
    let visits: Vec<usize> = env_list("WAYMARK_BIG_VISIT", "8,32");
    let scan_c: Vec<usize> = env_list("WAYMARK_BIG_SCAN", "2000,4000");
    let dim: usize = env_one("WAYMARK_BIG_DIM", waymark::search::DEFAULT_DIM);
    let k = 10;
    let corpus = read_corpus(&words, &IngestOptions::default()).expect("word list reads");
    let n = corpus.items.len();
    let raw_bytes = std::fs::metadata(&words).map(|m| m.len()).unwrap_or(0);
    let seed: u64 = env_one("WAYMARK_BIG_SEED", 20261202);
    let queries = typo_queries(&corpus.items, nq, seed);
    println!(
        "word list {}: {n} items, {raw_bytes} bytes; {nq} typo queries (1-3 edits, seed {seed}); k = {k}; {} threads",
        words.display(),
        rayon::current_num_threads()
    );

    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("big.wmk");
    let t = Instant::now();
    let report = build_index(
        &corpus,
        "bench",
        &BuildOptions {
            dim,
            ..BuildOptions::default()
        },
        &path,
        &|_| {},
    )
    .expect("build");
    let build_s = t.elapsed().as_secs_f64();
    drop(corpus);
    let index = Index::open(&path).expect("open");
    let d = index.meta().dim as usize;
    let size_limit = 3 * (raw_bytes + 4 * d as u64 * n as u64);
    println!(
        "build (d = {d}): {build_s:.2} s; index {} bytes ({:.1} MB; limit 3 × (text + 4·d·n) = {:.1} MB)",
        report.file_len,
        report.file_len as f64 / 1e6,
        size_limit as f64 / 1e6
    );
    let searcher = Searcher::new(&index);
    if let Ok(mode) = std::env::var("WAYMARK_BIG_PROFILE") {
        // One mode only, repeated, no brute force: for a profiler.
        let req = match mode.as_str() {
            "exact" => Request::Exact { k },
            "range" => Request::Within {
                radius: 2.0,
                k: None,
            },
            "embedded" | "embedded-one" => Request::Approximate(SearchParams::embedded(&index, k)),
            _ => Request::Approximate(SearchParams::from_index(&index, k)),
        };
        let one_by_one = mode.ends_with("-one");
        let times: usize = std::env::var("WAYMARK_BIG_TIMES")
            .ok()
            .and_then(|v| v.parse().ok())
            .unwrap_or(3);
        for _ in 0..times {
            let t = Instant::now();
            let found = if one_by_one {
                // One query a call, as a script asking line by line does (after the first
                // run, the searcher is warm).
                let Request::Approximate(p) = &req else {
                    unreachable!("one by one is approximate")
                };
                queries
                    .par_iter()
                    .map_init(Default::default, |s, q| searcher.search(q, p, s))
                    .collect::<Vec<_>>()
            } else {
                searcher.answer_many(&queries, &req)
            };
            let secs = t.elapsed().as_secs_f64();
            let (mut examined, mut computed) = (0, 0);
            for f in found.iter().flatten() {
                // Approximate answers carry no certificate: their measured count is theirs.
                match f.certificate {
                    Some(c) => {
                        examined += c.examined;
                        computed += c.computed;
                    }
                    None => computed += f.distances,
                }
            }
            println!(
                "{mode}: {:.1} q/s; {} examined, {} measured per query",
                found.len() as f64 / secs,
                examined / found.len().max(1),
                computed / found.len().max(1)
            );
        }
        return;
    }
    let plain = Searcher::new(&index);

    let t = Instant::now();
    let truth = scan_many(&index, &queries, k, Scan::Full).expect("k > 0");
    let full_qps = nq as f64 / t.elapsed().as_secs_f64();
    let t = Instant::now();
    let best = scan_many(&index, &queries, k, Scan::Best).expect("k > 0");
    let best_qps = nq as f64 / t.elapsed().as_secs_f64();
    assert_eq!(truth, best, "the two brute forces disagree");
    let truth_d: Vec<Vec<f64>> = truth
        .iter()
        .map(|t| t.iter().map(|n| n.distance).collect())
        .collect();
    println!(
        "full scan {full_qps:.1} q/s ({:.1} M pairs/s); best scan {best_qps:.1} q/s",
        full_qps * n as f64 / 1e6
    );
    let reference = reference::Reference::find().map(|r| {
        let version = r.version();
        let scan = r.scan(n, |i| index.key(i), &queries, k);
        let checked = scan.check(&truth, k);
        println!(
            "{} [rapidfuzz {version}]; distances equal waymark's brute force on all {checked} queries",
            scan.describe(n)
        );
        println!(
            "own full scan vs reference: {:.2}x the reference's pairs/s (cdist alone), {:.2}x its q/s",
            full_qps * n as f64 / scan.pairs_per_s(n),
            full_qps / scan.qps()
        );
        scan
    });
    let ref_qps = reference.as_ref().map(|r| r.qps());
    let mut rows = Vec::new();
    if let Some(q) = ref_qps {
        rows.push(Row {
            name: "reference scan (rapidfuzz cdist)".into(),
            qps: q,
            dists: n as f64,
            recall: 1.0,
        });
    }
    rows.extend([
        Row {
            name: "full scan (unbounded, all cores)".into(),
            qps: full_qps,
            dists: n as f64,
            recall: 1.0,
        },
        Row {
            name: "best scan (bounded, running k-th)".into(),
            qps: best_qps,
            dists: n as f64,
            recall: 1.0,
        },
    ]);

    // Each mode's batch runs until the runs last half a second in all; the mean counts.
    let run_on = |searcher: &Searcher, req: &Request| -> (f64, Vec<Found>) {
        let (secs, found, _) = timing::mean_secs(|| {
            searcher
                .answer_many(&queries, req)
                .into_iter()
                .map(|f| f.expect("query"))
                .collect::<Vec<Found>>()
        });
        (nq as f64 / secs, found)
    };
    let summarise = |name: String, qps: f64, found: &[Found]| {
        let mut rec = 0.0;
        let mut dist = 0usize;
        for (f, td) in found.iter().zip(&truth_d) {
            dist += f.distances;
            let got: Vec<(u32, f64)> = f.neighbors.iter().map(|n| (n.index, n.distance)).collect();
            rec += threshold_recall(td, &got, k);
        }
        Row {
            name,
            qps,
            dists: dist as f64 / nq as f64,
            recall: rec / nq as f64,
        }
    };

    let run = |req: &Request| run_on(&searcher, req);
    // One-time costs of a process, kept out of the timed rows: the cells' check on first
    // use, and the column blocks of the exact path (one query of each kind).
    let t = Instant::now();
    let _ = plain.answer_many(
        &queries[..1],
        &Request::Approximate(SearchParams::embedded(&index, k)),
    );
    let first_cells = t.elapsed().as_secs_f64();
    // The default approximate query's char counts, made once per searcher.
    let _ = plain.answer_many(
        &queries[..1],
        &Request::Approximate(SearchParams::from_index(&index, k)),
    );
    let t = Instant::now();
    let _ = searcher.answer_many(&queries[..1], &Request::Exact { k });
    let first_exact = t.elapsed().as_secs_f64();
    println!(
        "first query of a process: {:.0} ms approximate on the embedding (checks the cells), {:.0} ms exact or approximate by char counts (makes the char-count tally, or the column blocks for other metrics)",
        first_cells * 1e3,
        first_exact * 1e3
    );
    let counts = SearchParams::from_index(&index, k);
    let (qps, found) = run_on(&plain, &Request::Approximate(counts));
    rows.push(summarise(
        format!("approx. default (candidates from {})", counts.source.name()),
        qps,
        &found,
    ));
    let default = SearchParams::embedded(&index, k);
    let mut cs = vec![default.candidates];
    cs.extend(extra_c.iter().copied().filter(|&c| c != default.candidates));
    for c in cs {
        let p = default.with_candidates(c);
        let (qps, found) = run_on(&plain, &Request::Approximate(p));
        let tag = if c == default.candidates {
            " (embedding default)"
        } else {
            ""
        };
        rows.push(summarise(
            format!("approx. C={c}, visit {}{tag}", p.visit),
            qps,
            &found,
        ));
        for &v in &visits {
            let p = SearchParams { visit: v * c, ..p };
            let (qps, found) = run_on(&plain, &Request::Approximate(p));
            rows.push(summarise(
                format!("approx. C={c}, visit {}", p.visit),
                qps,
                &found,
            ));
        }
    }

    for &c in &scan_c {
        let p = SearchParams {
            source: waymark::search::CandidateSource::Scan,
            ..default.with_candidates(c)
        };
        let (qps, found) = run_on(&plain, &Request::Approximate(p));
        rows.push(summarise(
            format!("approx. C={c}, scan of all rows"),
            qps,
            &found,
        ));
    }

    let (qps, found) = run(&Request::Exact { k });
    for (f, t) in found.iter().zip(&truth) {
        assert_eq!(&f.neighbors, t, "exact answer differs from the brute force");
    }
    let computed: f64 = found
        .iter()
        .map(|f| f.certificate.map_or(0, |c| c.computed) as f64)
        .sum::<f64>()
        / nq as f64;
    let examined: f64 = found
        .iter()
        .map(|f| f.certificate.map_or(0, |c| c.examined) as f64)
        .sum::<f64>()
        / nq as f64;
    println!("exact k={k}: {examined:.0} items examined, {computed:.0} measured per query");
    rows.push(summarise(format!("exact k={k}"), qps, &found));

    let radius = 2.0;
    let (qps, found) = run(&Request::Within { radius, k: None });
    // The range answers against a bounded brute force over every item.
    let t = Instant::now();
    let brute: Vec<Vec<Neighbor>> = queries
        .par_iter()
        .map(|q| {
            let p = waymark::metric::LevenshteinQuery::new(q.as_bytes());
            let keys = index.keys();
            (0..n)
                .filter_map(|i| {
                    p.dist_within(keys.get(i), radius as u32).map(|d| Neighbor {
                        index: i as u32,
                        distance: f64::from(d),
                    })
                })
                .collect()
        })
        .collect();
    let brute_qps = nq as f64 / t.elapsed().as_secs_f64();
    let mut total = 0usize;
    for (f, b) in found.iter().zip(&brute) {
        let mut got: Vec<u32> = f.neighbors.iter().map(|n| n.index).collect();
        got.sort_unstable();
        let want: Vec<u32> = b.iter().map(|n| n.index).collect();
        assert_eq!(got, want, "range answer differs from the brute force");
        total += got.len();
    }
    println!(
        "range R={radius}: {:.1} items per query on average; bounded brute-force range {brute_qps:.1} q/s",
        total as f64 / nq as f64
    );
    let mut r = summarise(format!("range R={radius}"), qps, &found);
    r.recall = 1.0; // checked equal to the brute force above; recall@k does not apply
    rows.push(r);

    // Range R = 1 on the default index, then the same modes on indexes with a table.
    let brute_within = |radius: f64| -> Vec<Vec<u32>> {
        brute
            .iter()
            .map(|b| {
                b.iter()
                    .filter(|n| n.distance <= radius)
                    .map(|n| n.index)
                    .collect()
            })
            .collect()
    };
    let check_range = |found: &[Found], radius: f64| {
        for (f, want) in found.iter().zip(brute_within(radius)) {
            let mut got: Vec<u32> = f.neighbors.iter().map(|n| n.index).collect();
            got.sort_unstable();
            assert_eq!(got, want, "range answer differs from the brute force");
        }
    };
    let (qps, found) = run(&Request::Within {
        radius: 1.0,
        k: None,
    });
    check_range(&found, 1.0);
    let mut r = summarise("range R=1".into(), qps, &found);
    r.recall = 1.0;
    rows.push(r);
    let small: Vec<u32> = env_list("WAYMARK_BIG_SMALL", "2");
    let mut small_paths = Vec::new();
    if !small.is_empty() {
        let corpus = read_corpus(&words, &IngestOptions::default()).expect("word list reads");
        for &rs in &small {
            let spath = dir.path().join(format!("small{rs}.wmk"));
            let t = Instant::now();
            let rep = build_index(
                &corpus,
                "bench",
                &BuildOptions {
                    dim,
                    small_radius: Some(rs),
                    ..BuildOptions::default()
                },
                &spath,
                &|_| {},
            )
            .expect("build with a table");
            let secs = t.elapsed().as_secs_f64();
            let sidx = Index::open(&spath).expect("open");
            let (tr, entries, tbytes) = sidx.variants_summary().expect("a table");
            println!(
                "build with --small-radius {rs}: {secs:.2} s (table {:.2} s); index {:.1} MB, of which the table {:.1} MB: {entries} entries, {:.2} bytes per entry (radius {tr})",
                rep.variants_seconds,
                rep.file_len as f64 / 1e6,
                tbytes as f64 / 1e6,
                tbytes as f64 / entries as f64
            );
            let ss = Searcher::new(&sidx);
            // The table's first-use check, kept out of the timed rows.
            let t = Instant::now();
            let _ = ss.answer_many(
                &queries[..1],
                &Request::Within {
                    radius: 1.0,
                    k: None,
                },
            );
            println!(
                "first query of a process with the table: {:.0} ms (checks the table)",
                t.elapsed().as_secs_f64() * 1e3
            );
            for radius in [1.0, 2.0] {
                let (qps, found) = run_on(&ss, &Request::Within { radius, k: None });
                check_range(&found, radius);
                let mut r = summarise(format!("range R={radius}, table R={rs}"), qps, &found);
                r.recall = 1.0;
                rows.push(r);
            }
            let (qps, found) = run_on(&ss, &Request::Exact { k });
            for (f, t) in found.iter().zip(&truth) {
                assert_eq!(&f.neighbors, t, "exact answer differs from the brute force");
            }
            let through = found
                .iter()
                .filter(|f| f.certificate.is_some_and(|c| c.computed == f.distances))
                .count();
            // Through the table no landmark distance is computed.
            println!("exact k={k} with the table: {through} of {nq} answered through it");
            rows.push(summarise(format!("exact k={k}, table R={rs}"), qps, &found));
            small_paths.push((rs, spath));
        }
    }

    // Peak memory of a query process answering every query (default, exact, range).
    let qfile = dir.path().join("queries.txt");
    std::fs::write(&qfile, queries.join("\n") + "\n").expect("write queries");
    let limit_kb = (report.file_len + 64 * 1024 * 1024) / 1024;
    for (name, extra) in [
        ("approximate", &[][..]),
        ("exact", &["--exact"][..]),
        ("range R=2", &["--within", "2"][..]),
    ] {
        match query_peak_rss(&path, &qfile, extra) {
            Some(kb) => println!(
                "peak RSS of `waymark query` ({name}, {nq} queries): {:.1} MB (limit index + 64 MiB = {:.1} MB)",
                kb as f64 * 1024.0 / 1e6,
                limit_kb as f64 * 1024.0 / 1e6
            ),
            None => println!("peak RSS ({name}): /usr/bin/time -v unavailable"),
        }
    }

    for (rs, spath) in &small_paths {
        for (name, extra) in [
            ("range R=1", &["--within", "1"][..]),
            ("range R=2", &["--within", "2"][..]),
        ] {
            if let Some(kb) = query_peak_rss(spath, &qfile, extra) {
                println!(
                    "peak RSS of `waymark query` ({name}, table R={rs}, {nq} queries): {:.1} MB",
                    kb as f64 * 1024.0 / 1e6
                );
            }
        }
    }

    println!();
    println!(
        "{:<48} {:>10} {:>12} {:>10} {:>10} {:>10}",
        "mode", "q/s", "dist/query", "recall@10", "vs ref.", "vs full"
    );
    for r in &rows {
        let vs_ref = ref_qps.map_or("-".to_string(), |q| format!("{:.1}x", r.qps / q));
        println!(
            "{:<48} {:>10.1} {:>12.1} {:>10.4} {:>10} {:>9.2}x",
            r.name,
            r.qps,
            r.dists,
            r.recall,
            vs_ref,
            r.qps / full_qps
        );
    }
}
