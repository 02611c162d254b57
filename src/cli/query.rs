//! `waymark query`: answer queries from stdin or a file, in blocks, in input order; and the
//! reading of queries files shared with `eval` and `sweep`.
//!
//! Queries are answered in blocks of up to [`BLOCK`] lines (answered in parallel). When the
//! input can wait on its writer (a pipe or a terminal, not a regular file), a block is also
//! answered as soon as no whole line is left in the read buffer, before the next read, which
//! may block: a script that writes one line and waits gets its answer, and a full pipe still
//! gives blocks as large as its reads.

use std::io::{BufRead, BufReader, BufWriter, Read, Write};
use std::path::Path;
use std::time::Instant;

use anyhow::Context;

use super::args::{OutFormat, QueryArgs, QueryFormat};
use super::output::{write_json, write_json_error, write_tsv, write_tsv_error, Lookup};
use crate::error::Error;
use crate::index::parts::Parts;
use crate::index::Index;
use crate::ingest::{read_sequences, InputFormat, SequenceFormat, SequenceRecord};
use crate::pairs::{lookup_within, Radius};
use crate::search::parts::PartsSearcher;
use crate::search::{Request, SearchParams, Searcher};

/// Largest number of queries answered together.
const BLOCK: usize = 1024;

/// The UTF-8 byte-order mark, dropped from the start of a queries file or stdin.
const BOM: &[u8] = b"\xEF\xBB\xBF";

/// Smallest index for which [`wide_note`] is printed: below it a full scan is cheap anyway.
const NOTE_MIN_ITEMS: usize = 1000;

/// Size of the read buffer (a pipe gives at most its own size, 64 KiB on Linux, per read).
const READ_BUFFER: usize = 256 * 1024;

