//! What the commands print: query answers as JSON Lines or TSV, ids and distances as JSON,
//! and the progress bars (on stderr, only when it is a terminal).

use std::io::{IsTerminal, Write};

use indicatif::{ProgressBar, ProgressStyle};

use crate::index::{BuildProgress, BuildStage, IdRef, Index};
use crate::search::Found;

/// Where an answer's item numbers are looked up: one index, or an index in parts (item
/// numbers across the parts).
pub trait Lookup {
    /// The id of item `i`.
    fn id(&self, i: usize) -> IdRef<'_>;
    /// Item `i` as given.
    fn item(&self, i: usize) -> &[u8];
}

impl Lookup for Index {
    fn id(&self, i: usize) -> IdRef<'_> {
        Index::id(self, i)
    }
    fn item(&self, i: usize) -> &[u8] {
        Index::item(self, i)
    }
}

impl Lookup for crate::index::parts::Parts {
    fn id(&self, i: usize) -> IdRef<'_> {
        crate::index::parts::Parts::id(self, i as u32)
    }
    fn item(&self, i: usize) -> &[u8] {
        crate::index::parts::Parts::item(self, i as u32)
    }
}

/// An id as JSON: a number or a string, as typed in the input.
pub fn id_json(id: IdRef<'_>) -> serde_json::Value {
    match id {
        IdRef::Int(v) => serde_json::Value::from(v),
        IdRef::Text(b) => serde_json::Value::from(String::from_utf8_lossy(b).into_owned()),
    }
}

/// An id as TSV text: the number, or the text id as given.
pub fn id_text(id: IdRef<'_>) -> String {
    match id {
        IdRef::Int(v) => v.to_string(),
        IdRef::Text(b) => String::from_utf8_lossy(b).into_owned(),
    }
}

/// A distance as JSON: an integer when it is whole, else a float.
pub fn distance_json(d: f64) -> serde_json::Value {
    if d.fract() == 0.0 && d.abs() < 9e15 {
        serde_json::Value::from(d as i64)
    } else {
        serde_json::Value::from(d)
    }
}

/// Writes one query's answer as a JSON object on one line; `line` is the query's 1-based
/// line in its input (a FASTA/FASTQ record's header line), `name` a record's name.
#[allow(clippy::too_many_arguments)]
pub fn write_json(
    out: &mut impl Write,
    index: &dyn Lookup,
    line: usize,
    name: Option<&str>,
    query: &str,
    found: &Found,
    stats: bool,
) -> anyhow::Result<()> {
    let neighbors: Vec<serde_json::Value> = found
        .neighbors
        .iter()
        .map(|n| {
            serde_json::json!({
                "id": id_json(index.id(n.index as usize)),
                "item": String::from_utf8_lossy(index.item(n.index as usize)),
                "distance": distance_json(n.distance),
            })
        })
        .collect();
    let mut obj = serde_json::json!({ "line": line });
    if let Some(name) = name {
        obj["name"] = name.into();
    }
    obj["query"] = query.into();
    obj["neighbors"] = neighbors.into();
    if stats {
        obj["distances"] = found.distances.into();
        obj["pruned"] = found.pruned.into();
    }
    if let Some(c) = &found.certificate {
        obj["exact"] = serde_json::json!({
            "examined": c.examined,
            "computed": c.computed,
            "bound": c.bound.map(distance_json),
        });
    }
    serde_json::to_writer(&mut *out, &obj)?;
    out.write_all(b"\n")?;
    Ok(())
}

/// Writes a query that could not be answered as a JSON object on one line:
/// `{"line": N, "query": "...", "error": "..."}` (with `"name"` after the line for a
/// FASTA/FASTQ record).
pub fn write_json_error(
    out: &mut impl Write,
    line: usize,
    name: Option<&str>,
    query: &str,
    error: &str,
) -> anyhow::Result<()> {
    let mut obj = serde_json::json!({ "line": line });
    if let Some(name) = name {
        obj["name"] = name.into();
    }
    obj["query"] = query.into();
    obj["error"] = error.into();
    serde_json::to_writer(&mut *out, &obj)?;
    out.write_all(b"\n")?;
    Ok(())
}

