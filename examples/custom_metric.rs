//! A metric of your own, written in Rust: implement `Metric` and `PreparedQuery`, build an
//! index with it, open the index with it again, and ask approximate, exact and range
//! queries.
//!
//! Here: buoy identifiers of the Vessmark archipelago, `AREA-NNNN`, where a different area
//! costs 10 and the numbers count by their difference, capped at 9 (so any two buoys of one
//! area are closer than buoys of two areas). It is a metric: the area part is the discrete
//! metric times 10, the number part min(|a − b|, 9) (a capped metric is a metric), and a sum
//! of metrics is a metric.
//!
//! Every answer is checked against a brute force over all buoys; the program exits with an
//! error on the first difference. Run with `cargo run --release --example custom_metric`.

use std::io::Cursor;

use waymark::index::{build_index_with_metric, BuildOptions, Index};
use waymark::ingest::{read_corpus_from, IngestOptions};
use waymark::metric::{CustomMetric, Metric, PreparedQuery};
use waymark::search::{Found, SearchParams, Searcher};

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
}

impl Metric for BuoyDistance {
    type Prepared = BuoyQuery;

    /// Recorded in the index; opening it needs a metric of the same name.
    fn name(&self) -> &str {
        "buoy"
    }

    /// Whole numbers: stored coordinates are exact and exact queries prune more.
    fn is_integral(&self) -> bool {
        true
    }

    fn prepare(&self, query: &[u8]) -> BuoyQuery {
        BuoyQuery(parse(query))
    }
}

/// Invented buoys: three areas of the archipelago, numbers from a fixed stride.
fn buoys() -> Vec<String> {
    let areas = ["SKR", "ORV", "KTH"];
    (0..3000u32)
        .map(|i| format!("{}-{:04}", areas[(i % 3) as usize], (i * 7919) % 9973))
        .collect()
}

/// Every buoy as (distance, item number), by brute force, in answer order (distance, then
/// item number: the ids are record numbers here).
fn brute_force(items: &[String], query: &str) -> Vec<(f64, u32)> {
    let q = parse(query.as_bytes());
    let mut all: Vec<(f64, u32)> = items
        .iter()
        .enumerate()
        .map(|(i, s)| (between(&q, &parse(s.as_bytes())), i as u32))
        .collect();
    all.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
    all
}

fn pairs(found: &Found) -> Vec<(f64, u32)> {
    found
        .neighbors
        .iter()
        .map(|n| (n.distance, n.index))
        .collect()
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let items = buoys();
    let text = items.join("\n");
    let corpus = read_corpus_from(Cursor::new(text), "buoys", &IngestOptions::default())?;
    let dir = tempfile::tempdir()?;
    let path = dir.path().join("buoys.wmk");
    let metric = CustomMetric::new(BuoyDistance);
    let opts = BuildOptions {
        dim: 8,
        ..BuildOptions::default()
    };
    let report = build_index_with_metric(&corpus, "buoys", &opts, &metric, &path, &())?;
    println!(
        "built an index of {} buoys with the custom metric `{}` ({} bytes)",
        report.meta.n,
        metric.name(),
        report.file_len
    );

    // Opening needs the metric again; a plain open says which one.
    if let Err(e) = Index::open(&path).and_then(|i| i.metric().map(|_| ())) {
        println!("opened without it: {e}");
    }
    let index = Index::open_with_metric(&path, &metric)?;
    let searcher = Searcher::new(&index);
    let k = 5;
    let mut checked = 0;
    for query in ["SKR-0416", "KTH-0419", "ORV-5000", "ORV-12", "XYZ-0001"] {
        let truth = brute_force(&items, query);
        let kth = truth[k - 1].0;

        let exact = searcher.search_exact(query, k, &mut Default::default())?;
        if pairs(&exact) != truth[..k] {
            return Err(format!("{query}: exact answer differs from brute force").into());
        }
        let within = searcher.search_within(query, 3.0, None, &mut Default::default())?;
        let want: Vec<(f64, u32)> = truth.iter().copied().filter(|p| p.0 <= 3.0).collect();
        if pairs(&within) != want {
            return Err(format!("{query}: range answer differs from brute force").into());
        }
        // Approximate: every answer a true distance, none nearer than the true k-th missed
        // (threshold recall), with all items as candidates the answer is exact.
        let params = SearchParams::from_index(&index, k).with_candidates(items.len());
        let approx = searcher.search(query, &params, &mut Default::default())?;
        if pairs(&approx) != truth[..k] {
            return Err(format!("{query}: approximate answer with every candidate differs").into());
        }
        let quick = searcher.search(
            query,
            &SearchParams::from_index(&index, k),
            &mut Default::default(),
        )?;
        let hits = quick.neighbors.iter().filter(|n| n.distance <= kth).count();
        println!(
            "{query}: exact {:?}; {} within 3; approximate {hits}/{k} within the true 5th distance {kth}",
            exact
                .neighbors
                .iter()
                .map(|n| format!("{} {}", items[n.index as usize], n.distance))
                .collect::<Vec<_>>(),
            within.neighbors.len(),
        );
        checked += 1;
    }
    println!("{checked} queries: exact, range and all-candidate answers equal the brute force");
    Ok(())
}
