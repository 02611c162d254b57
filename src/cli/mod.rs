//! The command line: `args.rs` holds every clap definition, one file per command runs it
//! (`build.rs`, `query.rs`, `inspect.rs`, `eval.rs`, `sweep.rs`, `check_metric.rs`,
//! `install.rs`, `pairs.rs`, `groups.rs`),
//! `output.rs` writes answers and progress; this file runs a command and maps its error to
//! the exit code.
//!
//! Exit codes: 0 success; 1 an unexpected failure (e.g. writing the output failed);
//! 2 bad usage or bad input (unknown option, invalid value, unreadable or malformed input
//! file); 3 the index file was refused (not an index, another format version, corrupt or
//! truncated); 4 `check-metric` found that the distance is not a metric. A closed output pipe
//! (`waymark query … | head`) ends the command with 0.

mod args;
mod build;
mod check_metric;
mod eval;
mod groups;
mod inspect;
mod install;
mod output;
mod pairs;
mod parts;
mod query;
mod sweep;

use std::process::ExitCode;

use clap::Parser;

pub use args::Args;
use args::Command;

use crate::error::Error;

/// Runs the command line and returns the process exit code.
pub fn main() -> ExitCode {
    let args = match Args::try_parse() {
        Ok(a) => a,
        Err(e) => {
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    match run(args) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            if is_broken_pipe(&e) {
                return ExitCode::SUCCESS;
            }
            let mut chain = e.chain();
            let first = chain.next().map(describe).unwrap_or_default();
            let mut msg = format!("waymark: error: {first}");
            for cause in chain {
                // Library errors already print their source; do not repeat it.
                let text = describe(cause);
                if !msg.contains(&text) {
                    msg.push_str(&format!(": {text}"));
                }
            }
            // Messages may quote what a file says: its control characters are shown escaped.
            eprintln!("{}", crate::escape::escape_controls_keep_lines(&msg));
            ExitCode::from(exit_code(&e))
        }
    }
}

/// Runs one command.
fn run(args: Args) -> anyhow::Result<()> {
    match args.command {
        Command::Build(a) => build::build(a),
        Command::Query(a) => query::query(a),
        Command::Inspect(a) => inspect::inspect(a),
        Command::Eval(a) => eval::eval(a),
        Command::Sweep(a) => sweep::sweep(a),
        Command::CheckMetric(a) => check_metric::check_metric(a),
        Command::Install(a) => install::install(a),
        Command::Pairs(a) => pairs::pairs(a),
        Command::Groups(a) => groups::groups(a),
        Command::Add(a) => parts::add(a),
        Command::Remove(a) => parts::remove(a),
        Command::Compact(a) => parts::compact(a),
    }
}

/// Prints what an input's reader warned of on stderr, one `waymark: warning: …` line each.
fn print_warnings(warnings: &[crate::ingest::IngestWarning]) {
    for w in warnings {
        eprintln!(
            "waymark: warning: {}",
            crate::escape::escape_controls(&w.to_string())
        );
    }
}

/// Says on stderr which program an index's external metric runs, before it is started
/// (the command comes from the index file: open indexes you trust), unless `quiet`.
fn announce_program(index: &crate::index::Index, quiet: bool) {
    if let crate::metric::MetricSpec::External { command, .. } = &index.meta().metric_spec {
        if !quiet {
            eprintln!(
                "waymark: note: {} runs its metric program `{}` (named in the index file; \
                 --quiet-metric leaves out this note)",
                crate::escape::escape_controls(&index.path().display().to_string()),
                crate::escape::escape_controls(&command.join(" "))
            );
        }
    }
}

/// The one index a command that reads one index file works on: the file itself, or for an
/// index in parts with more than one part or removed items, the temporary index of its live
/// items ([`crate::index::parts::LiveIndex`]), whose answers are those of the compacted index.
enum OneIndex {
    File(crate::index::Index),
    Live(crate::index::parts::LiveIndex),
}

impl std::ops::Deref for OneIndex {
    type Target = crate::index::Index;
    fn deref(&self) -> &crate::index::Index {
        match self {
            OneIndex::File(i) => i,
            OneIndex::Live(l) => l.index(),
        }
    }
}

/// Opens the index at `path` for a command that reads one index; says first which program
/// its external metric runs (unless `quiet_metric`).
fn open_one(path: &std::path::Path, quiet_metric: bool) -> crate::Result<OneIndex> {
    let parts = crate::index::parts::Parts::open(path)?;
    announce_program(parts.first(), quiet_metric);
    if parts.is_whole() {
        return Ok(OneIndex::File(parts.into_first()));
    }
    Ok(OneIndex::Live(parts.live_index()?))
}

fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| {
        c.downcast_ref::<std::io::Error>()
            .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe)
            || c.downcast_ref::<serde_json::Error>()
                .is_some_and(|j| j.io_error_kind() == Some(std::io::ErrorKind::BrokenPipe))
    })
}

/// An error as the command line says it: the library's parameters by their flags.
fn describe(e: &(dyn std::error::Error + 'static)) -> String {
    let Some(err) = e.downcast_ref::<Error>() else {
        return e.to_string();
    };
    match err {
        Error::InvalidParameter { name, reason } => format!("{} {reason}", args::flag(*name)),
        Error::NoLowerBound { path, embedding } => format!(
            "{}: exact answers need a lower bound of the true distance, and this index's \
             {embedding} embedding gives none (its coordinates are not contractive); \
             leave out --exact and --within for approximate answers",
            path.display()
        ),
        Error::TooLarge { what, need, have } => format!(
            "{what} needs about {:.1} GB of memory and {:.1} GB is available; \
             {}, or free memory (the budget can be set with WAYMARK_MEMORY_BUDGET=bytes)",
            *need as f64 / 1e9,
            *have as f64 / 1e9,
            too_large_hint(what)
        ),
        other => other.to_string(),
    }
}

/// What to ask for instead of a request refused by the memory budget.
fn too_large_hint(what: &str) -> &'static str {
    if what.starts_with("measuring the distortion") {
        "ask for fewer --pairs"
    } else if what.starts_with("checking the metric") {
        "use a smaller --sample"
    } else if what.contains("deletion-variant table") {
        "leave out --small-radius or use --small-radius 1"
    } else {
        "build a smaller input (split it), use a lower --dim"
    }
}

fn exit_code(e: &anyhow::Error) -> u8 {
    for c in e.chain() {
        if c.downcast_ref::<check_metric::NotAMetric>().is_some() {
            return 4;
        }
        if let Some(err) = c.downcast_ref::<Error>() {
            return match err {
                Error::CorruptIndex { .. } | Error::IndexRefused { .. } => 3,
                Error::Ingest(_)
                | Error::Usage(_)
                | Error::InvalidParameter { .. }
                | Error::InvalidQuery(_)
                | Error::NoLowerBound { .. }
                | Error::TooLarge { .. }
                | Error::Io { .. }
                | Error::Metric(_) => 2,
            };
        }
        if c.downcast_ref::<crate::ingest::IngestError>().is_some() {
            return 2;
        }
    }
    1
}
