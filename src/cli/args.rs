//! Every clap definition of the command line. The input options of `build`, `sweep` and
//! `check-metric` are declared once ([`InputArgs`], [`MetricArgs`], [`IdArgs`]) and flattened
//! into each; help texts that quote a library default are built from its constant.

use std::path::PathBuf;

use clap::{Parser, Subcommand, ValueEnum};

use crate::embed::Method;
use crate::ingest::{
    load_input, IngestOptions, InputFormat, LoadedInput, MetricOptions, Normalize,
    DEFAULT_TIMEOUT_SECS,
};
use crate::metric::MetricKind;
use crate::search::{CandidateSource, Space};

/// The command line.
#[derive(Debug, Parser)]
#[command(name = "waymark", version, about, long_about = None)]
pub struct Args {
    #[command(subcommand)]
    pub(super) command: Command,
}

#[derive(Debug, Subcommand)]
pub(super) enum Command {
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
    /// Replace an index atomically with a file built elsewhere: copied next to it, checked
    /// whole, then renamed over it (readers of the old index keep answering).
    Install(InstallArgs),
    /// Check on a sample of the input that the distance is a metric (zero on equal items,
    /// symmetric, triangle inequality); exit code 4 when it is not.
    CheckMetric(CheckMetricArgs),
    /// Every pair of near items of an index (within R, or each item's k nearest), or
    /// look-ups of a queries file in bulk (JSON Lines out).
    Pairs(PairsArgs),
    /// Groups of near-duplicates of an index: items within R of each other, grouped.
    Groups(GroupsArgs),
    /// Add the items of a file to an index as a new part over its embedding (same metric and
    /// options as the index's); merges small parts. To a graph index, an edge list: its new
    /// nodes become items, and the index is rewritten on the union graph.
    Add(AddArgs),
    /// Remove items from an index by id (never returned again; space reclaimed by compact).
    Remove(RemoveArgs),
    /// Merge every part of an index into one index file, without its removed items.
    Compact(CompactArgs),
}

#[derive(Debug, clap::Args)]
pub(super) struct AddArgs {
    /// The index to add to (a single index file becomes a list of parts).
    pub index: PathBuf,
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub ids: IdArgs,
}

#[derive(Debug, clap::Args)]
pub(super) struct RemoveArgs {
    /// The index to remove from.
    pub index: PathBuf,
    /// The ids to remove, one per line (every live item with one of them is removed).
    #[arg(long = "ids", value_name = "FILE")]
    pub ids: PathBuf,
}

#[derive(Debug, clap::Args)]
pub(super) struct CompactArgs {
    /// The index to compact (written over atomically).
    pub index: PathBuf,
}

/// `n` with a comma between groups of three digits (`50,000`), as help texts print counts.
pub fn grouped(n: usize) -> String {
    let digits = n.to_string();
    let mut out = String::with_capacity(digits.len() + digits.len() / 3);
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(',');
        }
        out.push(c);
    }
    out
}

/// Help of `--candidates-from` (query and eval), with the library's threshold for cells.
fn candidates_from_help() -> String {
    format!(
        "Where candidates come from [default: cells for indexes of {} items or more, else scan]",
        grouped(crate::search::CELLS_MIN_ITEMS)
    )
}

/// Help of `build --candidates`, with the library's bounds of the stored default.
fn build_candidates_help() -> String {
    format!(
        "Default number of candidates re-ranked per query, stored in the index [default: the \
         number of items / 160, at least {} and at most {}]",
        crate::search::DEFAULT_CANDIDATES,
        crate::search::default_candidates(usize::MAX)
    )
}

