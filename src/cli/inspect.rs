//! `waymark inspect`: what an index holds, as text or JSON; `--verify` checks every checksum.

use std::io::Write;
use std::time::Instant;

use super::args::InspectArgs;
use crate::escape::escape_controls as esc;
use crate::index::Index;
use crate::metric::MetricSpec;

/// JSON text with the control characters serde_json writes as they are (DEL, C1 controls,
/// bidirectional formatting) written as `\u` escapes: the same values, safe on a terminal.
/// Such characters can only stand inside JSON strings, where the escape means the same.
fn json_escaped(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        // serde_json escapes C0 controls itself; the line breaks are its layout.
        if c >= '\x7f' && crate::escape::is_control(c) {
            let mut units = [0u16; 2];
            for u in c.encode_utf16(&mut units) {
                out.push_str(&format!("\\u{u:04x}"));
            }
        } else {
            out.push(c);
        }
    }
    out
}

pub(super) fn inspect(a: InspectArgs) -> anyhow::Result<()> {
    if crate::index::parts::is_list(&a.index)? {
        return inspect_parts(a);
    }
    let index = Index::open(&a.index)?;
    let t = Instant::now();
    let verified = if a.verify {
        index.verify()?;
        Some(t.elapsed().as_secs_f64())
    } else {
        None
    };
    let m = index.meta();
    let landmarks = index.reference_items();
    let sections: Vec<(&str, usize)> = index.sections().collect();
    let mut out = std::io::stdout().lock();
    if a.json {
        let obj = index.report(verified.is_some());
        writeln!(
            out,
            "{}",
            json_escaped(&serde_json::to_string_pretty(&obj)?)
        )?;
        return Ok(());
    }
    writeln!(out, "index         {}", esc(&a.index.display().to_string()))?;
    writeln!(
        out,
        "format        waymark index, version {}",
        index.format_version()
    )?;
    writeln!(out, "written by    {}", esc(&m.written_by))?;
    writeln!(
        out,
        "items         {} (from {}: {} records, {} blank skipped)",
        m.n,
        esc(&m.source),
        m.records,
        m.blank_skipped
    )?;
    match m.ids_from {
        Some(from) => writeln!(
            out,
            "ids           Int, consecutive from {from} (not stored)"
        )?,
        None => writeln!(out, "ids           {:?}", m.ids)?,
    }
    let params = match &m.metric_spec {
        MetricSpec::Hamming { length } => format!(" ({length} characters per item)"),
        MetricSpec::WeightedEdit { costs } => format!(
            " ({} indel and {} substitution rules; other symbols: indel {}, substitution {})",
            costs.indel.len(),
            costs.sub.len(),
            costs.default_indel,
            costs.default_sub
        ),
        MetricSpec::Jaccard { tokens } => match tokens {
            crate::metric::Tokens::Whitespace => " (token sets split on white space)".into(),
            crate::metric::Tokens::Separator(sep) => format!(" (token sets split on {sep:?})"),
            crate::metric::Tokens::QGrams(q) => format!(" (sets of {q}-grams)"),
        },
        MetricSpec::Vector { dim, .. } => format!(" ({dim} components per vector)"),
        MetricSpec::External {
            command,
            timeout_ms,
        } => format!(
            " (program `{}`, {} s per batch)",
            esc(&command.join(" ")),
            *timeout_ms as f64 / 1000.0
        ),
        MetricSpec::Custom { name, .. } => format!(" (`{}`, written in Rust)", esc(name)),
        MetricSpec::Levenshtein
        | MetricSpec::Damerau
        | MetricSpec::TokenEdit
        | MetricSpec::Graph => String::new(),
    };
    writeln!(out, "metric        {}{params}", m.metric)?;
    writeln!(
        out,
        "normalise     fold-case {}, trim {}, fold-punct {}, sort-tokens {}",
        m.normalize.fold_case, m.normalize.trim, m.normalize.fold_punct, m.normalize.sort_tokens
    )?;
    let how = match &m.embedding {
        crate::embed::Embedding::Landmarks { .. } => {
            format!("farthest-first from a sample of {}", m.sample)
        }
        crate::embed::Embedding::RefSets { pool, .. } => {
            format!("distances to sets drawn from a pool of {}", pool.len())
        }
        crate::embed::Embedding::FastMap { .. } => {
            format!("pivots from a sample of {}; not contractive", m.sample)
        }
    };
    writeln!(
        out,
        "embedding     {}, {} coordinates, {how} (seed {})",
        m.embedding.name(),
        m.dim,
        m.seed
    )?;
    writeln!(out, "references    {}", esc(&landmarks.join(" | ")))?;
    writeln!(
        out,
        "coordinates   u8, {} bytes per item; kd-tree of dimension {} (f32) over {}",
        m.stride,
        m.tree_dim,
        if index.tree_holds_rows() {
            format!("the first {} coordinates", index.tree_dims())
        } else {
            "every coordinate, unquantised".to_string()
        }
    )?;
    writeln!(
        out,
        "query default {} candidates ranked in {}",
        m.candidates,
        m.space.name()
    )?;
    match index.variants_summary() {
        Some((r, entries, bytes)) => writeln!(
            out,
            "small radius  deletion-variant table, exact range queries and pairs up to {r}: {entries} entries, {bytes} bytes ({:.2} per entry)",
            bytes as f64 / entries.max(1) as f64
        )?,
        None => writeln!(out, "small radius  no deletion-variant table (build --small-radius R)")?,
    }
    writeln!(out, "file size     {} bytes", index.file_len())?;
    for (name, len) in &sections {
        writeln!(out, "  section     {:<14} {len:>12} bytes", esc(name))?;
    }
    match verified {
        Some(s) => writeln!(out, "verified      every checksum matches ({s:.3} s)")?,
        None => writeln!(out, "verified      not checked (use --verify)")?,
    }
    Ok(())
}

