//! Checking that a distance function is a metric, on a sample of the items.
//!
//! The search's lower bounds, and so exact answers, hold only for a metric: d(x,x) = 0,
//! d(x,y) = d(y,x), d(x,y) > 0 for different items, and d(x,z) ≤ d(x,y) + d(y,z). A
//! user-defined distance often breaks one of them (a normalised score, a squared distance,
//! the restricted "optimal string alignment" form of Damerau's distance). [`check_axioms`]
//! draws a seeded sample of `m` items, measures all `m²` ordered pairs, and tests every pair
//! for the first three axioms and every triple of the sample for the triangle inequality
//! (`m³` triples: 8 million for the default 200 items, which takes well under a second
//! once the distances are known). Violations are counted and the worst are kept with the
//! items involved.
//!
//! A distance of 0 between different items (a pseudometric) keeps the lower bounds valid;
//! it is reported, but only as a note.
//!
//! ```
//! use waymark::metric::{check_axioms, Levenshtein};
//!
//! let items = ["Keth", "Kath", "Orvane", "Orvan", "Skarholm"];
//! let r = check_axioms(&Levenshtein, &items, 10, 1);
//! assert!(r.is_metric());
//! assert_eq!(r.triples, 125);
//! ```

use rand::seq::index::sample;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::Serialize;

use super::{Metric, PreparedQuery};

/// Relative tolerance of the equality and triangle checks, for distances in floating point.
pub const TOLERANCE: f64 = 1e-9;

/// Violations kept per axiom (the worst ones).
const KEEP: usize = 5;

/// A rule of a metric.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Axiom {
    /// Distances are finite numbers of at least 0.
    NonNegative,
    /// d(x, x) = 0.
    Identity,
    /// d(x, y) = d(y, x).
    Symmetry,
    /// d(x, y) > 0 when x ≠ y (without it: a pseudometric, still valid for the bounds).
    Positivity,
    /// d(x, z) ≤ d(x, y) + d(y, z).
    Triangle,
}

impl Axiom {
    /// How the rule reads.
    pub fn rule(self) -> &'static str {
        match self {
            Axiom::NonNegative => "d(x,y) is a finite number ≥ 0",
            Axiom::Identity => "d(x,x) = 0",
            Axiom::Symmetry => "d(x,y) = d(y,x)",
            Axiom::Positivity => "d(x,y) > 0 for x ≠ y",
            Axiom::Triangle => "d(x,z) ≤ d(x,y) + d(y,z)",
        }
    }
}

/// One violation: the items (sample positions mapped back to item indices) and distances.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Violation {
    /// The rule broken.
    pub axiom: Axiom,
    /// Item indices: x (and y, z as the rule has them).
    pub items: Vec<usize>,
    /// The distances involved: d(x,x); d(x,y), d(y,x); d(x,y); d(x,y), d(y,z), d(x,z).
    pub distances: Vec<f64>,
    /// By how much the rule is broken (larger is worse).
    pub excess: f64,
}

/// Counts and examples of violations, per axiom.
#[derive(Clone, Debug, Default, PartialEq, Serialize)]
pub struct AxiomReport {
    /// Items sampled.
    pub sample: usize,
    /// Ordered pairs measured (`sample²`).
    pub pairs: usize,
    /// Triples tested for the triangle inequality (`sample³`).
    pub triples: usize,
    /// Per axiom: number of violations (pairs or triples).
    pub counts: Vec<(Axiom, usize)>,
    /// The worst violations, at most five per axiom.
    pub worst: Vec<Violation>,
}

impl AxiomReport {
    /// Violations of `axiom`.
    pub fn count(&self, axiom: Axiom) -> usize {
        self.counts
            .iter()
            .find(|(a, _)| *a == axiom)
            .map_or(0, |c| c.1)
    }

    /// Whether no rule but positivity is broken: the lower bounds of the search hold.
    pub fn is_metric(&self) -> bool {
        self.counts
            .iter()
            .all(|&(a, c)| c == 0 || a == Axiom::Positivity)
    }
}

/// Tests the metric axioms on a seeded sample of `sample` items (see the module
/// documentation). Item `i` and `j` count as different when their bytes differ.
pub fn check_axioms<M: Metric, T: AsRef<[u8]> + Sync>(
    metric: &M,
    items: &[T],
    sample_size: usize,
    seed: u64,
) -> AxiomReport {
    let n = items.len();
    let m = sample_size.min(n);
    if m == 0 {
        return AxiomReport::default();
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut pick: Vec<usize> = sample(&mut rng, n, m).into_vec();
    pick.sort_unstable();
    let chosen: Vec<&[u8]> = pick.iter().map(|&i| items[i].as_ref()).collect();
    // d[a * m + b] = d(a, b), one batch per row.
    let mut d = vec![0.0; m * m];
    for (a, row) in d.chunks_exact_mut(m).enumerate() {
        metric.prepare(chosen[a]).distances(&chosen, row);
    }
    let mut counts = [0usize; 5];
    let mut worst: [Vec<Violation>; 5] = Default::default();
    let mut note = |axiom: Axiom, items: Vec<usize>, distances: Vec<f64>, excess: f64| {
        let k = axiom as usize;
        counts[k] += 1;
        let w = &mut worst[k];
        if w.len() < KEEP || w.last().is_some_and(|v| v.excess < excess) {
            let pos = w.partition_point(|v| v.excess >= excess);
            w.insert(
                pos,
                Violation {
                    axiom,
                    items: items.iter().map(|&s| pick[s]).collect(),
                    distances,
                    excess,
                },
            );
            w.truncate(KEEP);
        }
    };
    let tol = |x: f64| TOLERANCE * x.abs().max(1.0);
    let ok = |x: f64| x.is_finite() && x >= 0.0;
    for a in 0..m {
        for b in 0..m {
            let x = d[a * m + b];
            if !ok(x) {
                note(Axiom::NonNegative, vec![a, b], vec![x], f64::INFINITY);
                continue;
            }
            if a == b {
                if x > tol(0.0) {
                    note(Axiom::Identity, vec![a], vec![x], x);
                }
                continue;
            }
            let y = d[b * m + a];
            if a < b && ok(y) && (x - y).abs() > tol(x.max(y)) {
                note(Axiom::Symmetry, vec![a, b], vec![x, y], (x - y).abs());
            }
            if a < b && x == 0.0 && chosen[a] != chosen[b] {
                note(Axiom::Positivity, vec![a, b], vec![x], 0.0);
            }
        }
    }
    for a in 0..m {
        for b in 0..m {
            let ab = d[a * m + b];
            if !ok(ab) {
                continue;
            }
            for c in 0..m {
                let (bc, ac) = (d[b * m + c], d[a * m + c]);
                if ok(bc) && ok(ac) && ac > ab + bc + tol(ac) {
                    note(
                        Axiom::Triangle,
                        vec![a, b, c],
                        vec![ab, bc, ac],
                        ac - ab - bc,
                    );
                }
            }
        }
    }
    let all = [
        Axiom::NonNegative,
        Axiom::Identity,
        Axiom::Symmetry,
        Axiom::Positivity,
        Axiom::Triangle,
    ];
    AxiomReport {
        sample: m,
        pairs: m * m,
        triples: m * m * m,
        counts: all.iter().map(|&a| (a, counts[a as usize])).collect(),
        worst: worst.into_iter().flatten().collect(),
    }
}
