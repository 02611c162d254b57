//! The command line: argument definitions (all in this file) and the commands behind them.
//!
//! Exit codes: 0 success; 1 an unexpected failure (e.g. writing the output failed);
//! 2 bad usage or bad input (unknown option, invalid value, unreadable or malformed input
//! file); 3 the index file was refused (not an index, another format version, corrupt or
//! truncated). A closed output pipe (`waymark query … | head`) ends the command with 0.

use std::io::{BufRead, BufWriter, IsTerminal, Write};
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::time::Instant;

use anyhow::Context;
use clap::{Parser, Subcommand, ValueEnum};

use crate::error::Error;
use crate::index::{build_index, BuildOptions, IdRef, Index};
use crate::ingest::{read_corpus, Corpus, IngestOptions, InputFormat, Normalize};
use crate::metric::{Graph, MetricSpec};
use crate::search::{CandidateSource, Found, Request, SearchParams, Searcher, Space};

/// Near-neighbour search for strings that are not vectors.
#[derive(Debug, Parser)]
#[command(name = "waymark", version, about, long_about = None)]
pub struct Args {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Build an index from a file of items.
    Build(BuildArgs),
    /// Find the nearest items for queries read from stdin or a file (JSON Lines out).
    Query(QueryArgs),
    /// Show what an index holds; --verify checks every checksum.
    Inspect(InspectArgs),
    /// Measure an index: recall against brute force, cost and speed; distortion of its embedding.
    Eval(EvalArgs),
    /// Build and measure indexes over embedding methods, dimensions and spaces; write CSV, JSON and SVG charts.
    Sweep(SweepArgs),
    /// Check on a sample of the input that the distance is a metric (zero on equal items,
    /// symmetric, triangle inequality); exit code 4 when it is not.
    CheckMetric(CheckMetricArgs),
}

