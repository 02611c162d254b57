//! Throughput of the Levenshtein kernel, in compared pairs per second.
//!
//! * `scan`: one prepared query of 9 chars against an English word list (the system
//!   dictionary at /usr/share/dict/american-english when present, else a generated list of
//!   similar lengths): unbounded one item per call (`dist`), unbounded in batches
//!   (`dist_each`, `dist_batch`: one item per AVX2 lane where the CPU has it; also with a
//!   40-char query, which takes 64-bit lanes), and bounded with k = 2 — the shapes of a
//!   brute-force scan and of re-ranking with a running k-th best distance.
//! * With `WAYMARK_BENCH_SCANS=1`: instead of the above, the brute forces of `eval`
//!   (full scan and best scan through `scan_many`, both cores) on the whole word list with
//!   typo queries, in pairs per second by wall time and by CPU time (the full scan puts the
//!   queries in vector lanes, the best scan runs one query at a time); and in the same run
//!   `scan_many`'s full scan against the full and best scans one query at a time
//!   (`full_scan`, `best_scan` per query, all cores). `=kernel` runs only the one-thread comparison of `dist`
//!   with `dist_batch`.
//! * `levels`: `dist_batch` of one query against the word list at every dispatch level this
//!   CPU runs (`portable`, `avx2`, `avx512`; see `waymark::cpu::Level`), with queries of 8,
//!   9, 20 and 40 chars: the AVX-512 lane widths 8, 16, 32 and 64 bits (AVX2 takes 32-bit
//!   lanes up to 32 chars, 64-bit above). Run alone with `cargo bench --bench kernel -- levels`.
//! * `long`: a 300-char query (five 64-row blocks) against 300-char items a few edits away.

mod common;

use std::hint::black_box;

use criterion::{criterion_group, BenchmarkId, Criterion, Throughput};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use waymark::metric::LevenshteinQuery;

fn scan(c: &mut Criterion) {
    let items = common::words(100_000);
    let query = LevenshteinQuery::new(b"continent");
    let mut group = c.benchmark_group("scan");
    group.throughput(Throughput::Elements(items.len() as u64));
    group.bench_function("unbounded", |b| {
        b.iter(|| {
            let mut sum = 0u64;
            for item in &items {
                sum += u64::from(query.dist(black_box(item)));
            }
            sum
        })
    });
    group.bench_function("unbounded_dist_each", |b| {
        b.iter(|| {
            let mut sum = 0u64;
            query.dist_each(black_box(&items), |_, d| sum += u64::from(d));
            sum
        })
    });
    let slices: Vec<&[u8]> = items.iter().map(Vec::as_slice).collect();
    let mut out = vec![0u32; slices.len()];
    group.bench_function("unbounded_dist_batch", |b| {
        b.iter(|| {
            query.dist_batch(black_box(&slices), &mut out);
            out.iter().map(|&d| u64::from(d)).sum::<u64>()
        })
    });
    // A query of 40 chars: past the eight 32-bit lanes, so four 64-bit lanes.
    let long_query = LevenshteinQuery::new(b"continental shelf of the vessmark islands");
    group.bench_function("unbounded_dist_batch_q40", |b| {
        b.iter(|| {
            long_query.dist_batch(black_box(&slices), &mut out);
            out.iter().map(|&d| u64::from(d)).sum::<u64>()
        })
    });
    group.bench_function("bounded_k2", |b| {
        b.iter(|| {
            let mut hits = 0u64;
            for item in &items {
                if let Some(d) = query.dist_within(black_box(item), 2) {
                    hits += 1 + u64::from(d);
                }
            }
            hits
        })
    });
    group.finish();
}

