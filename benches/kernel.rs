//! Throughput of the Levenshtein kernel, in compared pairs per second.
//!
//! * `scan`: one prepared query of 9 chars against an English word list (the system
//!   dictionary at /usr/share/dict/american-english when present, else a generated list of
//!   similar lengths): unbounded one item per call (`dist`), unbounded two items at a time
//!   (`dist_each`), and bounded with k = 2 — the shapes of a brute-force scan and of
//!   re-ranking with a running k-th best distance.
//! * `long`: a 300-char query (five 64-row blocks) against 300-char items a few edits away.

mod common;

use std::hint::black_box;

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
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

criterion_group!(benches, scan, long);
criterion_main!(benches);
