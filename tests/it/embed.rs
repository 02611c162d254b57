//! Embeddings checked against published theorems on small abstract metrics, and against the
//! index they are stored in.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use waymark::embed::{embed_items, embed_one, quantize, EmbedOptions, Embedding, Method, MAX_DIM};
use waymark::eval::measure_distortion;
use waymark::index::BuildOptions;
use waymark::metric::{Levenshtein, Metric, MetricKind, PreparedQuery};

use crate::util::{build_in, corpus};

/// A finite metric given by its distance matrix; item `i` is stored as its index (4 bytes).
struct Matrix {
    n: usize,
    d: Vec<f64>,
}

struct Row(Vec<f64>);

fn id(item: &[u8]) -> usize {
    u32::from_le_bytes(item.try_into().expect("4 bytes")) as usize
}

impl PreparedQuery for Row {
    fn distance(&self, item: &[u8]) -> f64 {
        self.0[id(item)]
    }
    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64> {
        Some(self.distance(item)).filter(|&d| d <= bound)
    }
}

impl Metric for Matrix {
    type Prepared = Row;
    fn kind(&self) -> MetricKind {
        MetricKind::Levenshtein
    }
    fn prepare(&self, q: &[u8]) -> Row {
        let i = id(q);
        Row(self.d[i * self.n..(i + 1) * self.n].to_vec())
    }
}

fn items(n: usize) -> Vec<Vec<u8>> {
    (0..n as u32).map(|i| i.to_le_bytes().to_vec()).collect()
}

/// A random metric: shortest paths over a complete graph with random weights 1–10
/// (Floyd–Warshall), so the triangle inequality holds by construction.
fn random_metric(n: usize, seed: u64) -> Matrix {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut d = vec![0.0; n * n];
    for i in 0..n {
        for j in i + 1..n {
            let w = f64::from(rng.gen_range(1..=10u32));
            d[i * n + j] = w;
            d[j * n + i] = w;
        }
    }
    for k in 0..n {
        for i in 0..n {
            for j in 0..n {
                let via = d[i * n + k] + d[k * n + j];
                if via < d[i * n + j] {
                    d[i * n + j] = via;
                }
            }
        }
    }
    Matrix { n, d }
}

#[test]
fn every_point_a_landmark_is_an_isometry_into_linf() {
    // Fréchet (1906): x ↦ (d(x, y))_y is an isometry into L∞.
    for seed in 0..20 {
        let n = 5 + (seed as usize % 20);
        let m = random_metric(n, seed);
        let its = items(n);
        let opts = EmbedOptions {
            method: Method::Landmarks,
            dim: n,
            sample: n,
            pool: n,
            seed,
            ..Default::default()
        };
        let e = embed_items(&m, &its, &opts, &|_| {});
        assert_eq!(e.dim(), n, "every point is chosen as a landmark");
        for a in 0..n {
            for b in 0..n {
                let linf = e
                    .row(a)
                    .iter()
                    .zip(e.row(b))
                    .fold(0.0, |x: f64, (p, q)| x.max((p - q).abs()));
                assert_eq!(linf, m.d[a * n + b], "seed {seed}, pair ({a}, {b})");
            }
        }
        let r = measure_distortion(&m, &its, &e.embedding, 1 << 20, 0);
        let linf = &r.spaces[2];
        assert_eq!((linf.min, linf.max, linf.distortion), (1.0, 1.0, 1.0));
    }
}