#[derive(Debug, Clone, Copy, ValueEnum)]
pub(super) enum SpaceArg {
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

#[derive(Debug, Clone, Copy, ValueEnum)]
pub(super) enum SourceArg {
    /// The rows of the cells nearest the query (the default for large indexes).
    Cells,
    /// A SIMD pass over every item's compact coordinates.
    Scan,
    /// The kd-tree's exact nearest-n search on the coordinates.
    Tree,
    /// Items in increasing char-count bound, measured until the answers settle (plain
    /// Levenshtein only, and its default).
    Counts,
}

impl From<SourceArg> for CandidateSource {
    fn from(s: SourceArg) -> CandidateSource {
        match s {
            SourceArg::Cells => CandidateSource::Cells,
            SourceArg::Scan => CandidateSource::Scan,
            SourceArg::Tree => CandidateSource::Tree,
            SourceArg::Counts => CandidateSource::Counts,
        }
    }
}

/// The metric names of the command line (`weighted` is the library's `weighted-edit`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub(super) enum MetricArg {
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
    /// Edit distance over words: a word inserted or deleted costs 1, one word for another
    /// costs their normalised Levenshtein distance (0 to 1), so moved words and typos cost little.
    TokenEdit,
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

impl From<MetricArg> for MetricKind {
    fn from(m: MetricArg) -> MetricKind {
        match m {
            MetricArg::Levenshtein => MetricKind::Levenshtein,
            MetricArg::Damerau => MetricKind::Damerau,
            MetricArg::Hamming => MetricKind::Hamming,
            MetricArg::Weighted => MetricKind::WeightedEdit,
            MetricArg::Jaccard => MetricKind::Jaccard,
            MetricArg::TokenEdit => MetricKind::TokenEdit,
            MetricArg::L1 => MetricKind::L1,
            MetricArg::L2 => MetricKind::L2,
            MetricArg::Linf => MetricKind::Linf,
            MetricArg::Angular => MetricKind::Angular,
            MetricArg::Graph => MetricKind::Graph,
            MetricArg::External => MetricKind::External,
        }
    }
}

/// How items are compared.
#[derive(Debug, Clone, clap::Args)]
pub(super) struct MetricArgs {
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
    #[arg(long, value_name = "SECS", default_value_t = DEFAULT_TIMEOUT_SECS)]
    timeout: f64,
    /// external: the program and its arguments, after `--` (a build records it in the index;
    /// every process querying the index starts it).
    #[arg(last = true, value_name = "PROGRAM")]
    command: Vec<String>,
}

impl MetricArgs {
    /// The library's form of these options.
    fn options(&self) -> MetricOptions {
        MetricOptions {
            kind: self.metric.into(),
            costs: self.costs.clone(),
            separator: self.separator.clone(),
            qgrams: self.qgrams,
            header: self.header,
            command: self.command.clone(),
            timeout_secs: self.timeout,
        }
    }
}

/// The input file of `build`, `sweep` and `check-metric`, and how to read and compare it.
#[derive(Debug, Clone, clap::Args)]
pub(super) struct InputArgs {
    /// Input file: text (one item per line), .csv/.tsv (with --field) or .jsonl (with --field);
    /// for vector metrics one vector per line (or .npy); for graph an edge list.
    pub input: PathBuf,
    #[command(flatten)]
    metric: MetricArgs,
    /// Input format; by default from the file extension (.csv, .tsv, .jsonl, .fa/.fasta/.fna,
    /// .fq/.fastq, these two also with .gz; else text).
    #[arg(long = "input-format", value_enum, value_name = "FORMAT")]
    input_format: Option<InputFormat>,
    /// The column (header name or 0-based number) or JSON field holding the items.
    #[arg(long, value_name = "NAME")]
    field: Option<String>,
    /// Compare items ignoring case (a build stores this in the index and applies it to every
    /// query).
    #[arg(long = "fold-case")]
    fold_case: bool,
    /// Compare items without leading and trailing white space (stored and applied like
    /// --fold-case).
    #[arg(long)]
    trim: bool,
    /// Compare items with punctuation as white space, runs of white space as one space, and
    /// no white space at the ends (`Keth-Marine, Ltd.` as `Keth Marine Ltd`; stored and
    /// applied like --fold-case).
    #[arg(long = "fold-punct")]
    fold_punct: bool,
    /// Compare items with their white-space-separated words sorted, so that word order does
    /// not count (`Marine Supply Keth` as `Keth Marine Supply`; stored and applied like
    /// --fold-case).
    #[arg(long = "sort-tokens")]
    sort_tokens: bool,
}

/// Where the ids are (`build` and `sweep`).
#[derive(Debug, Clone, clap::Args)]
pub(super) struct IdArgs {
    /// The column or JSON field holding the ids (default: 0-based record number).
    #[arg(long = "id-field", value_name = "NAME")]
    id_field: Option<String>,
}

impl IdArgs {
    /// Whether an id column or field was named (else ids are record numbers).
    pub fn given(&self) -> bool {
        self.id_field.is_some()
    }
}

impl InputArgs {
    /// The normalisation asked for.
    pub fn normalize(&self) -> Normalize {
        Normalize {
            fold_case: self.fold_case,
            trim: self.trim,
            fold_punct: self.fold_punct,
            sort_tokens: self.sort_tokens,
        }
    }