/// `dist_batch` at every level this CPU runs and every AVX-512 lane width, over the same
/// items, so that the ratios between levels come from one run.
fn levels(c: &mut Criterion) {
    use waymark::cpu::Level;
    let items = common::words(100_000);
    let slices: Vec<&[u8]> = items.iter().map(Vec::as_slice).collect();
    let mut out = vec![0u32; slices.len()];
    let mut group = c.benchmark_group("levels");
    group.throughput(Throughput::Elements(slices.len() as u64));
    let queries: [&[u8]; 4] = [
        b"vessmark",                                 // 8 chars: 8-bit lanes
        b"continent",                                // 9 chars: 16-bit lanes
        b"harbour lights north",                     // 20 chars: 32-bit lanes
        b"continental shelf of the vessmark isles!", // 40 chars: 64-bit lanes
    ];
    for query in queries {
        let mut want: Option<u64> = None;
        for level in Level::ALL.into_iter().filter(|l| l.available()) {
            let q = LevenshteinQuery::with_level(query, level);
            let id = BenchmarkId::new(level.name(), format!("q{}", q.len()));
            group.bench_function(id, |b| {
                b.iter(|| {
                    q.dist_batch(black_box(&slices), &mut out);
                    out.iter().map(|&d| u64::from(d)).sum::<u64>()
                })
            });
            // Every level gives the same answers.
            let sum = out.iter().map(|&d| u64::from(d)).sum::<u64>();
            assert_eq!(*want.get_or_insert(sum), sum, "{} disagrees", level.name());
        }
    }
    group.finish();
}

fn long(c: &mut Criterion) {
    let mut rng = ChaCha8Rng::seed_from_u64(2);
    let alphabet = b"acgt";
    let base: Vec<u8> = (0..300)
        .map(|_| alphabet[rng.gen_range(0..alphabet.len())])
        .collect();
    // Items: the base with a few random substitutions, so distances stay small.
    let items: Vec<Vec<u8>> = (0..1_000)
        .map(|_| {
            let mut item = base.clone();
            for _ in 0..rng.gen_range(0..8) {
                let at = rng.gen_range(0..item.len());
                item[at] = alphabet[rng.gen_range(0..alphabet.len())];
            }
            item
        })
        .collect();
    let query = LevenshteinQuery::new(&base);
    let mut group = c.benchmark_group("long");
    group.throughput(Throughput::Elements(items.len() as u64));
    group.bench_function(BenchmarkId::new("unbounded", 300), |b| {
        b.iter(|| {
            items
                .iter()
                .map(|item| u64::from(query.dist(black_box(item))))
                .sum::<u64>()
        })
    });
    group.bench_function(BenchmarkId::new("bounded_k2", 300), |b| {
        b.iter(|| {
            items
                .iter()
                .filter_map(|item| query.dist_within(black_box(item), 2))
                .count()
        })
    });
    group.finish();
}

