//! Recall against dimension: one run over methods × dimensions × spaces × candidate counts.
//!
//! Each method is embedded once at the largest dimension asked for; every smaller dimension
//! is a prefix of it ([`crate::embed::Embedded::prefix`]: the first `d` farthest-first
//! landmarks, the first `d` reference sets, the first `d` FastMap axes are each a valid
//! `d`-dimensional embedding), so the sweep costs one embedding per method. Each
//! (method, dimension) is written as an index in a temporary folder, opened and queried like
//! any index; the exact answers are computed once (and cached, see [`super::truth`]).
//!
//! ```no_run
//! use waymark::eval::sweep::{run_sweep, write_outputs, SweepOptions};
//! use waymark::ingest::{read_corpus, IngestOptions};
//!
//! let corpus = read_corpus("demo-data/names.txt".as_ref(), &IngestOptions::default())?;
//! let queries: Vec<String> = std::fs::read_to_string("demo-data/lookups.txt")?
//!     .lines().map(String::from).collect();
//! let report = run_sweep(&corpus, "names.txt", &queries, None, &SweepOptions::default(),
//!     "sweep-out".as_ref(), &|_| {})?;
//! write_outputs(&report, "sweep-out".as_ref())?;
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```

use std::path::{Path, PathBuf};
use std::time::Instant;

use serde::Serialize;

use super::measure::measure_recall;
#[cfg(feature = "charts")]
use super::plot::{line_chart, Chart, Series};
use super::truth::{load_or_compute_truth, TruthSource};
use crate::coords::Space;
use crate::embed::{embed_items, EmbedOptions, Method, MAX_DIM};
use crate::error::{Error, Param, Result};
use crate::index::file::refuse_input_as_output;
use crate::index::{build_index_from, BuildOptions, Index};
use crate::ingest::{Corpus, Normalize};
use crate::metric::{Graph, MetricSpec};
use crate::search::SearchParams;

/// What to sweep over.
#[derive(Clone, Debug)]
pub struct SweepOptions {
    /// Embedding methods.
    pub methods: Vec<Method>,
    /// Dimensions, 1 to 64 each.
    pub dims: Vec<usize>,
    /// Spaces candidates are ranked in.
    pub spaces: Vec<Space>,
    /// Candidate counts.
    pub candidates: Vec<usize>,
    /// Neighbours per query.
    pub k: usize,
    /// Seed of the embeddings.
    pub seed: u64,
    /// Sample size for landmarks and FastMap pivots.
    pub sample: usize,
    /// Reference-set pool size.
    pub pool: usize,
    /// The normalisation the corpus keys were made with.
    pub normalize: Normalize,
    /// The metric.
    pub metric: MetricSpec,
    /// The graph of a graph metric.
    pub graph: Option<Graph>,
    /// The files the sweep reads (input, queries, a cost file): no output may be written
    /// over one of them (compared by device and inode, so links are caught too).
    pub inputs: Vec<PathBuf>,
}

impl Default for SweepOptions {
    fn default() -> Self {
        SweepOptions {
            methods: Method::ALL.to_vec(),
            dims: vec![2, 4, 8, 16, 32],
            spaces: vec![Space::L1, Space::L2, Space::Linf],
            candidates: vec![1000],
            k: 10,
            seed: 0,
            sample: 4096,
            pool: crate::embed::DEFAULT_POOL,
            normalize: Normalize::default(),
            metric: MetricSpec::Levenshtein,
            graph: None,
            inputs: Vec::new(),
        }
    }
}

impl SweepOptions {
    /// Checks the options (a value for each list, dimensions in range, counts of at least 1),
    /// so that a caller can refuse them before reading an input; [`run_sweep`] checks them too.
    pub fn check(&self) -> Result<()> {
        let bad = |name, reason: &str| Err(Error::parameter(name, reason));
        if self.methods.is_empty() || self.dims.is_empty() || self.spaces.is_empty() {
            return bad(Param::SweepAxes, "each need at least one value");
        }
        if self.candidates.is_empty() || self.candidates.contains(&0) {
            return bad(Param::Candidates, "needs values of at least 1");
        }
        if self.k == 0 {
            return bad(Param::K, "must be at least 1");
        }
        if let Some(&d) = self.dims.iter().find(|&&d| d == 0 || d > MAX_DIM) {
            return Err(Error::parameter(
                Param::Dims,
                format!("must each be between 1 and {MAX_DIM}, not {d}"),
            ));
        }
        if self.pool == 0 {
            return bad(Param::Pool, "must be at least 1");
        }
        if self.sample == 0 {
            return bad(Param::Sample, "must be at least 1");
        }
        Ok(())
    }

    /// Number of result rows the sweep makes.
    pub fn configurations(&self) -> usize {
        self.methods.len() * self.dims.len() * self.spaces.len() * self.candidates.len()
    }
}

/// One configuration's result: a row of `sweep.csv`.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SweepRow {
    /// Embedding method.
    pub method: &'static str,
    /// Dimension asked for.
    pub dim: usize,
    /// Dimension made (below `dim` only when the items allow no more).
    pub dim_made: usize,
    /// Space candidates were ranked in.
    pub space: &'static str,
    /// Candidates re-ranked per query.
    pub candidates: usize,
    /// Reference items a query is measured against (its embedding cost).
    pub refs: usize,
    /// Neighbours per query.
    pub k: usize,
    /// Mean threshold recall@k.
    pub recall: f64,
    /// Mean plain recall@k.
    pub plain_recall: f64,
    /// Mean distance computations per query.
    pub distances_per_query: f64,
    /// Distance computations as a share of the items.
    pub share_of_items: f64,
    /// Queries per second (all cores).
    pub qps: f64,
    /// Median latency, ms.
    pub p50_ms: f64,
    /// 95th percentile latency, ms.
    pub p95_ms: f64,
    /// 99th percentile latency, ms.
    pub p99_ms: f64,
}

/// Everything a sweep measured.
#[derive(Clone, Debug, Serialize)]
pub struct SweepReport {
    /// Items in the corpus.
    pub items: usize,
    /// Queries run per configuration.
    pub queries: usize,
    /// Neighbours per query.
    pub k: usize,
    /// Wall time of the exact answers (0 when read from the cache).
    pub truth_seconds: f64,
    /// Whether the exact answers came from the cache.
    pub truth_cached: bool,
    /// Seconds spent embedding, per method, at the largest dimension.
    pub embed_seconds: Vec<(&'static str, f64)>,
    /// Wall time of the whole sweep.
    pub total_seconds: f64,
    /// One row per configuration, in the order method, dimension, space, candidates.
    pub rows: Vec<SweepRow>,
    /// Notes (cache problems), for the user.
    pub notes: Vec<String>,
    /// The files the sweep read ([`SweepOptions::inputs`]), which [`write_outputs`] spares.
    #[serde(skip)]
    pub inputs: Vec<PathBuf>,
}

/// Progress of a sweep, for a progress bar.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Progress {
    /// `n` more exact answers computed.
    Truth(usize),
    /// One more configuration measured.
    Config,
}

/// Runs the sweep; `out_dir` (created if missing) holds the temporary indexes while it runs.
pub fn run_sweep(
    corpus: &Corpus,
    source: &str,
    queries: &[String],
    queries_file: Option<&Path>,
    opts: &SweepOptions,
    out_dir: &Path,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<SweepReport> {
    let started = Instant::now();
    let usage = |m: &str| Err(Error::Usage(m.to_string()));
    opts.check()?;
    if queries.is_empty() {
        return usage("the queries file holds no queries");
    }
    std::fs::create_dir_all(out_dir).map_err(|source| Error::Io {
        path: out_dir.to_path_buf(),
        source,
    })?;
    // Refuse an output that is an input before the long part, not after it.
    for path in output_paths(out_dir, &opts.candidates) {
        refuse_input_as_output(&path, &opts.inputs)?;
    }
    let tmp = tempfile::Builder::new()
        .prefix(".sweep-indexes")
        .tempdir_in(out_dir)
        .map_err(|source| Error::Io {
            path: out_dir.to_path_buf(),
            source,
        })?;
    let keys = corpus.key_bytes();
    let max_dim = *opts.dims.iter().max().expect("non-empty");
    let base = BuildOptions {
        seed: opts.seed,
        sample: opts.sample,
        pool: opts.pool,
        normalize: opts.normalize,
        metric: opts.metric.clone(),
        graph: opts.graph.clone(),
        ..BuildOptions::default()
    };
    let (_, metric) = crate::index::open_metric(&keys, source, &base)?;
    let mut rows = Vec::with_capacity(opts.configurations());
    let mut embed_seconds = Vec::new();
    let mut truth = None;
    let mut notes = Vec::new();
    let (mut truth_seconds, mut truth_cached) = (0.0, false);
    for &method in &opts.methods {
        let t = Instant::now();
        let full = embed_items(
            &metric,
            &keys,
            &EmbedOptions {
                method,
                dim: max_dim,
                sample: opts.sample,
                pool: opts.pool,
                seed: opts.seed,
                rule: Default::default(),
            },
            &|_| {},
        );
        metric.check()?;
        embed_seconds.push((method.name(), t.elapsed().as_secs_f64()));
        if full.dim() == 0 {
            // FastMap finds no axis among fewer than two distinct items; the other methods
            // still measure.
            notes.push(format!(
                "{}: the items allow no coordinate (too few distinct items); left out",
                method.name()
            ));
            continue;
        }
        for &dim in &opts.dims {
            let e = full.prefix(dim);
            let path = tmp.path().join(format!("{}-{dim}.wmk", method.name()));
            build_index_from(
                corpus,
                source,
                &BuildOptions {
                    method,
                    dim: e.dim().max(1),
                    ..base.clone()
                },
                &e,
                &path,
            )?;
            let index = Index::open(&path)?;
            if truth.is_none() {
                let (t, src) = load_or_compute_truth(&index, queries, queries_file, opts.k, &|n| {
                    progress(Progress::Truth(n))
                });
                match src {
                    TruthSource::Cached(_) => truth_cached = true,
                    TruthSource::Computed { seconds, note } => {
                        truth_seconds = seconds;
                        notes.extend(note);
                    }
                }
                truth = Some(t);
            }
            let tr = truth.as_ref().expect("set above");
            for &space in &opts.spaces {
                for &c in &opts.candidates {
                    let params = SearchParams {
                        space,
                        ..SearchParams::embedded(&index, opts.k).with_candidates(c)
                    };
                    let r = measure_recall(&index, queries, tr, &params)?;
                    rows.push(SweepRow {
                        method: method.name(),
                        dim,
                        dim_made: e.dim(),
                        space: space.name(),
                        candidates: c,
                        refs: e.embedding.refs().len(),
                        k: opts.k,
                        recall: r.recall,
                        plain_recall: r.plain_recall,
                        distances_per_query: r.distances_per_query,
                        share_of_items: r.share_of_items,
                        qps: r.qps,
                        p50_ms: r.p50_ms,
                        p95_ms: r.p95_ms,
                        p99_ms: r.p99_ms,
                    });
                    progress(Progress::Config);
                }
            }
            drop(index);
            let _ = std::fs::remove_file(&path);
        }
    }
    if rows.is_empty() {
        return Err(Error::Usage(format!(
            "{source}: no embedding method asked for can make a coordinate of these items \
             (too few distinct items)"
        )));
    }
    Ok(SweepReport {
        items: corpus.items.len(),
        queries: queries.len(),
        k: opts.k,
        truth_seconds,
        truth_cached,
        embed_seconds,
        total_seconds: started.elapsed().as_secs_f64(),
        rows,
        notes,
        inputs: opts.inputs.clone(),
    })
}

/// Every file [`write_outputs`] may write into `dir` for these candidate counts.
fn output_paths(dir: &Path, candidates: &[usize]) -> Vec<PathBuf> {
    let mut paths = vec![dir.join("sweep.csv"), dir.join("sweep.json")];
    if cfg!(feature = "charts") {
        let mut cands = candidates.to_vec();
        cands.sort_unstable();
        cands.dedup();
        paths.extend(
            cands
                .iter()
                .map(|c| dir.join(format!("recall_vs_dim_c{c}.svg"))),
        );
        paths.push(dir.join("recall_vs_qps.svg"));
    }
    paths
}

/// Writes `sweep.csv`, `sweep.json` and, with the `charts` feature, the SVG charts into
/// `dir`; returns the paths written (without the feature: the CSV and JSON files only).
/// Refused, before anything is written, when one of them is an input of the sweep
/// ([`SweepReport::inputs`]).
///
/// Charts: `recall_vs_dim_c<C>.svg` (recall@k against dimension, a line per method and space,
/// one chart per candidate count) and `recall_vs_qps.svg` (recall@k against queries per
/// second, a line per method, space and candidate count through the dimensions).
pub fn write_outputs(report: &SweepReport, dir: &Path) -> Result<Vec<PathBuf>> {
    let io = |path: &Path| {
        let path = path.to_path_buf();
        move |e: std::io::Error| Error::Io {
            path: path.clone(),
            source: e,
        }
    };
    std::fs::create_dir_all(dir).map_err(io(dir))?;
    let cands: Vec<usize> = report.rows.iter().map(|r| r.candidates).collect();
    for path in output_paths(dir, &cands) {
        refuse_input_as_output(&path, &report.inputs)?;
    }
    let mut written = Vec::new();
    let csv_path = dir.join("sweep.csv");
    {
        let mut w = csv::Writer::from_path(&csv_path)
            .map_err(|e| io(&csv_path)(std::io::Error::other(e)))?;
        for r in &report.rows {
            w.serialize(r)
                .map_err(|e| io(&csv_path)(std::io::Error::other(e)))?;
        }
        w.flush().map_err(io(&csv_path))?;
    }
    written.push(csv_path);
    let json_path = dir.join("sweep.json");
    let json = serde_json::to_vec_pretty(report).expect("report serialises");
    std::fs::write(&json_path, json).map_err(io(&json_path))?;
    written.push(json_path);
    #[cfg(feature = "charts")]
    write_charts(report, dir, &mut written)?;
    Ok(written)
}

/// Draws the charts of [`write_outputs`] into `dir`, adding their paths to `written`.
#[cfg(feature = "charts")]
fn write_charts(report: &SweepReport, dir: &Path, written: &mut Vec<PathBuf>) -> Result<()> {
    let mut cands: Vec<usize> = report.rows.iter().map(|r| r.candidates).collect();
    cands.sort_unstable();
    cands.dedup();
    let mut lines: Vec<(&str, &str)> = Vec::new();
    for r in &report.rows {
        if !lines.contains(&(r.method, r.space)) {
            lines.push((r.method, r.space));
        }
    }
    let k = report.k;
    for &c in &cands {
        let series: Vec<Series> = lines
            .iter()
            .map(|&(m, s)| Series {
                label: format!("{m}, {s}"),
                points: report
                    .rows
                    .iter()
                    .filter(|r| r.method == m && r.space == s && r.candidates == c)
                    .map(|r| (r.dim as f64, r.recall))
                    .collect(),
            })
            .collect();
        let title = format!(
            "Threshold recall@{k} vs dimension ({} items, {} queries, C = {c} candidates)",
            report.items, report.queries
        );
        let y = format!("threshold recall@{k} (fraction of true {k}-NN found)");
        let path = dir.join(format!("recall_vs_dim_c{c}.svg"));
        line_chart(
            &path,
            &Chart {
                title: &title,
                x_label: "embedding dimension (coordinates, log scale)",
                y_label: &y,
                x_log: true,
                y_range: None,
                lines: true,
            },
            &series,
        )?;
        written.push(path);
    }
    let many = cands.len() > 1;
    let cands = &cands;
    let series: Vec<Series> = lines
        .iter()
        .flat_map(|&(m, s)| {
            cands.iter().map(move |&c| Series {
                label: if many {
                    format!("{m}, {s}, C = {c}")
                } else {
                    format!("{m}, {s}")
                },
                points: report
                    .rows
                    .iter()
                    .filter(|r| r.method == m && r.space == s && r.candidates == c)
                    .map(|r| (r.qps, r.recall))
                    .collect(),
            })
        })
        .collect();
    let title = format!(
        "Threshold recall@{k} vs speed, through the dimensions ({} items)",
        report.items
    );
    let y = format!("threshold recall@{k} (fraction of true {k}-NN found)");
    let path = dir.join("recall_vs_qps.svg");
    line_chart(
        &path,
        &Chart {
            title: &title,
            x_label: "queries per second (all cores)",
            y_label: &y,
            x_log: false,
            y_range: None,
            lines: false,
        },
        &series,
    )?;
    written.push(path);
    Ok(())
}
