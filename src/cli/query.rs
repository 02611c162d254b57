//! `waymark query`: answer queries from stdin or a file, in blocks, in input order; and the
//! reading of queries files shared with `eval` and `sweep`.

use std::io::{BufRead, BufWriter, Write};
use std::path::Path;
use std::time::Instant;

use anyhow::Context;

use super::args::{OutFormat, QueryArgs};
use super::output::{write_json, write_tsv};
use crate::error::Error;
use crate::index::Index;
use crate::search::{Request, SearchParams, Searcher};

pub(super) fn query(a: QueryArgs) -> anyhow::Result<()> {
    let index = Index::open(&a.index)?;
    super::announce_program(&index, a.quiet_metric);
    let mut params = SearchParams::from_index(&index, a.k.unwrap_or(10));
    if let Some(c) = a.candidates {
        params = params.with_candidates(c);
    }
    if let Some(v) = a.visit {
        params.visit = v;
    }
    if let Some(s) = a.space {
        params.space = s.into();
    }
    params.source = a.candidates_from.map_or(params.source, Into::into);
    let request = match (a.within, a.exact) {
        (Some(radius), _) => Request::Within { radius, k: a.k },
        (None, true) => Request::Exact { k: params.k },
        (None, false) => Request::Approximate(params),
    };
    let searcher = Searcher::new(&index);
    searcher.check(&request)?;
    let (reader, name): (Box<dyn BufRead>, String) = match &a.queries {
        Some(p) => (
            Box::new(std::io::BufReader::new(std::fs::File::open(p).map_err(
                |source| Error::Io {
                    path: p.clone(),
                    source,
                },
            )?)),
            p.display().to_string(),
        ),
        None => (Box::new(std::io::stdin().lock()), "<stdin>".to_string()),
    };
    let stdout = std::io::stdout();
    let mut out = BufWriter::new(stdout.lock());
    let mut lines = QueryLines {
        reader,
        line: 0,
        name,
    };
    const BLOCK: usize = 1024;
    let t0 = Instant::now();
    let (mut answered, mut distances, mut exact_hits) = (0usize, 0usize, 0usize);
    loop {
        let block = lines.next_block(BLOCK)?;
        if block.is_empty() {
            break;
        }
        let answers = searcher.answer_many(&block, &request);
        let first_line = lines.line + 1 - block.len();
        for (j, (q, ans)) in block.iter().zip(answers).enumerate() {
            let found = ans.map_err(|e| at_query_line(e, &lines.name, first_line + j))?;
            answered += 1;
            distances += found.distances;
            exact_hits += usize::from(found.neighbors.first().is_some_and(|n| n.distance == 0.0));
            match a.format {
                OutFormat::Json => write_json(&mut out, &index, q, &found, a.stats)?,
                OutFormat::Tsv => write_tsv(&mut out, &index, q, &found)?,
            }
        }
        out.flush().context("writing the answers")?;
    }
    out.flush().context("writing the answers")?;
    if a.summary {
        let secs = t0.elapsed().as_secs_f64();
        let per = distances as f64 / answered.max(1) as f64;
        eprintln!(
            "answered {answered} queries in {secs:.3} s ({:.0} queries/s); {per:.0} distances per query ({:.2}% of {} items); {exact_hits} found an exact match",
            answered as f64 / secs.max(1e-9),
            100.0 * per / index.len() as f64,
            index.len()
        );
    }
    Ok(())
}

/// Names the query line in a query's error (a query the metric cannot take, a failing
/// metric program); errors of the index itself stay as they are.
pub(super) fn at_query_line(e: Error, name: &str, line: usize) -> Error {
    match e {
        Error::Usage(m) | Error::InvalidQuery(m) => Error::Usage(format!("{name}:{line}: {m}")),
        Error::Metric(m) => Error::Usage(format!("{name}:{line}: {m}")),
        other => other,
    }
}

/// Queries read line by line, UTF-8 checked, the line counted for errors.
struct QueryLines {
    reader: Box<dyn BufRead>,
    line: usize,
    name: String,
}

impl QueryLines {
    fn next_block(&mut self, max: usize) -> anyhow::Result<Vec<String>> {
        let mut block = Vec::new();
        let mut buf = Vec::new();
        while block.len() < max {
            buf.clear();
            let got = self
                .reader
                .read_until(b'\n', &mut buf)
                .with_context(|| format!("reading queries from {}", self.name))?;
            if got == 0 {
                break;
            }
            self.line += 1;
            if buf.last() == Some(&b'\n') {
                buf.pop();
            }
            if buf.last() == Some(&b'\r') {
                buf.pop();
            }
            let s = String::from_utf8(std::mem::take(&mut buf)).map_err(|e| {
                Error::Usage(format!(
                    "{}:{}: the query is not valid UTF-8 (byte {})",
                    self.name,
                    self.line,
                    e.utf8_error().valid_up_to() + 1
                ))
            })?;
            block.push(s);
        }
        Ok(block)
    }
}

/// Every line of a queries file (UTF-8 checked, the line named on error).
pub(super) fn read_query_file(path: &Path) -> anyhow::Result<Vec<String>> {
    let file = std::fs::File::open(path).map_err(|source| Error::Io {
        path: path.to_path_buf(),
        source,
    })?;
    let mut lines = QueryLines {
        reader: Box::new(std::io::BufReader::new(file)),
        line: 0,
        name: path.display().to_string(),
    };
    let mut all = Vec::new();
    loop {
        let block = lines.next_block(4096)?;
        if block.is_empty() {
            break;
        }
        all.extend(block);
    }
    if all.is_empty() {
        return Err(Error::Usage(format!("{}: no queries in the file", path.display())).into());
    }
    Ok(all)
}
