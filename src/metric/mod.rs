//! Distance functions between items.
//!
//! Every metric works on items stored as bytes (UTF-8 text for the string metrics). A query is
//! *prepared* once — for Levenshtein that builds the bit masks of Myers' algorithm — and then
//! compared with many items, which is the shape of every hot loop in waymark: embedding an item
//! against the landmarks, re-ranking candidates, and brute-force scans.
//!
//! Distances are reported as `f64`; integer metrics (Levenshtein, Hamming, Damerau) return
//! whole numbers.
//!
//! | metric | items | built from |
//! |---|---|---|
//! | [`Levenshtein`] | strings | nothing |
//! | [`Hamming`] | strings of one length ([`check_equal_lengths`]) | nothing |
//! | [`Damerau`] | strings (unrestricted Damerau–Levenshtein) | nothing |
//! | [`WeightedEdit`] | strings | a cost file ([`CostTable`]) |
//! | [`Jaccard`] | strings, as word or q-gram sets | [`Tokens`] |
//! | [`VectorMetric`] | little-endian `f32` vectors | [`Norm`] and the dimension |
//! | [`GraphMetric`] | node names | an edge list ([`Graph`]) |
//! | [`ExternalMetric`] | strings | a program speaking the `waymark-metric` protocol |
//!
//! Constructors that read options or side files return [`MetricError`], which names the file
//! and line. [`PreparedQuery::distances`] is the batched form.

mod any;
mod check;
mod damerau;
mod error;
mod external;
mod graph;
mod hamming;
mod jaccard;
mod levenshtein;
mod vector;
mod weighted;

pub use any::{AnyMetric, AnyQuery, MetricSpec};
pub use check::{check_axioms, Axiom, AxiomReport, Violation, TOLERANCE};
pub use damerau::{Damerau, DamerauQuery};
pub use error::MetricError;
pub use external::{ExternalMetric, ExternalQuery, MAX_BATCH, PROTOCOL, PROTOCOL_VERSION};
pub use graph::{Disconnected, Graph, GraphMetric, GraphQuery};
pub use hamming::{check_equal_lengths, Hamming, HammingQuery};
pub use jaccard::{Jaccard, JaccardQuery, Tokens};
pub use levenshtein::{Levenshtein, LevenshteinQuery};
pub use vector::{vector_bytes, Norm, VectorMetric, VectorQuery};
pub use weighted::{CostRules, CostTable, WeightedEdit, WeightedQuery};

use serde::{Deserialize, Serialize};

/// A distance function over items stored as bytes.
///
/// Implementations must be symmetric, zero on equal items and obey the triangle inequality
/// for the lower bounds used by search to be valid.
///
/// ```
/// use waymark::metric::{Levenshtein, Metric, PreparedQuery};
///
/// let q = Levenshtein.prepare(b"kitten");
/// assert_eq!(q.distance(b"sitting"), 3.0);
/// assert_eq!(q.distance_within(b"sitting", 2.0), None);
/// ```
pub trait Metric: Send + Sync {
    /// The prepared form of a query, reused for many comparisons.
    type Prepared: PreparedQuery;

    /// Which metric this is, as recorded in an index file.
    fn kind(&self) -> MetricKind;

    /// Prepares `query` for repeated comparison against items.
    fn prepare(&self, query: &[u8]) -> Self::Prepared;

    /// The distance between two items. Prefer [`Metric::prepare`] in loops.
    fn distance(&self, a: &[u8], b: &[u8]) -> f64 {
        self.prepare(a).distance(b)
    }
}

/// A query prepared by a [`Metric`], compared with many items.
pub trait PreparedQuery: Send + Sync {
    /// The exact distance from the query to `item`.
    fn distance(&self, item: &[u8]) -> f64;

    /// The distance if it is at most `bound`, else `None`.
    ///
    /// Implementations stop early once the distance must exceed `bound`, which is what makes
    /// re-ranking with a running k-th best distance cheap.
    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64>;

    /// The distances from the query to each of `items`, written to `out` (same length).
    ///
    /// The default calls [`PreparedQuery::distance`] per item; metrics with a per-call cost
    /// (such as an external program) answer the whole batch at once.
    ///
    /// # Panics
    ///
    /// If `out` and `items` differ in length (a programming error of the caller).
    fn distances(&self, items: &[&[u8]], out: &mut [f64]) {
        assert_eq!(items.len(), out.len(), "one output slot per item");
        for (o, item) in out.iter_mut().zip(items) {
            *o = self.distance(item);
        }
    }
}

/// The metrics an index can be built with.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum MetricKind {
    /// Unit-cost edit distance over Unicode scalar values.
    Levenshtein,
    /// Number of differing positions between strings of equal length.
    Hamming,
    /// Unrestricted Damerau–Levenshtein distance (adjacent transpositions count as one edit).
    Damerau,
    /// Edit distance with per-symbol costs from a cost file.
    #[serde(rename = "weighted-edit")]
    WeightedEdit,
    /// Jaccard distance of token or q-gram sets.
    Jaccard,
    /// L1 distance of `f32` vectors.
    L1,
    /// L2 distance of `f32` vectors.
    L2,
    /// L∞ distance of `f32` vectors.
    Linf,
    /// Angle between `f32` vectors, divided by π.
    Angular,
    /// Shortest-path distance between nodes of a weighted graph.
    Graph,
    /// Distances computed by an external program.
    External,
}

impl MetricKind {
    /// The name used on the command line and in `inspect`.
    pub fn name(self) -> &'static str {
        match self {
            MetricKind::Levenshtein => "levenshtein",
            MetricKind::Hamming => "hamming",
            MetricKind::Damerau => "damerau",
            MetricKind::WeightedEdit => "weighted-edit",
            MetricKind::Jaccard => "jaccard",
            MetricKind::L1 => "l1",
            MetricKind::L2 => "l2",
            MetricKind::Linf => "linf",
            MetricKind::Angular => "angular",
            MetricKind::Graph => "graph",
            MetricKind::External => "external",
        }
    }

    /// Whether distances are always whole numbers (lets coordinates be stored as integers).
    pub fn is_integral(self) -> bool {
        match self {
            MetricKind::Levenshtein | MetricKind::Hamming | MetricKind::Damerau => true,
            MetricKind::WeightedEdit
            | MetricKind::Jaccard
            | MetricKind::L1
            | MetricKind::L2
            | MetricKind::Linf
            | MetricKind::Angular
            | MetricKind::Graph
            | MetricKind::External => false,
        }
    }
}

impl std::fmt::Display for MetricKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}