pub(super) fn query(a: QueryArgs) -> anyhow::Result<()> {
    super::args::check_visit(a.visit, a.candidates_from)?;
    if a.stats && matches!(a.format, super::args::OutFormat::Tsv) {
        return Err(crate::error::Error::Usage(
            "--stats adds cost figures to JSON output; --format tsv has no place for them and \
             would ignore it: leave out --stats, or use --format json"
                .into(),
        )
        .into());
    }
    let parts = Parts::open(&a.index)?;
    let index = parts.first();
    super::announce_program(index, a.quiet_metric);
    let k = a.k.unwrap_or(10);
    // With --recall the candidates follow the curve weighed by the lengths of the queries
    // answered together (each block); the other options apply on top.
    let mut warned = false;
    let choose = |texts: &[String], warned: &mut bool| -> anyhow::Result<SearchParams> {
        let mut params = SearchParams::from_index(index, k);
        if let Some(r) = a.recall {
            let (p, choice) = SearchParams::recall_choice_for(index, k, r, texts)?;
            if !choice.reached && !*warned {
                *warned = true;
                eprintln!(
                    "waymark: warning: {}: the index's recall curve stops at {:.3} ({} \
                     candidates, used here), below the {r} asked; give more --candidates for \
                     more, or ask --exact for every true neighbour",
                    a.index.display(),
                    choice.expected,
                    choice.candidates
                );
            }
            params = p;
        }
        if let Some(c) = a.candidates {
            params = params.with_candidates(c);
        }
        if let Some(v) = a.visit {
            params.visit = v;
        }
        params.widen = a.widen.unwrap_or(params.widen);
        if let Some(s) = a.space {
            params.space = s.into();
        }
        // Candidates, a visit budget and a space are the embedding's: asking for one
        // searches it rather than the char counts.
        if a.candidates.is_some() || a.visit.is_some() || a.space.is_some() {
            params = params.on_embedding(index);
        }
        params.source = a.candidates_from.map_or(params.source, Into::into);
        Ok(params)
    };
    // Checked (and a curve refused) before any query is read.
    let params = choose(&[], &mut true)?;
    let request = match (a.within, a.within_fraction, a.exact) {
        (Some(radius), _, _) => Request::Within { radius, k: a.k },
        // Each query's radius follows from its length; the check takes radius 0.
        (None, Some(_), _) => Request::Within {
            radius: 0.0,
            k: a.k,
        },
        (None, None, true) => Request::Exact { k: params.k },
        (None, None, false) => Request::Approximate(params),
    };
    if a.visit.is_some()
        && matches!(request, Request::Approximate(_))
        && params.source == crate::search::CandidateSource::Scan
    {
        let advice = if index.has_cells() {
            "add --candidates-from cells to search its cells"
        } else {
            "it has no cells"
        };
        eprintln!(
            "waymark: note: {}: --visit counts only with cells, and this index of {} items \
             (fewer than {}) is searched by a scan of every row, which --visit does not change; \
             {advice}",
            a.index.display(),
            index.len(),
            crate::search::CELLS_MIN_ITEMS
        );
    }
    let fraction = a.within_fraction.map(Radius::Fraction);
    if let Some(f) = fraction {
        f.check(index)?;
    }
    // An index in parts is searched part by part and the answers merged; one part with
    // nothing removed is searched as it is.
    let whole = parts.is_whole();
    let searcher = Searcher::new(index);
    let in_parts = PartsSearcher::new(&parts);
    let lookup: &dyn Lookup = if whole { index } else { &parts };
    in_parts.check(&request)?;
    let format = a.query_format.map(QueryFormat::sequences);
    let mut lines = match &a.queries {
        Some(p) => QueryLines::open(p, format)?,
        None => QueryLines::stdin(format.flatten())?,
    };
    let stdout = std::io::stdout();
    let mut out = BufWriter::new(stdout.lock());
    let t0 = Instant::now();
    let (mut answered, mut distances, mut exact_hits, mut refused) = (0usize, 0, 0, 0);
    let mut end = false;
    let mut noted = false;
    // An input that cannot be read on (a line ending in a lone carriage return, a failed
    // read): the lines before it are answered first, as before a query that is refused.
    let mut stopped: Option<anyhow::Error> = None;
    while !end {
        // Lines of this block: the good ones' texts go to the searcher together.
        let mut entries: Vec<Entry> = Vec::new();
        let mut texts: Vec<String> = Vec::new();
        while entries.len() < BLOCK {
            if lines.may_wait && !entries.is_empty() && !lines.line_waiting() {
                break;
            }
            let next = match lines.next_raw() {
                Ok(next) => next,
                Err(e) => {
                    stopped = Some(e);
                    None
                }
            };
            let Some((line, bytes, name)) = next else {
                end = true;
                break;
            };
            match decode(bytes) {
                Ok(text) => {
                    texts.push(text);
                    entries.push(Entry::Good(line, name));
                }
                Err((text, e)) => entries.push(Entry::Bad(line, name, text, e)),
            }
        }
        let request = match (&request, a.recall) {
            (Request::Approximate(_), Some(_)) if !texts.is_empty() => {
                Request::Approximate(choose(&texts, &mut warned)?)
            }
            _ => request,
        };
        let answers = match (fraction, whole) {
            (Some(f), true) => lookup_within(&searcher, &texts, f, a.k),
            (None, true) => searcher.answer_many(&texts, &request),
            (Some(f), false) => {
                in_parts.merge_each(texts.len(), a.k, |_, s| lookup_within(s, &texts, f, None))
            }
            (None, false) => in_parts.answer_many(&texts, &request),
        }
        .into_iter();
        let answers: Vec<_> = answers.collect();
        if !noted {
            if let Some(note) = wide_note(index, parts.live(), &a, &answers) {
                eprintln!("{note}");
                noted = true;
            }
        }
        let mut answers = answers.into_iter();
        let mut texts = texts.into_iter();
        for entry in entries {
            let (line, name, query, result) = match entry {
                Entry::Good(line, name) => {
                    let query = texts.next().expect("one text per good line");
                    let result = answers.next().expect("one answer per query");
                    (line, name, query, result)
                }
                Entry::Bad(line, name, text, e) => (line, name, text, Err(e)),
            };
            let name = name.as_deref();
            match result {
                Ok(found) => {
                    answered += 1;
                    distances += found.distances;
                    exact_hits +=
                        usize::from(found.neighbors.first().is_some_and(|n| n.distance == 0.0));
                    match a.format {
                        OutFormat::Json => {
                            write_json(&mut out, lookup, line, name, &query, &found, a.stats)?
                        }
                        OutFormat::Tsv => write_tsv(&mut out, lookup, &query, &found)?,
                    }
                }
                Err(Error::InvalidQuery(m) | Error::Usage(m)) if a.errors_inline => {
                    refused += 1;
                    match a.format {
                        OutFormat::Json => write_json_error(&mut out, line, name, &query, &m)?,
                        OutFormat::Tsv => write_tsv_error(&mut out, line, &query, &m)?,
                    }
                }
                Err(e) => {
                    out.flush().context("writing the answers")?;
                    return Err(at_query_line(e, &lines.name, line).into());
                }
            }
        }
        out.flush().context("writing the answers")?;
        if let Some(e) = stopped {
            return Err(e);
        }
    }
    if a.summary {
        let secs = t0.elapsed().as_secs_f64();
        let per = distances as f64 / answered.max(1) as f64;
        let refused = if a.errors_inline {
            format!("; {refused} refused")
        } else {
            String::new()
        };
        eprintln!(
            "answered {answered} queries in {secs:.3} s ({:.0} queries/s); {per:.0} distances per query ({:.2}% of {} items); {exact_hits} found an exact match{refused}",
            answered as f64 / secs.max(1e-9),
            100.0 * per / parts.live() as f64,
            parts.live()
        );
    }
    Ok(())
}