    /// The files read: the input and a cost file; outputs must not be written over them.
    pub fn files(&self) -> Vec<PathBuf> {
        std::iter::once(self.input.clone())
            .chain(self.metric.costs.clone())
            .collect()
    }

    /// The input's path as errors and summaries name it.
    pub fn source(&self) -> String {
        self.input.display().to_string()
    }

    /// Reads the input as its metric wants it (ids from `ids`, else record numbers), and
    /// prints the reader's warnings on stderr.
    pub fn load(&self, ids: Option<&IdArgs>) -> crate::Result<LoadedInput> {
        let ingest = IngestOptions {
            format: self.input_format,
            field: self.field.clone(),
            id_field: ids.and_then(|i| i.id_field.clone()),
            normalize: self.normalize(),
        };
        let input = load_input(&self.input, &ingest, &self.metric.options())?;
        super::print_warnings(&input.warnings);
        Ok(input)
    }
}

#[derive(Debug, clap::Args)]
pub(super) struct BuildArgs {
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub ids: IdArgs,
    /// Where to write the index (replaced atomically).
    #[arg(short = 'o', long = "output", value_name = "INDEX")]
    pub output: PathBuf,
    /// Embedding dimension: the number of coordinates (1 to 64).
    #[arg(long = "dim", value_name = "D", default_value_t = crate::search::DEFAULT_DIM)]
    pub dim: usize,
    /// How items become coordinates: distances to landmarks, to random reference sets, or
    /// FastMap projections (not contractive: no pruning).
    #[arg(long, value_enum, default_value = "landmarks")]
    pub embedding: Method,
    /// Size of the reference-set pool: a query costs one distance per pool item (refsets).
    #[arg(long, value_name = "P", default_value_t = crate::embed::DEFAULT_POOL)]
    pub pool: usize,
    /// Seed of the embedding's random choices; the same seed and input give the same index.
    #[arg(long, value_name = "S", default_value_t = 0)]
    pub seed: u64,
    #[arg(long, value_name = "C", value_parser = clap::value_parser!(u64).range(1..),
          help = build_candidates_help())]
    pub candidates: Option<u64>,
    /// Default space candidates are ranked in, stored in the index.
    #[arg(long, value_enum, default_value = "l2")]
    pub space: SpaceArg,
    /// How many times a query whose answers come from the end of its candidate list may
    /// double its candidates and rows, stored in the index; 0 never.
    #[arg(long, value_name = "N", default_value_t = 0,
          value_parser = clap::value_parser!(u32).range(0..=8))]
    pub widen: u32,
    /// Number of items landmarks and FastMap pivots are chosen from.
    #[arg(long = "landmark-sample", value_name = "N", default_value_t = 4096)]
    pub landmark_sample: usize,
    /// Which sampled items may become landmarks: any (farthest-first takes the sample's
    /// outliers first), or all but the 20% farthest on average from the others.
    #[arg(long = "landmark-rule", value_enum, default_value = "farthest")]
    pub landmark_rule: crate::embed::LandmarkRule,
    /// Do not measure the recall curve that `query --recall` uses (the build samples a few
    /// hundred of its items as queries and stores the curve in the index).
    #[arg(long = "no-calibration")]
    pub no_calibration: bool,
    /// Also store a deletion-variant table of radius R (1 or 2): exact `--within` queries,
    /// pairs and groups up to R found through shared deletion variants, much faster, for
    /// about 8.5 bytes per (variant, item) (levenshtein, damerau, hamming).
    #[arg(long = "small-radius", value_name = "R")]
    pub small_radius: Option<u32>,
    /// Build the index as N parts (1 to 1024) in parallel: the reference items are chosen
    /// once from --landmark-sample items, each part's items embedded against them; the
    /// index is a list file with its parts in INDEX.parts/ (no recall curve is measured).
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u64).range(1..=1024))]
    pub shards: Option<u64>,
    /// Print nothing on success.
    #[arg(short, long)]
    pub quiet: bool,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