#[test]
fn no_method_embeds_the_four_cycle_into_l2_below_sqrt_2() {
    // Enflo (1969): the 4-cycle needs distortion at least √2 in L2.
    let n = 4;
    let d: Vec<f64> = (0..16usize)
        .map(|k| {
            let c = (k / 4).abs_diff(k % 4);
            c.min(4 - c) as f64
        })
        .collect();
    let m = Matrix { n, d };
    let its = items(n);
    for method in Method::ALL {
        for dim in 1..=8 {
            for seed in 0..10 {
                let opts = EmbedOptions {
                    method,
                    dim,
                    sample: 4,
                    pool: 4,
                    seed,
                    ..Default::default()
                };
                let e = embed_items(&m, &its, &opts, &|_| {});
                let r = measure_distortion(&m, &its, &e.embedding, 100, 0);
                let l2 = &r.spaces[1];
                assert!(
                    l2.distortion >= 2f64.sqrt() - 1e-9,
                    "{method} d={dim} seed {seed}: L2 distortion {}",
                    l2.distortion
                );
            }
        }
    }
}

#[test]
fn reference_sets_distortion_stays_below_c_log2_n() {
    // Bourgain (1985): O(log n) distortion. Measured here over 30 random metrics of 16–64
    // points, pool = all points, 64 sets, the largest L1 distortion / log2(n) measured was
    // 1.20 (printed with `--nocapture`); the check allows c = 1.5.
    let c = 1.5;
    let mut worst: f64 = 0.0;
    for seed in 0..30u64 {
        let n = 16 + (seed as usize * 7) % 49;
        let m = random_metric(n, 100 + seed);
        let its = items(n);
        let opts = EmbedOptions {
            method: Method::RefSets,
            dim: MAX_DIM,
            sample: n,
            pool: n,
            seed,
            ..Default::default()
        };
        let e = embed_items(&m, &its, &opts, &|_| {});
        let r = measure_distortion(&m, &its, &e.embedding, 1 << 20, 0);
        assert!(r.all_pairs);
        let ratio = r.spaces[0].distortion / (n as f64).log2();
        worst = worst.max(ratio);
        assert!(
            ratio < c,
            "n = {n}, seed {seed}: distortion {} ≥ {c}·log2 n",
            r.spaces[0].distortion
        );
        // Distance to a set is 1-Lipschitz: nothing expands in L∞ (common practice).
        assert_eq!(r.spaces[2].expanded, 0.0);
    }
    println!("largest L1 distortion / log2 n: {worst:.3}");
}

fn words() -> Vec<String> {
    // Invented place names in the demo's style, plus their misspellings.
    let base = [
        "orvane",
        "quay",
        "strand",
        "kaldrith",
        "tessamir",
        "vessmark",
        "holmreach",
        "brindle",
        "ferrygate",
        "saltmere",
        "lowerby",
        "greyhaven",
        "marrowick",
        "tidesend",
        "skerrow",
    ];
    let mut out = Vec::new();
    for (i, a) in base.iter().enumerate() {
        for b in &base[i..] {
            out.push(format!("{a} {b}"));
        }
    }
    out
}

#[test]
fn stored_coordinates_are_reproduced_from_reference_distances() {
    // The index stores quantised coordinates; a query equal to an item must get the same.
    let items = words();
    let corpus = corpus(&items);
    let dir = tempfile::tempdir().unwrap();
    for method in Method::ALL {
        let index = build_in(
            dir.path(),
            &format!("{method}.wmk"),
            &corpus,
            &BuildOptions {
                method,
                dim: 12,
                pool: 16,
                ..BuildOptions::default()
            },
        );
        let meta = index.meta();
        assert_eq!(meta.embedding.method(), method);
        assert_eq!(index.bound().is_some(), method != Method::FastMap);
        if method == Method::FastMap {
            assert!(
                meta.scale != 1.0,
                "FastMap coordinates are real: scaled to the u8 range"
            );
        }
        let rows = index.rows();
        let mut used = 0u8;
        for (i, item) in items.iter().enumerate() {
            let c = embed_one(&Levenshtein, &items, &meta.embedding, item.as_bytes());
            let row = &rows.row(i)[..meta.dim as usize];
            let again: Vec<u8> = c.iter().map(|&x| quantize(x, meta.scale)).collect();
            assert_eq!(row, &again[..], "{method}, item {i}");
            used = used.max(*row.iter().max().unwrap());
        }
        if method == Method::FastMap {
            assert_eq!(
                used, 255,
                "the largest coordinate uses the top of the byte range"
            );
        }
    }
}

