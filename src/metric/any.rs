//! One type for every metric an index can be built with, chosen at run time.
//!
//! An index records a [`MetricSpec`]: the metric's kind and what it needs besides the items
//! (a cost table, a tokenisation, a vector dimension, the command of an external program; a
//! graph's edges live in their own section of the index file). [`MetricSpec::open`] turns it
//! into an [`AnyMetric`], whose prepared queries are [`AnyQuery`]s. Build, search and eval
//! work through these two types, so every metric takes the same path.
//!
//! ```
//! use waymark::metric::{Metric, MetricSpec, PreparedQuery};
//!
//! let m = MetricSpec::Damerau.open(None)?;
//! let q = m.prepare(b"Keth Landing");
//! assert_eq!(q.distance(b"Kteh Landing"), 1.0); // one swap of neighbours
//! # Ok::<(), waymark::metric::MetricError>(())
//! ```

use std::time::Duration;

use serde::{Deserialize, Serialize};

use super::{
    CostRules, CostTable, CustomMetric, CustomQuery, Damerau, DamerauQuery, ExternalMetric,
    ExternalQuery, Graph, GraphMetric, GraphQuery, Hamming, HammingQuery, Jaccard, JaccardQuery,
    Levenshtein, LevenshteinQuery, Metric, MetricError, MetricKind, Norm, PreparedQuery, TokenEdit,
    TokenEditQuery, Tokens, VectorMetric, VectorQuery, WeightedEdit, WeightedQuery,
};

/// A metric as recorded in an index: its kind and its parameters.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum MetricSpec {
    /// Unit-cost edit distance.
    #[default]
    Levenshtein,
    /// Unrestricted Damerau–Levenshtein distance.
    Damerau,
    /// Hamming distance on strings of one length.
    Hamming {
        /// The items' length in chars; queries must have it too.
        length: u64,
    },
    /// Edit distance with the costs of a cost file (recorded whole).
    WeightedEdit {
        /// The checked rules.
        costs: CostRules,
    },
    /// Jaccard distance of token or q-gram sets.
    Jaccard {
        /// How items are cut into set elements.
        tokens: Tokens,
    },
    /// Edit distance over words ([`TokenEdit`]).
    TokenEdit,
    /// A distance between `f32` vectors.
    Vector {
        /// Which distance.
        norm: Norm,
        /// Components per vector.
        dim: u32,
    },
    /// Shortest-path distance on the graph stored in the index.
    Graph,
    /// Distances from an external program speaking the `waymark-metric` protocol.
    External {
        /// Program and arguments, run again by every process that opens the index.
        command: Vec<String>,
        /// Time limit per batch, in milliseconds.
        timeout_ms: u64,
    },
    /// A metric written in Rust against the library ([`CustomMetric`]): only its name is
    /// recorded, and opening the index needs the same metric again.
    Custom {
        /// The metric's [`Metric::name`].
        name: String,
        /// Whether its distances are whole numbers ([`Metric::is_integral`]).
        integral: bool,
    },
}

impl MetricSpec {
    /// The kind of metric.
    pub fn kind(&self) -> MetricKind {
        match self {
            MetricSpec::Levenshtein => MetricKind::Levenshtein,
            MetricSpec::Damerau => MetricKind::Damerau,
            MetricSpec::Hamming { .. } => MetricKind::Hamming,
            MetricSpec::WeightedEdit { .. } => MetricKind::WeightedEdit,
            MetricSpec::Jaccard { .. } => MetricKind::Jaccard,
            MetricSpec::TokenEdit => MetricKind::TokenEdit,
            MetricSpec::Vector { norm, .. } => match norm {
                Norm::L1 => MetricKind::L1,
                Norm::L2 => MetricKind::L2,
                Norm::Linf => MetricKind::Linf,
                Norm::Angular => MetricKind::Angular,
            },
            MetricSpec::Graph => MetricKind::Graph,
            MetricSpec::External { .. } => MetricKind::External,
            MetricSpec::Custom { .. } => MetricKind::Custom,
        }
    }

    /// Whether distances are always whole numbers (lets coordinates be stored as whole
    /// distances).
    pub fn is_integral(&self) -> bool {
        match self {
            MetricSpec::Custom { integral, .. } => *integral,
            other => other.kind().is_integral(),
        }
    }

    /// The record of a metric of the library user's own.
    pub fn custom(metric: &CustomMetric) -> MetricSpec {
        MetricSpec::Custom {
            name: metric.name().to_string(),
            integral: metric.is_integral(),
        }
    }

    /// Whether items are text (and queries are normalised like items); `false` for vectors
    /// and graph nodes.
    pub fn is_text(&self) -> bool {
        !matches!(self, MetricSpec::Vector { .. } | MetricSpec::Graph)
    }

