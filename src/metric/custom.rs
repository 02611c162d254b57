//! A metric of the library user's own, held behind one type so that it takes the same path
//! as the built-in metrics.
//!
//! Any type implementing [`Metric`] (with `'static` data) can be wrapped:
//! [`CustomMetric::new`] erases its type, and [`super::AnyMetric::Custom`] carries it
//! through build, search and eval. An index records only the metric's name: the code
//! cannot be stored, so opening the index needs the same metric again.
//!
//! ```
//! use waymark::metric::{CustomMetric, Metric, PreparedQuery};
//!
//! /// Distance between two dock numbers: how far apart they are along the quay.
//! struct Quay;
//! struct QuayQuery(i64);
//!
//! fn number(b: &[u8]) -> i64 {
//!     std::str::from_utf8(b).ok().and_then(|s| s.trim().parse().ok()).unwrap_or(0)
//! }
//!
//! impl Metric for Quay {
//!     type Prepared = QuayQuery;
//!     fn name(&self) -> &str { "quay" }
//!     fn is_integral(&self) -> bool { true }
//!     fn prepare(&self, q: &[u8]) -> QuayQuery { QuayQuery(number(q)) }
//! }
//! impl PreparedQuery for QuayQuery {
//!     fn distance(&self, item: &[u8]) -> f64 { (self.0 - number(item)).abs() as f64 }
//! }
//!
//! let m = CustomMetric::new(Quay);
//! assert_eq!(m.name(), "quay");
//! assert_eq!(m.prepare(b"12").distance(b"7"), 5.0);
//! ```

use std::sync::Arc;

use super::{Metric, MetricKind, PreparedQuery};

/// The object-safe side of [`Metric`], implemented for every metric.
trait Erased: Send + Sync {
    fn name(&self) -> &str;
    fn is_integral(&self) -> bool;
    fn bounded_by_char_counts(&self) -> bool;
    fn prepare_shared(&self, query: &[u8]) -> Arc<dyn PreparedQuery>;
    fn distance(&self, a: &[u8], b: &[u8]) -> f64;
    fn check(&self) -> Result<(), super::MetricError>;
}

impl<M> Erased for M
where
    M: Metric,
    M::Prepared: 'static,
{
    fn name(&self) -> &str {
        Metric::name(self)
    }
    fn is_integral(&self) -> bool {
        Metric::is_integral(self)
    }
    fn bounded_by_char_counts(&self) -> bool {
        Metric::bounded_by_char_counts(self)
    }
    fn prepare_shared(&self, query: &[u8]) -> Arc<dyn PreparedQuery> {
        Arc::new(self.prepare(query))
    }
    fn distance(&self, a: &[u8], b: &[u8]) -> f64 {
        Metric::distance(self, a, b)
    }
    fn check(&self) -> Result<(), super::MetricError> {
        Metric::check(self)
    }
}

/// A metric of your own, its type erased (cheap to clone: the metric is shared).
#[derive(Clone)]
pub struct CustomMetric(Arc<dyn Erased>);

impl CustomMetric {
    /// Wraps `metric`.
    pub fn new<M>(metric: M) -> CustomMetric
    where
        M: Metric + 'static,
        M::Prepared: 'static,
    {
        CustomMetric(Arc::new(metric))
    }
}

impl std::fmt::Debug for CustomMetric {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_tuple("CustomMetric").field(&self.0.name()).finish()
    }
}

/// A query prepared by a [`CustomMetric`].
#[derive(Clone)]
pub struct CustomQuery(Arc<dyn PreparedQuery>);

impl std::fmt::Debug for CustomQuery {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("CustomQuery")
    }
}

impl Metric for CustomMetric {
    type Prepared = CustomQuery;

    fn kind(&self) -> MetricKind {
        MetricKind::Custom
    }
    fn name(&self) -> &str {
        self.0.name()
    }
    fn is_integral(&self) -> bool {
        self.0.is_integral()
    }
    fn bounded_by_char_counts(&self) -> bool {
        self.0.bounded_by_char_counts()
    }
    fn prepare(&self, query: &[u8]) -> CustomQuery {
        CustomQuery(self.0.prepare_shared(query))
    }
    fn distance(&self, a: &[u8], b: &[u8]) -> f64 {
        self.0.distance(a, b)
    }
    fn check(&self) -> Result<(), super::MetricError> {
        self.0.check()
    }
}

impl PreparedQuery for CustomQuery {
    #[inline]
    fn distance(&self, item: &[u8]) -> f64 {
        self.0.distance(item)
    }
    #[inline]
    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64> {
        self.0.distance_within(item, bound)
    }
    fn distances(&self, items: &[&[u8]], out: &mut [f64]) {
        self.0.distances(items, out)
    }
    fn group_size(&self) -> usize {
        self.0.group_size()
    }
}