#[test]
fn a_prefix_of_an_embedding_is_the_smaller_embedding() {
    let items = words();
    for method in Method::ALL {
        let opts = |dim| EmbedOptions {
            method,
            dim,
            sample: 200,
            pool: 16,
            seed: 3,
            ..Default::default()
        };
        let big = embed_items(&Levenshtein, &items, &opts(16), &|_| {});
        let small = embed_items(&Levenshtein, &items, &opts(6), &|_| {});
        let cut = big.prefix(6);
        assert_eq!(cut.coords, small.coords, "{method}");
        if method != Method::RefSets {
            assert_eq!(cut.embedding, small.embedding, "{method}");
        }
        // The cut embedding recomputes its own coordinates from its (shorter) reference list.
        for (i, it) in items.iter().enumerate() {
            let c = embed_one(&Levenshtein, &items, &cut.embedding, it.as_bytes());
            assert_eq!(&c[..], cut.row(i), "{method}, item {i}");
        }
        assert!(cut.embedding.refs().len() <= big.embedding.refs().len());
    }
}

#[test]
fn malformed_embeddings_are_refused() {
    let bad = [
        Embedding::Landmarks {
            landmarks: vec![0, 99],
        },
        Embedding::Landmarks { landmarks: vec![] },
        Embedding::RefSets {
            pool: vec![1, 2],
            sets: vec![vec![0], vec![2]],
        },
        Embedding::RefSets {
            pool: vec![1, 2],
            sets: vec![vec![]],
        },
    ];
    for e in &bad {
        assert!(e.check(10).is_err(), "{e:?}");
    }
    let ok = Embedding::RefSets {
        pool: vec![1, 2],
        sets: vec![vec![0, 1], vec![1]],
    };
    assert!(ok.check(10).is_ok());
}

#[test]
fn trimmed_landmarks_leave_the_outliers_that_farthest_first_takes() {
    use waymark::embed::{choose_landmarks_by, LandmarkOptions, LandmarkRule};
    // 400 of Debian's wamerican words and 10 invented strings of 40 letters: the long ones
    // are the sample's outliers (a word of L letters is at least 40 − L edits from them).
    let mut items: Vec<String> = crate::util::word_list()
        .lines()
        .step_by(250)
        .take(400)
        .map(String::from)
        .collect();
    let long: Vec<String> = (0..10u8)
        .map(|i| {
            (0..40u8)
                .map(|j| char::from(b'a' + (i * 7 + j * 3) % 26))
                .collect()
        })
        .collect();
    items.extend(long.iter().cloned());
    let is_long = |l: usize| l >= 400;
    let opts = LandmarkOptions {
        dim: 8,
        sample: items.len(),
        seed: 5,
    };
    let far = choose_landmarks_by(&Levenshtein, &items, &opts, LandmarkRule::Farthest);
    let trim = choose_landmarks_by(&Levenshtein, &items, &opts, LandmarkRule::Trimmed);
    assert!(
        far.iter().any(|&l| is_long(l)),
        "farthest-first takes an outlier: {far:?}"
    );
    assert!(
        trim.iter().all(|&l| !is_long(l)),
        "the trimmed sample has no outlier: {trim:?}"
    );
    assert_eq!(trim.len(), 8);
    // The build records what it chose: an index built with the rule has those landmarks.
    let dir = tempfile::tempdir().unwrap();
    let index = build_in(
        dir.path(),
        "t.wmk",
        &corpus(&items),
        &BuildOptions {
            dim: 8,
            sample: items.len(),
            seed: 5,
            landmark_rule: LandmarkRule::Trimmed,
            ..BuildOptions::default()
        },
    );
    let refs: Vec<usize> = index
        .meta()
        .embedding
        .refs()
        .iter()
        .map(|&r| r as usize)
        .collect();
    assert_eq!(refs, trim);
}