    /// The metric itself. A graph metric needs the graph (`None` is refused); an external
    /// metric starts its program here. A custom metric cannot be made from its record (the
    /// code is not in the file): refused with the advice to supply it.
    pub fn open(&self, graph: Option<Graph>) -> Result<AnyMetric, MetricError> {
        Ok(match self {
            MetricSpec::Levenshtein => AnyMetric::Levenshtein(Levenshtein),
            MetricSpec::Damerau => AnyMetric::Damerau(Damerau),
            MetricSpec::Hamming { .. } => AnyMetric::Hamming(Hamming),
            MetricSpec::WeightedEdit { costs } => {
                let table = CostTable::try_from(costs.clone()).map_err(MetricError::Options)?;
                AnyMetric::WeightedEdit(WeightedEdit::new(table))
            }
            MetricSpec::Jaccard { tokens } => AnyMetric::Jaccard(Jaccard::new(tokens.clone())?),
            MetricSpec::TokenEdit => AnyMetric::TokenEdit(TokenEdit),
            MetricSpec::Vector { norm, dim } => {
                AnyMetric::Vector(VectorMetric::new(*norm, *dim as usize)?)
            }
            MetricSpec::Graph => {
                AnyMetric::Graph(GraphMetric::new(graph.ok_or_else(|| {
                    MetricError::Options("the graph metric needs its graph".into())
                })?))
            }
            MetricSpec::External {
                command,
                timeout_ms,
            } => AnyMetric::External(ExternalMetric::spawn(
                command,
                Duration::from_millis(*timeout_ms),
            )?),
            MetricSpec::Custom { name, .. } => {
                return Err(MetricError::Options(format!(
                    "the index was built with the custom metric `{}`, written in Rust; \
                     open it from a program that supplies that metric \
                     (Index::open_with_metric)",
                    crate::escape::escape_controls(name)
                )))
            }
        })
    }
}

/// Every metric, behind one type (see the module documentation).
#[derive(Clone, Debug)]
pub enum AnyMetric {
    /// [`Levenshtein`].
    Levenshtein(Levenshtein),
    /// [`Damerau`].
    Damerau(Damerau),
    /// [`Hamming`].
    Hamming(Hamming),
    /// [`WeightedEdit`].
    WeightedEdit(WeightedEdit),
    /// [`Jaccard`].
    Jaccard(Jaccard),
    /// [`TokenEdit`].
    TokenEdit(TokenEdit),
    /// [`VectorMetric`].
    Vector(VectorMetric),
    /// [`GraphMetric`].
    Graph(GraphMetric),
    /// [`ExternalMetric`].
    External(ExternalMetric),
    /// A metric of the library user's own ([`CustomMetric`]).
    Custom(CustomMetric),
}

/// A query prepared by an [`AnyMetric`].
///
/// The Levenshtein variant holds its match masks inline, so it is much larger than the
/// others; a query is made once and used for thousands of comparisons, never stored in
/// bulk, so it is not boxed (that would add an indirection to the hottest call).
#[allow(clippy::large_enum_variant)]
#[derive(Clone, Debug)]
pub enum AnyQuery {
    /// For [`Levenshtein`].
    Levenshtein(LevenshteinQuery),
    /// For [`Damerau`].
    Damerau(DamerauQuery),
    /// For [`Hamming`].
    Hamming(HammingQuery),
    /// For [`WeightedEdit`].
    WeightedEdit(WeightedQuery),
    /// For [`Jaccard`].
    Jaccard(JaccardQuery),
    /// For [`TokenEdit`].
    TokenEdit(TokenEditQuery),
    /// For [`VectorMetric`].
    Vector(VectorQuery),
    /// For [`GraphMetric`].
    Graph(GraphQuery),
    /// For [`ExternalMetric`].
    External(ExternalQuery),
    /// For [`CustomMetric`].
    Custom(CustomQuery),
}

macro_rules! each {
    ($value:expr, $name:ident => $body:expr) => {
        match $value {
            AnyQuery::Levenshtein($name) => $body,
            AnyQuery::Damerau($name) => $body,
            AnyQuery::Hamming($name) => $body,
            AnyQuery::WeightedEdit($name) => $body,
            AnyQuery::Jaccard($name) => $body,
            AnyQuery::TokenEdit($name) => $body,
            AnyQuery::Vector($name) => $body,
            AnyQuery::Graph($name) => $body,
            AnyQuery::External($name) => $body,
            AnyQuery::Custom($name) => $body,
        }
    };
}

impl AnyMetric {
    /// The first failure of an external program, if any; `Ok` for every other metric.
    /// Callers check it after each batch of distances (see [`ExternalMetric::check`]).
    pub fn check(&self) -> Result<(), MetricError> {
        match self {
            AnyMetric::External(m) => m.check(),
            AnyMetric::Custom(m) => Metric::check(m),
            _ => Ok(()),
        }
    }
}

/// Cheap lower bounds from a few numbers per item, its *sketch*: exact and range queries
/// compare the query's sketch with each item's before measuring the item.
impl AnyMetric {
    /// Numbers per item of [`AnyMetric::sketch`]; 0 when the metric has no bound of this
    /// kind (Levenshtein, Damerau and Hamming are bounded by char counts instead,
    /// [`Metric::bounded_by_char_counts`]; a graph, a program or a metric of your own by
    /// nothing but the stored coordinates).
    pub fn sketch_width(&self) -> usize {
        match self {
            AnyMetric::WeightedEdit(_) => super::weighted::WEIGHTED_SKETCH,
            AnyMetric::Jaccard(_) => super::jaccard::JACCARD_SKETCH,
            AnyMetric::TokenEdit(_) => 1,
            AnyMetric::Vector(m) => m.sketch_width(),
            _ => 0,
        }
    }

