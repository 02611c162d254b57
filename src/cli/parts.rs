//! `waymark add`, `remove` and `compact`: an index that grows in parts
//! ([`crate::index::parts`]).

use std::time::Instant;

use anyhow::Context;

use super::args::{AddArgs, CompactArgs, RemoveArgs};
use crate::index::parts::{self, NewIds, RemoveId};
use crate::ingest::LoadedInput;

pub(super) fn add(a: AddArgs) -> anyhow::Result<()> {
    let t0 = Instant::now();
    crate::index::file::refuse_input_as_output(&a.index, &a.input.files())?;
    let source = a.input.source();
    let LoadedInput {
        corpus,
        spec,
        graph,
        ..
    } = a.input.load(Some(&a.ids))?;
    if let Some(graph) = graph {
        return add_graph(&a, &graph, &source, t0);
    }
    let ids = if a.ids.given() {
        NewIds::Given
    } else {
        NewIds::Continue
    };
    let r = parts::add(
        &a.index,
        corpus,
        &source,
        spec,
        a.input.normalize(),
        ids,
        a.input.files(),
    )?;
    let merged = if r.merged > 0 {
        format!("; merged the last {} parts", r.merged)
    } else {
        String::new()
    };
    eprintln!(
        "added {} items to {} in {:.2} s: {} parts{merged}",
        r.added,
        a.index.display(),
        t0.elapsed().as_secs_f64(),
        r.parts
    );
    Ok(())
}

/// `add` of an edge list to a graph index: the index is rewritten on the union graph.
fn add_graph(
    a: &AddArgs,
    graph: &crate::metric::Graph,
    source: &str,
    t0: Instant,
) -> anyhow::Result<()> {
    let r = parts::add_graph(&a.index, graph, source, a.input.files())?;
    let dropped = if r.dropped > 0 {
        format!(", {} removed items dropped", r.dropped)
    } else {
        String::new()
    };
    eprintln!(
        "added {} new nodes to {} in {:.2} s: a graph add rewrites the index, because new \
         edges can shorten paths between old nodes: {} items embedded again on the union \
         graph ({} nodes, {} edges){dropped}; 1 part",
        r.added,
        a.index.display(),
        t0.elapsed().as_secs_f64(),
        r.rewritten + r.added,
        r.nodes,
        r.edges,
    );
    if let Some(note) = longer_note(&r.longer, source, &a.input.files()) {
        eprintln!("{note}");
    }
    let (before, after) = r.saturated;
    if after > before + 0.05 {
        eprintln!(
            "warning: {:.0}% of the stored coordinates are saturated (before: {:.0}%): new nodes \
             lie farther from the reference items than the index's coordinate scale holds; \
             answers stay exact, but a new build would prune better",
            after * 100.0,
            before * 100.0
        );
    }
    Ok(())
}

/// The line that says which given edge weights a graph add did not take (the index had a
/// shorter one): their count and the first of them by its line in the edge list; `None`
/// when every weight was taken.
fn longer_note(
    longer: &[(String, String, f64, f64)],
    source: &str,
    files: &[std::path::PathBuf],
) -> Option<String> {
    let (a, b, given, kept) = longer.first()?;
    let pairs: std::collections::HashMap<(&str, &str), (f64, f64)> = longer
        .iter()
        .flat_map(|(a, b, g, k)| {
            [
                ((a.as_str(), b.as_str()), (*g, *k)),
                ((b.as_str(), a.as_str()), (*g, *k)),
            ]
        })
        .collect();
    // The edge list is read again for the line (only when some weight was not taken); the
    // first line that gives one of those edges.
    let mut first: Option<(u64, String, String, f64, f64)> = None;
    if let Some(text) = files.first().and_then(|f| std::fs::read_to_string(f).ok()) {
        let _ = crate::metric::Graph::each_edge_line(&text, source, |line, x, y, _| {
            if first.is_none() {
                if let Some(&(g, k)) = pairs.get(&(x, y)) {
                    first = Some((line, x.to_string(), y.to_string(), g, k));
                }
            }
        });
    }
    let (at, a, b, given, kept) = match first {
        Some((line, x, y, g, k)) => (format!("line {line}, "), x, y, g, k),
        None => (String::new(), a.clone(), b.clone(), *given, *kept),
    };
    let n = longer.len();
    let edges = if n == 1 { "edge" } else { "edges" };
    let (give, were) = if n == 1 {
        ("gives", "was")
    } else {
        ("give", "were")
    };
    Some(format!(
        "waymark: warning: {n} {edges} of {source} {give} a longer weight than the index's and \
         {were} ignored (first: {at}{a}–{b} {given}, the index keeps {kept})"
    ))
}

pub(super) fn remove(a: RemoveArgs) -> anyhow::Result<()> {
    let bytes = std::fs::read(&a.ids).with_context(|| format!("reading {}", a.ids.display()))?;
    let source = a.ids.display().to_string();
    let text = String::from_utf8(bytes).map_err(|e| {
        let line = e.as_bytes()[..e.utf8_error().valid_up_to()]
            .iter()
            .filter(|&&b| b == b'\n')
            .count()
            + 1;
        crate::Error::Usage(format!("{source}: line {line}: not UTF-8"))
    })?;
    let ids: Vec<RemoveId> = text
        .lines()
        .enumerate()
        .filter(|(_, l)| !l.trim().is_empty())
        .map(|(i, l)| RemoveId {
            line: i + 1,
            text: l.to_string(),
        })
        .collect();
    if ids.is_empty() {
        return Err(crate::Error::Usage(format!("{source}: no ids to remove")).into());
    }
    let r = parts::remove(&a.index, &ids, &source)?;
    eprintln!(
        "removed {} items from {}; {} left",
        r.removed,
        a.index.display(),
        r.live
    );
    Ok(())
}

pub(super) fn compact(a: CompactArgs) -> anyhow::Result<()> {
    let t0 = Instant::now();
    let r = parts::compact(&a.index)?;
    if r.written {
        eprintln!(
            "compacted {} parts of {} into one index file of {} items ({} removed items \
             dropped) in {:.2} s",
            r.parts_before,
            a.index.display(),
            r.items,
            r.dropped,
            t0.elapsed().as_secs_f64()
        );
    } else {
        eprintln!(
            "{} is one index file with nothing removed: nothing to do",
            a.index.display()
        );
    }
    Ok(())
}
