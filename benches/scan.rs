//! Throughput of the candidate scan (`waymark::coords::scan::score_rows`), in rows per second.
//!
//! Rows are real landmark coordinates: each word of the system word list
//! (/usr/share/dict/american-english, 104,334 words, or as many generated words when it is
//! missing) against 64 landmarks drawn from the list, saturated at 255 like an index's
//! rows; the query is a word with one substitution. For each space (L1, squared L2, L∞)
//! and stride 8, 16, 32 and 64, every dispatch level this CPU runs (`portable`, `avx2`,
//! `avx512`; `waymark::cpu::Level`, passed to `score_rows_at`) is timed in the same run, and
//! every level's scores are checked to be the portable ones. Each iteration clears the
//! histogram, as a caller does, then scores all rows and fills it.
//! `cargo bench --bench scan`.

mod common;

use std::hint::black_box;

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use waymark::coords::scan::{score_rows_at, HIST_BINS};
use waymark::cpu::Level;
use waymark::metric::LevenshteinQuery;
use waymark::search::Space;

const ROWS: usize = 104_334;
const LANDMARKS: usize = 64;

/// Coordinates of `item` against the landmarks: 64 bytes, saturated at 255.
fn row(landmarks: &[LevenshteinQuery], item: &[u8]) -> [u8; 64] {
    let mut r = [0u8; 64];
    for (c, l) in r.iter_mut().zip(landmarks) {
        *c = l.dist(item).min(255) as u8;
    }
    r
}

fn scan(c: &mut Criterion) {
    let words = common::words(ROWS);
    let mut rng = ChaCha8Rng::seed_from_u64(3);
    let landmarks: Vec<LevenshteinQuery> = (0..LANDMARKS)
        .map(|_| LevenshteinQuery::new(&words[rng.gen_range(0..words.len())]))
        .collect();
    let full: Vec<[u8; 64]> = words.iter().map(|w| row(&landmarks, w)).collect();
    let mut typo = words[rng.gen_range(0..words.len())].clone();
    let at = rng.gen_range(0..typo.len());
    typo[at] = b'q';
    let q_full = row(&landmarks, &typo);
    let n = full.len();
    let levels: Vec<Level> = Level::ALL.into_iter().filter(|l| l.available()).collect();
    println!(
        "levels timed: {:?}",
        levels.iter().map(|l| l.name()).collect::<Vec<_>>()
    );

    let mut out = vec![0u32; n];
    let mut hist = vec![0u32; HIST_BINS];
    for space in [Space::L1, Space::L2, Space::Linf] {
        let mut group = c.benchmark_group(format!("scan_{}", space.name()));
        group.throughput(Throughput::Elements(n as u64));
        for stride in [8, 16, 32, 64] {
            // The first `stride` landmarks, as an index of dimension `stride` stores them.
            let coords: Vec<u8> = full
                .iter()
                .flat_map(|r| r[..stride].iter().copied())
                .collect();
            let mut q = [0u8; 64];
            q[..stride].copy_from_slice(&q_full[..stride]);
            let mut want: Option<Vec<u32>> = None;
            for &level in &levels {
                group.bench_function(BenchmarkId::new(level.name(), stride), |b| {
                    b.iter(|| {
                        hist.fill(0);
                        score_rows_at(
                            level,
                            black_box(&coords),
                            stride,
                            black_box(&q),
                            space,
                            &mut out,
                            &mut hist,
                        );
                        black_box((&out, &hist));
                    })
                });
                // Every level gives the portable scores.
                let want = want.get_or_insert_with(|| out.clone());
                assert!(*want == out, "{} disagrees", level.name());
            }
        }
        group.finish();
    }
}

criterion_group!(benches, scan);
criterion_main!(benches);