/// Brute-force k-NN through `eval::scan_many` (all cores) on the whole word list with typo
/// queries: pairs per second of the full scan and of the best scan, measured in one run so
/// that their ratio holds even on a busy machine. `WAYMARK_BENCH_QUERIES` sets the number of
/// queries [1000], `WAYMARK_BENCH_ROUNDS` how often each scan is repeated [3] (the fastest
/// round is reported, every round is printed).
fn brute_force() {
    use waymark::eval::{scan_many, typo_queries, Scan};
    use waymark::index::{build_index, BuildOptions, Index};
    use waymark::ingest::{read_corpus, IngestOptions};

    let path = std::path::Path::new(common::DICTIONARY);
    if !path.exists() {
        eprintln!(
            "{} is missing: apt-get install -y wamerican",
            path.display()
        );
        return;
    }
    let env = |name: &str, default: usize| {
        std::env::var(name)
            .ok()
            .and_then(|v| v.parse().ok())
            .unwrap_or(default)
    };
    let nq = env("WAYMARK_BENCH_QUERIES", 1000);
    let rounds = env("WAYMARK_BENCH_ROUNDS", 3).max(1);
    let corpus = read_corpus(path, &IngestOptions::default()).expect("word list reads");
    let queries = typo_queries(&corpus.items, nq, 20261201);
    kernel_alone(&queries);
    if std::env::var("WAYMARK_BENCH_SCANS").as_deref() == Ok("kernel") {
        return;
    }
    let dir = tempfile::tempdir().expect("temp dir");
    let file = dir.path().join("words.wmk");
    build_index(&corpus, "bench", &BuildOptions::default(), &file, &|_| {}).expect("build");
    let index = Index::open(&file).expect("open");
    let pairs = (nq * index.len()) as f64;
    println!(
        "{}: {} items, {} typo queries (1-3 edits), k = 10, {} threads",
        path.display(),
        index.len(),
        nq,
        rayon::current_num_threads()
    );
    let mut fastest = [f64::INFINITY; 2];
    let mut fastest_cpu = [f64::INFINITY; 2];
    let mut answers = Vec::new();
    for round in 0..rounds {
        for (slot, scan) in [Scan::Full, Scan::Best].into_iter().enumerate() {
            let (t, cpu) = (std::time::Instant::now(), cpu_seconds());
            let got = scan_many(&index, &queries, 10, scan).expect("k > 0");
            let s = t.elapsed().as_secs_f64();
            let cpu = cpu_seconds() - cpu;
            fastest[slot] = fastest[slot].min(s);
            fastest_cpu[slot] = fastest_cpu[slot].min(cpu);
            println!(
                "round {round} {scan:?}: {:.3} s wall, {:.1} M pairs/s, {:.0} q/s; {:.3} CPU s, {:.1} M pairs per CPU s",
                s,
                pairs / s / 1e6,
                nq as f64 / s,
                cpu,
                pairs / cpu / 1e6
            );
            answers.push(got);
        }
        let best = answers.pop().expect("two scans");
        let full = answers.pop().expect("two scans");
        assert_eq!(full, best, "the full scan and the best scan disagree");
    }
    lanes_against_one_by_one(&index, &queries, pairs, rounds);
    println!(
        "fastest: full scan {:.1} M pairs/s ({:.0} q/s), best scan {:.1} M pairs/s ({:.0} q/s), best/full {:.2}x",
        pairs / fastest[0] / 1e6,
        nq as f64 / fastest[0],
        pairs / fastest[1] / 1e6,
        nq as f64 / fastest[1],
        fastest[0] / fastest[1]
    );
    let threads = rayon::current_num_threads() as f64;
    println!(
        "by CPU time ({threads} threads, what the wall time is on an idle machine): full scan {:.1} M pairs/s, best scan {:.1} M pairs/s, best/full {:.2}x",
        pairs / fastest_cpu[0] * threads / 1e6,
        pairs / fastest_cpu[1] * threads / 1e6,
        fastest_cpu[0] / fastest_cpu[1]
    );
}

