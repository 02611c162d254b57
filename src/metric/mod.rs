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
//! | [`TokenEdit`] | strings, as word sequences (edits of words, normalised Levenshtein between words) | nothing |
//! | [`VectorMetric`] | little-endian `f32` vectors | [`Norm`] and the dimension |
//! | [`GraphMetric`] | node names | an edge list ([`Graph`]) |
//! | [`ExternalMetric`] | strings | a program speaking the `waymark-metric` protocol |
//! | your own type implementing [`Metric`] | bytes | your code ([`CustomMetric`] holds it) |
//!
//! Constructors that read options or side files return [`MetricError`], which names the file
//! and line. [`PreparedQuery::distances`] is the batched form.

mod any;
mod check;
mod custom;
mod damerau;
mod error;
mod external;
mod graph;
mod hamming;
mod jaccard;
mod levenshtein;
mod multi;
mod token_edit;
mod vector;
mod weighted;

pub use any::{AnyMetric, AnyQuery, MetricSpec};
pub use check::{check_axioms, Axiom, AxiomReport, Violation, TOLERANCE};
pub use custom::{CustomMetric, CustomQuery};
pub use damerau::{Damerau, DamerauQuery};
pub use error::MetricError;
pub(crate) use error::{first_lone_cr, lone_cr_message, side_file_text};
pub use external::{ExternalMetric, ExternalQuery, MAX_BATCH, PROTOCOL, PROTOCOL_VERSION};
pub use graph::{Disconnected, Graph, GraphMetric, GraphQuery};
pub use hamming::{check_equal_lengths, Hamming, HammingQuery};
pub use jaccard::{Jaccard, JaccardQuery, Tokens};
pub use levenshtein::{Levenshtein, LevenshteinQuery};
pub use multi::{LevenshteinLanes, LONG_ITEM};
pub use token_edit::{normalized_levenshtein, TokenEdit, TokenEditQuery};
pub use vector::{vector_bytes, Norm, VectorMetric, VectorQuery};
pub use weighted::{CostRules, CostTable, WeightedEdit, WeightedQuery};

use serde::{Deserialize, Serialize};

/// A distance function over items stored as bytes.
///
/// Implementations must be symmetric, zero on equal items and obey the triangle inequality
/// for the lower bounds used by search to be valid ([`check_axioms`] tests a sample).
///
/// The built-in metrics implement it, and so can a type of your own: an index built with
/// it ([`crate::index::build_index_with_metric`]) records its [`Metric::name`] and is
/// opened again with the same metric ([`crate::index::Index::open_with_metric`]).
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

    /// Which metric this is, as recorded in an index file ([`MetricKind::Custom`], the
    /// default, for a metric of your own).
    fn kind(&self) -> MetricKind {
        MetricKind::Custom
    }

    /// The metric's name, recorded in the index: the built-in metrics' names are their
    /// kinds'; a metric of your own names itself, and an index built with it opens only
    /// with a metric of the same name.
    fn name(&self) -> &str {
        self.kind().name()
    }

    /// Whether every distance is a whole number (lets stored coordinates be whole distances,
    /// which makes the lower bounds of exact queries tighter). The default asks the kind.
    fn is_integral(&self) -> bool {
        self.kind().is_integral()
    }

    /// Whether the distance of two strings is at least their char-count gap and their
    /// char-signature gap (see [`LevenshteinQuery::signature`]): true for unit-cost edit
    /// distances, where each insertion, deletion or substitution changes one char. Exact
    /// and range queries then use these bounds besides the stored coordinates. Default:
    /// `false`.
    fn bounded_by_char_counts(&self) -> bool {
        false
    }

    /// Prepares `query` for repeated comparison against items.
    fn prepare(&self, query: &[u8]) -> Self::Prepared;

    /// Whether the metric has failed since it was set up. A distance has no error of its
    /// own: a metric that can fail (an external program that exits, a distance written in
    /// another language that raises) reports NaN for the distances it could not measure and
    /// remembers why; build, search and eval call this after measuring and stop with the
    /// error. Default: never fails.
    fn check(&self) -> Result<(), MetricError> {
        Ok(())
    }

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
    /// Implementations may stop early once the distance must exceed `bound`, which is what
    /// makes re-ranking with a running k-th best distance cheap. The default computes the
    /// distance and compares.
    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64> {
        let d = self.distance(item);
        (d <= bound).then_some(d)
    }

    /// The distances from the query to each of `items`, written to `out` (same length).
    ///
    /// The default calls [`PreparedQuery::distance`] per item; metrics with a per-call cost
    /// (such as an external program) or a kernel that measures several items together
    /// (Levenshtein's vector lanes) answer the whole batch at once.
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

    /// How many items [`PreparedQuery::distances`] is best given at once.
    ///
    /// 1 (the default): items are measured one at a time with
    /// [`PreparedQuery::distance_within`], so that search can skip a candidate by its
    /// lower bound and stop a distance early. More: search hands candidates to
    /// [`PreparedQuery::distances`] in groups of this size and skips none, because one
    /// distance in a group costs less than a skip test (Levenshtein's vector lanes: 64) or
    /// every call is a round trip (an external program: `usize::MAX`, all at once).
    fn group_size(&self) -> usize {
        1
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
    /// Edit distance over words: a word inserted or deleted costs 1, one word for another
    /// their normalised Levenshtein distance.
    #[serde(rename = "token-edit")]
    TokenEdit,
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
    /// A metric written in Rust against the library ([`Metric`]), recorded by its name.
    Custom,
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
            MetricKind::TokenEdit => "token-edit",
            MetricKind::L1 => "l1",
            MetricKind::L2 => "l2",
            MetricKind::Linf => "linf",
            MetricKind::Angular => "angular",
            MetricKind::Graph => "graph",
            MetricKind::External => "external",
            MetricKind::Custom => "custom",
        }
    }

    /// Whether distances are always whole numbers (lets coordinates be stored as integers).
    pub fn is_integral(self) -> bool {
        match self {
            MetricKind::Levenshtein | MetricKind::Hamming | MetricKind::Damerau => true,
            MetricKind::WeightedEdit
            | MetricKind::Jaccard
            | MetricKind::TokenEdit
            | MetricKind::L1
            | MetricKind::L2
            | MetricKind::Linf
            | MetricKind::Angular
            | MetricKind::Graph
            | MetricKind::External
            | MetricKind::Custom => false,
        }
    }
}

impl std::fmt::Display for MetricKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}
