//! Published metric-index methods against waymark on the same word lists and queries: a
//! BK-tree (Burkhard & Keller 1973), a vantage-point tree (Yianilos 1993) and, for range
//! queries with R ≤ 2, the deletion-neighbourhood method (Bocek, Hunt & Stiller 2007). All run
//! on waymark's own Levenshtein kernel (`benches/common/baselines.rs`), so only the method
//! differs. The reference scan (rapidfuzz's parallel all-pairs scan, a general-purpose
//! fuzzy-string library; `scripts/bench-deps.sh`) and waymark's own full scan give the
//! ratios' base.
//!
//! Every exact answer (trees' k-NN and range, deletion neighbourhood, waymark's `--exact`
//! and `--within`) is checked against waymark's brute force in the same run. For the
//! approximate mode, each tree gets a budget of distance computations per query, searched
//! (doubling, then bisection) for the smallest that reaches waymark's default recall.
//!
//! Run with `cargo bench --bench baselines`. Settings through the environment (defaults in
//! brackets):
//! - `WAYMARK_BASE_LISTS` word lists, each `PATH:SEED` (SEED of the typo queries, the same
//!   as `end_to_end` and `big` use) [/usr/share/dict/american-english:20261201,
//!   /usr/share/dict/american-english-insane:20261202]
//! - `WAYMARK_BASE_QUERIES` typo queries per list [1000]
//! - `WAYMARK_BASE_RADII` radii of the range queries [1,2]
//! - `WAYMARK_BASE_TUNE` bisection steps of the budget search [4]
//! - `WAYMARK_BASE_SMALL` radius of waymark's own deletion-variant table (`build
//!   --small-radius`), built as a second index whose `--within` rows run beside the
//!   others; the deletion neighbourhood's "waymark ÷ this" is then against them [2;
//!   empty: none]

use std::path::PathBuf;
use std::time::Instant;

use rayon::prelude::*;
use waymark::eval::{scan_many, threshold_recall, typo_queries, Scan};
use waymark::index::{build_index, BuildOptions, Index};
use waymark::ingest::{read_corpus, IngestOptions};
use waymark::search::{Found, Neighbor, Request, SearchParams, Searcher};

#[path = "common/baselines.rs"]
mod baselines;
#[path = "common/reference.rs"]
mod reference;

use baselines::{Answer, BkTree, DeletionIndex, VpTree};

fn env_list<T: std::str::FromStr>(name: &str, default: &str) -> Vec<T> {
    std::env::var(name)
        .unwrap_or_else(|_| default.to_string())
        .split(',')
        .filter_map(|s| s.trim().parse().ok())
        .collect()
}

struct Row {
    mode: String,
    method: String,
    qps: f64,
    dists: f64,
    recall: Option<f64>,
    /// waymark's q/s in the same mode, for the "waymark ÷ this" column.
    waymark_qps: Option<f64>,
}

/// Answers every query on all cores; (q/s, answers).
fn timed<T: Send>(queries: &[String], f: impl Fn(&str) -> T + Sync) -> (f64, Vec<T>) {
    let t = Instant::now();
    let out: Vec<T> = queries.par_iter().map(|q| f(q)).collect();
    (queries.len() as f64 / t.elapsed().as_secs_f64(), out)
}

fn mean_computed(a: &[Answer]) -> f64 {
    a.iter().map(|x| x.computed as f64).sum::<f64>() / a.len().max(1) as f64
}

fn recall_of(a: &[Answer], truth_d: &[Vec<f64>], k: usize) -> f64 {
    a.iter()
        .zip(truth_d)
        .map(|(x, td)| {
            let got: Vec<(u32, f64)> = x.hits.iter().map(|&(i, d)| (i, f64::from(d))).collect();
            threshold_recall(td, &got, k)
        })
        .sum::<f64>()
        / a.len().max(1) as f64
}

/// Panics unless every k-NN answer's distances equal the brute force's.
fn check_knn(name: &str, a: &[Answer], truth: &[Vec<Neighbor>]) {
    for (q, (x, t)) in a.iter().zip(truth).enumerate() {
        let got: Vec<u32> = x.hits.iter().map(|&(_, d)| d).collect();
        let want: Vec<u32> = t.iter().map(|nb| nb.distance as u32).collect();
        assert_eq!(
            got, want,
            "{name}: exact k-NN differs from the brute force on query {q}"
        );
    }
}

/// Panics unless every range answer's items equal the brute force's.
fn check_range(name: &str, a: &[Answer], brute: &[Vec<u32>]) {
    for (q, (x, b)) in a.iter().zip(brute).enumerate() {
        let mut got: Vec<u32> = x.hits.iter().map(|&(i, _)| i).collect();
        got.sort_unstable();
        assert_eq!(
            &got, b,
            "{name}: range answer differs from the brute force on query {q}"
        );
    }
}