/// The note printed once per process when exact or range answers measure more than half of
/// the items per query (a block's mean, from the certificates): the lower bounds cannot
/// narrow such a request, and a full scan would cost the same. `None` below that, for
/// approximate answers, and for indexes of fewer than [`NOTE_MIN_ITEMS`] items.
fn wide_note(
    index: &Index,
    n: usize,
    a: &QueryArgs,
    answers: &[crate::error::Result<crate::search::Found>],
) -> Option<String> {
    if n < NOTE_MIN_ITEMS {
        return None;
    }
    let computed: Vec<usize> = answers
        .iter()
        .filter_map(|r| r.as_ref().ok())
        .filter_map(|f| f.certificate.map(|c| c.computed))
        .collect();
    if computed.is_empty() {
        return None;
    }
    let share = computed.iter().sum::<usize>() as f64 / computed.len() as f64 / n as f64;
    if share <= 0.5 {
        return None;
    }
    let what = match (a.within, a.within_fraction) {
        (Some(r), _) => format!("--within {r}"),
        (None, Some(f)) => format!("--within-fraction {f}"),
        (None, None) => format!("--exact -k {}", a.k.unwrap_or(10)),
    };
    Some(format!(
        "waymark: note: {what} measures {:.0}% of the items per query under {}: the bounds \
         cannot narrow it; a full scan costs the same",
        100.0 * share,
        index.meta().metric.name()
    ))
}

/// One line of a block: a query handed to the searcher (its line and record name), or one
/// refused as read (its line, record name, text with invalid bytes replaced, the error).
enum Entry {
    Good(usize, Option<String>),
    Bad(usize, Option<String>, String, Error),
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

/// Queries read line by line, the line counted for errors; or the records of a FASTA or
/// FASTQ file (by its name's extension, as `build` tells them), read whole.
struct QueryLines {
    reader: BufReader<Box<dyn Read>>,
    line: usize,
    /// The byte of the input where the next line starts (0-based), for errors.
    start: u64,
    name: String,
    /// A read may wait on a writer (a pipe or a terminal), so a block is answered before it.
    may_wait: bool,
    /// The records of a FASTA/FASTQ queries file, in order.
    records: Option<std::vec::IntoIter<SequenceRecord>>,
}

impl QueryLines {
    /// A queries file; a folder or a missing file is a usage error. `format`: `Some(None)`
    /// for lines, `Some(Some(f))` for FASTA/FASTQ records, `None` by the file's extension.
    fn open(path: &Path, format: Option<Option<SequenceFormat>>) -> Result<QueryLines, Error> {
        let io = |source| Error::Io {
            path: path.to_path_buf(),
            source,
        };
        let file = std::fs::File::open(path).map_err(io)?;
        let meta = file.metadata().map_err(io)?;
        if meta.is_dir() {
            return Err(Error::Usage(format!(
                "{}: is a folder; --queries takes a file with one query per line",
                path.display()
            )));
        }
        let name = path.display().to_string();
        let format = format.unwrap_or(match InputFormat::from_path(path) {
            InputFormat::Sequences(f) => Some(f),
            _ => None,
        });
        let records = match format {
            Some(format) => Some(read_sequences(file, &name, format)?.into_iter()),
            None => None,
        };
        Ok(QueryLines {
            reader: BufReader::with_capacity(
                READ_BUFFER,
                Box::new(std::fs::File::open(path).map_err(io)?),
            ),
            line: 0,
            start: 0,
            name,
            may_wait: !meta.is_file(),
            records,
        })
    }