#[derive(Debug, clap::Args)]
struct CheckMetricArgs {
    /// Input file, as for `build`.
    input: PathBuf,
    #[command(flatten)]
    metric: MetricArgs,
    /// Items sampled: all their ordered pairs and triples are checked.
    #[arg(long, value_name = "M", default_value_t = 200)]
    sample: usize,
    /// Seed of the sample.
    #[arg(long, value_name = "S", default_value_t = 0)]
    seed: u64,
    /// Input format; by default from the file extension.
    #[arg(long = "input-format", value_enum, value_name = "FORMAT")]
    input_format: Option<FormatArg>,
    /// The column or JSON field holding the items.
    #[arg(long, value_name = "NAME")]
    field: Option<String>,
    /// Compare ignoring case.
    #[arg(long = "fold-case")]
    fold_case: bool,
    /// Compare without leading and trailing white space.
    #[arg(long)]
    trim: bool,
    /// Print one JSON object.
    #[arg(long)]
    json: bool,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum FormatArg {
    /// One item per line.
    Text,
    /// Comma-separated values with a header row.
    Csv,
    /// Tab-separated values with a header row.
    Tsv,
    /// One JSON object per line.
    Jsonl,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum SpaceArg {
    L1,
    L2,
    Linf,
}

impl From<SpaceArg> for Space {
    fn from(s: SpaceArg) -> Space {
        match s {
            SpaceArg::L1 => Space::L1,
            SpaceArg::L2 => Space::L2,
            SpaceArg::Linf => Space::Linf,
        }
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
enum MetricArg {
    /// Edit distance: insertions, deletions, substitutions of characters (text; the default).
    Levenshtein,
    /// Edit distance that also counts swapping two adjacent characters as one edit (unrestricted).
    Damerau,
    /// Number of positions where two strings of one length differ (barcodes).
    Hamming,
    /// Edit distance with costs per character from --costs FILE.
    Weighted,
    /// 1 − |A∩B|/|A∪B| of token sets (--separator) or character q-grams (--qgrams).
    Jaccard,
    /// Sum of absolute differences of numeric vectors (CSV/TSV rows or .npy).
    L1,
    /// Euclidean distance of numeric vectors.
    L2,
    /// Largest absolute difference of numeric vectors.
    Linf,
    /// Angle between numeric vectors, divided by π.
    Angular,
    /// Shortest-path length in a weighted graph; the input is an edge list `a b weight`.
    Graph,
    /// Distances from your own program (after `--`), over the waymark-metric protocol.
    External,
}

/// How items are compared: shared by `build`, `sweep` and `check-metric`.
#[derive(Debug, Clone, clap::Args)]
struct MetricArgs {
    /// The distance items are compared by.
    #[arg(long, value_enum, default_value = "levenshtein")]
    metric: MetricArg,
    /// weighted: the cost file (insert/delete and substitution costs per character).
    #[arg(long, value_name = "FILE")]
    costs: Option<PathBuf>,
    /// jaccard: tokens are the pieces between this separator [default: white space].
    #[arg(long, value_name = "SEP")]
    separator: Option<String>,
    /// jaccard: sets of Q consecutive characters instead of tokens.
    #[arg(long, value_name = "Q", conflicts_with = "separator")]
    qgrams: Option<usize>,
    /// Vector input: the first line names the columns (skipped).
    #[arg(long)]
    header: bool,
    /// external: time limit for each batch of distances, in seconds.
    #[arg(long, value_name = "SECS", default_value_t = 30.0)]
    timeout: f64,
    /// external: the program and its arguments, after `--` (recorded in the index; every
    /// process querying the index starts it).
    #[arg(last = true, value_name = "COMMAND")]
    command: Vec<String>,
}

#[derive(Debug, clap::Args)]
struct BuildArgs {
    /// Input file: text (one item per line), .csv/.tsv (with --field) or .jsonl (with --field);
    /// for vector metrics one vector per line (or .npy); for graph an edge list.
    input: PathBuf,
    #[command(flatten)]
    metric: MetricArgs,
    /// Where to write the index (replaced atomically).
    #[arg(short = 'o', long = "output", value_name = "INDEX")]
    output: PathBuf,
    /// Embedding dimension: the number of coordinates (1 to 64).
    #[arg(long = "dim", value_name = "D", default_value_t = crate::search::DEFAULT_DIM)]
    dim: usize,
    /// How items become coordinates: distances to landmarks, to random reference sets, or
    /// FastMap projections (not contractive: no pruning).
    #[arg(long, value_enum, default_value = "landmarks")]
    embedding: MethodArg,
    /// Size of the reference-set pool: a query costs one distance per pool item (refsets).
    #[arg(long, value_name = "P", default_value_t = crate::embed::DEFAULT_POOL)]
    pool: usize,
    /// Seed of the embedding's random choices; the same seed and input give the same index.
    #[arg(long, value_name = "S", default_value_t = 0)]
    seed: u64,
    /// Input format; by default from the file extension (.csv, .tsv, .jsonl, else text).
    #[arg(long = "input-format", value_enum, value_name = "FORMAT")]
    input_format: Option<FormatArg>,
    /// The column (header name or 0-based number) or JSON field holding the items.
    #[arg(long, value_name = "NAME")]
    field: Option<String>,
    /// The column or JSON field holding the ids (default: 0-based record number).
    #[arg(long = "id-field", value_name = "NAME")]
    id_field: Option<String>,
    /// Compare items and queries ignoring case (stored in the index, applied to queries).
    #[arg(long = "fold-case")]
    fold_case: bool,
    /// Compare items and queries without leading and trailing white space.
    #[arg(long)]
    trim: bool,
    /// Default number of candidates re-ranked per query, stored in the index [default: the
    /// number of items / 160, at least 1000 and at most 4000].
    #[arg(long, value_name = "C", value_parser = clap::value_parser!(u64).range(1..))]
    candidates: Option<u64>,
    /// Default space candidates are ranked in, stored in the index.
    #[arg(long, value_enum, default_value = "l1")]
    space: SpaceArg,
    /// Number of items landmarks and FastMap pivots are chosen from.
    #[arg(long = "landmark-sample", value_name = "N", default_value_t = 4096)]
    landmark_sample: usize,
    /// Print nothing on success.
    #[arg(short, long)]
    quiet: bool,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
enum MethodArg {
    /// Distances to farthest-first landmark items.
    Landmarks,
    /// Distances to random sets of sizes 1, 2, 4, … drawn from a pool (Bourgain).
    Refsets,
    /// FastMap projections onto pivot lines.
    Fastmap,
}

impl From<MethodArg> for crate::embed::Method {
    fn from(m: MethodArg) -> Self {
        match m {
            MethodArg::Landmarks => crate::embed::Method::Landmarks,
            MethodArg::Refsets => crate::embed::Method::RefSets,
            MethodArg::Fastmap => crate::embed::Method::FastMap,
        }
    }
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum OutFormat {
    /// One JSON object per query.
    Json,
    /// One tab-separated line per neighbour: query, rank, id, item, distance.
    Tsv,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum SourceArg {
    /// The rows of the cells nearest the query (the default for large indexes).
    Cells,
    /// A SIMD pass over every item's compact coordinates.
    Scan,
    /// The kd-tree's exact nearest-n search on the coordinates.
    Tree,
}

#[derive(Debug, clap::Args)]
struct QueryArgs {
    /// The index file.
    index: PathBuf,
    /// Number of neighbours per query [default: 10; with --within: every item within R].
    #[arg(short = 'k', value_name = "K")]
    k: Option<usize>,
    /// Exact k nearest neighbours, each answer with its certificate (needs an index whose
    /// embedding gives a lower bound of the true distance).
    #[arg(long, conflicts_with_all = ["candidates", "space", "candidates_from"])]
    exact: bool,
    /// Every item at true distance at most R, exactly (with -k: the k nearest of them).
    #[arg(long, value_name = "R", allow_negative_numbers = true, conflicts_with_all = ["candidates", "space", "candidates_from"])]
    within: Option<f64>,
    /// Candidates re-ranked by the true distance (default: stored in the index).
    #[arg(long, value_name = "C")]
    candidates: Option<usize>,
    /// Space candidates are ranked in (default: stored in the index).
    #[arg(long, value_enum)]
    space: Option<SpaceArg>,
    /// Where candidates come from [default: cells for indexes of 250,000 items or more, else
    /// scan].
    #[arg(long = "candidates-from", value_enum)]
    candidates_from: Option<SourceArg>,
    /// With cells: compare the rows of the nearest cells until N rows are compared
    /// [default: 12 per candidate]; 0 compares every row.
    #[arg(long, value_name = "N", conflicts_with_all = ["exact", "within"])]
    visit: Option<usize>,
    /// Read queries from this file instead of stdin, one per line.
    #[arg(long, value_name = "FILE")]
    queries: Option<PathBuf>,
    /// Output format.
    #[arg(long, value_enum, default_value = "json")]
    format: OutFormat,
    /// Add per-query cost figures (distances computed, candidates pruned) to JSON output.
    #[arg(long)]
    stats: bool,
    /// Print a one-line summary on stderr when done (queries, q/s, distances per query).
    #[arg(long)]
    summary: bool,
}

#[derive(Debug, clap::Args)]
struct InspectArgs {
    /// The index file.
    index: PathBuf,
    /// Read the whole file and check every section's checksum.
    #[arg(long)]
    verify: bool,
    /// Print as one JSON object.
    #[arg(long)]
    json: bool,
}

#[derive(Debug, clap::Args)]
struct EvalArgs {
    /// The index file.
    index: PathBuf,
    /// Queries, one per line: measure recall@k against brute force (answers cached beside it).
    #[arg(long, value_name = "FILE")]
    queries: Option<PathBuf>,
    /// Number of neighbours per query.
    #[arg(short = 'k', value_name = "K", default_value_t = 10)]
    k: usize,
    /// Candidate counts to measure, comma-separated.
    #[arg(
        long,
        value_name = "C,...",
        value_delimiter = ',',
        default_value = "250,500,1000,2000"
    )]
    candidates: Vec<usize>,
    /// Space candidates are ranked in (default: stored in the index).
    #[arg(long, value_enum)]
    space: Option<SpaceArg>,
    /// Where candidates come from [default: as for `query`].
    #[arg(long = "candidates-from", value_enum)]
    candidates_from: Option<SourceArg>,
    /// With cells: rows compared per query [default: 12 per candidate]; 0 compares every
    /// row.
    #[arg(long, value_name = "N")]
    visit: Option<usize>,
    /// Report the distortion of the embedding on a sample of item pairs.
    #[arg(long)]
    distortion: bool,
    /// Pairs measured for --distortion (all pairs when the index has no more).
    #[arg(long, value_name = "N", default_value_t = 100_000)]
    pairs: usize,
    /// Recompute the exact answers even if a valid cache exists (and replace it).
    #[arg(long = "no-cache")]
    no_cache: bool,
    /// Print one JSON object instead of tables.
    #[arg(long)]
    json: bool,
}

#[derive(Debug, clap::Args)]
struct SweepArgs {
    /// Input file, as for `build`.
    input: PathBuf,
    #[command(flatten)]
    metric: MetricArgs,
    /// Queries, one per line (exact answers cached beside it).
    #[arg(long, value_name = "FILE")]
    queries: PathBuf,
    /// Folder for sweep.csv, sweep.json and the SVG charts (created if missing).
    #[arg(long = "out", value_name = "DIR")]
    out: PathBuf,
    /// Number of neighbours per query.
    #[arg(short = 'k', value_name = "K", default_value_t = 10)]
    k: usize,
    /// Dimensions, comma-separated (1 to 64).
    #[arg(
        long,
        value_name = "D,...",
        value_delimiter = ',',
        default_value = "2,4,8,16,32"
    )]
    dims: Vec<usize>,
    /// Embedding methods, comma-separated.
    #[arg(
        long,
        value_enum,
        value_name = "METHOD,...",
        value_delimiter = ',',
        default_value = "landmarks,refsets,fastmap"
    )]
    embeddings: Vec<MethodArg>,
    /// Spaces candidates are ranked in, comma-separated.
    #[arg(
        long,
        value_enum,
        value_name = "SPACE,...",
        value_delimiter = ',',
        default_value = "l1,l2,linf"
    )]
    spaces: Vec<SpaceArg>,
    /// Candidate counts, comma-separated.
    #[arg(
        long,
        value_name = "C,...",
        value_delimiter = ',',
        default_value = "1000"
    )]
    candidates: Vec<usize>,
    /// Seed of the embeddings.
    #[arg(long, value_name = "S", default_value_t = 0)]
    seed: u64,
    /// Size of the reference-set pool.
    #[arg(long, value_name = "P", default_value_t = crate::embed::DEFAULT_POOL)]
    pool: usize,
    /// Number of items landmarks and FastMap pivots are chosen from.
    #[arg(long = "landmark-sample", value_name = "N", default_value_t = 4096)]
    landmark_sample: usize,
    /// Input format; by default from the file extension.
    #[arg(long = "input-format", value_enum, value_name = "FORMAT")]
    input_format: Option<FormatArg>,
    /// The column or JSON field holding the items.
    #[arg(long, value_name = "NAME")]
    field: Option<String>,
    /// The column or JSON field holding the ids.
    #[arg(long = "id-field", value_name = "NAME")]
    id_field: Option<String>,
    /// Compare ignoring case.
    #[arg(long = "fold-case")]
    fold_case: bool,
    /// Compare without leading and trailing white space.
    #[arg(long)]
    trim: bool,
    /// Print nothing but errors.
    #[arg(short, long)]
    quiet: bool,
}

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
            let mut msg = format!("waymark: error: {e}");
            for cause in e.chain().skip(1) {
                // Library errors already print their source; do not repeat it.
                let text = cause.to_string();
                if !msg.contains(&text) {
                    msg.push_str(&format!(": {text}"));
                }
            }
            eprintln!("{msg}");
            ExitCode::from(exit_code(&e))
        }
    }
}

fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| {
        c.downcast_ref::<std::io::Error>()
            .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe)
            || c.downcast_ref::<serde_json::Error>()
                .is_some_and(|j| j.io_error_kind() == Some(std::io::ErrorKind::BrokenPipe))
    })
}

fn exit_code(e: &anyhow::Error) -> u8 {
    for c in e.chain() {
        if c.downcast_ref::<NotAMetric>().is_some() {
            return 4;
        }
        if let Some(err) = c.downcast_ref::<Error>() {
            return match err {
                Error::Index { .. } => 3,
                Error::Ingest(_) | Error::Usage(_) | Error::Io { .. } | Error::Metric(_) => 2,
            };
        }
        if c.downcast_ref::<crate::ingest::IngestError>().is_some() {
            return 2;
        }
    }
    1
}

fn run(args: Args) -> anyhow::Result<()> {
    match args.command {
        Command::Build(a) => build(a),
        Command::Query(a) => query(a),
        Command::Inspect(a) => inspect(a),
        Command::Eval(a) => eval(a),
        Command::Sweep(a) => sweep(a),
        Command::CheckMetric(a) => check_metric(a),
    }
}

/// What the input of a build holds under its metric.
struct Input {
    corpus: Corpus,
    spec: MetricSpec,
    graph: Option<Graph>,
}