pub(super) enum OutFormat {
    /// One JSON object per query.
    Json,
    /// One tab-separated line per neighbour: query, rank, id, item, distance.
    Tsv,
}

#[derive(Debug, clap::Args)]
pub(super) struct QueryArgs {
    /// The index file.
    pub index: PathBuf,
    /// Number of neighbours per query [default: 10; with --within: every item within R].
    #[arg(short = 'k', value_name = "K")]
    pub k: Option<usize>,
    /// Exact k nearest neighbours, each answer with its certificate (needs an index whose
    /// embedding gives a lower bound of the true distance).
    #[arg(long, conflicts_with_all = ["candidates", "space", "candidates_from"])]
    pub exact: bool,
    /// Every item at true distance at most R, exactly (with -k: the k nearest of them).
    #[arg(long, value_name = "R", allow_negative_numbers = true, conflicts_with_all = ["candidates", "space", "candidates_from"])]
    pub within: Option<f64>,
    /// Every item at true distance at most F × the length in chars of the longer of the
    /// query and the item, exactly (with -k: the k nearest of them); text metrics only.
    #[arg(long = "within-fraction", value_name = "F", allow_negative_numbers = true,
          conflicts_with_all = ["within", "exact", "candidates", "space", "candidates_from", "visit"])]
    pub within_fraction: Option<f64>,
    /// Candidates re-ranked by the true distance (default: stored in the index).
    #[arg(long, value_name = "C")]
    pub candidates: Option<usize>,
    /// Space candidates are ranked in (default: stored in the index).
    #[arg(long, value_enum)]
    pub space: Option<SpaceArg>,
    #[arg(long = "candidates-from", value_enum, help = candidates_from_help())]
    pub candidates_from: Option<SourceArg>,
    /// With cells: compare the rows of the nearest cells until N rows are compared
    /// [default: 12 per candidate]; 0 compares every row.
    #[arg(long, value_name = "N", conflicts_with_all = ["exact", "within"])]
    pub visit: Option<usize>,
    /// How many times a query whose answers come from the end of its candidate list may
    /// double its candidates and rows (default: stored in the index); 0 never.
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u32).range(0..=8),
          conflicts_with_all = ["exact", "within", "within_fraction"])]
    pub widen: Option<u32>,
    /// Ask for a threshold recall@k (between 0 and 1) instead of a candidate count: the
    /// candidates and rows visited come from the recall curve stored in the index.
    #[arg(long, value_name = "R", allow_negative_numbers = true,
          conflicts_with_all = ["exact", "within", "within_fraction", "candidates", "space", "candidates_from", "visit", "widen"])]
    pub recall: Option<f64>,
    /// Read queries from this file instead of stdin, one per line (FASTA/FASTQ records for
    /// .fa, .fasta, .fna, .fq, .fastq, also with .gz).
    #[arg(long, value_name = "FILE")]
    pub queries: Option<PathBuf>,
    /// How the queries are laid out [default: from the --queries file's extension; stdin:
    /// text]. FASTA/FASTQ input is read whole before the first answer.
    #[arg(long = "query-format", value_enum, value_name = "FORMAT")]
    pub query_format: Option<QueryFormat>,
    /// Output format.
    #[arg(long, value_enum, default_value = "json")]
    pub format: OutFormat,
    /// Report a query that cannot be answered (invalid UTF-8, not a node, another length or
    /// dimension) on its own output line, in place of its answer, and go on [default: stop
    /// with exit code 2].
    #[arg(long = "errors-inline")]
    pub errors_inline: bool,
    /// Add per-query cost figures (distances computed, candidates pruned) to JSON output.
    #[arg(long)]
    pub stats: bool,
    /// Print a one-line summary on stderr when done (queries, q/s, distances per query).
    #[arg(long)]
    pub summary: bool,
    /// Do not print the metric program's command on stderr before running it (an index
    /// built with --metric external names a program that this command runs).
    #[arg(long = "quiet-metric")]
    pub quiet_metric: bool,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