/// Rows of each part the drift report looks at.
const DRIFT_SAMPLE: usize = 100_000;

/// `inspect` of an index in parts: the parts, their sizes and removed items, the drift of
/// each part's coordinates against the first part's; then the first part as `inspect`
/// shows an index file.
fn inspect_parts(a: InspectArgs) -> anyhow::Result<()> {
    let parts = crate::index::parts::Parts::open(&a.index)?;
    let t = Instant::now();
    let verified = if a.verify {
        parts.verify()?;
        Some(t.elapsed().as_secs_f64())
    } else {
        None
    };
    let mut out = std::io::stdout().lock();
    if a.json {
        let obj = parts.report(verified.is_some(), DRIFT_SAMPLE);
        writeln!(
            out,
            "{}",
            json_escaped(&serde_json::to_string_pretty(&obj)?)
        )?;
        return Ok(());
    }
    let drift = parts.drift(DRIFT_SAMPLE);
    let dir = crate::index::parts::parts_dir(&a.index);
    writeln!(out, "index         {}", esc(&a.index.display().to_string()))?;
    writeln!(
        out,
        "format        waymark parts list, version {}: {} parts in {}",
        crate::index::parts::LIST_VERSION,
        parts.parts().len(),
        esc(&dir.display().to_string())
    )?;
    writeln!(
        out,
        "items         {} live of {} ({} removed)",
        parts.live(),
        parts.len(),
        parts.len() - parts.live()
    )?;
    writeln!(out, "embedding     fingerprint {}", parts.fingerprint())?;
    writeln!(
        out,
        "part  items      removed  bytes        saturated  zeros   nearest ref  file"
    )?;
    for (j, (p, d)) in parts.parts().iter().zip(&drift).enumerate() {
        writeln!(
            out,
            "{j:<5} {:<10} {:<8} {:<12} {:<10} {:<7} {:<12} {}",
            p.index.len(),
            p.removed.len(),
            p.index.file_len(),
            format!("{:.2}%", 100.0 * d.saturated),
            format!("{:.2}%", 100.0 * d.zeros),
            d.nearest_reference
                .map_or("-".to_string(), |x| format!("{x:.3}")),
            esc(&p.file)
        )?;
    }
    if let (Some(first), true) = (drift.first(), drift.len() > 1) {
        for (j, d) in drift.iter().enumerate().skip(1) {
            let far = match (d.nearest_reference, first.nearest_reference) {
                (Some(x), Some(y)) if y > 0.0 => x > 1.5 * y,
                _ => false,
            };
            if d.saturated > first.saturated + 0.05 || far {
                writeln!(
                    out,
                    "warning       part {j}'s items lie far from the reference items chosen \
                     for part 0 (more saturated coordinates or a larger distance to the \
                     nearest reference): approximate recall may drop; rebuild the index \
                     from all its items"
                )?;
            }
        }
    }
    if let Some(s) = verified {
        writeln!(out, "verified      every section of every part ({s:.2} s)")?;
    }
    Ok(())
}