/// Reads the input of `build`, `sweep` or `check-metric` as the metric wants it: text records
/// (with the ingest options), vectors, or an edge list whose nodes are the items.
fn load_input(path: &Path, ingest: &IngestOptions, m: &MetricArgs) -> anyhow::Result<Input> {
    use crate::metric::{CostTable, Norm, Tokens};
    let usage = |msg: String| -> anyhow::Error { Error::Usage(msg).into() };
    let name = m.metric.to_possible_value().expect("no skipped values");
    let name = name.get_name();
    let only = |flag: &str, set: bool, for_metric: &str| -> anyhow::Result<()> {
        if set && name != for_metric {
            return Err(usage(format!(
                "{flag} is an option of --metric {for_metric}, not of --metric {name}"
            )));
        }
        Ok(())
    };
    only("--costs", m.costs.is_some(), "weighted")?;
    only("--separator", m.separator.is_some(), "jaccard")?;
    only("--qgrams", m.qgrams.is_some(), "jaccard")?;
    only("a command after --", !m.command.is_empty(), "external")?;
    let vector = match m.metric {
        MetricArg::L1 => Some(Norm::L1),
        MetricArg::L2 => Some(Norm::L2),
        MetricArg::Linf => Some(Norm::Linf),
        MetricArg::Angular => Some(Norm::Angular),
        _ => None,
    };
    if m.header && vector.is_none() {
        return Err(usage(format!(
            "--header is for vector inputs (--metric l1, l2, linf or angular), not --metric {name}"
        )));
    }
    let text_options_given = ingest.field.is_some()
        || ingest.id_field.is_some()
        || ingest.format.is_some()
        || !ingest.normalize.is_identity();
    if (vector.is_some() || m.metric == MetricArg::Graph) && text_options_given {
        return Err(usage(format!(
            "--field, --id-field, --input-format, --fold-case and --trim are for text inputs; \
             --metric {name} reads {}",
            if vector.is_some() {
                "one vector per line (or a .npy file)"
            } else {
                "an edge list"
            }
        )));
    }
    let source = path.display().to_string();
    if let Some(norm) = vector {
        let v = crate::ingest::vectors::read_vectors(
            path,
            &crate::ingest::vectors::VectorOptions {
                format: None,
                header: m.header,
            },
        )
        .map_err(Error::from)?;
        let n = v.items.len();
        let corpus = Corpus {
            items: v.rows,
            keys: Some(v.items),
            ids: crate::ingest::Ids::Int((0..n as i64).collect()),
            blank_skipped: 0,
            records: n,
        };
        let spec = MetricSpec::Vector {
            norm,
            dim: u32::try_from(v.dim).map_err(|_| usage(format!("{source}: too many columns")))?,
        };
        return Ok(Input {
            corpus,
            spec,
            graph: None,
        });
    }
    if m.metric == MetricArg::Graph {
        let g = Graph::from_path(path).map_err(Error::from)?;
        let names: Vec<String> = (0..g.len() as u32)
            .map(|v| String::from_utf8_lossy(g.name(v)).into_owned())
            .collect();
        let corpus = Corpus {
            records: names.len(),
            items: names.clone(),
            keys: None,
            ids: crate::ingest::Ids::Text(names),
            blank_skipped: 0,
        };
        return Ok(Input {
            corpus,
            spec: MetricSpec::Graph,
            graph: Some(g),
        });
    }
    let spec = match m.metric {
        MetricArg::Levenshtein => MetricSpec::Levenshtein,
        MetricArg::Damerau => MetricSpec::Damerau,
        MetricArg::Hamming => MetricSpec::Hamming { length: 0 },
        MetricArg::Weighted => {
            let file = m
                .costs
                .as_ref()
                .ok_or_else(|| usage("--metric weighted needs --costs FILE".into()))?;
            let table = CostTable::from_path(file).map_err(Error::from)?;
            MetricSpec::WeightedEdit {
                costs: table.rules().clone(),
            }
        }
        MetricArg::Jaccard => MetricSpec::Jaccard {
            tokens: match (&m.qgrams, &m.separator) {
                (Some(q), _) => Tokens::QGrams(*q),
                (None, Some(s)) => Tokens::Separator(s.clone()),
                (None, None) => Tokens::Whitespace,
            },
        },
        MetricArg::External => {
            if m.command.is_empty() {
                return Err(usage(
                    "--metric external needs the program after `--`, e.g. \
                     `-- python3 my_metric.py`"
                        .into(),
                ));
            }
            if !(m.timeout.is_finite() && m.timeout > 0.0) {
                return Err(usage(format!(
                    "--timeout must be a positive number of seconds, not {}",
                    m.timeout
                )));
            }
            MetricSpec::External {
                command: m.command.clone(),
                timeout_ms: (m.timeout * 1000.0).ceil() as u64,
            }
        }
        _ => unreachable!("vector and graph metrics are handled above"),
    };
    if let MetricSpec::Jaccard { tokens } = &spec {
        crate::metric::Jaccard::new(tokens.clone()).map_err(Error::from)?;
    }
    let corpus = read_corpus(path, ingest).map_err(Error::from)?;
    Ok(Input {
        corpus,
        spec,
        graph: None,
    })
}

