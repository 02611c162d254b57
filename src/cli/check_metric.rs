//! `waymark check-metric`: test the metric axioms on a sample of the input.

use std::io::Write;
use std::time::Instant;

use super::args::CheckMetricArgs;
use crate::error::Error;
use crate::index::BuildOptions;
use crate::ingest::Corpus;
use crate::metric::{check_axioms, Axiom, AxiomReport};

/// The distance is not a metric on the sample `check-metric` drew (exit code 4).
#[derive(Debug, thiserror::Error)]
#[error("{0}")]
pub(super) struct NotAMetric(String);

/// One line per violation kept in `r`, with the items quoted.
pub(super) fn describe_violations(r: &AxiomReport, corpus: &Corpus) -> Vec<String> {
    let item = |i: usize| format!("{:?}", corpus.items[i]);
    r.worst
        .iter()
        .map(|v| {
            let d = &v.distances;
            match v.axiom {
                Axiom::NonNegative => {
                    format!("d({}, {}) = {}", item(v.items[0]), item(v.items[1]), d[0])
                }
                Axiom::Identity => format!("d({0}, {0}) = {1}", item(v.items[0]), d[0]),
                Axiom::Symmetry => format!(
                    "d({0}, {1}) = {2} but d({1}, {0}) = {3}",
                    item(v.items[0]),
                    item(v.items[1]),
                    d[0],
                    d[1]
                ),
                Axiom::Positivity => format!(
                    "d({}, {}) = 0 for different items (a pseudometric: lower bounds still hold)",
                    item(v.items[0]),
                    item(v.items[1])
                ),
                Axiom::Triangle => format!(
                    "d({x}, {z}) = {} > d({x}, {y}) + d({y}, {z}) = {} + {}",
                    d[2],
                    d[0],
                    d[1],
                    x = item(v.items[0]),
                    y = item(v.items[1]),
                    z = item(v.items[2]),
                ),
            }
        })
        .collect()
}

pub(super) fn check_metric(a: CheckMetricArgs) -> anyhow::Result<()> {
    if a.sample < 2 {
        return Err(Error::Usage("--sample must be at least 2".into()).into());
    }
    let input = a.input.load(None)?;
    let source = a.input.source();
    let keys = input.corpus.key_bytes();
    crate::resources::check_axiom_sample(keys.len(), a.sample)?;
    let (spec, metric) = crate::index::open_metric(
        &keys,
        &source,
        &BuildOptions {
            metric: input.spec,
            graph: input.graph,
            ..BuildOptions::default()
        },
    )?;
    let t0 = Instant::now();
    let r = check_axioms(&metric, &keys, a.sample, a.seed);
    metric.check()?;
    let secs = t0.elapsed().as_secs_f64();
    let lines = describe_violations(&r, &input.corpus);
    let mut out = std::io::stdout().lock();
    if a.json {
        let obj = serde_json::json!({
            "input": source,
            "metric": spec.kind().name(),
            "report": r,
            "violations": lines,
            "is_metric": r.is_metric(),
            "seconds": secs,
        });
        serde_json::to_writer_pretty(&mut out, &obj)?;
        writeln!(out)?;
    } else {
        writeln!(
            out,
            "{source}: {} metric on {} of {} items: {} pairs and {} triples in {secs:.2} s",
            spec.kind(),
            r.sample,
            input.corpus.items.len(),
            r.pairs,
            r.triples
        )?;
        for &(ax, c) in &r.counts {
            writeln!(out, "  {:<30} {c:>10} violations", ax.rule())?;
        }
        for l in &lines {
            writeln!(out, "  e.g. {l}")?;
        }
    }
    if r.is_metric() {
        if !a.json {
            writeln!(out, "no violation on this sample: lower bounds and exact answers hold as far as it shows")?;
        }
        Ok(())
    } else {
        Err(NotAMetric(format!(
            "{source}: the {} distance is not a metric on this sample: exact answers \
             (--exact, --within) and pruning are not sound with it",
            spec.kind()
        ))
        .into())
    }
}
