//! Recall against dimension on Debian's wamerican list: every method × dimension × space.
//!
//! Run with `cargo bench --bench sweep`. Prints the sweep's table and its total time (exact
//! answers included, computed once by brute force), and writes the CSV, JSON and SVG charts
//! to `target/sweep-bench/`. The README's defaults and its recall-versus-dimension table come
//! from this bench.
//!
//! Settings through the environment (defaults in brackets):
//! - `WAYMARK_BENCH_WORDS`  word list [/usr/share/dict/american-english, Debian's wamerican]
//! - `WAYMARK_BENCH_QUERIES` number of typo queries [1000]
//! - `WAYMARK_BENCH_DIMS` dimensions [2,4,8,16,32]
//! - `WAYMARK_BENCH_METHODS` methods [landmarks,refsets,fastmap]
//! - `WAYMARK_BENCH_SPACES` spaces [l1,l2,linf]
//! - `WAYMARK_BENCH_CANDIDATES` candidate counts [1000,2087]
//! - `WAYMARK_BENCH_POOL` reference-set pool size [the default, 32]
//! - `WAYMARK_BENCH_K` neighbours per query [10]

use std::path::PathBuf;

use waymark::embed::Method;
use waymark::eval::sweep::{run_sweep, write_outputs, SweepOptions};
use waymark::eval::typo_queries;
use waymark::ingest::{read_corpus, IngestOptions};
use waymark::search::Space;

fn env_list(name: &str, default: &str) -> Vec<String> {
    std::env::var(name)
        .unwrap_or_else(|_| default.to_string())
        .split(',')
        .map(|s| s.trim().to_string())
        .filter(|s| !s.is_empty())
        .collect()
}

fn nums(name: &str, default: &str) -> Vec<usize> {
    env_list(name, default)
        .iter()
        .filter_map(|s| s.parse().ok())
        .collect()
}

fn main() {
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
    let corpus = read_corpus(&words, &IngestOptions::default()).expect("word list reads");
    let nq = nums("WAYMARK_BENCH_QUERIES", "1000")[0];
    let queries = typo_queries(&corpus.items, nq, 20261201);
    let opts = SweepOptions {
        methods: env_list("WAYMARK_BENCH_METHODS", "landmarks,refsets,fastmap")
            .iter()
            .filter_map(|m| Method::parse(m))
            .collect(),
        dims: nums("WAYMARK_BENCH_DIMS", "2,4,8,16,32"),
        spaces: env_list("WAYMARK_BENCH_SPACES", "l1,l2,linf")
            .iter()
            .map(|s| match s.as_str() {
                "l1" => Space::L1,
                "linf" => Space::Linf,
                _ => Space::L2,
            })
            .collect(),
        candidates: nums("WAYMARK_BENCH_CANDIDATES", "1000,2087"),
        k: nums("WAYMARK_BENCH_K", "10")[0],
        pool: nums(
            "WAYMARK_BENCH_POOL",
            &waymark::embed::DEFAULT_POOL.to_string(),
        )[0],
        ..SweepOptions::default()
    };
    let out = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target/sweep-bench");
    let r =
        run_sweep(&corpus, "wamerican", &queries, None, &opts, &out, &|_| {}).expect("sweep runs");
    let files = write_outputs(&r, &out).expect("outputs written");
    println!(
        "word list {}: {} items; {} typo queries (1-3 edits); k = {}; {} threads",
        words.display(),
        r.items,
        r.queries,
        r.k,
        rayon::current_num_threads()
    );
    println!(
        "sweep of {} configurations: {:.1} s in all; exact answers (full scan) {:.1} s = {:.1} M pairs/s; embedding at d = {}: {}",
        r.rows.len(),
        r.total_seconds,
        r.truth_seconds,
        r.items as f64 * r.queries as f64 / r.truth_seconds.max(1e-9) / 1e6,
        opts.dims.iter().max().unwrap(),
        r.embed_seconds
            .iter()
            .map(|(m, s)| format!("{m} {s:.2} s"))
            .collect::<Vec<_>>()
            .join(", ")
    );
    println!("| method | d | space | C | refs | recall@{} | plain | distances/query | % of items | queries/s |", r.k);
    println!("|---|---:|---|---:|---:|---:|---:|---:|---:|---:|");
    for x in &r.rows {
        println!(
            "| {} | {} | {} | {} | {} | {:.3} | {:.3} | {:.0} | {:.2}% | {:.0} |",
            x.method,
            x.dim_made,
            x.space,
            x.candidates,
            x.refs,
            x.recall,
            x.plain_recall,
            x.distances_per_query,
            100.0 * x.share_of_items,
            x.qps
        );
    }
    for f in files {
        println!("wrote {}", f.display());
    }
}