/// The distance is not a metric on the sample `check-metric` drew (exit code 4).
#[derive(Debug, thiserror::Error)]
#[error("{0}")]
struct NotAMetric(String);

/// The ingest format asked for on the command line (`None`: from the file extension).
fn input_format(f: Option<FormatArg>) -> Option<InputFormat> {
    f.map(|f| match f {
        FormatArg::Text => InputFormat::Text,
        FormatArg::Csv => InputFormat::Csv { delimiter: b',' },
        FormatArg::Tsv => InputFormat::Csv { delimiter: b'\t' },
        FormatArg::Jsonl => InputFormat::JsonLines,
    })
}

/// One line per violation kept in `r`, with the items quoted.
fn describe_violations(r: &crate::metric::AxiomReport, corpus: &Corpus) -> Vec<String> {
    use crate::metric::Axiom;
    let item = |i: usize| format!("{:?}", corpus.items[i]);
    r.worst
        .iter()
        .map(|v| {
            let d = &v.distances;
            match v.axiom {
                Axiom::NonNegative => {
                    format!("d({}, {}) = {}", item(v.items[0]), item(v.items[1]), d[0])
                }
                Axiom::Identity => format!("d({0}, {0}) = {1}", item(v.items[0]), d[0]),
                Axiom::Symmetry => format!(
                    "d({0}, {1}) = {2} but d({1}, {0}) = {3}",
                    item(v.items[0]),
                    item(v.items[1]),
                    d[0],
                    d[1]
                ),
                Axiom::Positivity => format!(
                    "d({}, {}) = 0 for different items (a pseudometric: lower bounds still hold)",
                    item(v.items[0]),
                    item(v.items[1])
                ),
                Axiom::Triangle => format!(
                    "d({x}, {z}) = {} > d({x}, {y}) + d({y}, {z}) = {} + {}",
                    d[2],
                    d[0],
                    d[1],
                    x = item(v.items[0]),
                    y = item(v.items[1]),
                    z = item(v.items[2]),
                ),
            }
        })
        .collect()
}

fn check_metric(a: CheckMetricArgs) -> anyhow::Result<()> {
    use crate::metric::check_axioms;
    if a.sample < 2 {
        return Err(Error::Usage("--sample must be at least 2".into()).into());
    }
    let normalize = Normalize {
        fold_case: a.fold_case,
        trim: a.trim,
    };
    let input = load_input(
        &a.input,
        &IngestOptions {
            format: input_format(a.input_format),
            field: a.field.clone(),
            id_field: None,
            normalize,
        },
        &a.metric,
    )?;
    let source = a.input.display().to_string();
    let keys = input.corpus.key_bytes();
    let (spec, metric) = crate::index::open_metric(
        &keys,
        &source,
        &BuildOptions {
            metric: input.spec,
            graph: input.graph,
            ..BuildOptions::default()
        },
    )?;
    let t0 = Instant::now();
    let r = check_axioms(&metric, &keys, a.sample, a.seed);
    metric.check()?;
    let secs = t0.elapsed().as_secs_f64();
    let lines = describe_violations(&r, &input.corpus);
    let mut out = std::io::stdout().lock();
    if a.json {
        let obj = serde_json::json!({
            "input": source,
            "metric": spec.kind().name(),
            "report": r,
            "violations": lines,
            "is_metric": r.is_metric(),
            "seconds": secs,
        });
        serde_json::to_writer_pretty(&mut out, &obj)?;
        writeln!(out)?;
    } else {
        writeln!(
            out,
            "{source}: {} metric on {} of {} items: {} pairs and {} triples in {secs:.2} s",
            spec.kind(),
            r.sample,
            input.corpus.items.len(),
            r.pairs,
            r.triples
        )?;
        for &(ax, c) in &r.counts {
            writeln!(out, "  {:<30} {c:>10} violations", ax.rule())?;
        }
        for l in &lines {
            writeln!(out, "  e.g. {l}")?;
        }
    }
    if r.is_metric() {
        if !a.json {
            writeln!(out, "no violation on this sample: lower bounds and exact answers hold as far as it shows")?;
        }
        Ok(())
    } else {
        Err(NotAMetric(format!(
            "{source}: the {} distance is not a metric on this sample: exact answers \
             (--exact, --within) and pruning are not sound with it",
            spec.kind()
        ))
        .into())
    }
}