fn run_list(path: &str, seed: u64, nq: usize, radii: &[u32], tune: usize) {
    let k = 10;
    let words_path = PathBuf::from(path);
    if !words_path.exists() {
        println!("{path} is missing: install Debian's wamerican / wamerican-insane; list skipped");
        return;
    }
    let corpus = read_corpus(&words_path, &IngestOptions::default()).expect("word list reads");
    let n = corpus.items.len();
    let queries = typo_queries(&corpus.items, nq, seed);
    println!();
    println!(
        "=== {path}: {n} words; {nq} typo queries (seed {seed}); k = {k}; {} threads",
        rayon::current_num_threads()
    );
    let dir = tempfile::tempdir().expect("temp dir");
    let ipath = dir.path().join("base.wmk");
    let t = Instant::now();
    let report =
        build_index(&corpus, "bench", &BuildOptions::default(), &ipath, &|_| {}).expect("build");
    println!(
        "waymark build (default): {:.2} s, {:.1} MB",
        t.elapsed().as_secs_f64(),
        report.file_len as f64 / 1e6
    );
    drop(corpus);
    let index = Index::open(&ipath).expect("open");
    let searcher = Searcher::new(&index);
    let words: Vec<&[u8]> = (0..n).map(|i| index.key(i)).collect();

    // Ground truth: waymark's own full scan.
    let t = Instant::now();
    let truth = scan_many(&index, &queries, k, Scan::Full).expect("k > 0");
    let full_qps = nq as f64 / t.elapsed().as_secs_f64();
    let truth_d: Vec<Vec<f64>> = truth
        .iter()
        .map(|t| t.iter().map(|nb| nb.distance).collect())
        .collect();
    println!(
        "own full scan: {full_qps:.1} q/s ({:.1} M pairs/s)",
        full_qps * n as f64 / 1e6
    );
    let ref_qps = reference::Reference::find().map(|r| {
        let scan = r.scan(n, |i| words[i], &queries, k);
        let checked = scan.check(&truth, k);
        println!(
            "{}; distances equal the brute force on all {checked} queries; own full scan {:.2}x its pairs/s",
            scan.describe(n),
            full_qps * n as f64 / scan.pairs_per_s(n)
        );
        scan.qps()
    });
    let brute: Vec<Vec<Vec<u32>>> = radii
        .iter()
        .map(|&r| {
            queries
                .par_iter()
                .map(|q| {
                    let p = waymark::metric::LevenshteinQuery::new(q.as_bytes());
                    (0..n as u32)
                        .filter(|&i| p.dist_within(words[i as usize], r).is_some())
                        .collect()
                })
                .collect()
        })
        .collect();

    let mut rows: Vec<Row> = Vec::new();
    if let Some(q) = ref_qps {
        rows.push(Row {
            mode: "k-NN scan".into(),
            method: "reference scan (rapidfuzz cdist)".into(),
            qps: q,
            dists: n as f64,
            recall: Some(1.0),
            waymark_qps: None,
        });
    }
    rows.push(Row {
        mode: "k-NN scan".into(),
        method: "waymark own full scan".into(),
        qps: full_qps,
        dists: n as f64,
        recall: Some(1.0),
        waymark_qps: None,
    });

    // waymark, every mode.
    let wm = |req: &Request| -> (f64, Vec<Found>) {
        let _ = searcher.answer_many(&queries[..1], req); // first-use costs out of the timing
        let t = Instant::now();
        let found: Vec<Found> = searcher
            .answer_many(&queries, req)
            .into_iter()
            .map(|f| f.expect("query"))
            .collect();
        (nq as f64 / t.elapsed().as_secs_f64(), found)
    };
    let wm_recall = |found: &[Found]| -> f64 {
        found
            .iter()
            .zip(&truth_d)
            .map(|(f, td)| {
                let got: Vec<(u32, f64)> = f
                    .neighbors
                    .iter()
                    .map(|nb| (nb.index, nb.distance))
                    .collect();
                threshold_recall(td, &got, k)
            })
            .sum::<f64>()
            / nq as f64
    };
    let wm_dists =
        |found: &[Found]| found.iter().map(|f| f.distances as f64).sum::<f64>() / nq as f64;

    let (approx_qps, found) = wm(&Request::Approximate(SearchParams::from_index(&index, k)));
    let approx_recall = wm_recall(&found);
    rows.push(Row {
        mode: "approximate".into(),
        method: "waymark default".into(),
        qps: approx_qps,
        dists: wm_dists(&found),
        recall: Some(approx_recall),
        waymark_qps: None,
    });
    let (exact_qps, found) = wm(&Request::Exact { k });
    for (q, (f, t)) in found.iter().zip(&truth).enumerate() {
        let got: Vec<f64> = f.neighbors.iter().map(|nb| nb.distance).collect();
        let want: Vec<f64> = t.iter().map(|nb| nb.distance).collect();
        assert_eq!(
            got, want,
            "waymark --exact differs from the brute force on query {q}"
        );
    }
    rows.push(Row {
        mode: "exact k-NN".into(),
        method: "waymark --exact".into(),
        qps: exact_qps,
        dists: wm_dists(&found),
        recall: Some(1.0),
        waymark_qps: None,
    });
    let mut range_qps = Vec::new();
    for (&r, b) in radii.iter().zip(&brute) {
        let (qps, found) = wm(&Request::Within {
            radius: f64::from(r),
            k: None,
        });
        for (q, (f, b)) in found.iter().zip(b).enumerate() {
            let mut got: Vec<u32> = f.neighbors.iter().map(|nb| nb.index).collect();
            got.sort_unstable();
            assert_eq!(
                &got, b,
                "waymark --within {r} differs from the brute force on query {q}"
            );
        }
        rows.push(Row {
            mode: format!("range R={r}"),
            method: format!("waymark --within {r}"),
            qps,
            dists: wm_dists(&found),
            recall: None,
            waymark_qps: None,
        });
        range_qps.push(qps);
    }
    // waymark with its deletion-variant table, on a second index.
    let mut table_qps: Vec<Option<f64>> = vec![None; radii.len()];
    if let Some(&rs) = env_list::<u32>("WAYMARK_BASE_SMALL", "2").first() {
        let corpus = read_corpus(&words_path, &IngestOptions::default()).expect("word list reads");
        let spath = dir.path().join("small.wmk");
        let t = Instant::now();
        let rep = build_index(
            &corpus,
            "bench",
            &BuildOptions {
                small_radius: Some(rs),
                ..BuildOptions::default()
            },
            &spath,
            &|_| {},
        )
        .expect("build with a table");
        let sidx = Index::open(&spath).expect("open");
        let (_, entries, tbytes) = sidx.variants_summary().expect("a table");
        println!(
            "waymark build --small-radius {rs}: {:.2} s (table {:.2} s), {:.1} MB, of which the table {:.1} MB ({entries} entries, {:.2} bytes each)",
            t.elapsed().as_secs_f64(),
            rep.variants_seconds,
            rep.file_len as f64 / 1e6,
            tbytes as f64 / 1e6,
            tbytes as f64 / entries as f64
        );
        let ss = Searcher::new(&sidx);
        let _ = ss.answer_many(
            &queries[..1],
            &Request::Within {
                radius: 1.0,
                k: None,
            },
        );
        for (j, (&r, b)) in radii.iter().zip(&brute).enumerate() {
            if r > rs {
                continue;
            }
            let t = Instant::now();
            let found: Vec<Found> = ss
                .answer_many(
                    &queries,
                    &Request::Within {
                        radius: f64::from(r),
                        k: None,
                    },
                )
                .into_iter()
                .map(|f| f.expect("query"))
                .collect();
            let qps = nq as f64 / t.elapsed().as_secs_f64();
            for (q, (f, b)) in found.iter().zip(b).enumerate() {
                let mut got: Vec<u32> = f.neighbors.iter().map(|nb| nb.index).collect();
                got.sort_unstable();
                assert_eq!(
                    &got, b,
                    "waymark --within {r} with the table differs on query {q}"
                );
            }
            rows.push(Row {
                mode: format!("range R={r}"),
                method: format!("waymark --within {r}, table R={rs}"),
                qps,
                dists: wm_dists(&found),
                recall: None,
                waymark_qps: None,
            });
            table_qps[j] = Some(qps);
        }
    }

    // The trees.
    let t = Instant::now();
    let bk = BkTree::build(&words);
    println!(
        "BK-tree build: {:.2} s (one core), {} distances, {:.1} MB of arrays",
        t.elapsed().as_secs_f64(),
        bk.build_computed,
        bk.bytes() as f64 / 1e6
    );
    let t = Instant::now();
    let vp = VpTree::build(&words, 20261203);
    println!(
        "VP-tree build: {:.2} s (all cores), {} distances, {:.1} MB of arrays",
        t.elapsed().as_secs_f64(),
        vp.build_computed,
        vp.bytes() as f64 / 1e6
    );
    type Knn<'t> = Box<dyn Fn(&str, usize) -> Answer + Sync + 't>;
    type Range<'t> = Box<dyn Fn(&str, u32) -> Answer + Sync + 't>;
    let trees: Vec<(&str, Knn, Range)> = vec![
        (
            "BK-tree",
            Box::new(|q: &str, b| bk.knn(q.as_bytes(), k, b)),
            Box::new(|q: &str, r| bk.range(q.as_bytes(), r)),
        ),
        (
            "VP-tree",
            Box::new(|q: &str, b| vp.knn(q.as_bytes(), k, b)),
            Box::new(|q: &str, r| vp.range(q.as_bytes(), r)),
        ),
    ];
    for (name, knn, range) in &trees {
        let (qps, a) = timed(&queries, |q| knn(q, usize::MAX));
        check_knn(name, &a, &truth);
        rows.push(Row {
            mode: "exact k-NN".into(),
            method: format!("{name}, best-first"),
            qps,
            dists: mean_computed(&a),
            recall: Some(1.0),
            waymark_qps: Some(exact_qps),
        });
        for ((&r, b), &wq) in radii.iter().zip(&brute).zip(&range_qps) {
            let (qps, a) = timed(&queries, |q| range(q, r));
            check_range(name, &a, b);
            rows.push(Row {
                mode: format!("range R={r}"),
                method: (*name).to_string(),
                qps,
                dists: mean_computed(&a),
                recall: None,
                waymark_qps: Some(wq),
            });
        }
        // Budget for waymark's default recall: double, then bisect.
        let eval = |budget: usize| {
            let (qps, a) = timed(&queries, |q| knn(q, budget));
            let rec = recall_of(&a, &truth_d, k);
            println!(
                "  {name} budget {budget}: {qps:.1} q/s, {:.0} distances/query, recall@10 {rec:.4}",
                mean_computed(&a)
            );
            (qps, mean_computed(&a), rec)
        };
        let mut lo = 0usize;
        let mut hi = 1000usize;
        let mut at_hi = eval(hi);
        while at_hi.2 < approx_recall && hi < n {
            lo = hi;
            hi = (hi * 2).min(n);
            at_hi = eval(hi);
        }
        for _ in 0..tune {
            if hi - lo <= hi / 50 {
                break;
            }
            let mid = (lo + hi) / 2;
            let m = eval(mid);
            if m.2 >= approx_recall {
                hi = mid;
                at_hi = m;
            } else {
                lo = mid;
            }
        }
        rows.push(Row {
            mode: "approximate".into(),
            method: format!("{name}, budget {hi} distances"),
            qps: at_hi.0,
            dists: at_hi.1,
            recall: Some(at_hi.2),
            waymark_qps: Some(approx_qps),
        });
    }

    // Deletion neighbourhood, R ≤ 2.
    for (((&r, b), &wq), tq) in radii.iter().zip(&brute).zip(&range_qps).zip(&table_qps) {
        let wq = tq.unwrap_or(wq);
        if r > 2 {
            continue;
        }
        let t = Instant::now();
        let dn = DeletionIndex::build(&words, r);
        println!(
            "deletion neighbourhood R={r} build: {:.2} s (all cores); {} (variant, word) entries, {} distinct variants; map {:.1} MB",
            t.elapsed().as_secs_f64(),
            dn.entries,
            dn.keys(),
            dn.bytes() as f64 / 1e6
        );
        let (qps, a) = timed(&queries, |q| dn.range(q.as_bytes(), r));
        check_range("deletion neighbourhood", &a, b);
        rows.push(Row {
            mode: format!("range R={r}"),
            method: "deletion neighbourhood".into(),
            qps,
            dists: mean_computed(&a),
            recall: None,
            waymark_qps: Some(wq),
        });
    }

    println!();
    println!(
        "{:<12} {:<34} {:>10} {:>11} {:>9} {:>9} {:>9} {:>14}",
        "mode", "method", "q/s", "dist/query", "recall@10", "vs ref.", "vs full", "waymark ÷ this"
    );
    for r in &rows {
        println!(
            "{:<12} {:<34} {:>10.1} {:>11.0} {:>9} {:>9} {:>8.2}x {:>14}",
            r.mode,
            r.method,
            r.qps,
            r.dists,
            r.recall.map_or("exact".into(), |x| format!("{x:.4}")),
            ref_qps.map_or("-".into(), |q| format!("{:.1}x", r.qps / q)),
            r.qps / full_qps,
            r.waymark_qps
                .map_or(String::new(), |w| format!("{:.2}x", w / r.qps))
        );
    }
}

fn main() {
    let lists = std::env::var("WAYMARK_BASE_LISTS").unwrap_or_else(|_| {
        "/usr/share/dict/american-english:20261201,/usr/share/dict/american-english-insane:20261202"
            .into()
    });
    let nq: usize = env_list("WAYMARK_BASE_QUERIES", "1000")[0];
    let radii: Vec<u32> = env_list("WAYMARK_BASE_RADII", "1,2");
    let tune: usize = env_list("WAYMARK_BASE_TUNE", "4")[0];
    for spec in lists.split(',') {
        let (path, seed) = spec
            .rsplit_once(':')
            .map(|(p, s)| (p, s.parse().expect("seed after ':'")))
            .unwrap_or((spec, 20261201));
        run_list(path, seed, nq, &radii, tune);
    }
}
