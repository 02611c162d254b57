//! `waymark eval`: recall, cost and speed of an index against brute force, and the
//! distortion of its embedding.

use std::io::Write;

use super::args::EvalArgs;
use super::output::counting_bar;
use super::query::{at_query_line, read_query_file};
use crate::error::Error;
use crate::eval::{
    calibrate_from_queries, index_distortion, load_or_compute_truth, measure_recall,
    measure_recall_parts, TruthSource,
};
use crate::index::parts::{LiveIndex, Parts};
use crate::index::{store_calibration, Index, RecallChoice};
use crate::search::parts::PartsSearcher;
use crate::search::{CandidateSource, Request, SearchParams, Searcher, Space};

pub(super) fn eval(a: EvalArgs) -> anyhow::Result<()> {
    super::args::check_visit(a.visit, a.candidates_from)?;
    if a.queries.is_none() && !a.distortion {
        return Err(Error::Usage(
            "nothing to measure: give --queries FILE (recall) and/or --distortion".into(),
        )
        .into());
    }
    // An index in parts answers as `query` answers it, part by part; its ground truth and
    // distortion are those of its live items, read as one index ([`Parts::live_index`]).
    let parts = Parts::open(&a.index)?;
    let index: &Index = parts.first();
    let items = parts.live();
    if a.calibrate && parts.is_listed() {
        return Err(Error::Usage(format!(
            "{}: an index in parts (its list file): --calibrate stores a recall curve \
             measured on one index file; run `waymark compact {}` first, then calibrate \
             (an index in parts uses the curve of its first part)",
            a.index.display(),
            a.index.display()
        ))
        .into());
    }
    // The pairs asked for must fit in memory, checked before any work.
    if a.distortion {
        crate::resources::check_distortion(items, a.pairs, index.meta().dim as usize)?;
    }
    super::announce_program(index, a.quiet_metric);
    // Asked recalls are checked, and an index without a curve refused, before any work
    // (unless --calibrate is to make the curve).
    for &r in &a.recall {
        crate::search::check_recall(r)?;
    }
    if !a.recall.is_empty() && a.k == 0 {
        return Err(Error::parameter(crate::error::Param::K, "must be at least 1").into());
    }
    if let (Some(&r), false) = (a.recall.first(), a.calibrate) {
        SearchParams::recall_choice(index, a.k.max(1), r)?;
    }
    let space: Space = a.space.map_or(index.meta().space, Into::into);
    // One setting per candidate count, checked (k, candidates) before any answer is computed.
    let settings: Vec<SearchParams> = if a.recall.is_empty() {
        &a.candidates[..]
    } else {
        &[]
    }
    .iter()
    .map(|&c| {
        let mut params = SearchParams {
            space,
            ..SearchParams::embedded(index, a.k).with_candidates(c)
        };
        if let Some(v) = a.visit {
            params.visit = v;
        }
        params.widen = a.widen.unwrap_or(params.widen);
        params.source = a.candidates_from.map_or(params.source, Into::into);
        params
    })
    .collect();
    let searcher = Searcher::new(index);
    let in_parts = PartsSearcher::new(&parts);
    for &params in &settings {
        in_parts.check(&Request::Approximate(params))?;
    }
    // The live items as one index, for an index in parts with more than one part or removed
    // items (made once, only when something reads it).
    let live = if parts.is_whole() || (a.queries.is_none() && !a.distortion) {
        None
    } else {
        Some(parts.live_index()?)
    };
    let one: &Index = live.as_ref().map_or(index, LiveIndex::index);
    let mut json = serde_json::json!({
        "index": a.index.display().to_string(),
        "items": items,
        "embedding": index.meta().embedding.name(),
        "dim": index.meta().dim,
        "refs": index.meta().embedding.refs().len(),
        "contractive": index.meta().embedding.contractive(),
    });
    let mut out = std::io::stdout().lock();
    if let Some(qpath) = &a.queries {
        let queries = read_query_file(qpath)?;
        // Every query must suit the metric before any is measured.
        for (i, q) in queries.iter().enumerate() {
            searcher
                .prepare(q)
                .map_err(|e| at_query_line(e, &qpath.display().to_string(), i + 1))?;
        }
        if a.no_cache {
            let key = crate::eval::truth::index_key(one);
            let _ = std::fs::remove_file(crate::eval::truth::cache_path(qpath, &key, a.k));
        }
        let bar = counting_bar(queries.len() as u64, "exact answers", !a.json);
        let (mut truth, source) =
            load_or_compute_truth(one, &queries, Some(qpath), a.k, &|n| bar.inc(n as u64));
        bar.finish_and_clear();
        // An external metric reports a failure of its program here (its distances are NaN).
        one.metric()?.check()?;
        // Item numbers of the live items' index made those of the parts.
        if let Some(l) = &live {
            for n in truth.answers.iter_mut().flatten() {
                n.index = l.number(n.index);
            }
        }
        let (truth_note, truth_json) = match &source {
            TruthSource::Cached(p) => (
                format!("exact answers read from {}", p.display()),
                serde_json::json!({"cached": true, "path": p.display().to_string()}),
            ),
            TruthSource::Computed { seconds, note } => {
                if let Some(n) = note {
                    // A cache whose answers are wrong is a warning; a stale one only a note.
                    let level = if n.contains("does not hold the true answers") {
                        "warning"
                    } else {
                        "note"
                    };
                    eprintln!("waymark: {level}: {n}");
                }
                let qps = queries.len() as f64 / seconds.max(1e-9);
                (
                    format!(
                        "exact answers by full scan: {seconds:.2} s ({qps:.0} queries/s, {:.1} M pairs/s)",
                        qps * items as f64 / 1e6
                    ),
                    serde_json::json!({"cached": false, "seconds": seconds, "queries_per_second": qps}),
                )
            }
        };
        let qname = qpath.display().to_string();
        let calibrated = if a.calibrate {
            let cal = calibrate_from_queries(index, &queries, &truth, a.k, &qname)?;
            store_calibration(&a.index, index.meta(), Some(cal.clone()))?;
            Some(cal)
        } else {
            None
        };
        // The file now holds the new curve: the measures below read it from there.
        let reopened;
        let index: &Index = if calibrated.is_some() {
            reopened = Index::open(&a.index)?;
            &reopened
        } else {
            index
        };
        let mut asked: Vec<(f64, RecallChoice)> = Vec::new();
        let mut settings = settings;
        for &r in &a.recall {
            let (p, choice) = SearchParams::recall_choice_for(index, a.k, r, &queries)?;
            asked.push((r, choice));
            settings.push(p);
        }
        let mut rows = Vec::new();
        for params in &settings {
            rows.push(if parts.is_whole() {
                measure_recall(index, &queries, &truth, params)?
            } else {
                measure_recall_parts(&in_parts, &queries, &truth, params)?
            });
        }
        if a.json {
            json["queries"] = queries.len().into();
            json["k"] = a.k.into();
            json["ground_truth"] = truth_json;
            let mut values = serde_json::to_value(&rows)?;
            if let Some(list) = values.as_array_mut() {
                for (v, (r, c)) in list.iter_mut().zip(&asked) {
                    v["asked_recall"] = (*r).into();
                    v["expected_recall"] = c.expected.into();
                    v["curve_reaches"] = c.reached.into();
                }
            }
            json["recall"] = values;
            if let Some(c) = &calibrated {
                json["calibration"] = serde_json::to_value(c)?;
                json["calibration_stored"] = a.index.display().to_string().into();
            }
        } else {
            writeln!(
                out,
                "{}: {} items, {} coordinates by {}; {} queries, k = {}, candidates {}",
                a.index.display(),
                items,
                index.meta().dim,
                index.meta().embedding.name(),
                queries.len(),
                a.k,
                match (rows.first().map(|r| r.source), a.visit) {
                    (Some(CandidateSource::Cells), None) => format!(
                        "ranked in {} from cells ({} rows compared per candidate)",
                        space.name(),
                        crate::search::VISIT_PER_CANDIDATE
                    ),
                    (Some(CandidateSource::Cells), Some(0)) => {
                        format!("ranked in {} from cells (every row)", space.name())
                    }
                    (Some(CandidateSource::Cells), Some(v)) => {
                        format!(
                            "ranked in {} from cells ({v} rows compared per query)",
                            space.name()
                        )
                    }
                    (Some(CandidateSource::Tree), _) => {
                        format!("ranked in {} from the kd-tree", space.name())
                    }
                    (Some(CandidateSource::Counts), _) => {
                        "by char counts (where they pay; the candidate count serves where they do not)"
                            .into()
                    }
                    _ => format!("ranked in {} from a scan of every row", space.name()),
                }
            )?;
            writeln!(out, "{truth_note}")?;
            if let Some(c) = &calibrated {
                writeln!(
                    out,
                    "recall curve measured on these {} queries (k = {}) and stored in {} (a new file renamed over it): {}",
                    c.queries,
                    c.k,
                    a.index.display(),
                    c.points
                        .iter()
                        .map(|p| format!("{} → {:.4}", p.candidates, p.recall))
                        .collect::<Vec<_>>()
                        .join(", ")
                )?;
            }
            if !asked.is_empty() {
                write!(out, "{:>7} {:>8} ", "asked", "expected")?;
            }
            writeln!(
                out,
                "{:>10} {:>9} {:>9} {:>11} {:>8} {:>9} {:>8} {:>8} {:>8}",
                "candidates",
                "recall@k",
                "plain@k",
                "distances",
                "% items",
                "queries/s",
                "p50 ms",
                "p95 ms",
                "p99 ms"
            )?;
            for (j, r) in rows.iter().enumerate() {
                if let Some((asked, c)) = asked.get(j) {
                    let mark = if c.reached { "" } else { "<" };
                    write!(out, "{asked:>7} {:>8}", format!("{mark}{:.4}", c.expected))?;
                    write!(out, " ")?;
                }
                writeln!(
                    out,
                    "{:>10} {:>9.4} {:>9.4} {:>11.1} {:>7.2}% {:>9.0} {:>8.3} {:>8.3} {:>8.3}",
                    r.candidates,
                    r.recall,
                    r.plain_recall,
                    r.distances_per_query,
                    100.0 * r.share_of_items,
                    r.qps,
                    r.p50_ms,
                    r.p95_ms,
                    r.p99_ms
                )?;
            }
        }
    }
    if a.distortion {
        let r = index_distortion(one, a.pairs)?;
        if a.json {
            json["distortion"] = serde_json::to_value(&r)?;
        } else if r.pairs == 0 {
            writeln!(
                out,
                "distortion of the {} coordinates ({}): no pairs to measure: {} items, {} pairs at distance 0 skipped (a distortion needs two items at a distance above 0)",
                r.method, r.dim, r.items, r.zero_pairs
            )?;
        } else {
            writeln!(
                out,
                "distortion of the {} coordinates ({}): ratio embedded / true distance over {} pairs{} ({} pairs at distance 0 skipped)",
                r.method,
                r.dim,
                r.pairs,
                if r.all_pairs {
                    " (all pairs)".to_string()
                } else {
                    format!(" among {} random items", r.items)
                },
                r.zero_pairs
            )?;
            writeln!(
                out,
                "{:>5} {:>8} {:>8} {:>8} {:>8} {:>8} {:>8} {:>8} {:>10} {:>10} {:>10} {:>10}",
                "space",
                "min",
                "p01",
                "p50",
                "p99",
                "max",
                "mean",
                "",
                "distortion",
                "p99/p01",
                "contracted",
                "expanded"
            )?;
            for s in &r.spaces {
                let q = |x: f64| s.quantiles.iter().find(|p| p.0 == x).map_or(0.0, |p| p.1);
                writeln!(
                    out,
                    "{:>5} {:>8.3} {:>8.3} {:>8.3} {:>8.3} {:>8.3} {:>8.3} {:>10.3} {:>10.3} {:>9.1}% {:>9.1}%",
                    s.space.name(),
                    s.min,
                    q(0.01),
                    q(0.5),
                    q(0.99),
                    s.max,
                    s.mean,
                    s.distortion,
                    s.distortion_98,
                    100.0 * s.contracted,
                    100.0 * s.expanded
                )?;
            }
            for s in &r.spaces {
                let top = s
                    .histogram
                    .iter()
                    .map(|b| b.count)
                    .max()
                    .unwrap_or(1)
                    .max(1);
                writeln!(out, "histogram of the ratio in {}:", s.space.name())?;
                for b in &s.histogram {
                    writeln!(
                        out,
                        "  {:>8.3} – {:<8.3} {:>8} {}",
                        b.lo,
                        b.hi,
                        b.count,
                        "#".repeat((40 * b.count).div_ceil(top))
                    )?;
                }
            }
        }
    }
    if a.json {
        serde_json::to_writer_pretty(&mut out, &json)?;
        writeln!(out)?;
    }
    Ok(())
}
