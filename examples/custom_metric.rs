//! A metric of your own: implement `Metric` and `PreparedQuery`, then use it like the
//! built-in ones. Here: buoy identifiers of the Vessmark archipelago, `AREA-NNNN`, where a
//! different area costs 10 and the numbers count by their difference, capped at 9 (so any
//! two buoys of one area are closer than buoys of two areas).
//!
//! It is a metric: the area part is the discrete metric times 10, the number part
//! min(|a − b|, 9) (a capped metric is a metric), and a sum of metrics is a metric.
//!
//! Run with `cargo run --example custom_metric`.

use waymark::metric::{Metric, MetricKind, PreparedQuery};

/// Distance between buoy identifiers such as `SKR-0417`.
struct BuoyDistance;

/// A parsed identifier: area and number (a malformed one is its whole text and no number).
#[derive(Clone, Debug, PartialEq)]
struct Buoy {
    area: Vec<u8>,
    number: Option<u32>,
}

fn parse(id: &[u8]) -> Buoy {
    let text = String::from_utf8_lossy(id);
    match text.rsplit_once('-') {
        Some((area, n)) if n.parse::<u32>().is_ok() => Buoy {
            area: area.as_bytes().to_vec(),
            number: n.parse().ok(),
        },
        _ => Buoy {
            area: id.to_vec(),
            number: None,
        },
    }
}

fn between(a: &Buoy, b: &Buoy) -> f64 {
    let area = if a.area == b.area { 0.0 } else { 10.0 };
    let number = match (a.number, b.number) {
        (Some(x), Some(y)) => f64::from(x.abs_diff(y).min(9)),
        (None, None) => 0.0,
        _ => 9.0,
    };
    area + number
}

/// The prepared query: parsed once, compared with many items.
struct BuoyQuery(Buoy);

impl PreparedQuery for BuoyQuery {
    fn distance(&self, item: &[u8]) -> f64 {
        between(&self.0, &parse(item))
    }

    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64> {
        let d = self.distance(item);
        (d <= bound).then_some(d)
    }
}

impl Metric for BuoyDistance {
    type Prepared = BuoyQuery;

    /// Until custom metrics are recorded in an index, a custom metric borrows the kind of
    /// the program-computed metrics.
    fn kind(&self) -> MetricKind {
        MetricKind::External
    }

    fn prepare(&self, query: &[u8]) -> BuoyQuery {
        BuoyQuery(parse(query))
    }
}

/// The `k` nearest items by brute force, ordered by (distance, index).
fn nearest<M: Metric>(metric: &M, items: &[&str], query: &str, k: usize) -> Vec<(f64, usize)> {
    let q = metric.prepare(query.as_bytes());
    let bytes: Vec<&[u8]> = items.iter().map(|s| s.as_bytes()).collect();
    let mut d = vec![0.0; items.len()];
    q.distances(&bytes, &mut d);
    let mut order: Vec<(f64, usize)> = d.into_iter().zip(0..).collect();
    order.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
    order.truncate(k);
    order
}

fn main() {
    // Invented buoys of the Vessmark archipelago: Skarholm (SKR), Orvane (ORV), Keth (KTH).
    let buoys = [
        "SKR-0410", "SKR-0417", "SKR-0433", "ORV-0417", "ORV-0012", "KTH-0418", "KTH-0420",
        "SKR-0415", "ORV-0419", "KTH-0001",
    ];
    for query in ["SKR-0416", "KTH-0419", "ORV-0500"] {
        println!("{query}:");
        for (d, i) in nearest(&BuoyDistance, &buoys, query, 3) {
            println!("  {:<9} {d}", buoys[i]);
        }
    }
    // The bounded form, as re-ranking uses it.
    let q = BuoyDistance.prepare(b"SKR-0416");
    assert_eq!(q.distance_within(b"SKR-0417", 1.0), Some(1.0));
    assert_eq!(q.distance_within(b"ORV-0417", 5.0), None);
}
