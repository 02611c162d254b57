//! `waymark pairs`: every pair of near items of an index (a self-join), or look-ups of a
//! queries file in bulk, one pair per output line.

use std::io::{BufWriter, Write};
use std::time::Instant;

use anyhow::Context;

use super::args::{PairFormat, PairsArgs};
use super::output::write_json_error;
use super::output::{counting_bar, distance_json, id_json, id_text, tsv_field};
use super::query::{at_query_line, read_query_file, read_query_lines};
use crate::error::Error;
use crate::index::Index;
use crate::pairs::{lookup_within, JoinBy, JoinPath, NearestJoin, Pair, Radius, SelfJoin};
use crate::search::{Found, Request, SearchParams, Searcher};

/// Queries looked up per block of `--queries`.
const LOOKUP_BLOCK: usize = 4096;

/// The radius asked for, if any.
pub(super) fn radius_of(within: Option<f64>, fraction: Option<f64>) -> Option<Radius> {
    within.map(Radius::Fixed).or(fraction.map(Radius::Fraction))
}

pub(super) fn pairs(a: PairsArgs) -> anyhow::Result<()> {
    let radius = radius_of(a.within, a.within_fraction);
    if radius.is_none() && a.k.is_none() {
        return Err(Error::Usage(
            "pairs needs -k K (each item's K nearest) or --within R / --within-fraction F \
             (every pair within a distance)"
                .into(),
        )
        .into());
    }
    // An index in parts is read as one index of its live items (the compacted index's
    // answers; the output names items by id, never by number).
    let one = super::open_one(&a.index, a.quiet_metric)?;
    let index: &Index = &one;
    if let Some(r) = radius {
        r.check(index)?;
    }
    let params = a.k.filter(|_| !a.exact).map(|k| {
        let mut p = SearchParams::from_index(index, k);
        if let Some(c) = a.candidates {
            // Candidates are the embedding's: asking for them searches it.
            p = p.with_candidates(c).on_embedding(index);
        }
        p.source = a.candidates_from.map_or(p.source, Into::into);
        p
    });
    let stdout = std::io::stdout();
    let mut out = BufWriter::new(stdout.lock());
    let t0 = Instant::now();
    if let Some(path) = &a.queries {
        return lookups(&a, index, radius, params, path, &mut out, t0);
    }
    let mut count = 0u64;
    let mut write = |out: &mut BufWriter<_>, batch: &[Pair]| -> anyhow::Result<()> {
        for p in batch {
            write_pair(out, index, p, a.format)?;
        }
        count += batch.len() as u64;
        out.flush().context("writing the pairs")
    };
    let bar = counting_bar(index.len() as u64, "items", !a.quiet);
    let computed = if let Some(r) = radius {
        let by = if a.no_variant_table {
            JoinBy::Columns
        } else {
            JoinBy::Auto
        };
        let mut join = SelfJoin::with(index, r, by)?;
        while let Some(batch) = join.next_batch() {
            write(&mut out, &batch?)?;
            bar.set_position(join.done() as u64);
        }
        Some((join.stats().computed, join.path()))
    } else {
        let k = a.k.expect("-k or a radius, checked above");
        let mut join = NearestJoin::new(index, k, params)?.refine(a.refine_rounds);
        while let Some(batch) = join.next_batch() {
            write(&mut out, &batch?)?;
            bar.set_position(join.done() as u64);
        }
        None
    };
    bar.finish_and_clear();
    if a.summary {
        let secs = t0.elapsed().as_secs_f64();
        let computed = computed.map_or(String::new(), |(c, path)| {
            let how = match path {
                JoinPath::Columns => "the column blocks".to_string(),
                JoinPath::StoredVariants => "the index's deletion-variant table".to_string(),
                JoinPath::BuiltVariants {
                    radius,
                    bytes,
                    seconds,
                } => format!(
                    "a deletion-variant table of radius {radius} built in memory ({:.1} MB, {seconds:.2} s)",
                    bytes as f64 / 1e6
                ),
            };
            format!("; {c} distances computed; near items found through {how}")
        });
        eprintln!(
            "{count} pairs among {} items in {secs:.3} s ({:.0} items/s){computed}",
            index.len(),
            index.len() as f64 / secs.max(1e-9)
        );
    }
    Ok(())
}