pub(super) enum PairFormat {
    /// One JSON object per pair.
    Json,
    /// One tab-separated line per pair: id, item, id, item, distance (with --queries:
    /// line, query, id, item, distance).
    Tsv,
}

#[derive(Debug, clap::Args)]
pub(super) struct PairsArgs {
    /// The index file.
    pub index: PathBuf,
    /// Each item's K nearest other items (approximate unless --exact).
    #[arg(short = 'k', value_name = "K", conflicts_with_all = ["within", "within_fraction"])]
    pub k: Option<usize>,
    /// Every pair at true distance at most R, exactly.
    #[arg(long, value_name = "R", allow_negative_numbers = true)]
    pub within: Option<f64>,
    /// Every pair at true distance at most F × the length in chars of its longer item,
    /// exactly; text metrics only.
    #[arg(
        long = "within-fraction",
        value_name = "F",
        allow_negative_numbers = true,
        conflicts_with = "within"
    )]
    pub within_fraction: Option<f64>,
    /// With -k: the exact k nearest (needs an index whose embedding gives a lower bound).
    #[arg(long, requires = "k")]
    pub exact: bool,
    /// With -k, approximate: candidates re-ranked by the true distance (default: stored in
    /// the index).
    #[arg(long, value_name = "C", conflicts_with_all = ["exact", "within", "within_fraction"])]
    pub candidates: Option<usize>,
    #[arg(long = "candidates-from", value_enum,
          conflicts_with_all = ["exact", "within", "within_fraction"],
          help = candidates_from_help())]
    pub candidates_from: Option<SourceArg>,
    /// With -k, approximate: after the search, N rounds that measure each item's
    /// neighbours' neighbours and keep the k best (cheap; more recall for fewer candidates).
    #[arg(
        long = "refine-rounds",
        value_name = "N",
        default_value_t = 0,
        conflicts_with_all = ["exact", "within", "within_fraction", "queries"]
    )]
    pub refine_rounds: usize,
    /// Look up the queries of this file (one per line) against the index instead of
    /// pairing the index's items; each pair carries the query's line.
    #[arg(long, value_name = "FILE")]
    pub queries: Option<PathBuf>,
    /// With --queries: report a query that cannot be answered (invalid UTF-8, not a node,
    /// another length or dimension) on its own output line, in place of its pairs, and go on
    /// [default: stop with exit code 2].
    #[arg(long = "errors-inline", requires = "queries")]
    pub errors_inline: bool,
    /// Find near items through the column blocks only: build no deletion-variant table in
    /// memory and leave the index's unused [default: through the index's table when its
    /// radius covers R, else through one built in memory for R of at most 2 when it fits
    /// the memory budget].
    #[arg(long = "no-variant-table", conflicts_with_all = ["k", "queries"])]
    pub no_variant_table: bool,
    /// Output format.
    #[arg(long, value_enum, default_value = "json")]
    pub format: PairFormat,
    /// Print a one-line summary on stderr when done (pairs, time, distances computed).
    #[arg(long)]
    pub summary: bool,
    /// No progress bar.
    #[arg(short, long)]
    pub quiet: bool,
    /// Do not print the metric program's command on stderr before running it.
    #[arg(long = "quiet-metric")]
    pub quiet_metric: bool,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
