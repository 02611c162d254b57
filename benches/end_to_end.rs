//! End-to-end bench: build over a word list, run typo queries, compare with brute force.
//!
//! Run with `cargo bench --bench end_to_end`. Everything is measured in one run on this
//! machine, so compare the ratios, not the absolute figures. Ratios are against the reference
//! scan (rapidfuzz's parallel all-pairs scan, a general-purpose fuzzy-string library: see
//! `benches/common/reference.rs`; `scripts/bench-deps.sh` installs it), whose distances are
//! checked against waymark's brute force on every query; without it the bench says so and
//! gives ratios against waymark's own full scan only.
//!
//! Each approximate row's batch runs until its runs last half a second in all, and the mean
//! is reported (`benches/common/timing.rs`): one batch of 1,000 fast queries lasts a few
//! milliseconds.
//!
//! Settings through the environment (defaults in brackets):
//! - `WAYMARK_BENCH_WORDS`  word list [/usr/share/dict/american-english, Debian's wamerican]
//! - `WAYMARK_BENCH_QUERIES` number of typo queries [1000]
//! - `WAYMARK_BENCH_DIMS` embedding dimensions to try [16,32,48]
//! - `WAYMARK_BENCH_CANDIDATES` candidate counts to try [500,1000,2000,4000]
//! - `WAYMARK_BENCH_SPACES` spaces to try [l1,l2,linf]
//! - `WAYMARK_BENCH_TREE` also measure the kd-tree candidate source [1]
//! - `WAYMARK_BENCH_K` neighbours per query [10]

use std::path::PathBuf;
use std::time::Instant;

#[path = "common/reference.rs"]
mod reference;
#[path = "common/timing.rs"]
mod timing;

use waymark::eval::{scan_many, threshold_recall, typo_queries, Scan};
use waymark::index::{build_index, BuildOptions, Index};
use waymark::ingest::{read_corpus, IngestOptions};
use waymark::search::{
    CandidateSource, SearchParams, Searcher, Space, DEFAULT_CANDIDATES, DEFAULT_DIM,
};

fn env_list<T: std::str::FromStr>(name: &str, default: &str) -> Vec<T> {
    std::env::var(name)
        .unwrap_or_else(|_| default.to_string())
        .split(',')
        .filter_map(|s| s.trim().parse().ok())
        .collect()
}

fn space(s: &str) -> Space {
    match s {
        "l1" => Space::L1,
        "linf" => Space::Linf,
        _ => Space::L2,
    }
}

struct Row {
    name: String,
    qps: f64,
    dists: f64,
    recall: f64,
}

