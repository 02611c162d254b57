//! The self-join bench: Debian's wamerican-insane list (663,473 words), every pair within
//! R = 1 and R = 2 exactly, and the approximate 10-NN graph, against all-pairs scans
//! estimated from a measured sample: the reference scan (rapidfuzz's parallel all-pairs scan,
//! a general-purpose fuzzy-string library, `benches/common/reference.rs`, installed by
//! `scripts/bench-deps.sh`; checked against the brute force on the sample) and the project's
//! own full-scan kernel.
//!
//! Run with `cargo bench --bench pairs`. The machine is shared: compare ratios measured in
//! one run.
//!
//! Settings through the environment (defaults in brackets):
//! - `WAYMARK_PAIRS_WORDS` word list [/usr/share/dict/american-english-insane]
//! - `WAYMARK_PAIRS_SAMPLE` items scanned for the brute-force estimate and the recall [500]
//! - `WAYMARK_PAIRS_RADII` radii of the exact joins [1,2]
//! - `WAYMARK_PAIRS_CANDIDATES` candidates per item of the 10-NN graph [500]
//! - `WAYMARK_PAIRS_VISIT` rows visited per item with cells [12 per candidate]
//! - `WAYMARK_PAIRS_ROUNDS` refinement rounds by neighbours of neighbours [3]
//! - `WAYMARK_PAIRS_ONLY` `within` or `nearest`: run only that part [both]
//! - `WAYMARK_PAIRS_JOIN` how the exact joins find near items: `columns` (the column
//!   blocks), `variants` (a deletion-variant table built in memory, the default path for
//!   R ≤ 2), or both, whose pairs are then checked equal [columns,variants]

use std::path::PathBuf;
use std::time::Instant;

#[path = "common/reference.rs"]
mod reference;

use rand::seq::SliceRandom;
use rand::SeedableRng;
use waymark::eval::{scan_many, threshold_recall, Scan};
use waymark::index::{build_index, BuildOptions, Index};
use waymark::ingest::{read_corpus, IngestOptions};
use waymark::pairs::{JoinBy, JoinPath, NearestJoin, Pair, Radius, SelfJoin};
use waymark::search::{SearchParams, Searcher};

fn env_list<T: std::str::FromStr>(name: &str, default: &str) -> Vec<T> {
    std::env::var(name)
        .unwrap_or_else(|_| default.to_string())
        .split(',')
        .filter_map(|s| s.trim().parse().ok())
        .collect()
}