fn build(a: BuildArgs) -> anyhow::Result<()> {
    let t0 = Instant::now();
    let normalize = Normalize {
        fold_case: a.fold_case,
        trim: a.trim,
    };
    let format = input_format(a.input_format);
    let opts = IngestOptions {
        format,
        field: a.field.clone(),
        id_field: a.id_field.clone(),
        normalize,
    };
    if a.dim == 0 || a.dim > crate::embed::MAX_DIM {
        return Err(Error::Usage(format!(
            "--dim must be between 1 and {}, not {}",
            crate::embed::MAX_DIM,
            a.dim
        ))
        .into());
    }
    let source_name = a.input.display().to_string();
    if let Ok(m) = std::fs::metadata(&a.input) {
        crate::resources::check_input(&source_name, m.len())?;
    }
    let Input {
        corpus,
        spec,
        graph,
    } = load_input(&a.input, &opts, &a.metric)?;
    let read_seconds = t0.elapsed().as_secs_f64();
    let n = corpus.items.len();
    let text_bytes: usize = corpus.items.iter().map(String::len).sum::<usize>()
        + corpus
            .keys
            .as_ref()
            .map_or(0, |k| k.iter().map(Vec::len).sum());
    crate::resources::check_build(&source_name, n, text_bytes, a.dim)?;
    let bar = if std::io::stderr().is_terminal() && !a.quiet {
        let b = indicatif::ProgressBar::new(n as u64);
        b.set_style(
            indicatif::ProgressStyle::with_template(
                "embedding {bar:40} {pos}/{len} items ({eta} left)",
            )
            .expect("valid template"),
        );
        b
    } else {
        indicatif::ProgressBar::hidden()
    };
    let source = a.input.display().to_string();
    let report = build_index(
        &corpus,
        &source,
        &BuildOptions {
            metric: spec,
            graph,
            method: a.embedding.into(),
            dim: a.dim,
            seed: a.seed,
            sample: a.landmark_sample,
            pool: a.pool,
            candidates: a.candidates.map_or(0, |c| c as usize),
            space: a.space.into(),
            normalize,
        },
        &a.output,
        &|done| bar.inc(done as u64),
    )?;
    bar.finish_and_clear();
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
            report.file_len as f64 / 1e6,
            t0.elapsed().as_secs_f64()
        )?;
        if m.blank_skipped > 0 {
            writeln!(out, "skipped {} blank records", m.blank_skipped)?;
        }
        if (m.dim as usize) < a.dim {
            writeln!(
                out,
                "note: only {} coordinates could be made (asked for {}): the input has too few distinct items",
                m.dim, a.dim
            )?;
        }
        writeln!(
            out,
            "time: read {:.2} s, embed {:.2} s, tree and cells {:.2} s, write {:.2} s",
            read_seconds, report.embed_seconds, report.tree_seconds, report.write_seconds
        )?;
    }
    Ok(())
}

/// The candidate source a `--candidates-from` value asks for, or `default`.
fn source_of(arg: Option<SourceArg>, default: CandidateSource) -> CandidateSource {
    match arg {
        None => default,
        Some(SourceArg::Cells) => CandidateSource::Cells,
        Some(SourceArg::Scan) => CandidateSource::Scan,
        Some(SourceArg::Tree) => CandidateSource::Tree,
    }
}

fn open_index(path: &Path) -> anyhow::Result<Index> {
    Ok(Index::open(path)?)
}