/// Writes a query that could not be answered as one TSV line: query, the word `error` where
/// an answer has its rank, the query's line, the message.
pub fn write_tsv_error(
    out: &mut impl Write,
    line: usize,
    query: &str,
    error: &str,
) -> anyhow::Result<()> {
    writeln!(
        out,
        "{}\terror\t{line}\t{}",
        tsv_field(query),
        tsv_field(error)
    )?;
    Ok(())
}

/// Escapes a TSV field: backslash, tab, newline and carriage return become `\\ \t \n \r`.
pub fn tsv_field(s: &str) -> std::borrow::Cow<'_, str> {
    if !s.contains(['\\', '\t', '\n', '\r']) {
        return s.into();
    }
    let mut o = String::with_capacity(s.len() + 4);
    for c in s.chars() {
        match c {
            '\\' => o.push_str("\\\\"),
            '\t' => o.push_str("\\t"),
            '\n' => o.push_str("\\n"),
            '\r' => o.push_str("\\r"),
            c => o.push(c),
        }
    }
    o.into()
}

/// Writes one query's answer as one TSV line per neighbour.
pub fn write_tsv(
    out: &mut impl Write,
    index: &dyn Lookup,
    query: &str,
    found: &Found,
) -> anyhow::Result<()> {
    for (rank, n) in found.neighbors.iter().enumerate() {
        let id = id_text(index.id(n.index as usize));
        let item = String::from_utf8_lossy(index.item(n.index as usize));
        write!(
            out,
            "{}\t{}\t{}\t{}\t{}",
            tsv_field(query),
            rank + 1,
            tsv_field(&id),
            tsv_field(&item),
            distance_json(n.distance)
        )?;
        match &found.certificate {
            Some(c) => writeln!(out, "\t{}\t{}", c.examined, c.computed)?,
            None => writeln!(out)?,
        }
    }
    Ok(())
}

/// A bar counting to `len` on stderr, labelled `what`; hidden unless `show` and stderr is a
/// terminal.
pub fn counting_bar(len: u64, what: &str, show: bool) -> ProgressBar {
    if !show || !std::io::stderr().is_terminal() {
        return ProgressBar::hidden();
    }
    let b = ProgressBar::new(len);
    b.set_style(
        ProgressStyle::with_template(&format!("{what} {{bar:40}} {{pos}}/{{len}} ({{eta}} left)"))
            .expect("valid template"),
    );
    b
}

/// The progress of a build on stderr: a bar while items are embedded, then a spinner naming
/// the stage (tree and cells, writing), which reports no finer progress. Shows nothing unless
/// `show` and stderr is a terminal.
pub struct BuildBars {
    embed: ProgressBar,
    stage: Option<ProgressBar>,
}

impl BuildBars {
    /// Bars for a build of `items` items.
    pub fn new(items: usize, show: bool) -> BuildBars {
        let show = show && std::io::stderr().is_terminal();
        if !show {
            return BuildBars {
                embed: ProgressBar::hidden(),
                stage: None,
            };
        }
        let embed = ProgressBar::new(items as u64);
        embed.set_style(
            ProgressStyle::with_template("embedding {bar:40} {pos}/{len} items ({eta} left)")
                .expect("valid template"),
        );
        let stage = ProgressBar::new_spinner();
        stage.set_style(
            ProgressStyle::with_template("{spinner} {msg} ({elapsed})").expect("valid template"),
        );
        BuildBars {
            embed,
            stage: Some(stage),
        }
    }

    /// Clears whatever is still shown.
    pub fn finish(&self) {
        self.embed.finish_and_clear();
        if let Some(s) = &self.stage {
            s.finish_and_clear();
        }
    }
}

impl BuildProgress for BuildBars {
    fn stage(&self, stage: BuildStage) {
        let Some(s) = &self.stage else { return };
        let msg = match stage {
            BuildStage::Embed => return,
            BuildStage::TreeAndCells => "building the tree and cells",
            BuildStage::Write => "writing the index",
        };
        self.embed.finish_and_clear();
        s.set_message(msg);
        s.reset_elapsed();
        s.enable_steady_tick(std::time::Duration::from_millis(120));
    }

    fn embedded(&self, items: usize) {
        self.embed.inc(items as u64);
    }
}