fn main() {
    let words = PathBuf::from(
        std::env::var("WAYMARK_PAIRS_WORDS")
            .unwrap_or_else(|_| "/usr/share/dict/american-english-insane".into()),
    );
    if !words.exists() {
        eprintln!(
            "{} is missing: install Debian's wamerican-insane (apt-get install -y wamerican-insane)",
            words.display()
        );
        return;
    }
    let sample_n: usize = env_list("WAYMARK_PAIRS_SAMPLE", "500")[0];
    let radii: Vec<f64> = env_list("WAYMARK_PAIRS_RADII", "1,2");
    let only = std::env::var("WAYMARK_PAIRS_ONLY").unwrap_or_default();
    let corpus = read_corpus(&words, &IngestOptions::default()).expect("word list reads");
    let n = corpus.items.len();
    println!(
        "word list {}: {n} items; {} threads",
        words.display(),
        rayon::current_num_threads()
    );
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("pairs.wmk");
    let t = Instant::now();
    build_index(&corpus, "bench", &BuildOptions::default(), &path, &|_| {}).expect("build");
    println!("build (default index): {:.2} s", t.elapsed().as_secs_f64());
    drop(corpus);
    let index = Index::open(&path).expect("open");
    let text = |i: usize| String::from_utf8_lossy(index.item(i)).into_owned();

    // A fixed sample of items, scanned in full: the brute force's cost per item, and the
    // true neighbours for the recall of the 10-NN graph.
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(20261203);
    let mut all: Vec<usize> = (0..n).collect();
    all.shuffle(&mut rng);
    let sample: Vec<usize> = all.into_iter().take(sample_n.min(n)).collect();
    let queries: Vec<String> = sample.iter().map(|&i| text(i)).collect();
    let t = Instant::now();
    let truth = scan_many(&index, &queries, 11, Scan::Full).expect("k > 0");
    let per_item = t.elapsed().as_secs_f64() / sample.len() as f64;
    let brute_s = per_item * n as f64 / 2.0;
    println!(
        "brute force: full scans of {} items, {:.2} ms each on all cores ({:.1} M distances/s); \
         all n(n-1)/2 = {:.3e} pairs estimated at {brute_s:.0} s",
        sample.len(),
        per_item * 1e3,
        n as f64 / per_item / 1e6,
        n as f64 * (n as f64 - 1.0) / 2.0
    );

    // The reference scan of the same sample: its cost per item, scaled the same way.
    let reference_s = reference::Reference::find().map(|r| {
        let version = r.version();
        let scan = r.scan(n, |i| index.key(i), &queries, 11);
        let checked = scan.check(&truth, 11);
        let per = scan.scan_s() / sample.len() as f64;
        let est = per * n as f64 / 2.0;
        println!(
            "{} [rapidfuzz {version}]; distances equal waymark's brute force on all {checked} sampled items; \
             all pairs estimated at {est:.0} s; own full scan {:.2}x the reference's pairs/s (cdist alone)",
            scan.describe(n),
            (n as f64 / per_item) / scan.pairs_per_s(n)
        );
        est
    });
    let vs = |secs: f64| match reference_s {
        Some(r) => format!(
            "vs reference scan {:.1}x, vs own full scan {:.1}x",
            r / secs,
            brute_s / secs
        ),
        None => format!(
            "vs own full scan {:.1}x (reference skipped)",
            brute_s / secs
        ),
    };

    if only != "nearest" {
        let searcher = Searcher::new(&index);
        let mut previous: Vec<(u64, Vec<Pair>)> = Vec::new();
        let joins: Vec<String> = std::env::var("WAYMARK_PAIRS_JOIN")
            .unwrap_or_else(|_| "columns,variants".into())
            .split(',')
            .map(|s| s.trim().to_string())
            .filter(|s| !s.is_empty())
            .collect();
        for (&r, by) in radii
            .iter()
            .flat_map(|r| joins.iter().map(move |j| (r, j.clone())))
        {
            let how = if by == "columns" {
                JoinBy::Columns
            } else {
                JoinBy::Auto
            };
            let t = Instant::now();
            let join = SelfJoin::with(&index, Radius::Fixed(r), how).expect("join");
            let path = join.path();
            let (pairs, stats) = join.collect_all().expect("pairs");
            let secs = t.elapsed().as_secs_f64();
            let path = match path {
                JoinPath::Columns => "through the column blocks".to_string(),
                JoinPath::StoredVariants => "through the index's table".to_string(),
                JoinPath::BuiltVariants {
                    radius,
                    bytes,
                    seconds,
                } => format!(
                    "through a table of radius {radius} built in memory ({:.1} MB, {seconds:.2} s of the total)",
                    bytes as f64 / 1e6
                ),
            };
            println!("within R = {r}, {path}:");
            let key = r.to_bits();
            match previous.iter().find(|(k, _)| *k == key) {
                Some((_, p)) => assert!(p == &pairs, "the two joins at R = {r} differ"),
                None => previous.push((key, pairs.clone())),
            }
            // Exactness on the sample: each sampled item's pairs equal its range query's
            // answer (itself left out).
            let mut mine: Vec<Vec<u32>> = vec![Vec::new(); n];
            for p in &pairs {
                mine[p.a as usize].push(p.b);
                mine[p.b as usize].push(p.a);
            }
            let mut checked = 0usize;
            for (&i, q) in sample.iter().zip(&queries).take(200) {
                let found = searcher
                    .search_within(q, r, None, &mut Default::default())
                    .expect("range query");
                let mut want: Vec<u32> = found
                    .neighbors
                    .iter()
                    .map(|nb| nb.index)
                    .filter(|&j| j as usize != i)
                    .collect();
                let mut got = mine[i].clone();
                want.sort_unstable();
                got.sort_unstable();
                assert_eq!(got, want, "item {i} ({q}) at R = {r}");
                checked += 1;
            }
            println!(
                "within R = {r}: {secs:.1} s; {} pairs ({:.0} pairs/s; {:.2e} item pairs covered/s); \
                 {} examined, {} distances computed; {}; {checked} items checked against range queries",
                pairs.len(),
                pairs.len() as f64 / secs,
                n as f64 * (n as f64 - 1.0) / 2.0 / secs,
                stats.examined,
                stats.computed,
                vs(secs)
            );
        }
    }

    if only != "within" {
        let k = 10;
        let mut params = SearchParams::from_index(&index, k);
        params = params.with_candidates(env_list("WAYMARK_PAIRS_CANDIDATES", "500")[0]);
        if let Some(&v) = env_list::<usize>("WAYMARK_PAIRS_VISIT", "").first() {
            params.visit = v;
        }
        let rounds: usize = env_list("WAYMARK_PAIRS_ROUNDS", "3")[0];
        let t = Instant::now();
        let mut join = NearestJoin::new(&index, k, Some(params))
            .expect("join")
            .refine(rounds);
        let mut pairs = 0usize;
        while let Some(b) = join.next_batch() {
            pairs += b.expect("batch").len();
        }
        let secs = t.elapsed().as_secs_f64();
        let mut rec = 0.0;
        for (&i, t) in sample.iter().zip(&truth) {
            let td: Vec<f64> = t
                .iter()
                .filter(|nb| nb.index as usize != i)
                .take(k)
                .map(|nb| nb.distance)
                .collect();
            let got = join.neighbors(i).expect("done");
            rec += threshold_recall(&td, got, k);
        }
        let recall = rec / sample.len() as f64;
        println!(
            "approximate 10-NN graph ({} candidates, {} rows visited, {:?}, {rounds} refinement rounds): {secs:.1} s \
             ({:.0} items/s); {pairs} pairs; recall@10 {recall:.4} on {} items checked by full scan; \
             {}",
            params.candidates,
            params.visit,
            params.source,
            n as f64 / secs,
            sample.len(),
            vs(secs)
        );
    }
}