pub(super) enum GroupingArg {
    /// Connected components of the pairs: chains join items far apart.
    Components,
    /// Every member within R of its group's centre (greedy, most-paired items first).
    Centre,
    /// Every two members within R of each other (greedy, most-paired seeds first).
    Clique,
}

impl From<GroupingArg> for crate::pairs::Grouping {
    fn from(g: GroupingArg) -> crate::pairs::Grouping {
        match g {
            GroupingArg::Components => crate::pairs::Grouping::Components,
            GroupingArg::Centre => crate::pairs::Grouping::Centre,
            GroupingArg::Clique => crate::pairs::Grouping::Clique,
        }
    }
}

/// The layouts of queries.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub(super) enum QueryFormat {
    /// One query per line.
    Text,
    /// FASTA records (plain or gzip): the sequences, with the record names in the answers.
    Fasta,
    /// FASTQ records (plain or gzip): the sequences, with the record names in the answers.
    Fastq,
}

impl QueryFormat {
    /// The sequence layout, if it is one.
    pub fn sequences(self) -> Option<crate::ingest::SequenceFormat> {
        match self {
            QueryFormat::Text => None,
            QueryFormat::Fasta => Some(crate::ingest::SequenceFormat::Fasta),
            QueryFormat::Fastq => Some(crate::ingest::SequenceFormat::Fastq),
        }
    }
}

#[derive(Debug, Clone, Copy, ValueEnum)]
pub(super) enum GroupFormat {
    /// One JSON object per group.
    Json,
    /// One tab-separated line per member: group, size, id, item.
    Tsv,
}

#[derive(Debug, clap::Args)]
pub(super) struct GroupsArgs {
    /// The index file.
    pub index: PathBuf,
    /// Items at true distance at most R are near-duplicates.
    #[arg(long, value_name = "R", allow_negative_numbers = true)]
    pub within: Option<f64>,
    /// Items at true distance at most F × the length in chars of the longer are
    /// near-duplicates; text metrics only.
    #[arg(
        long = "within-fraction",
        value_name = "F",
        allow_negative_numbers = true,
        conflicts_with = "within"
    )]
    pub within_fraction: Option<f64>,
    /// How pairs make groups.
    #[arg(long, value_enum, default_value = "centre")]
    pub grouping: GroupingArg,
    /// Also write items in no pair, as groups of one.
    #[arg(long)]
    pub singletons: bool,
    /// Find near items through the column blocks only: build no deletion-variant table in
    /// memory and leave the index's unused [default: through the index's table when its
    /// radius covers R, else through one built in memory for R of at most 2 when it fits
    /// the memory budget].
    #[arg(long = "no-variant-table")]
    pub no_variant_table: bool,
    /// Output format.
    #[arg(long, value_enum, default_value = "json")]
    pub format: GroupFormat,
    /// Print a one-line summary on stderr when done.
    #[arg(long)]
    pub summary: bool,
    /// No progress bar.
    #[arg(short, long)]
    pub quiet: bool,
    /// Do not print the metric program's command on stderr before running it.
    #[arg(long = "quiet-metric")]
    pub quiet_metric: bool,
}