/// The brute force of many queries with the queries in vector lanes (`scan_many`'s full
/// scan) against the two scans one query at a time on all cores (`full_scan`
/// and `best_scan` per query, what `scan_many` ran before), in one run; answers must compare
/// equal.
fn lanes_against_one_by_one(
    index: &waymark::index::Index,
    queries: &[String],
    pairs: f64,
    rounds: usize,
) {
    use rayon::prelude::*;
    use waymark::eval::{best_scan, full_scan, scan_many, Scan};

    let mut fastest = [f64::INFINITY; 3];
    for round in 0..rounds {
        let t = std::time::Instant::now();
        let full: Vec<_> = queries
            .par_iter()
            .map(|q| full_scan(index, q, 10).expect("k > 0"))
            .collect();
        let s_full = t.elapsed().as_secs_f64();
        let t = std::time::Instant::now();
        let best: Vec<_> = queries
            .par_iter()
            .map(|q| best_scan(index, q, 10).expect("k > 0"))
            .collect();
        let s_best = t.elapsed().as_secs_f64();
        let t = std::time::Instant::now();
        let lanes = scan_many(index, queries, 10, Scan::Full).expect("k > 0");
        let s_lanes = t.elapsed().as_secs_f64();
        assert_eq!(full, lanes, "queries in lanes and one by one disagree");
        assert_eq!(best, lanes, "queries in lanes and the best scan disagree");
        for (f, s) in fastest.iter_mut().zip([s_full, s_best, s_lanes]) {
            *f = f.min(s);
        }
        println!(
            "round {round}: one query at a time, full scan {:.1} M pairs/s, best scan {:.1} M pairs/s; queries in lanes {:.1} M pairs/s",
            pairs / s_full / 1e6,
            pairs / s_best / 1e6,
            pairs / s_lanes / 1e6
        );
    }
    println!(
        "fastest: one query at a time, full scan {:.1} M pairs/s, best scan {:.1} M pairs/s; queries in lanes {:.1} M pairs/s: lanes/full {:.2}x, lanes/best {:.2}x",
        pairs / fastest[0] / 1e6,
        pairs / fastest[1] / 1e6,
        pairs / fastest[2] / 1e6,
        fastest[0] / fastest[2],
        fastest[1] / fastest[2]
    );
}

/// The kernel alone on one thread over the word list, by CPU time: one item per call
/// against the batched form, for the first 20 typo queries.
fn kernel_alone(queries: &[String]) {
    // The kernel alone on one thread, over the same items and the first 20 queries: one
    // item per call against the batched form, as an anchor for the ratios below.
    let words = common::words(100_000);
    let keys: Vec<&[u8]> = words.iter().map(Vec::as_slice).collect();
    let mut out = vec![0u32; keys.len()];
    let few = &queries[..queries.len().min(20)];
    let t = cpu_seconds();
    let mut sum = 0u64;
    for q in few {
        let p = waymark::metric::LevenshteinQuery::new(q.as_bytes());
        sum += keys.iter().map(|x| u64::from(p.dist(x))).sum::<u64>();
    }
    let single = cpu_seconds() - t;
    let t = cpu_seconds();
    let mut sum2 = 0u64;
    for q in few {
        let p = waymark::metric::LevenshteinQuery::new(q.as_bytes());
        p.dist_batch(&keys, &mut out);
        sum2 += out.iter().map(|&d| u64::from(d)).sum::<u64>();
    }
    let batch = cpu_seconds() - t;
    assert_eq!(sum, sum2, "batched and one-item kernels disagree");
    let kp = (few.len() * keys.len()) as f64;
    println!(
        "one thread, kernel alone, per CPU second: dist {:.1} M pairs/s, dist_batch {:.1} M pairs/s ({:.2}x)",
        kp / single / 1e6,
        kp / batch / 1e6,
        single / batch
    );
}

/// CPU time of this process so far, in seconds: the sum over its threads of the time spent
/// on a core, from Linux's /proc/self/task/*/schedstat (first field, nanoseconds). On a
/// machine shared with other jobs, wall time counts the waits for a core; this does not.
fn cpu_seconds() -> f64 {
    let Ok(tasks) = std::fs::read_dir("/proc/self/task") else {
        return f64::NAN;
    };
    let mut ns = 0u64;
    for t in tasks.flatten() {
        if let Ok(s) = std::fs::read_to_string(t.path().join("schedstat")) {
            ns += s
                .split_whitespace()
                .next()
                .and_then(|v| v.parse::<u64>().ok())
                .unwrap_or(0);
        }
    }
    ns as f64 / 1e9
}

criterion_group!(benches, scan, levels, long);

fn main() {
    // `WAYMARK_BENCH_SCANS=1 cargo bench --bench kernel` runs the brute-force report alone.
    if std::env::var_os("WAYMARK_BENCH_SCANS").is_some() {
        brute_force();
        return;
    }
    benches();
    Criterion::default().configure_from_args().final_summary();
}