fn main() {
    // Ignore the arguments cargo passes to bench binaries (e.g. --bench).
    let words = PathBuf::from(
        std::env::var("WAYMARK_BENCH_WORDS")
            .unwrap_or_else(|_| "/usr/share/dict/american-english".into()),
    );
    if !words.exists() {
        eprintln!(
            "{} is missing: install Debian's wamerican (apt-get install -y wamerican)",
            words.display()
        );
        return;
    }
    let nq: usize = env_list("WAYMARK_BENCH_QUERIES", "1000")[0];
    let k: usize = env_list("WAYMARK_BENCH_K", "10")[0];
    let dims: Vec<usize> = env_list("WAYMARK_BENCH_DIMS", "16,32,48");
    let cands: Vec<usize> = env_list("WAYMARK_BENCH_CANDIDATES", "500,1000,2000,4000");
    let spaces: Vec<String> = env_list("WAYMARK_BENCH_SPACES", "l1,l2,linf");
    let with_tree = env_list::<u32>("WAYMARK_BENCH_TREE", "1")[0] != 0;
    let threads = rayon::current_num_threads();

    let t = Instant::now();
    let corpus = read_corpus(&words, &IngestOptions::default()).expect("word list reads");
    let read_s = t.elapsed().as_secs_f64();
    let n = corpus.items.len();
    let queries = typo_queries(&corpus.items, nq, 20261201);
    println!(
        "word list {} : {} items (read in {:.2} s); {} typo queries (1-3 edits); k = {}; {} threads",
        words.display(),
        n,
        read_s,
        nq,
        k,
        threads
    );

    let dir = tempfile::tempdir().expect("temp dir");
    // Ground truth and the two brute forces.
    let path0 = dir.path().join("default.wmk");
    let t = Instant::now();
    let report =
        build_index(&corpus, "bench", &BuildOptions::default(), &path0, &|_| {}).expect("build");
    let build_s = t.elapsed().as_secs_f64();
    let t = Instant::now();
    let index = Index::open(&path0).expect("open");
    let open_only_ms = t.elapsed().as_secs_f64() * 1e3;
    let searcher = Searcher::new(&index);
    let first = searcher
        .search(
            &queries[0],
            &SearchParams::from_index(&index, k),
            &mut Default::default(),
        )
        .expect("query");
    let open_ms = t.elapsed().as_secs_f64() * 1e3;
    assert!(!first.neighbors.is_empty());

    let t = Instant::now();
    let truth = scan_many(&index, &queries, k, Scan::Full).expect("k > 0");
    let full_s = t.elapsed().as_secs_f64();
    let t = Instant::now();
    let best = scan_many(&index, &queries, k, Scan::Best).expect("k > 0");
    let best_s = t.elapsed().as_secs_f64();
    for (a, b) in truth.iter().zip(&best) {
        assert_eq!(a, b, "the two brute forces disagree");
    }
    let truth_d: Vec<Vec<f64>> = truth
        .iter()
        .map(|t| t.iter().map(|n| n.distance).collect())
        .collect();
    let full_qps = nq as f64 / full_s;
    let best_qps = nq as f64 / best_s;
    println!(
        "default build (d = {DEFAULT_DIM}, C = {DEFAULT_CANDIDATES}): {:.2} s, index {:.1} MB ({} bytes), open {:.3} ms, open + first query {:.2} ms",
        build_s,
        report.file_len as f64 / 1e6,
        report.file_len,
        open_only_ms,
        open_ms
    );
    println!(
        "full scan: {:.1} q/s, {:.1} M pairs/s | best scan: {:.1} q/s",
        full_qps,
        full_qps * n as f64 / 1e6,
        best_qps
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
    // A row of approximate answers: `searcher` answers every query with `p`, timed.
    let approximate = |name: String, searcher: &Searcher, p: &SearchParams| {
        // The batch runs until the runs last half a second in all; the mean counts.
        let (secs, found, _) = timing::mean_secs(|| searcher.search_many(&queries, p));
        let (mut rec, mut dist) = (0.0, 0usize);
        for (f, td) in found.iter().zip(&truth_d) {
            let f = f.as_ref().expect("query");
            dist += f.distances;
            let got: Vec<(u32, f64)> = f.neighbors.iter().map(|n| (n.index, n.distance)).collect();
            rec += threshold_recall(td, &got, k);
        }
        Row {
            name,
            qps: nq as f64 / secs,
            dists: dist as f64 / nq as f64,
            recall: rec / nq as f64,
        }
    };
    // Today's default approximate query: candidates from the char counts (the searcher
    // made them on its first query above).
    let counts = SearchParams::from_index(&index, k);
    rows.push(approximate(
        format!("default (candidates from {})", counts.source.name()),
        &searcher,
        &counts,
    ));
    for &d in &dims {
        let path = dir.path().join(format!("d{d}.wmk"));
        let t = Instant::now();
        build_index(
            &corpus,
            "bench",
            &BuildOptions {
                dim: d,
                ..BuildOptions::default()
            },
            &path,
            &|_| {},
        )
        .expect("build");
        let b_s = t.elapsed().as_secs_f64();
        let idx = Index::open(&path).expect("open");
        let s = Searcher::new(&idx);
        println!("built d = {d} in {b_s:.2} s");
        // First-use costs (the cells' check, tables made once per searcher) stay out of
        // the timed rows: a few queries through each source first.
        for src in [CandidateSource::Cells, CandidateSource::Scan] {
            let p = SearchParams {
                source: src,
                ..SearchParams::from_index(&idx, k)
            };
            let _ = s.search_many(&queries[..queries.len().min(16)], &p);
        }
        for sp in &spaces {
            let mut sources = vec![CandidateSource::Cells, CandidateSource::Scan];
            if with_tree {
                sources.push(CandidateSource::Tree);
            }
            for &src in &sources {
                for &c in &cands {
                    let p = SearchParams {
                        k,
                        candidates: c,
                        space: space(sp),
                        source: src,
                        visit: c * waymark::search::VISIT_PER_CANDIDATE,
                        widen: 0,
                    };
                    rows.push(approximate(
                        format!("d={d:<2} {:<4} {:<4} C={c}", sp, src.name()),
                        &s,
                        &p,
                    ));
                }
            }
        }
    }
    println!();
    println!(
        "{:<40} {:>10} {:>12} {:>10} {:>10} {:>11}",
        "configuration", "q/s", "dist/query", "recall@k", "vs ref.", "vs full"
    );
    for r in &rows {
        let vs_ref = ref_qps.map_or("-".to_string(), |q| format!("{:.1}x", r.qps / q));
        println!(
            "{:<40} {:>10.1} {:>12.1} {:>10.4} {:>10} {:>10.2}x",
            r.name,
            r.qps,
            r.dists,
            r.recall,
            vs_ref,
            r.qps / full_qps
        );
    }
}