#[derive(Debug, clap::Args)]
pub(super) struct InspectArgs {
    /// The index file.
    pub index: PathBuf,
    /// Read the whole file and check every section's checksum.
    #[arg(long)]
    pub verify: bool,
    /// Print as one JSON object.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, clap::Args)]
pub(super) struct EvalArgs {
    /// The index file.
    pub index: PathBuf,
    /// Queries, one per line: measure recall@k against brute force (answers cached beside it).
    #[arg(long, value_name = "FILE")]
    pub queries: Option<PathBuf>,
    /// Number of neighbours per query.
    #[arg(short = 'k', value_name = "K", default_value_t = 10)]
    pub k: usize,
    /// Candidate counts to measure on --queries, comma-separated.
    #[arg(
        long,
        value_name = "C,...",
        value_delimiter = ',',
        default_value = "250,500,1000,2000",
        requires = "queries"
    )]
    pub candidates: Vec<usize>,
    /// Space candidates are ranked in (default: stored in the index).
    #[arg(long, value_enum, requires = "queries")]
    pub space: Option<SpaceArg>,
    #[arg(long = "candidates-from", value_enum, requires = "queries",
          help = candidates_from_help())]
    pub candidates_from: Option<SourceArg>,
    /// With cells: rows compared per query [default: 12 per candidate]; 0 compares every
    /// row.
    #[arg(long, value_name = "N", requires = "queries")]
    pub visit: Option<usize>,
    /// How many times a query whose answers come from the end of its candidate list may
    /// double its candidates and rows (default: stored in the index); 0 never.
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u32).range(0..=8),
          requires = "queries")]
    pub widen: Option<u32>,
    /// Asked recalls to measure instead of candidate counts, comma-separated (each between
    /// 0 and 1): each row shows the setting the index's recall curve chose and the recall
    /// the queries got.
    #[arg(long, value_name = "R,...", value_delimiter = ',', allow_negative_numbers = true,
          requires = "queries",
          conflicts_with_all = ["candidates", "space", "candidates_from", "visit", "widen"])]
    pub recall: Vec<f64>,
    /// Measure the index's recall curve on these queries (needs --queries) and store it in
    /// the index, replacing the one there: a new file is written beside it and renamed over
    /// it, as a build does.
    #[arg(long, requires = "queries")]
    pub calibrate: bool,
    /// Report the distortion of the embedding on a sample of item pairs.
    #[arg(long)]
    pub distortion: bool,
    /// Pairs measured for --distortion (all pairs when the index has no more).
    #[arg(long, value_name = "N", default_value_t = 100_000)]
    pub pairs: usize,
    /// Recompute the exact answers even if a valid cache exists (and replace it).
    #[arg(long = "no-cache")]
    pub no_cache: bool,
    /// Print one JSON object instead of tables.
    #[arg(long)]
    pub json: bool,
    /// Do not print the metric program's command on stderr before running it (an index
    /// built with --metric external names a program that this command runs).
    #[arg(long = "quiet-metric")]
    pub quiet_metric: bool,
}

