//! `waymark build`: read the input under its metric, embed, write the index.

use std::io::Write;
use std::time::Instant;

use super::args::BuildArgs;
use super::check_metric::describe_violations;
use super::output::BuildBars;
use crate::index::{build_index_with, BuildOptions};
use crate::ingest::LoadedInput;

pub(super) fn build(a: BuildArgs) -> anyhow::Result<()> {
    let t0 = Instant::now();
    let options = BuildOptions {
        method: a.embedding,
        dim: a.dim,
        seed: a.seed,
        sample: a.landmark_sample,
        pool: a.pool,
        landmark_rule: a.landmark_rule,
        candidates: a.candidates.map_or(0, |c| c as usize),
        space: a.space.into(),
        widen: a.widen,
        normalize: a.input.normalize(),
        inputs: a.input.files(),
        small_radius: a.small_radius,
        ..BuildOptions::default()
    };
    // Refuse impossible options before reading a large input.
    options.check()?;
    // Refuse an output that is an input before reading it (the writer checks again).
    crate::index::file::refuse_input_as_output(&a.output, &options.inputs)?;
    let source = a.input.source();
    if let Ok(m) = std::fs::metadata(&a.input.input) {
        crate::resources::check_input(&source, m.len())?;
    }
    let LoadedInput {
        corpus,
        spec,
        graph,
        ..
    } = a.input.load(Some(&a.ids))?;
    let read_seconds = t0.elapsed().as_secs_f64();
    let n = corpus.items.len();
    let text_bytes: usize = corpus.items.iter().map(String::len).sum::<usize>()
        + corpus
            .keys
            .as_ref()
            .map_or(0, |k| k.iter().map(Vec::len).sum());
    let table = match a.small_radius {
        Some(r) => {
            let keys = corpus.key_bytes();
            crate::index::variants::build_estimate(
                keys.iter()
                    .map(|k| String::from_utf8_lossy(k).chars().count()),
                r,
            )
        }
        None => 0,
    };
    crate::resources::check_build(&source, n, text_bytes, a.dim, table)?;
    if let Some(shards) = a.shards {
        return build_sharded(&a, &corpus, &source, spec, graph, options, shards, t0);
    }
    let bars = BuildBars::new(n, !a.quiet);
    let report = build_index_with(
        &corpus,
        &source,
        &BuildOptions {
            metric: spec,
            graph,
            ..options
        },
        &a.output,
        &bars,
    );
    bars.finish();
    let report = report?;
    if let Some(r) = report.axioms.as_ref().filter(|r| !r.is_metric()) {
        eprintln!(
            "waymark: warning: the {} distance breaks the metric rules on a sample of {} items \
             (run `waymark check-metric` for more); exact answers and pruning are not sound",
            report.meta.metric, r.sample
        );
        for l in describe_violations(r, &corpus).iter().take(3) {
            eprintln!("waymark: warning:   {l}");
        }
    }
    let t_cal = Instant::now();
    let calibration = if a.no_calibration {
        None
    } else {
        crate::eval::calibrate_file(
            &a.output,
            &crate::eval::CalibrateOptions {
                seed: a.seed,
                ..Default::default()
            },
        )?
    };
    let calibrate_seconds = t_cal.elapsed().as_secs_f64();
    let file_len = std::fs::metadata(&a.output).map_or(report.file_len, |m| m.len());
    if !a.quiet {
        let m = &report.meta;
        let mut out = std::io::stdout().lock();
        writeln!(
            out,
            "indexed {} items from {} into {} ({}, {} coordinates by {}, {:.1} MB) in {:.2} s",
            m.n,
            source,
            a.output.display(),
            m.metric,
            m.dim,
            m.embedding.name(),
            file_len as f64 / 1e6,
            t0.elapsed().as_secs_f64()
        )?;
        if m.blank_skipped > 0 {
            writeln!(out, "skipped {} blank records", m.blank_skipped)?;
        }
        if (m.dim as usize) < a.dim {
            writeln!(
                out,
                "note: only {} coordinates could be made (asked for {}): the input has too few distinct items (items at distance 0 from each other count as one)",
                m.dim, a.dim
            )?;
        }
        if let Some(c) = &calibration {
            let at = |r: f64| {
                let ch = c.choose(r, n);
                if ch.reached {
                    ch.candidates.to_string()
                } else {
                    format!("{}+", ch.candidates)
                }
            };
            writeln!(
                out,
                "recall curve: {} items as queries, k = {}: candidates for recall 0.9 / 0.95 / 0.99: {} / {} / {}",
                c.queries,
                c.k,
                at(0.9),
                at(0.95),
                at(0.99)
            )?;
        }
        let variants = match a.small_radius {
            Some(r) => format!(
                ", deletion variants (R = {r}) {:.2} s",
                report.variants_seconds
            ),
            None => String::new(),
        };
        writeln!(
            out,
            "time: read {:.2} s, embed {:.2} s, tree and cells {:.2} s{variants}, write {:.2} s, recall curve {:.2} s",
            read_seconds,
            report.embed_seconds,
            report.tree_seconds,
            report.write_seconds,
            calibrate_seconds
        )?;
    }
    Ok(())
}

/// `build --shards N`: the seed, the shards in parallel, the list.
#[allow(clippy::too_many_arguments)]
fn build_sharded(
    a: &BuildArgs,
    corpus: &crate::ingest::Corpus,
    source: &str,
    spec: crate::metric::MetricSpec,
    graph: Option<crate::metric::Graph>,
    options: BuildOptions,
    shards: u64,
    t0: Instant,
) -> anyhow::Result<()> {
    let read_seconds = t0.elapsed().as_secs_f64();
    let r = crate::index::shards::build_sharded(
        corpus,
        source,
        &BuildOptions {
            metric: spec,
            graph,
            ..options
        },
        shards as usize,
        &a.output,
    )?;
    if !a.quiet {
        let m = &r.seed.meta;
        let file_len: u64 = std::fs::read_dir(crate::index::parts::parts_dir(&a.output))
            .map(|d| {
                d.flatten()
                    .filter_map(|e| e.metadata().ok())
                    .map(|m| m.len())
                    .sum()
            })
            .unwrap_or(0);
        let mut out = std::io::stdout().lock();
        writeln!(
            out,
            "indexed {} items from {} into {} ({} parts, {}, {} coordinates by {} chosen from {} items, {:.1} MB) in {:.2} s",
            corpus.items.len(),
            source,
            a.output.display(),
            r.shard_items.len(),
            m.metric,
            m.dim,
            m.embedding.name(),
            r.sample,
            file_len as f64 / 1e6,
            t0.elapsed().as_secs_f64()
        )?;
        writeln!(
            out,
            "time: read {read_seconds:.2} s, reference items {:.2} s, parts {:.2} s; no recall curve (query --recall needs one: give --candidates)",
            r.seed_seconds, r.shards_seconds
        )?;
    }
    Ok(())
}