/// `--queries FILE`: each query's items within the radius or its k nearest, one pair per
/// line with the query's line.
fn lookups(
    a: &PairsArgs,
    index: &Index,
    radius: Option<Radius>,
    params: Option<SearchParams>,
    path: &std::path::Path,
    out: &mut impl Write,
    t0: Instant,
) -> anyhow::Result<()> {
    // Each line: its query, or (`--errors-inline`, a line that is not valid UTF-8) its text
    // with the bytes replaced and the error.
    let lines: Vec<Result<String, (String, Error)>> = if a.errors_inline {
        read_query_lines(path)?
    } else {
        read_query_file(path)?.into_iter().map(Ok).collect()
    };
    let searcher = Searcher::new(index);
    let request = match (radius, params, a.k) {
        (Some(_), _, _) => None,
        (None, Some(p), _) => Some(Request::Approximate(p)),
        (None, None, Some(k)) => Some(Request::Exact { k }),
        (None, None, None) => unreachable!("-k or a radius, checked by the caller"),
    };
    match &request {
        Some(r) => searcher.check(r)?,
        None => searcher.check(&Request::Within {
            radius: 0.0,
            k: None,
        })?,
    }
    let name = path.display().to_string();
    let bar = counting_bar(lines.len() as u64, "queries", !a.quiet);
    let (mut count, mut refused) = (0u64, 0u64);
    for (b, block) in lines.chunks(LOOKUP_BLOCK).enumerate() {
        let good: Vec<String> = block
            .iter()
            .filter_map(|l| l.as_ref().ok().cloned())
            .collect();
        let answers: Vec<crate::Result<Found>> = match (&request, radius) {
            (Some(r), _) => searcher.answer_many(&good, r),
            (None, Some(r)) => lookup_within(&searcher, &good, r, None),
            (None, None) => unreachable!("a request or a radius"),
        };
        let mut answers = answers.into_iter();
        for (j, entry) in block.iter().enumerate() {
            let line = b * LOOKUP_BLOCK + j + 1;
            let (q, found) = match entry {
                Ok(q) => (q, answers.next().expect("one answer per good line")),
                // Only `--errors-inline` keeps such lines; the message is the error's.
                Err((text, e)) => (text, Err(Error::InvalidQuery(e.to_string()))),
            };
            let found = match found {
                Ok(found) => found,
                Err(Error::InvalidQuery(m) | Error::Usage(m)) if a.errors_inline => {
                    refused += 1;
                    match a.format {
                        PairFormat::Json => write_json_error(out, line, None, q, &m)?,
                        PairFormat::Tsv => {
                            writeln!(out, "{line}\t{}\terror\t{}", tsv_field(q), tsv_field(&m))?
                        }
                    }
                    continue;
                }
                Err(e) => {
                    out.flush().context("writing the pairs")?;
                    return Err(at_query_line(e, &name, line).into());
                }
            };
            for n in &found.neighbors {
                count += 1;
                match a.format {
                    PairFormat::Json => {
                        let obj = serde_json::json!({
                            "line": line,
                            "query": q,
                            "id": id_json(index.id(n.index as usize)),
                            "item": String::from_utf8_lossy(index.item(n.index as usize)),
                            "distance": distance_json(n.distance),
                        });
                        serde_json::to_writer(&mut *out, &obj)?;
                        out.write_all(b"\n")?;
                    }
                    PairFormat::Tsv => writeln!(
                        out,
                        "{line}\t{}\t{}\t{}\t{}",
                        tsv_field(q),
                        tsv_field(&id_text(index.id(n.index as usize))),
                        tsv_field(&String::from_utf8_lossy(index.item(n.index as usize))),
                        distance_json(n.distance)
                    )?,
                }
            }
        }
        out.flush().context("writing the pairs")?;
        bar.inc(block.len() as u64);
    }
    bar.finish_and_clear();
    if a.summary {
        let secs = t0.elapsed().as_secs_f64();
        let refused = if a.errors_inline {
            format!("; {refused} refused")
        } else {
            String::new()
        };
        eprintln!(
            "{count} pairs for {} queries in {secs:.3} s ({:.0} queries/s){refused}",
            lines.len(),
            lines.len() as f64 / secs.max(1e-9)
        );
    }
    Ok(())
}

/// One pair of a self-join: `{"a": {"id", "item"}, "b": {"id", "item"}, "distance"}`, or
/// TSV `id, item, id, item, distance`.
fn write_pair(
    out: &mut impl Write,
    index: &Index,
    p: &Pair,
    format: PairFormat,
) -> anyhow::Result<()> {
    let (a, b) = (p.a as usize, p.b as usize);
    match format {
        PairFormat::Json => {
            let obj = serde_json::json!({
                "a": {"id": id_json(index.id(a)), "item": String::from_utf8_lossy(index.item(a))},
                "b": {"id": id_json(index.id(b)), "item": String::from_utf8_lossy(index.item(b))},
                "distance": distance_json(p.distance),
            });
            serde_json::to_writer(&mut *out, &obj)?;
            out.write_all(b"\n")?;
        }
        PairFormat::Tsv => writeln!(
            out,
            "{}\t{}\t{}\t{}\t{}",
            tsv_field(&id_text(index.id(a))),
            tsv_field(&String::from_utf8_lossy(index.item(a))),
            tsv_field(&id_text(index.id(b))),
            tsv_field(&String::from_utf8_lossy(index.item(b))),
            distance_json(p.distance)
        )?,
    }
    Ok(())
}