fn query(a: QueryArgs) -> anyhow::Result<()> {
    let index = open_index(&a.index)?;
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
    params.source = source_of(a.candidates_from, params.source);
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
fn at_query_line(e: Error, name: &str, line: usize) -> Error {
    match e {
        Error::Usage(m) => Error::Usage(format!("{name}:{line}: {m}")),
        Error::Metric(m) => Error::Usage(format!("{name}:{line}: {m}")),
        other => other,
    }
}

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

fn id_json(id: IdRef<'_>) -> serde_json::Value {
    match id {
        IdRef::Int(v) => serde_json::Value::from(v),
        IdRef::Text(b) => serde_json::Value::from(String::from_utf8_lossy(b).into_owned()),
    }
}

fn distance_json(d: f64) -> serde_json::Value {
    if d.fract() == 0.0 && d.abs() < 9e15 {
        serde_json::Value::from(d as i64)
    } else {
        serde_json::Value::from(d)
    }
}

fn write_json(
    out: &mut impl Write,
    index: &Index,
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
    let mut obj = serde_json::json!({ "query": query, "neighbors": neighbors });
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

/// Escapes a TSV field: backslash, tab, newline and carriage return become `\\ \t \n \r`.
fn tsv_field(s: &str) -> std::borrow::Cow<'_, str> {
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

fn write_tsv(
    out: &mut impl Write,
    index: &Index,
    query: &str,
    found: &Found,
) -> anyhow::Result<()> {
    for (rank, n) in found.neighbors.iter().enumerate() {
        let id = match index.id(n.index as usize) {
            IdRef::Int(v) => v.to_string(),
            IdRef::Text(b) => String::from_utf8_lossy(b).into_owned(),
        };
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

fn inspect(a: InspectArgs) -> anyhow::Result<()> {
    let index = open_index(&a.index)?;
    let t = Instant::now();
    let verified = if a.verify {
        index.verify()?;
        Some(t.elapsed().as_secs_f64())
    } else {
        None
    };
    let m = index.meta();
    let landmarks: Vec<String> = m
        .embedding
        .refs()
        .iter()
        .map(|&l| String::from_utf8_lossy(index.item(l as usize)).into_owned())
        .collect();
    let sections: Vec<(&str, usize)> = index.sections().collect();
    let mut out = std::io::stdout().lock();
    if a.json {
        let obj = serde_json::json!({
            "path": a.index.display().to_string(),
            "format_version": crate::index::file::FORMAT_VERSION,
            "file_bytes": index.file_len(),
            "meta": m,
            "landmark_items": landmarks,
            "sections": sections.iter().map(|(k, l)| serde_json::json!({"name": k, "bytes": l})).collect::<Vec<_>>(),
            "verified": verified.is_some(),
        });
        serde_json::to_writer_pretty(&mut out, &obj)?;
        writeln!(out)?;
        return Ok(());
    }
    writeln!(out, "index         {}", a.index.display())?;
    writeln!(
        out,
        "format        waymark index, version {}",
        crate::index::file::FORMAT_VERSION
    )?;
    writeln!(out, "written by    {}", m.written_by)?;
    writeln!(
        out,
        "items         {} (from {}: {} records, {} blank skipped)",
        m.n, m.source, m.records, m.blank_skipped
    )?;
    writeln!(out, "ids           {:?}", m.ids)?;
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
            command.join(" "),
            *timeout_ms as f64 / 1000.0
        ),
        MetricSpec::Custom { name, .. } => format!(" (`{name}`, written in Rust)"),
        MetricSpec::Levenshtein | MetricSpec::Damerau | MetricSpec::Graph => String::new(),
    };
    writeln!(out, "metric        {}{params}", m.metric)?;
    writeln!(
        out,
        "normalise     fold-case {}, trim {}",
        m.normalize.fold_case, m.normalize.trim
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
    writeln!(out, "references    {}", landmarks.join(" | "))?;
    writeln!(
        out,
        "coordinates   u8, {} bytes per item; kd-tree of dimension {} (f32)",
        m.stride, m.tree_dim
    )?;
    writeln!(
        out,
        "query default {} candidates ranked in {}",
        m.candidates,
        m.space.name()
    )?;
    writeln!(out, "file size     {} bytes", index.file_len())?;
    for (name, len) in &sections {
        writeln!(out, "  section     {name:<14} {len:>12} bytes")?;
    }
    match verified {
        Some(s) => writeln!(out, "verified      every checksum matches ({s:.3} s)")?,
        None => writeln!(out, "verified      not checked (use --verify)")?,
    }
    Ok(())
}

/// Every line of a queries file (UTF-8 checked, the line named on error).
fn read_query_file(path: &Path) -> anyhow::Result<Vec<String>> {
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

fn counting_bar(len: u64, what: &str, show: bool) -> indicatif::ProgressBar {
    if !show || !std::io::stderr().is_terminal() {
        return indicatif::ProgressBar::hidden();
    }
    let b = indicatif::ProgressBar::new(len);
    b.set_style(
        indicatif::ProgressStyle::with_template(&format!(
            "{what} {{bar:40}} {{pos}}/{{len}} ({{eta}} left)"
        ))
        .expect("valid template"),
    );
    b
}

fn eval(a: EvalArgs) -> anyhow::Result<()> {
    use crate::eval::{load_or_compute_truth, measure_distortion, measure_recall, TruthSource};
    if a.queries.is_none() && !a.distortion {
        return Err(Error::Usage(
            "nothing to measure: give --queries FILE (recall) and/or --distortion".into(),
        )
        .into());
    }
    if a.k == 0 {
        return Err(Error::Usage("-k must be at least 1".into()).into());
    }
    if a.candidates.is_empty() || a.candidates.contains(&0) {
        return Err(Error::Usage("--candidates needs values of at least 1".into()).into());
    }
    let index = open_index(&a.index)?;
    let space: Space = a.space.map_or(index.meta().space, Into::into);
    let mut json = serde_json::json!({
        "index": a.index.display().to_string(),
        "items": index.len(),
        "embedding": index.meta().embedding.name(),
        "dim": index.meta().dim,
        "refs": index.meta().embedding.refs().len(),
        "contractive": index.meta().embedding.contractive(),
    });
    let mut out = std::io::stdout().lock();
    if let Some(qpath) = &a.queries {
        let queries = read_query_file(qpath)?;
        // Every query must suit the metric before any is measured.
        let searcher = Searcher::new(&index);
        for (i, q) in queries.iter().enumerate() {
            searcher
                .prepare(q)
                .map_err(|e| at_query_line(e, &qpath.display().to_string(), i + 1))?;
        }
        if a.no_cache {
            let key = crate::eval::truth::index_key(&index);
            let _ = std::fs::remove_file(crate::eval::truth::cache_path(qpath, &key, a.k));
        }
        let bar = counting_bar(queries.len() as u64, "exact answers", !a.json);
        let (truth, source) =
            load_or_compute_truth(&index, &queries, Some(qpath), a.k, &|n| bar.inc(n as u64));
        bar.finish_and_clear();
        // An external metric reports a failure of its program here (its distances are NaN).
        index.metric()?.check()?;
        let (truth_note, truth_json) = match &source {
            TruthSource::Cached(p) => (
                format!("exact answers read from {}", p.display()),
                serde_json::json!({"cached": true, "path": p.display().to_string()}),
            ),
            TruthSource::Computed { seconds, note } => {
                if let Some(n) = note {
                    eprintln!("waymark: note: {n}");
                }
                let qps = queries.len() as f64 / seconds.max(1e-9);
                (
                    format!(
                        "exact answers by full scan: {seconds:.2} s ({qps:.0} queries/s, {:.1} M pairs/s)",
                        qps * index.len() as f64 / 1e6
                    ),
                    serde_json::json!({"cached": false, "seconds": seconds, "queries_per_second": qps}),
                )
            }
        };
        let mut rows = Vec::new();
        for &c in &a.candidates {
            let mut params = SearchParams {
                space,
                ..SearchParams::from_index(&index, a.k).with_candidates(c)
            };
            if let Some(v) = a.visit {
                params.visit = v;
            }
            params.source = source_of(a.candidates_from, params.source);
            rows.push(measure_recall(&index, &queries, &truth, &params)?);
        }
        if a.json {
            json["queries"] = queries.len().into();
            json["k"] = a.k.into();
            json["ground_truth"] = truth_json;
            json["recall"] = serde_json::to_value(&rows)?;
        } else {
            writeln!(
                out,
                "{}: {} items, {} coordinates by {}; {} queries, k = {}, candidates ranked in {} {}",
                a.index.display(),
                index.len(),
                index.meta().dim,
                index.meta().embedding.name(),
                queries.len(),
                a.k,
                space.name(),
                match (rows.first().map(|r| r.source), a.visit) {
                    (Some(CandidateSource::Cells), None) => format!(
                        "from cells ({} rows compared per candidate)",
                        crate::search::VISIT_PER_CANDIDATE
                    ),
                    (Some(CandidateSource::Cells), Some(0)) => "from cells (every row)".into(),
                    (Some(CandidateSource::Cells), Some(v)) => {
                        format!("from cells ({v} rows compared per query)")
                    }
                    (Some(CandidateSource::Tree), _) => "from the kd-tree".into(),
                    _ => "from a scan of every row".into(),
                }
            )?;
            writeln!(out, "{truth_note}")?;
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
            for r in &rows {
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
        let keys = index.keys();
        let items: Vec<&[u8]> = (0..index.len()).map(|i| keys.get(i)).collect();
        let metric = index.metric()?;
        let r = measure_distortion(
            metric,
            &items,
            &index.meta().embedding,
            a.pairs,
            index.meta().seed,
        );
        if a.json {
            json["distortion"] = serde_json::to_value(&r)?;
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

fn sweep(a: SweepArgs) -> anyhow::Result<()> {
    use crate::eval::sweep::{run_sweep, write_outputs, Progress, SweepOptions};
    let normalize = Normalize {
        fold_case: a.fold_case,
        trim: a.trim,
    };
    let opts = SweepOptions {
        methods: a.embeddings.iter().map(|&m| m.into()).collect(),
        dims: a.dims.clone(),
        spaces: a.spaces.iter().map(|&s| s.into()).collect(),
        candidates: a.candidates.clone(),
        k: a.k,
        seed: a.seed,
        sample: a.landmark_sample,
        pool: a.pool,
        normalize,
        metric: MetricSpec::Levenshtein,
        graph: None,
    };
    if let Some(&d) = opts
        .dims
        .iter()
        .find(|&&d| d == 0 || d > crate::embed::MAX_DIM)
    {
        return Err(Error::Usage(format!(
            "--dims: every dimension must be between 1 and {}, not {d}",
            crate::embed::MAX_DIM
        ))
        .into());
    }
    if a.pool == 0 {
        return Err(Error::Usage("--pool must be at least 1".into()).into());
    }
    let format = input_format(a.input_format);
    let Input {
        corpus,
        spec,
        graph,
    } = load_input(
        &a.input,
        &IngestOptions {
            format,
            field: a.field.clone(),
            id_field: a.id_field.clone(),
            normalize,
        },
        &a.metric,
    )?;
    let opts = SweepOptions {
        metric: spec,
        graph,
        ..opts
    };
    let queries = read_query_file(&a.queries)?;
    let configs = opts.configurations() as u64;
    let bar = counting_bar(queries.len() as u64 + configs, "sweep", !a.quiet);
    let source = a.input.display().to_string();
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