    /// Standard input. Its own buffer stays empty: reads as large as ours bypass it.
    /// FASTA/FASTQ records are read whole before the first answer.
    fn stdin(format: Option<SequenceFormat>) -> Result<QueryLines, Error> {
        let name = "<stdin>".to_string();
        let records = match format {
            Some(format) => Some(read_sequences(std::io::stdin(), &name, format)?.into_iter()),
            None => None,
        };
        Ok(QueryLines {
            reader: BufReader::with_capacity(READ_BUFFER, Box::new(std::io::stdin())),
            line: 0,
            start: 0,
            name,
            may_wait: !stdin_is_file(),
            records,
        })
    }

    /// Whether a whole line is already in the buffer (reading it cannot wait).
    fn line_waiting(&self) -> bool {
        self.records.is_some() || self.reader.buffer().contains(&b'\n')
    }

    /// The next line's number and bytes, without its line ending and, on the first line,
    /// without a UTF-8 byte-order mark; `None` at the end. A line that ends with a lone
    /// carriage return is refused, as every input reader refuses it
    /// ([`crate::ingest::end_line`]). For a FASTA/FASTQ file: the next record's header
    /// line, sequence and name.
    #[allow(clippy::type_complexity)]
    fn next_raw(&mut self) -> anyhow::Result<Option<(usize, Vec<u8>, Option<String>)>> {
        if let Some(records) = &mut self.records {
            return Ok(records
                .next()
                .map(|r| (r.line as usize, r.sequence.into_bytes(), Some(r.name))));
        }
        let mut buf = Vec::new();
        let got = self
            .reader
            .read_until(b'\n', &mut buf)
            .with_context(|| format!("reading queries from {}", self.name))?;
        if got == 0 {
            return Ok(None);
        }
        self.line += 1;
        crate::ingest::end_line(&mut buf, &self.name, self.line as u64, self.start)?;
        self.start += got as u64;
        if self.line == 1 && buf.starts_with(BOM) {
            buf.drain(..BOM.len());
        }
        Ok(Some((self.line, buf, None)))
    }
}

/// A line as text, or its text with invalid bytes replaced and the error.
fn decode(bytes: Vec<u8>) -> Result<String, (String, Error)> {
    String::from_utf8(bytes).map_err(|e| {
        let at = e.utf8_error().valid_up_to() + 1;
        let text = String::from_utf8_lossy(e.as_bytes()).into_owned();
        let error = Error::InvalidQuery(format!("the query is not valid UTF-8 (byte {at})"));
        (text, error)
    })
}

/// Whether standard input is a regular file (redirected from one), whose reads never wait.
#[cfg(unix)]
fn stdin_is_file() -> bool {
    use std::os::fd::AsFd;
    std::io::stdin()
        .as_fd()
        .try_clone_to_owned()
        .map(std::fs::File::from)
        .and_then(|f| f.metadata())
        .is_ok_and(|m| m.is_file())
}

#[cfg(not(unix))]
fn stdin_is_file() -> bool {
    false
}

/// Every line of a queries file (UTF-8 checked, the line named on error).
pub(super) fn read_query_file(path: &Path) -> anyhow::Result<Vec<String>> {
    let name = path.display().to_string();
    read_query_lines(path)?
        .into_iter()
        .enumerate()
        .map(|(i, l)| l.map_err(|(_, e)| at_query_line(e, &name, i + 1).into()))
        .collect()
}

/// Every line of a queries file, in order: its text, or for a line that is not valid UTF-8
/// its text with the invalid bytes replaced and the error (for `--errors-inline`).
pub(super) fn read_query_lines(
    path: &Path,
) -> anyhow::Result<Vec<Result<String, (String, Error)>>> {
    let mut lines = QueryLines::open(path, None)?;
    let mut all = Vec::new();
    while let Some((_, bytes, _)) = lines.next_raw()? {
        all.push(decode(bytes));
    }
    if all.is_empty() {
        return Err(Error::Usage(format!("{}: no queries in the file", path.display())).into());
    }
    Ok(all)
}