    /// Writes the sketch of `item` to `out` ([`AnyMetric::sketch_width`] numbers).
    ///
    /// ```
    /// use waymark::metric::{Metric, MetricSpec, PreparedQuery, Tokens};
    ///
    /// let m = MetricSpec::Jaccard { tokens: Tokens::Whitespace }.open(None)?;
    /// let (a, b) = (b"north ferry quay", b"south ferry");
    /// let mut sa = vec![0.0; m.sketch_width()];
    /// let mut sb = sa.clone();
    /// m.sketch(a, &mut sa);
    /// m.sketch(b, &mut sb);
    /// assert!(m.sketch_bound(&sa, &sb) <= m.distance(a, b));
    /// # Ok::<(), waymark::metric::MetricError>(())
    /// ```
    pub fn sketch(&self, item: &[u8], out: &mut [f64]) {
        match self {
            AnyMetric::WeightedEdit(_) => WeightedEdit::sketch(item, out),
            AnyMetric::Jaccard(m) => m.sketch(item, out),
            AnyMetric::TokenEdit(_) => TokenEdit::sketch(item, out),
            AnyMetric::Vector(m) => m.sketch(item, out),
            _ => {}
        }
    }

    /// A lower bound of the distance between two items from their sketches (0 for a
    /// metric without them). Each metric's file proves its bound.
    #[inline]
    pub fn sketch_bound(&self, a: &[f64], b: &[f64]) -> f64 {
        match self {
            AnyMetric::WeightedEdit(m) => m.sketch_bound(a, b),
            AnyMetric::Jaccard(_) => Jaccard::sketch_bound(a, b),
            AnyMetric::TokenEdit(_) => TokenEdit::sketch_bound(a, b),
            AnyMetric::Vector(m) => m.sketch_bound(a, b),
            _ => 0.0,
        }
    }
}

macro_rules! each_metric {
    ($value:expr, $name:ident => $body:expr) => {
        match $value {
            AnyMetric::Levenshtein($name) => $body,
            AnyMetric::Damerau($name) => $body,
            AnyMetric::Hamming($name) => $body,
            AnyMetric::WeightedEdit($name) => $body,
            AnyMetric::Jaccard($name) => $body,
            AnyMetric::TokenEdit($name) => $body,
            AnyMetric::Vector($name) => $body,
            AnyMetric::Graph($name) => $body,
            AnyMetric::External($name) => $body,
            AnyMetric::Custom($name) => $body,
        }
    };
}

impl Metric for AnyMetric {
    type Prepared = AnyQuery;

    fn kind(&self) -> MetricKind {
        each_metric!(self, m => m.kind())
    }

    fn name(&self) -> &str {
        each_metric!(self, m => m.name())
    }

    fn is_integral(&self) -> bool {
        each_metric!(self, m => m.is_integral())
    }

    fn bounded_by_char_counts(&self) -> bool {
        each_metric!(self, m => m.bounded_by_char_counts())
    }

    fn prepare(&self, query: &[u8]) -> AnyQuery {
        match self {
            AnyMetric::Levenshtein(m) => AnyQuery::Levenshtein(m.prepare(query)),
            AnyMetric::Damerau(m) => AnyQuery::Damerau(m.prepare(query)),
            AnyMetric::Hamming(m) => AnyQuery::Hamming(m.prepare(query)),
            AnyMetric::WeightedEdit(m) => AnyQuery::WeightedEdit(m.prepare(query)),
            AnyMetric::Jaccard(m) => AnyQuery::Jaccard(m.prepare(query)),
            AnyMetric::TokenEdit(m) => AnyQuery::TokenEdit(m.prepare(query)),
            AnyMetric::Vector(m) => AnyQuery::Vector(m.prepare(query)),
            AnyMetric::Graph(m) => AnyQuery::Graph(m.prepare(query)),
            AnyMetric::External(m) => AnyQuery::External(m.prepare(query)),
            AnyMetric::Custom(m) => AnyQuery::Custom(m.prepare(query)),
        }
    }

    fn distance(&self, a: &[u8], b: &[u8]) -> f64 {
        // The graph's own form runs one Dijkstra, not a prepared query's full table.
        each_metric!(self, m => m.distance(a, b))
    }

    fn check(&self) -> Result<(), MetricError> {
        AnyMetric::check(self)
    }
}

impl PreparedQuery for AnyQuery {
    #[inline]
    fn distance(&self, item: &[u8]) -> f64 {
        each!(self, q => q.distance(item))
    }

    #[inline]
    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64> {
        each!(self, q => q.distance_within(item, bound))
    }

    fn distances(&self, items: &[&[u8]], out: &mut [f64]) {
        each!(self, q => q.distances(items, out))
    }

    #[inline]
    fn group_size(&self) -> usize {
        each!(self, q => q.group_size())
    }
}
