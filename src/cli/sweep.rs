//! `waymark sweep`: build and measure indexes over methods, dimensions, spaces and candidate
//! counts; write CSV, JSON and the charts.

use std::io::Write;

use super::args::SweepArgs;
use super::output::counting_bar;
use super::query::read_query_file;
use crate::eval::sweep::{run_sweep, write_outputs, Progress, SweepOptions};
use crate::ingest::LoadedInput;
use crate::metric::MetricSpec;

pub(super) fn sweep(a: SweepArgs) -> anyhow::Result<()> {
    let opts = SweepOptions {
        methods: a.embeddings.clone(),
        dims: a.dims.clone(),
        spaces: a.spaces.iter().map(|&s| s.into()).collect(),
        candidates: a.candidates.clone(),
        k: a.k,
        seed: a.seed,
        sample: a.landmark_sample,
        pool: a.pool,
        normalize: a.input.normalize(),
        metric: MetricSpec::Levenshtein,
        graph: None,
        inputs: a
            .input
            .files()
            .into_iter()
            .chain([a.queries.clone()])
            .collect(),
    };
    // Refuse impossible options before reading the input.
    opts.check()?;
    let LoadedInput {
        corpus,
        spec,
        graph,
        ..
    } = a.input.load(Some(&a.ids))?;
    let opts = SweepOptions {
        metric: spec,
        graph,
        ..opts
    };
    let queries = read_query_file(&a.queries)?;
    let configs = opts.configurations() as u64;
    let bar = counting_bar(queries.len() as u64 + configs, "sweep", !a.quiet);
    let source = a.input.source();
    let report = run_sweep(
        &corpus,
        &source,
        &queries,
        Some(&a.queries),
        &opts,
        &a.out,
        &|p| match p {
            Progress::Truth(n) => bar.inc(n as u64),
            Progress::Config => bar.inc(1),
        },
    )?;
    bar.finish_and_clear();
    let written = write_outputs(&report, &a.out)?;
    for n in &report.notes {
        eprintln!("waymark: note: {n}");
    }
    if !a.quiet {
        let mut out = std::io::stdout().lock();
        writeln!(
            out,
            "{} configurations over {} items, {} queries, k = {} in {:.1} s (exact answers: {})",
            report.rows.len(),
            report.items,
            report.queries,
            report.k,
            report.total_seconds,
            if report.truth_cached {
                "cached".to_string()
            } else {
                format!("{:.1} s", report.truth_seconds)
            }
        )?;
        writeln!(
            out,
            "{:<10} {:>4} {:>5} {:>10} {:>5} {:>9} {:>9} {:>10} {:>9}",
            "method",
            "dim",
            "space",
            "candidates",
            "refs",
            "recall@k",
            "plain@k",
            "distances",
            "queries/s"
        )?;
        for r in &report.rows {
            writeln!(
                out,
                "{:<10} {:>4} {:>5} {:>10} {:>5} {:>9.4} {:>9.4} {:>10.1} {:>9.0}",
                r.method,
                r.dim_made,
                r.space,
                r.candidates,
                r.refs,
                r.recall,
                r.plain_recall,
                r.distances_per_query,
                r.qps
            )?;
        }
        for p in &written {
            writeln!(out, "wrote {}", p.display())?;
        }
    }
    Ok(())
}