#[derive(Debug, clap::Args)]
pub(super) struct SweepArgs {
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub ids: IdArgs,
    /// Queries, one per line (exact answers cached beside it).
    #[arg(long, value_name = "FILE")]
    pub queries: PathBuf,
    /// Folder for sweep.csv, sweep.json and the SVG charts (created if missing).
    #[arg(long = "out", value_name = "DIR")]
    pub out: PathBuf,
    /// Number of neighbours per query.
    #[arg(short = 'k', value_name = "K", default_value_t = 10)]
    pub k: usize,
    /// Dimensions, comma-separated (1 to 64).
    #[arg(
        long,
        value_name = "D,...",
        value_delimiter = ',',
        default_value = "2,4,8,16,32"
    )]
    pub dims: Vec<usize>,
    /// Embedding methods, comma-separated.
    #[arg(
        long,
        value_enum,
        value_name = "METHOD,...",
        value_delimiter = ',',
        default_value = "landmarks,refsets,fastmap"
    )]
    pub embeddings: Vec<Method>,
    /// Spaces candidates are ranked in, comma-separated.
    #[arg(
        long,
        value_enum,
        value_name = "SPACE,...",
        value_delimiter = ',',
        default_value = "l1,l2,linf"
    )]
    pub spaces: Vec<SpaceArg>,
    /// Candidate counts, comma-separated.
    #[arg(
        long,
        value_name = "C,...",
        value_delimiter = ',',
        default_value = "1000"
    )]
    pub candidates: Vec<usize>,
    /// Seed of the embeddings.
    #[arg(long, value_name = "S", default_value_t = 0)]
    pub seed: u64,
    /// Size of the reference-set pool.
    #[arg(long, value_name = "P", default_value_t = crate::embed::DEFAULT_POOL)]
    pub pool: usize,
    /// Number of items landmarks and FastMap pivots are chosen from.
    #[arg(long = "landmark-sample", value_name = "N", default_value_t = 4096)]
    pub landmark_sample: usize,
    /// Print nothing but errors.
    #[arg(short, long)]
    pub quiet: bool,
}

#[derive(Debug, clap::Args)]
pub(super) struct InstallArgs {
    /// The new index file (built elsewhere; left as it is).
    pub new: PathBuf,
    /// The index to replace (or to create).
    pub index: PathBuf,
    /// Print nothing on success.
    #[arg(short, long)]
    pub quiet: bool,
}

#[derive(Debug, clap::Args)]
pub(super) struct CheckMetricArgs {
    #[command(flatten)]
    pub input: InputArgs,
    /// Items sampled: all their ordered pairs and triples are checked.
    #[arg(long, value_name = "M", default_value_t = 200)]
    pub sample: usize,
    /// Seed of the sample.
    #[arg(long, value_name = "S", default_value_t = 0)]
    pub seed: u64,
    /// Print one JSON object.
    #[arg(long)]
    pub json: bool,
}

/// Refuses `--visit` with `--candidates-from scan`, `tree` or `counts`: only cells have rows to visit,
/// so those sources would ignore it.
pub(super) fn check_visit(
    visit: Option<usize>,
    from: Option<SourceArg>,
) -> Result<(), crate::error::Error> {
    let source = match (visit, from) {
        (Some(_), Some(SourceArg::Scan)) => "scan",
        (Some(_), Some(SourceArg::Tree)) => "tree",
        (Some(_), Some(SourceArg::Counts)) => "counts",
        _ => return Ok(()),
    };
    Err(crate::error::Error::Usage(format!(
        "--visit sets how many rows of the nearest cells are compared; --candidates-from \
         {source} compares no cells and would ignore it: leave out --visit, or use \
         --candidates-from cells"
    )))
}

/// The flag that sets a library parameter, for error messages.
pub(super) fn flag(p: crate::error::Param) -> &'static str {
    use crate::error::Param;
    match p {
        Param::K => "-k",
        Param::Candidates => "--candidates",
        Param::Radius => "--within",
        Param::Fraction => "--within-fraction",
        Param::Dim => "--dim",
        Param::Pool => "--pool",
        Param::Dims => "--dims",
        Param::SweepAxes => "--embeddings, --dims and --spaces",
        Param::Sample => "--landmark-sample",
        Param::Recall => "--recall",
        Param::SmallRadius => "--small-radius",
        Param::Source => "--candidates-from",
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::CommandFactory;

    #[test]
    fn the_definitions_are_consistent() {
        Args::command().debug_assert();
    }

    #[test]
    fn counts_are_grouped_by_thousands() {
        assert_eq!(grouped(0), "0");
        assert_eq!(grouped(999), "999");
        assert_eq!(grouped(1000), "1,000");
        assert_eq!(grouped(50_000), "50,000");
        assert_eq!(grouped(1_234_567), "1,234,567");
    }
}
