//! The Python package's extension module, `waymark._waymark`: a thin layer over the
//! waymark library. Everything it does is a library call; this file only converts Python
//! values (lists, numpy arrays, callables) to the library's types and back, releases the
//! GIL around the work, and raises the library's errors as Python exceptions.
//!
//! `python/waymark/__init__.py` re-exports it and `python/waymark/__init__.pyi` documents
//! its types.

use std::cell::RefCell;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

use numpy::ndarray::Array2;
use numpy::{PyArray1, PyArray2, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::create_exception;
use pyo3::exceptions::PyException;
use pyo3::prelude::*;
use pyo3::sync::PyOnceLock;
use pyo3::types::{PyDict, PyList, PyString, PyType};
use self_cell::self_cell;

use waymark::embed::{LandmarkRule, Method};
use waymark::error::Param;
use waymark::eval::{load_or_compute_truth, measure_recall, CalibrateOptions, TruthSource};
use waymark::index::parts::{parts_dir, Parts};
use waymark::index::{build_index_with, build_index_with_metric, BuildOptions, IdRef, Index};
use waymark::ingest::{
    corpus_from_items, load_input, text_metric_spec, Corpus, Ids, IngestOptions, InputFormat,
    MetricOptions, Normalize,
};
use waymark::metric::{CustomMetric, Metric, MetricError, MetricKind, MetricSpec, Norm};
use waymark::pairs::{group, join_across, lookup_within, Grouping, Pair, Radius, SelfJoin};
use waymark::search::parts::PartsSearcher;
use waymark::search::{CandidateSource, Found, Request, Scratch, SearchParams, Searcher, Space};
use waymark::Error;

create_exception!(
    waymark,
    WaymarkError,
    PyException,
    "Base class of every error waymark raises."
);
create_exception!(
    waymark,
    BadInputError,
    WaymarkError,
    "Bad input or a bad argument: items, ids, a query the metric cannot take, an option out \
     of range, a file that cannot be read or written."
);
create_exception!(
    waymark,
    CorruptIndexError,
    WaymarkError,
    "The index file was refused: not an index, another format version, corrupt or \
     truncated, or built with a metric that was not supplied."
);
create_exception!(
    waymark,
    MetricFailedError,
    WaymarkError,
    "The metric failed: a Python distance that raised or returned something that is not a \
     distance, or an external metric program that exited, hung or broke its protocol."
);

/// The library's error as a Python exception of its class, with the library's message.
fn py_err(e: Error) -> PyErr {
    let message = e.to_string();
    match e {
        Error::CorruptIndex { .. } | Error::IndexRefused { .. } => {
            CorruptIndexError::new_err(message)
        }
        // A distance of the user's own that failed; a side file or the metric's options
        // that are wrong are bad input, as on the command line (exit code 2).
        Error::Metric(MetricError::Custom { .. } | MetricError::Program { .. }) => {
            MetricFailedError::new_err(message)
        }
        _ => BadInputError::new_err(message),
    }
}

fn bad(message: impl Into<String>) -> PyErr {
    BadInputError::new_err(message.into())
}

// ---------------------------------------------------------------------------------------
// Integer arguments.

/// `BadArgumentError`: an integer argument out of range. It is a [`BadInputError`] (so
/// `except waymark.WaymarkError` catches it) and a `ValueError` (as Python's own functions
/// raise for a value of the right type out of range). Python classes cannot take two
/// bases through `create_exception!`, so it is made once with `type(...)`.
static BAD_ARGUMENT: PyOnceLock<Py<PyType>> = PyOnceLock::new();

fn bad_argument_type(py: Python<'_>) -> PyResult<&Bound<'_, PyType>> {
    BAD_ARGUMENT
        .get_or_try_init(py, || -> PyResult<Py<PyType>> {
            let attrs = PyDict::new(py);
            attrs.set_item("__module__", "waymark")?;
            attrs.set_item(
                "__doc__",
                "An integer argument out of range (negative, zero where at least 1 is \
                 needed, or too large): both a BadInputError and a ValueError.",
            )?;
            let bases = (
                py.get_type::<BadInputError>(),
                py.get_type::<pyo3::exceptions::PyValueError>(),
            );
            let made = py
                .get_type::<PyType>()
                .call1(("BadArgumentError", bases, attrs))?;
            Ok(made.cast_into::<PyType>()?.unbind())
        })
        .map(|t| t.bind(py))
}

/// A `BadArgumentError` with `message`.
fn bad_argument(py: Python<'_>, message: String) -> PyErr {
    match bad_argument_type(py) {
        Ok(t) => PyErr::from_type(t.clone(), message),
        Err(e) => e,
    }
}

/// The integer argument `name` of the Python API, `obj`, as a `T` of at least `least`
/// (0 or 1) and at most `max`; otherwise a `BadArgumentError` that names the argument and
/// the value given ("k must be a positive integer, got -1"). Not an integer at all: the
/// `TypeError` of PyO3's conversion, which names the argument.
fn whole<T: TryFrom<i128>>(
    obj: &Bound<'_, PyAny>,
    name: &str,
    least: i128,
    max: i128,
) -> PyResult<T> {
    let py = obj.py();
    let kind = if least >= 1 {
        "a positive integer"
    } else {
        "an integer of at least 0"
    };
    let value = match obj.extract::<i128>() {
        Ok(v) => v,
        // Beyond i128: absurdly large, or absurdly negative.
        Err(e) if e.is_instance_of::<pyo3::exceptions::PyOverflowError>(py) => {
            let negative = obj.lt(0i32).unwrap_or(false);
            let got = obj
                .repr()
                .map_or_else(|_| "?".to_string(), |r| r.to_string());
            return Err(bad_argument(
                py,
                if negative {
                    format!("{name} must be {kind}, got {got}")
                } else {
                    format!("{name} must be at most {max}, got {got}")
                },
            ));
        }
        Err(e) => return Err(e),
    };
    // Zero where at least 1 is needed is left to the library, whose message is the
    // command line's ("k must be at least 1"); `least` only words the refusal of a
    // negative value.
    if value < 0 {
        return Err(bad_argument(
            py,
            format!("{name} must be {kind}, got {value}"),
        ));
    }
    if value > max {
        return Err(bad_argument(
            py,
            format!("{name} must be at most {max}, got {value}"),
        ));
    }
    T::try_from(value)
        .map_err(|_| bad_argument(py, format!("{name} must be at most {max}, got {value}")))
}

/// Converters of the integer arguments, one per name and type, for
/// `#[pyo3(from_py_with = ...)]` (which takes a function of the argument alone); the
/// `Option` ones take `None` as not given.
macro_rules! int_arguments {
    ($($f:ident, $opt:ident: $t:ty = $name:literal, at least $least:literal;)*) => {$(
        fn $f(obj: &Bound<'_, PyAny>) -> PyResult<$t> {
            whole(obj, $name, $least, <$t>::MAX as i128)
        }
        #[allow(dead_code)]
        fn $opt(obj: &Bound<'_, PyAny>) -> PyResult<Option<$t>> {
            if obj.is_none() {
                return Ok(None);
            }
            $f(obj).map(Some)
        }
    )*};
}

/// `candidates` of `eval`: a list of counts, each checked as [`whole`] checks one.
fn opt_candidate_list(obj: &Bound<'_, PyAny>) -> PyResult<Option<Vec<usize>>> {
    if obj.is_none() {
        return Ok(None);
    }
    let list: Vec<Bound<'_, PyAny>> = obj.extract()?;
    list.iter()
        .map(arg_candidates)
        .collect::<PyResult<_>>()
        .map(Some)
}

/// An item number for `Index.id` and `Index.item`: beyond i64 it is not in the index
/// either (an `IndexError`, as for any number out of range).
fn item_no(obj: &Bound<'_, PyAny>) -> PyResult<i64> {
    match obj.extract::<i64>() {
        Err(e) if e.is_instance_of::<pyo3::exceptions::PyOverflowError>(obj.py()) => {
            let got = obj
                .repr()
                .map_or_else(|_| "?".to_string(), |r| r.to_string());
            Err(pyo3::exceptions::PyIndexError::new_err(format!(
                "item number {got} is not in the index"
            )))
        }
        other => other,
    }
}

int_arguments! {
    arg_k, opt_k: usize = "k", at least 1;
    arg_candidates, opt_candidates: usize = "candidates", at least 1;
    arg_visit, opt_visit: usize = "visit", at least 0;
    arg_widen, opt_widen: u32 = "widen", at least 0;
    arg_dim, opt_dim: usize = "dim", at least 1;
    arg_pool, opt_pool: usize = "pool", at least 0;
    arg_seed, opt_seed: u64 = "seed", at least 0;
    arg_landmark_sample, opt_landmark_sample: usize = "landmark_sample", at least 1;
    arg_qgrams, opt_qgrams: usize = "qgrams", at least 1;
    arg_small_radius, opt_small_radius: u32 = "small_radius", at least 0;
    arg_pairs, opt_pairs: usize = "pairs", at least 0;
    arg_shard, opt_shard: usize = "shard", at least 0;
    arg_first_number, opt_first_number: i64 = "first_number", at least 0;
}

// ---------------------------------------------------------------------------------------
// A distance written in Python.

/// A metric whose distance is a Python callable `f(query, items) -> distances`: one call
/// per batch of items (all the candidates of a query, the landmarks of a query, a chunk
/// of items at build time), with the GIL taken for the call. Failures (an exception, a
/// result that is not one finite distance ≥ 0 per item) are kept and reported by
/// [`Metric::check`], which build, search and eval call after measuring; the failed
/// distances are NaN meanwhile. A failure is kept for the life of the metric (as an
/// external program's is): open the index again after fixing the function.
struct PyDistance {
    name: String,
    integral: bool,
    func: Arc<Py<PyAny>>,
    failed: Arc<Mutex<Option<String>>>,
}

struct PyDistanceQuery {
    func: Arc<Py<PyAny>>,
    query: String,
    failed: Arc<Mutex<Option<String>>>,
}

impl Metric for PyDistance {
    type Prepared = PyDistanceQuery;

    fn name(&self) -> &str {
        &self.name
    }

    fn is_integral(&self) -> bool {
        self.integral
    }

    fn prepare(&self, query: &[u8]) -> PyDistanceQuery {
        PyDistanceQuery {
            func: self.func.clone(),
            query: String::from_utf8_lossy(query).into_owned(),
            failed: self.failed.clone(),
        }
    }

    fn check(&self) -> Result<(), MetricError> {
        match &*self.failed.lock().unwrap_or_else(|e| e.into_inner()) {
            Some(message) => Err(MetricError::Custom {
                name: self.name.clone(),
                message: message.clone(),
            }),
            None => Ok(()),
        }
    }
}

impl PyDistanceQuery {
    /// One call of the function on `items`; the distances, or what is wrong with them.
    fn call(&self, items: &[&[u8]]) -> Result<Vec<f64>, String> {
        Python::attach(|py| {
            let batch = PyList::new(
                py,
                items
                    .iter()
                    .map(|b| PyString::new(py, &String::from_utf8_lossy(b))),
            )
            .map_err(|e| e.to_string())?;
            let out = self
                .func
                .call1(py, (self.query.as_str(), batch))
                .map_err(|e| format!("the distance function raised {e}"))?;
            let out = out.bind(py);
            let got: Vec<f64> = if let Ok(a) = out.extract::<PyReadonlyArray1<f64>>() {
                a.as_array().to_vec()
            } else if let Ok(a) = out.extract::<PyReadonlyArray1<f32>>() {
                a.as_array().iter().map(|&x| f64::from(x)).collect()
            } else {
                out.extract::<Vec<f64>>().map_err(|_| {
                    format!(
                        "the distance function returned {}, not a sequence of numbers",
                        out.get_type()
                            .name()
                            .map_or_else(|_| "?".to_string(), |n| n.to_string())
                    )
                })?
            };
            if got.len() != items.len() {
                return Err(format!(
                    "the distance function returned {} distances for {} items",
                    got.len(),
                    items.len()
                ));
            }
            if let Some((i, d)) = got
                .iter()
                .enumerate()
                .find(|(_, d)| !(d.is_finite() && **d >= 0.0))
            {
                return Err(format!(
                    "the distance function returned {d} for {:?} and {:?}: a distance is a \
                     finite number of at least 0",
                    self.query,
                    String::from_utf8_lossy(items[i])
                ));
            }
            Ok(got)
        })
    }
}

impl waymark::metric::PreparedQuery for PyDistanceQuery {
    fn distance(&self, item: &[u8]) -> f64 {
        let mut out = [0.0];
        self.distances(&[item], &mut out);
        out[0]
    }

    fn distances(&self, items: &[&[u8]], out: &mut [f64]) {
        if self
            .failed
            .lock()
            .unwrap_or_else(|e| e.into_inner())
            .is_some()
        {
            out.fill(f64::NAN);
            return;
        }
        match self.call(items) {
            Ok(d) => out.copy_from_slice(&d),
            Err(message) => {
                out.fill(f64::NAN);
                let mut failed = self.failed.lock().unwrap_or_else(|e| e.into_inner());
                failed.get_or_insert(message);
            }
        }
    }

    /// Every call crosses into Python: all items at once.
    fn group_size(&self) -> usize {
        usize::MAX
    }
}

/// The custom metric of a Python callable, named `name` (default: its `__name__`).
fn py_metric(
    func: &Bound<'_, PyAny>,
    name: Option<String>,
    integral: bool,
) -> PyResult<CustomMetric> {
    if !func.is_callable() {
        return Err(bad("metric must be a metric name or a callable"));
    }
    let name = match name {
        Some(n) => n,
        None => func
            .getattr("__name__")
            .and_then(|n| n.extract::<String>())
            .map_err(|_| bad("a callable metric without __name__ needs metric_name="))?,
    };
    if name.is_empty() {
        return Err(bad("metric_name must not be empty"));
    }
    Ok(CustomMetric::new(PyDistance {
        name,
        integral,
        func: Arc::new(func.clone().unbind()),
        failed: Arc::new(Mutex::new(None)),
    }))
}

// ---------------------------------------------------------------------------------------
// Names of options, as the command line spells them.

fn metric_kind(name: &str) -> PyResult<MetricKind> {
    Ok(match name {
        "levenshtein" => MetricKind::Levenshtein,
        "damerau" => MetricKind::Damerau,
        "hamming" => MetricKind::Hamming,
        "weighted" => MetricKind::WeightedEdit,
        "jaccard" => MetricKind::Jaccard,
        "token-edit" => MetricKind::TokenEdit,
        "l1" => MetricKind::L1,
        "l2" => MetricKind::L2,
        "linf" => MetricKind::Linf,
        "angular" => MetricKind::Angular,
        "graph" => MetricKind::Graph,
        "external" => MetricKind::External,
        other => {
            return Err(bad(format!(
                "metric `{other}` is not one of levenshtein, damerau, hamming, weighted, \
                 jaccard, token-edit, l1, l2, linf, angular, graph, external (or a callable)"
            )))
        }
    })
}

fn space(name: &str) -> PyResult<Space> {
    Ok(match name {
        "l1" => Space::L1,
        "l2" => Space::L2,
        "linf" => Space::Linf,
        other => return Err(bad(format!("space `{other}` is not one of l1, l2, linf"))),
    })
}

fn method(name: &str) -> PyResult<Method> {
    Ok(match name {
        "landmarks" => Method::Landmarks,
        "refsets" => Method::RefSets,
        "fastmap" => Method::FastMap,
        other => {
            return Err(bad(format!(
                "embedding `{other}` is not one of landmarks, refsets, fastmap"
            )))
        }
    })
}

fn landmark_rule(name: &str) -> PyResult<LandmarkRule> {
    Ok(match name {
        "farthest" => LandmarkRule::Farthest,
        "trimmed" => LandmarkRule::Trimmed,
        other => {
            return Err(bad(format!(
                "landmark_rule `{other}` is not one of farthest, trimmed"
            )))
        }
    })
}

fn source(name: &str) -> PyResult<CandidateSource> {
    // The command line's names (`CandidateSource::name`).
    const SOURCES: [CandidateSource; 4] = [
        CandidateSource::Cells,
        CandidateSource::Scan,
        CandidateSource::Tree,
        CandidateSource::Counts,
    ];
    SOURCES
        .into_iter()
        .find(|s| s.name() == name)
        .ok_or_else(|| {
            let names: Vec<&str> = SOURCES.iter().map(|s| s.name()).collect();
            bad(format!(
                "candidates_from `{name}` is not one of {}",
                names.join(", ")
            ))
        })
}

fn input_format(name: &str) -> PyResult<InputFormat> {
    use waymark::ingest::SequenceFormat;
    Ok(match name {
        "text" => InputFormat::Text,
        "csv" => InputFormat::Csv { delimiter: b',' },
        "tsv" => InputFormat::Csv { delimiter: b'\t' },
        "jsonl" => InputFormat::JsonLines,
        "fasta" => InputFormat::Sequences(SequenceFormat::Fasta),
        "fastq" => InputFormat::Sequences(SequenceFormat::Fastq),
        other => {
            return Err(bad(format!(
                "input_format `{other}` is not one of text, csv, tsv, jsonl, fasta, fastq"
            )))
        }
    })
}

// ---------------------------------------------------------------------------------------
// Building.

/// The options of a build that do not depend on the input (every `waymark build` option).
struct BuildArgs {
    dim: usize,
    embedding: String,
    pool: usize,
    seed: u64,
    candidates: Option<usize>,
    space: String,
    landmark_sample: usize,
    landmark_rule: String,
    small_radius: Option<u32>,
    widen: u32,
    calibrate: bool,
}

impl BuildArgs {
    fn options(&self, normalize: Normalize, inputs: Vec<PathBuf>) -> PyResult<BuildOptions> {
        let o = BuildOptions {
            method: method(&self.embedding)?,
            dim: self.dim,
            seed: self.seed,
            sample: self.landmark_sample,
            pool: self.pool,
            landmark_rule: landmark_rule(&self.landmark_rule)?,
            candidates: self.candidates.unwrap_or(0),
            space: space(&self.space)?,
            normalize,
            inputs,
            small_radius: self.small_radius,
            widen: self.widen,
            ..BuildOptions::default()
        };
        if self.candidates == Some(0) {
            return Err(py_err(Error::parameter(
                Param::Candidates,
                "must be at least 1",
            )));
        }
        o.check().map_err(py_err)?;
        Ok(o)
    }
}

/// Metric options from the keyword arguments (a metric name).
#[allow(clippy::too_many_arguments)]
fn metric_options(
    kind: MetricKind,
    costs: Option<PathBuf>,
    separator: Option<String>,
    qgrams: Option<usize>,
    header: bool,
    command: Option<Vec<String>>,
    timeout: f64,
) -> MetricOptions {
    MetricOptions {
        kind,
        costs,
        separator,
        qgrams,
        header,
        command: command.unwrap_or_default(),
        timeout_secs: timeout,
    }
}

/// Builds `corpus` into `path` with `spec` (or the custom metric), measures the recall
/// curve unless told not to, and opens the result; the GIL is released meanwhile.
#[allow(clippy::too_many_arguments)]
fn build_corpus(
    py: Python<'_>,
    corpus: Corpus,
    source: &str,
    spec: MetricSpec,
    graph: Option<waymark::metric::Graph>,
    custom: Option<CustomMetric>,
    options: BuildOptions,
    calibrate: bool,
    path: &Path,
) -> PyResult<PyIndex> {
    let n = corpus.items.len();
    let text_bytes: usize = corpus.items.iter().map(String::len).sum::<usize>()
        + corpus
            .keys
            .as_ref()
            .map_or(0, |k| k.iter().map(Vec::len).sum());
    let seed = options.seed;
    let dim = options.dim;
    let report = py.detach(|| -> Result<_, Error> {
        let table = match options.small_radius {
            Some(r) => waymark::index::variants::build_estimate(
                corpus
                    .key_bytes()
                    .iter()
                    .map(|k| String::from_utf8_lossy(k).chars().count()),
                r,
            ),
            None => 0,
        };
        waymark::resources::check_build(source, n, text_bytes, dim, table)?;
        let options = BuildOptions {
            metric: spec,
            graph,
            ..options
        };
        let report = match &custom {
            Some(m) => build_index_with_metric(&corpus, source, &options, m, path, &())?,
            None => build_index_with(&corpus, source, &options, path, &())?,
        };
        if calibrate {
            let cal = CalibrateOptions {
                seed,
                ..Default::default()
            };
            match &custom {
                // The curve is measured by searching, with the metric supplied again.
                Some(m) => {
                    let index = Index::open_with_metric(path, m)?;
                    if let Some(c) = waymark::eval::calibrate_from_items(&index, &cal)? {
                        waymark::index::store_calibration(path, index.meta(), Some(c))?;
                    }
                }
                None => {
                    waymark::eval::calibrate_file(path, &cal)?;
                }
            }
        }
        Ok(report)
    });
    let report = report.map_err(py_err)?;
    if let Some(r) = report.axioms.as_ref().filter(|r| !r.is_metric()) {
        let rules: Vec<String> = r
            .counts
            .iter()
            .filter(|(_, c)| *c > 0)
            .map(|(a, c)| format!("{}: {c} violations", a.rule()))
            .collect();
        let message = format!(
            "the {} distance breaks the metric rules on a sample of {} items ({}); exact \
             answers and pruning are not sound",
            report.meta.metric,
            r.sample,
            rules.join("; ")
        );
        let warnings = py.import("warnings")?;
        warnings.call_method1(
            "warn",
            (message, py.get_type::<pyo3::exceptions::PyUserWarning>()),
        )?;
    }
    PyIndex::open(py, path, custom)
}

/// Ids from Python: `None`, a list of ints or a list of strings.
fn ids_from(ids: Option<&Bound<'_, PyAny>>) -> PyResult<Option<Ids>> {
    let Some(ids) = ids else { return Ok(None) };
    if ids.is_none() {
        return Ok(None);
    }
    if let Ok(v) = ids.extract::<Vec<i64>>() {
        return Ok(Some(Ids::Int(v)));
    }
    if let Ok(v) = ids.extract::<Vec<String>>() {
        return Ok(Some(Ids::Text(v)));
    }
    Err(bad(
        "ids must be a list of integers or a list of strings, one per item",
    ))
}

/// Builds an index from items in memory. See `python/waymark/__init__.pyi`.
#[pyfunction]
#[pyo3(signature = (
    items, path, *, ids=None, metric=None, metric_name=None, integral=false, costs=None,
    separator=None, qgrams=None, command=None, timeout=30.0, dim=64, embedding="landmarks",
    pool=32, seed=0, candidates=None, space="l2", landmark_sample=4096,
    landmark_rule="farthest", fold_case=false, trim=false, fold_punct=false,
    sort_tokens=false, small_radius=None, widen=0, calibrate=true
))]
#[allow(clippy::too_many_arguments)]
fn build(
    py: Python<'_>,
    items: &Bound<'_, PyAny>,
    path: PathBuf,
    ids: Option<&Bound<'_, PyAny>>,
    metric: Option<&Bound<'_, PyAny>>,
    metric_name: Option<String>,
    integral: bool,
    costs: Option<PathBuf>,
    separator: Option<String>,
    #[pyo3(from_py_with = opt_qgrams)] qgrams: Option<usize>,
    command: Option<Vec<String>>,
    timeout: f64,
    #[pyo3(from_py_with = arg_dim)] dim: usize,
    embedding: &str,
    #[pyo3(from_py_with = arg_pool)] pool: usize,
    #[pyo3(from_py_with = arg_seed)] seed: u64,
    #[pyo3(from_py_with = opt_candidates)] candidates: Option<usize>,
    space: &str,
    #[pyo3(from_py_with = arg_landmark_sample)] landmark_sample: usize,
    landmark_rule: &str,
    fold_case: bool,
    trim: bool,
    fold_punct: bool,
    sort_tokens: bool,
    #[pyo3(from_py_with = opt_small_radius)] small_radius: Option<u32>,
    #[pyo3(from_py_with = arg_widen)] widen: u32,
    calibrate: bool,
) -> PyResult<PyIndex> {
    let args = BuildArgs {
        dim,
        embedding: embedding.into(),
        pool,
        seed,
        candidates,
        space: space.into(),
        landmark_sample,
        landmark_rule: landmark_rule.into(),
        small_radius,
        widen,
        calibrate,
    };
    let normalize = Normalize {
        fold_case,
        trim,
        fold_punct,
        sort_tokens,
    };
    let ids = ids_from(ids)?;
    let mut inputs = Vec::new();
    if let Some(c) = &costs {
        inputs.push(c.clone());
    }
    // A 2-D array of numbers: vectors.
    if let Ok(array) = items.extract::<PyReadonlyArray2<'_, f32>>() {
        let kind = match metric {
            None => MetricKind::L2,
            Some(m) => match m.extract::<String>() {
                Ok(name) => metric_kind(&name)?,
                Err(_) => {
                    return Err(bad(
                        "a distance written in Python compares strings; give the items as a list of strings",
                    ))
                }
            },
        };
        let norm = match kind {
            MetricKind::L1 => Norm::L1,
            MetricKind::L2 => Norm::L2,
            MetricKind::Linf => Norm::Linf,
            MetricKind::Angular => Norm::Angular,
            other => {
                return Err(bad(format!(
                    "a 2-D array holds vectors: metric must be l1, l2, linf or angular, not {}",
                    other
                )))
            }
        };
        if !normalize.is_identity() {
            return Err(bad(
                "fold_case, trim, fold_punct and sort_tokens are for text items, not vectors",
            ));
        }
        let view = array.as_array();
        let (n, d) = view.dim();
        let vectors = waymark::ingest::vectors::vectors_from_values(n, d, "items", |r, c| {
            f64::from(view[[r, c]])
        })
        .map_err(|e| py_err(e.into()))?;
        let ids = ids.unwrap_or_else(|| Ids::Int((0..n as i64).collect()));
        let corpus =
            Corpus::new(vectors.rows, Some(vectors.items), ids).map_err(|e| py_err(e.into()))?;
        if n == 0 {
            return Err(bad("no items: the array has no rows"));
        }
        let dim_u32 = u32::try_from(d).map_err(|_| bad("the vectors have too many components"))?;
        let options = args.options(normalize, inputs)?;
        return build_corpus(
            py,
            corpus,
            "items",
            MetricSpec::Vector { norm, dim: dim_u32 },
            None,
            None,
            options,
            args.calibrate,
            &path,
        );
    }
    if items.is_instance_of::<PyString>() {
        return Err(bad(
            "items must be a list of strings (or a 2-D float32 array), not one string; \
             build_file reads a file",
        ));
    }
    if let Ok(a) = items.getattr("ndim") {
        if a.extract::<usize>().ok() != Some(1) || items.extract::<Vec<String>>().is_err() {
            return Err(bad(
                "an array of vectors must be 2-D with dtype float32 (numpy.asarray(x, dtype=numpy.float32))",
            ));
        }
    }
    let texts: Vec<String> = items
        .extract()
        .map_err(|_| bad("items must be a list of strings or a 2-D float32 numpy array"))?;
    let (spec, custom) = match metric {
        Some(m) if !m.is_instance_of::<PyString>() => (
            MetricSpec::Levenshtein,
            Some(py_metric(m, metric_name, integral)?),
        ),
        m => {
            let name = match m {
                Some(m) => m.extract::<String>()?,
                None => "levenshtein".to_string(),
            };
            let kind = metric_kind(&name)?;
            let opts = metric_options(kind, costs, separator, qgrams, false, command, timeout);
            (text_metric_spec(&opts).map_err(py_err)?, None)
        }
    };
    let ingest = IngestOptions {
        normalize,
        ..IngestOptions::default()
    };
    let corpus = corpus_from_items(texts, ids, &ingest, "items").map_err(|e| py_err(e.into()))?;
    let options = args.options(normalize, inputs)?;
    build_corpus(
        py,
        corpus,
        "items",
        spec,
        None,
        custom,
        options,
        args.calibrate,
        &path,
    )
}

/// Builds an index from a file, read exactly as `waymark build` reads it.
#[pyfunction]
#[pyo3(signature = (
    input, path, *, metric="levenshtein", field=None, id_field=None, input_format=None,
    header=false, costs=None, separator=None, qgrams=None, command=None, timeout=30.0, dim=64,
    embedding="landmarks", pool=32, seed=0, candidates=None, space="l2",
    landmark_sample=4096, landmark_rule="farthest", fold_case=false, trim=false,
    fold_punct=false, sort_tokens=false, small_radius=None, widen=0, calibrate=true
))]
#[allow(clippy::too_many_arguments)]
fn build_file(
    py: Python<'_>,
    input: PathBuf,
    path: PathBuf,
    metric: &str,
    field: Option<String>,
    id_field: Option<String>,
    input_format: Option<&str>,
    header: bool,
    costs: Option<PathBuf>,
    separator: Option<String>,
    #[pyo3(from_py_with = opt_qgrams)] qgrams: Option<usize>,
    command: Option<Vec<String>>,
    timeout: f64,
    #[pyo3(from_py_with = arg_dim)] dim: usize,
    embedding: &str,
    #[pyo3(from_py_with = arg_pool)] pool: usize,
    #[pyo3(from_py_with = arg_seed)] seed: u64,
    #[pyo3(from_py_with = opt_candidates)] candidates: Option<usize>,
    space: &str,
    #[pyo3(from_py_with = arg_landmark_sample)] landmark_sample: usize,
    landmark_rule: &str,
    fold_case: bool,
    trim: bool,
    fold_punct: bool,
    sort_tokens: bool,
    #[pyo3(from_py_with = opt_small_radius)] small_radius: Option<u32>,
    #[pyo3(from_py_with = arg_widen)] widen: u32,
    calibrate: bool,
) -> PyResult<PyIndex> {
    let args = BuildArgs {
        dim,
        embedding: embedding.into(),
        pool,
        seed,
        candidates,
        space: space.into(),
        landmark_sample,
        landmark_rule: landmark_rule.into(),
        small_radius,
        widen,
        calibrate,
    };
    let normalize = Normalize {
        fold_case,
        trim,
        fold_punct,
        sort_tokens,
    };
    let ingest = IngestOptions {
        format: input_format.map(self::input_format).transpose()?,
        field,
        id_field,
        normalize,
    };
    let kind = metric_kind(metric)?;
    let mut inputs = vec![input.clone()];
    if let Some(c) = &costs {
        inputs.push(c.clone());
    }
    let opts = metric_options(kind, costs, separator, qgrams, header, command, timeout);
    let options = args.options(normalize, inputs)?;
    let source = input.display().to_string();
    let loaded = py
        .detach(|| -> Result<_, Error> {
            waymark::index::file::refuse_input_as_output(&path, &options.inputs)?;
            if let Ok(m) = std::fs::metadata(&input) {
                waymark::resources::check_input(&source, m.len())?;
            }
            load_input(&input, &ingest, &opts)
        })
        .map_err(py_err)?;
    build_corpus(
        py,
        loaded.corpus,
        &source,
        loaded.spec,
        loaded.graph,
        None,
        options,
        args.calibrate,
        &path,
    )
}

// ---------------------------------------------------------------------------------------
// An open index.

self_cell!(
    /// An open index (one file, or the parts a list file names) and the searchers over its
    /// parts, which keep what exact queries make on first use (the column blocks,
    /// signatures) for every later query.
    struct Held {
        owner: Parts,
        #[covariant]
        dependent: PartsSearcher,
    }
);

/// An open, memory-mapped index. Safe to share between threads: queries take no lock.
#[pyclass(frozen, name = "Index", module = "waymark")]
struct PyIndex {
    held: Held,
    /// Whether the metric is a Python callable (its calls take the GIL one at a time).
    python_metric: bool,
}

thread_local! {
    /// Each thread's buffers for single queries.
    static SCRATCH: RefCell<Scratch> = RefCell::new(Scratch::default());
}

/// A query as the library takes it: text, or a vector written as numbers separated by
/// commas (each the shortest decimal that reads back as the same number).
fn query_text(index: &Index, q: &Bound<'_, PyAny>) -> PyResult<String> {
    if let Ok(s) = q.cast::<PyString>() {
        return Ok(s.to_str()?.to_owned());
    }
    if matches!(index.meta().metric_spec, MetricSpec::Vector { .. }) {
        let v: Vec<f64> = if let Ok(a) = q.extract::<PyReadonlyArray1<f32>>() {
            a.as_array().iter().map(|&x| f64::from(x)).collect()
        } else if let Ok(a) = q.extract::<PyReadonlyArray1<f64>>() {
            a.as_array().to_vec()
        } else {
            q.extract::<Vec<f64>>()
                .map_err(|_| bad("a vector query is a sequence of numbers or a 1-D array"))?
        };
        return Ok(vector_text(v.iter().copied()));
    }
    Err(bad(
        "a query is a string (or, for a vector index, a sequence of numbers)",
    ))
}

fn vector_text(v: impl Iterator<Item = f64>) -> String {
    let mut s = String::new();
    for (i, x) in v.enumerate() {
        if i > 0 {
            s.push(',');
        }
        s.push_str(&x.to_string());
    }
    s
}

/// The id of item `i` (numbered across the parts) as a Python value.
fn id_value(py: Python<'_>, parts: &Parts, i: usize) -> PyResult<Py<PyAny>> {
    Ok(match parts.id(i as u32) {
        IdRef::Int(v) => v.into_pyobject(py)?.into_any().unbind(),
        IdRef::Text(b) => PyString::new(py, &String::from_utf8_lossy(b))
            .into_any()
            .unbind(),
    })
}

/// Rows of each part sampled for the drift figures of `inspect` on a list file (as
/// `waymark inspect`).
const DRIFT_SAMPLE: usize = 100_000;

/// The answers of many queries: item numbers and distances, n_queries × k each.
type ManyAnswers<'py> = (Bound<'py, PyArray2<i64>>, Bound<'py, PyArray2<f64>>);

/// Pairs of items: numbers a, numbers b and distances, one element per pair.
type PairArrays<'py> = (
    Bound<'py, PyArray1<i64>>,
    Bound<'py, PyArray1<i64>>,
    Bound<'py, PyArray1<f64>>,
);

/// What to ask, from the keyword arguments of `query` and `query_many`.
#[allow(clippy::too_many_arguments)]
/// `req` with the candidates an asked `recall` needs for these queries: the curve weighed
/// by their lengths (`SearchParams::recall_choice_for`); other requests as they are.
fn for_these(
    index: &Index,
    req: Request,
    recall: Option<f64>,
    texts: &[String],
) -> PyResult<Request> {
    match (req, recall) {
        (Request::Approximate(p), Some(r)) if !texts.is_empty() => {
            let (q, _) = SearchParams::recall_choice_for(index, p.k, r, texts).map_err(py_err)?;
            Ok(Request::Approximate(q))
        }
        (req, _) => Ok(req),
    }
}

#[allow(clippy::too_many_arguments)]
fn request(
    index: &Index,
    k: Option<usize>,
    exact: bool,
    within: Option<f64>,
    recall: Option<f64>,
    candidates: Option<usize>,
    space_name: Option<&str>,
    source_name: Option<&str>,
    visit: Option<usize>,
    widen: Option<u32>,
    fraction: Option<f64>,
) -> PyResult<Request> {
    let tuning = candidates.is_some()
        || space_name.is_some()
        || source_name.is_some()
        || visit.is_some()
        || widen.is_some();
    if [exact, within.is_some(), fraction.is_some()]
        .iter()
        .filter(|&&x| x)
        .count()
        > 1
    {
        return Err(bad(
            "exact, within and within_fraction do not combine: each is exact on its own",
        ));
    }
    if (exact || within.is_some() || fraction.is_some()) && (tuning || recall.is_some()) {
        return Err(bad(
            "exact and within answers do not take recall, candidates, space, candidates_from, visit or widen",
        ));
    }
    if recall.is_some() && tuning {
        return Err(bad(
            "recall chooses the candidates itself: it does not combine with candidates, space, candidates_from, visit or widen",
        ));
    }
    if let Some(radius) = within {
        return Ok(Request::Within { radius, k });
    }
    if fraction.is_some() {
        // Answered by `answer_fraction`; the request only carries k.
        return Ok(Request::Within { radius: 0.0, k });
    }
    let k = k.unwrap_or(10);
    if exact {
        return Ok(Request::Exact { k });
    }
    let mut p = SearchParams::from_index(index, k);
    if let (Some(_), Some(from @ ("scan" | "tree" | "counts"))) = (visit, source_name) {
        return Err(bad(format!(
            "visit sets how many rows of the nearest cells are compared; candidates_from={from:?} \
             compares no cells and would ignore it: leave out visit, or use candidates_from=\"cells\""
        )));
    }
    if let Some(r) = recall {
        p = SearchParams::for_recall(index, k, r).map_err(py_err)?;
    }
    if let Some(c) = candidates {
        p = p.with_candidates(c);
    }
    if let Some(v) = visit {
        p.visit = v;
    }
    if let Some(w) = widen {
        p.widen = w;
    }
    if let Some(s) = space_name {
        p.space = space(s)?;
    }
    // Candidates, a visit budget and a space are the embedding's: asking for one searches
    // it rather than the char counts.
    if candidates.is_some() || visit.is_some() || space_name.is_some() {
        p = p.on_embedding(index);
    }
    if let Some(s) = source_name {
        p.source = source(s)?;
    }
    Ok(Request::Approximate(p))
}

impl PyIndex {
    fn open(py: Python<'_>, path: &Path, custom: Option<CustomMetric>) -> PyResult<PyIndex> {
        let python_metric = custom.is_some();
        let parts = py
            .detach(|| match &custom {
                Some(m) => Index::open_with_metric(path, m).map(Parts::single),
                None => Parts::open(path),
            })
            .map_err(py_err)?;
        let index = parts.first();
        // An index of a Python distance opened without one is refused now, not at its
        // first query (the library refuses the metric's first use).
        if let (false, MetricSpec::Custom { name, .. }) = (python_metric, &index.meta().metric_spec)
        {
            return Err(CorruptIndexError::new_err(format!(
                "{}: the index was built with the distance `{}` written in Python (or Rust): \
                 open it with the same function, waymark.open(path, metric=FUNCTION)",
                path.display(),
                waymark::escape::escape_controls(name)
            )));
        }
        Ok(PyIndex {
            held: Held::new(parts, |p| PartsSearcher::new(p)),
            python_metric,
        })
    }

    /// The first part: its metadata holds the defaults of a search.
    fn index(&self) -> &Index {
        self.held.borrow_owner().first()
    }

    fn parts(&self) -> &Parts {
        self.held.borrow_owner()
    }

    /// The searcher of the first part (the only one of a whole index).
    fn searcher(&self) -> &Searcher<'_> {
        self.held.borrow_dependent().searcher(0)
    }

    fn in_parts(&self) -> &PartsSearcher<'_> {
        self.held.borrow_dependent()
    }

    /// Refuses what only a single index file answers (eval, distortion).
    fn whole_only(&self, what: &str) -> PyResult<()> {
        if self.parts().is_whole() {
            return Ok(());
        }
        Err(bad(format!(
            "{what} of an index in parts (a list file: {}) is not available: compact it \
             first (`waymark compact`), or build it as one file",
            self.parts().path().display()
        )))
    }

    /// The answer as a list of (id, item, distance).
    fn answer_list(&self, py: Python<'_>, found: &Found) -> PyResult<Py<PyList>> {
        let parts = self.parts();
        let rows = found
            .neighbors
            .iter()
            .map(|n| {
                let i = n.index as usize;
                let item = String::from_utf8_lossy(parts.item(n.index));
                Ok((id_value(py, parts, i)?, item, n.distance))
            })
            .collect::<PyResult<Vec<_>>>()?;
        Ok(PyList::new(py, rows)?.unbind())
    }
}

#[pymethods]
impl PyIndex {
    /// Opens an index file (memory-mapped: cheap, so each worker process can open its own).
    #[new]
    #[pyo3(signature = (path, *, metric=None, metric_name=None, integral=false))]
    fn new(
        py: Python<'_>,
        path: PathBuf,
        metric: Option<&Bound<'_, PyAny>>,
        metric_name: Option<String>,
        integral: bool,
    ) -> PyResult<PyIndex> {
        let custom = match metric {
            Some(m) => Some(py_metric(m, metric_name, integral)?),
            None => None,
        };
        PyIndex::open(py, &path, custom)
    }

    fn __len__(&self) -> usize {
        self.parts().live()
    }

    fn __repr__(&self) -> String {
        let m = self.index().meta();
        let parts = match self.parts().parts().len() {
            1 => String::new(),
            p => format!(" in {p} parts"),
        };
        format!(
            "<waymark.Index {:?}: {} items{parts}, {}, {} coordinates by {}>",
            self.parts().path().display().to_string(),
            self.parts().live(),
            m.metric_spec.kind(),
            m.dim,
            m.embedding.name()
        )
    }

    /// The file the index was opened from.
    #[getter]
    fn path(&self) -> String {
        self.parts().path().display().to_string()
    }

    /// The metric's name (`levenshtein`, `l2`, … or a Python distance's name).
    #[getter]
    fn metric(&self) -> String {
        match &self.index().meta().metric_spec {
            MetricSpec::Custom { name, .. } => name.clone(),
            MetricSpec::WeightedEdit { .. } => "weighted".into(),
            s => s.kind().name().to_string(),
        }
    }

    /// The id of item `number` (an int or a str, as given at build time).
    fn id(
        &self,
        py: Python<'_>,
        #[pyo3(from_py_with = item_no)] number: i64,
    ) -> PyResult<Py<PyAny>> {
        let i = self.item_number(number)?;
        id_value(py, self.parts(), i)
    }

    /// Item `number` as given at build time.
    fn item(&self, #[pyo3(from_py_with = item_no)] number: i64) -> PyResult<String> {
        let i = self.item_number(number)?;
        Ok(String::from_utf8_lossy(self.parts().item(i as u32)).into_owned())
    }

    /// The ids of item numbers: a list shaped as `numbers` (1-D or 2-D), with None where
    /// a number is the fill value -1.
    fn ids(&self, py: Python<'_>, numbers: &Bound<'_, PyAny>) -> PyResult<Py<PyAny>> {
        self.map_numbers(py, numbers, id_value)
    }

    /// The items of item numbers, shaped and filled as [`PyIndex::ids`].
    fn items(&self, py: Python<'_>, numbers: &Bound<'_, PyAny>) -> PyResult<Py<PyAny>> {
        self.map_numbers(py, numbers, |py, parts, i| {
            Ok(
                PyString::new(py, &String::from_utf8_lossy(parts.item(i as u32)))
                    .into_any()
                    .unbind(),
            )
        })
    }

    /// One query: a list of (id, item, distance), nearest first.
    #[pyo3(signature = (
        query, k=None, *, exact=false, within=None, within_fraction=None, recall=None,
        candidates=None, space=None, candidates_from=None, visit=None, widen=None
    ))]
    #[allow(clippy::too_many_arguments)]
    fn query(
        &self,
        py: Python<'_>,
        query: &Bound<'_, PyAny>,
        #[pyo3(from_py_with = opt_k)] k: Option<usize>,
        exact: bool,
        within: Option<f64>,
        within_fraction: Option<f64>,
        recall: Option<f64>,
        #[pyo3(from_py_with = opt_candidates)] candidates: Option<usize>,
        space: Option<&str>,
        candidates_from: Option<&str>,
        #[pyo3(from_py_with = opt_visit)] visit: Option<usize>,
        #[pyo3(from_py_with = opt_widen)] widen: Option<u32>,
    ) -> PyResult<Py<PyList>> {
        let index = self.index();
        let req = request(
            index,
            k,
            exact,
            within,
            recall,
            candidates,
            space,
            candidates_from,
            visit,
            widen,
            within_fraction,
        )?;
        let text = query_text(index, query)?;
        let req = for_these(index, req, recall, std::slice::from_ref(&text))?;
        let searcher = self.searcher();
        let in_parts = self.in_parts();
        let whole = self.parts().is_whole();
        let found = py
            .detach(|| {
                if !whole {
                    let one = std::slice::from_ref(&text);
                    let mut all = match within_fraction {
                        Some(f) => in_parts.merge_each(1, k, |_, s| {
                            lookup_within(s, one, Radius::Fraction(f), None)
                        }),
                        None => in_parts.answer_many(one, &req),
                    };
                    return all.pop().expect("one answer per query");
                }
                if let Some(f) = within_fraction {
                    let mut all = lookup_within(
                        searcher,
                        std::slice::from_ref(&text),
                        Radius::Fraction(f),
                        k,
                    );
                    return all.pop().expect("one answer per query");
                }
                SCRATCH.with(|s| match s.try_borrow_mut() {
                    Ok(mut s) => searcher.answer(&text, &req, &mut s),
                    // Re-entered on this thread (a Python metric that queries): fresh buffers.
                    Err(_) => searcher.answer(&text, &req, &mut Scratch::default()),
                })
            })
            .map_err(py_err)?;
        self.answer_list(py, &found)
    }

    /// Many queries on all cores, the GIL released: a pair of numpy arrays (numbers,
    /// distances), each n_queries × k, filled with -1 and inf where fewer are found.
    #[pyo3(signature = (
        queries, k=10, *, exact=false, within=None, within_fraction=None, recall=None,
        candidates=None, space=None, candidates_from=None, visit=None, widen=None
    ))]
    #[allow(clippy::too_many_arguments)]
    fn query_many<'py>(
        &self,
        py: Python<'py>,
        queries: &Bound<'py, PyAny>,
        #[pyo3(from_py_with = arg_k)] k: usize,
        exact: bool,
        within: Option<f64>,
        within_fraction: Option<f64>,
        recall: Option<f64>,
        #[pyo3(from_py_with = opt_candidates)] candidates: Option<usize>,
        space: Option<&str>,
        candidates_from: Option<&str>,
        #[pyo3(from_py_with = opt_visit)] visit: Option<usize>,
        #[pyo3(from_py_with = opt_widen)] widen: Option<u32>,
    ) -> PyResult<ManyAnswers<'py>> {
        let index = self.index();
        let req = request(
            index,
            Some(k),
            exact,
            within,
            recall,
            candidates,
            space,
            candidates_from,
            visit,
            widen,
            within_fraction,
        )?;
        let texts = self.query_texts(queries)?;
        let req = for_these(index, req, recall, &texts)?;
        let searcher = self.searcher();
        let in_parts = self.in_parts();
        let whole = self.parts().is_whole();
        let n = texts.len();
        // The answer arrays are n × k whatever is found: a k far beyond the index's size
        // is refused here rather than aborting on an allocation.
        let cells = n
            .checked_mul(k)
            .filter(|c| {
                let mut probe: Vec<[u8; 16]> = Vec::new();
                probe.try_reserve_exact(*c).is_ok()
            })
            .ok_or_else(|| {
                bad_argument(
                    py,
                    format!(
                        "k = {k} for {n} queries asks for arrays of {n} × {k} answers:                          more than memory holds; give a smaller k"
                    ),
                )
            })?;
        let result = py.detach(|| -> Result<(Vec<i64>, Vec<f64>), Error> {
            in_parts.check(&req)?;
            let answers = match (within_fraction, whole) {
                (Some(f), true) => lookup_within(searcher, &texts, Radius::Fraction(f), Some(k)),
                (None, true) => searcher.answer_many(&texts, &req),
                (Some(f), false) => in_parts.merge_each(texts.len(), Some(k), |_, s| {
                    lookup_within(s, &texts, Radius::Fraction(f), None)
                }),
                (None, false) => in_parts.answer_many(&texts, &req),
            };
            let mut numbers = vec![-1i64; cells];
            let mut dists = vec![f64::INFINITY; cells];
            for (q, a) in answers.into_iter().enumerate() {
                let found = a.map_err(|e| at_query(e, q))?;
                for (j, nb) in found.neighbors.iter().take(k).enumerate() {
                    numbers[q * k + j] = i64::from(nb.index);
                    dists[q * k + j] = nb.distance;
                }
            }
            Ok((numbers, dists))
        });
        let (numbers, dists) = result.map_err(py_err)?;
        let numbers = Array2::from_shape_vec((n, k), numbers).expect("n × k numbers");
        let dists = Array2::from_shape_vec((n, k), dists).expect("n × k distances");
        Ok((
            PyArray2::from_owned_array(py, numbers),
            PyArray2::from_owned_array(py, dists),
        ))
    }

    /// Every pair within a radius: of this index's own items (`other` None: the pairs of
    /// `waymark pairs --within`), or of an item of this index and an item of `other`. As
    /// three 1-D arrays (numbers a, numbers b, distances). See `__init__.pyi`.
    #[pyo3(signature = (within=None, *, within_fraction=None, other=None))]
    fn pairs_within<'py>(
        &self,
        py: Python<'py>,
        within: Option<f64>,
        within_fraction: Option<f64>,
        other: Option<&PyIndex>,
    ) -> PyResult<PairArrays<'py>> {
        let radius = match (within, within_fraction) {
            (Some(r), None) => Radius::Fixed(r),
            (None, Some(f)) => Radius::Fraction(f),
            _ => {
                return Err(bad(
                    "pairs_within takes one of within (a distance) and within_fraction",
                ))
            }
        };
        self.whole_only("pairs_within")?;
        if let Some(o) = other {
            o.whole_only("pairs_within")?;
        }
        let index = self.index();
        let pairs = py
            .detach(|| match other {
                None => SelfJoin::new(index, radius)?
                    .collect_all()
                    .map(|(pairs, _)| pairs),
                Some(o) => join_across(index, o.index(), radius),
            })
            .map_err(py_err)?;
        let a: Vec<i64> = pairs.iter().map(|p| i64::from(p.a)).collect();
        let b: Vec<i64> = pairs.iter().map(|p| i64::from(p.b)).collect();
        let d: Vec<f64> = pairs.iter().map(|p| p.distance).collect();
        Ok((
            PyArray1::from_vec(py, a),
            PyArray1::from_vec(py, b),
            PyArray1::from_vec(py, d),
        ))
    }

    /// What the index holds, as `waymark inspect --json` (with `verify`, every checksum
    /// is checked first).
    #[pyo3(signature = (*, verify=false))]
    fn inspect(&self, py: Python<'_>, verify: bool) -> PyResult<Py<PyAny>> {
        let parts = self.parts();
        let report = py
            .detach(|| -> Result<_, Error> {
                if verify {
                    parts.verify()?;
                }
                if parts.is_listed() {
                    return Ok(parts.report(verify, DRIFT_SAMPLE));
                }
                Ok(parts.first().report(verify))
            })
            .map_err(py_err)?;
        json_to_py(py, &report)
    }

    /// Recall against brute force on `queries`, as `waymark eval`: one row per candidate
    /// count (or per asked recall).
    #[pyo3(signature = (queries, k=10, *, candidates=None, recall=None, space=None, candidates_from=None, visit=None))]
    #[allow(clippy::too_many_arguments)]
    fn eval(
        &self,
        py: Python<'_>,
        queries: &Bound<'_, PyAny>,
        #[pyo3(from_py_with = arg_k)] k: usize,
        #[pyo3(from_py_with = opt_candidate_list)] candidates: Option<Vec<usize>>,
        recall: Option<Vec<f64>>,
        space: Option<&str>,
        candidates_from: Option<&str>,
        #[pyo3(from_py_with = opt_visit)] visit: Option<usize>,
    ) -> PyResult<Py<PyAny>> {
        self.whole_only("eval")?;
        let index = self.index();
        if candidates.is_some() && recall.is_some() {
            return Err(bad("give candidates or recall, not both"));
        }
        let texts = self.query_texts(queries)?;
        let mut settings = Vec::new();
        let mut asked = Vec::new();
        for r in recall.unwrap_or_default() {
            if space.is_some() || candidates_from.is_some() || visit.is_some() {
                return Err(bad(
                    "recall chooses the candidates itself: it does not combine with space, candidates_from or visit",
                ));
            }
            let (p, choice) =
                SearchParams::recall_choice_for(index, k, r, &texts).map_err(py_err)?;
            settings.push(p);
            asked.push((r, choice));
        }
        if asked.is_empty() {
            for c in candidates.unwrap_or_else(|| vec![250, 500, 1000, 2000]) {
                match request(
                    index,
                    Some(k),
                    false,
                    None,
                    None,
                    Some(c),
                    space,
                    candidates_from,
                    visit,
                    None,
                    None,
                )? {
                    Request::Approximate(p) => settings.push(p),
                    _ => unreachable!("an approximate request"),
                }
            }
        }
        let searcher = self.searcher();
        let result = py.detach(|| -> Result<_, Error> {
            for p in &settings {
                searcher.check(&Request::Approximate(*p))?;
            }
            for (i, q) in texts.iter().enumerate() {
                searcher.prepare(q).map_err(|e| at_query(e, i))?;
            }
            let (truth, source) = load_or_compute_truth(index, &texts, None, k, &|_| {});
            index.metric()?.check()?;
            let rows = settings
                .iter()
                .map(|p| measure_recall(index, &texts, &truth, p))
                .collect::<Result<Vec<_>, _>>()?;
            Ok((rows, source))
        });
        let (rows, source) = result.map_err(py_err)?;
        let mut values = serde_json::to_value(&rows).map_err(|e| bad(e.to_string()))?;
        if let Some(list) = values.as_array_mut() {
            for (v, (r, c)) in list.iter_mut().zip(&asked) {
                v["asked_recall"] = (*r).into();
                v["expected_recall"] = c.expected.into();
                v["curve_reaches"] = c.reached.into();
            }
        }
        let seconds = match source {
            TruthSource::Computed { seconds, .. } => Some(seconds),
            TruthSource::Cached(_) => None,
        };
        let report = serde_json::json!({
            "index": index.path().display().to_string(),
            "items": index.len(),
            "queries": texts.len(),
            "k": k,
            "ground_truth_seconds": seconds,
            "recall": values,
        });
        json_to_py(py, &report)
    }

    /// The distortion report of the embedding, as `waymark eval --distortion --pairs`.
    #[pyo3(signature = (*, pairs=100_000))]
    fn distortion(
        &self,
        py: Python<'_>,
        #[pyo3(from_py_with = arg_pairs)] pairs: usize,
    ) -> PyResult<Py<PyAny>> {
        self.whole_only("distortion")?;
        let index = self.index();
        let report = py
            .detach(|| waymark::eval::index_distortion(index, pairs))
            .map_err(py_err)?;
        let value = serde_json::to_value(&report).map_err(|e| bad(e.to_string()))?;
        json_to_py(py, &value)
    }

    /// Whether the metric is a Python callable (queries then take the GIL for its calls).
    #[getter]
    fn python_metric(&self) -> bool {
        self.python_metric
    }
}

impl PyIndex {
    /// Item `number` (across the parts), refused when it is not one or is removed.
    fn item_number(&self, number: i64) -> PyResult<usize> {
        let parts = self.parts();
        let n = parts.len();
        let i = usize::try_from(number)
            .ok()
            .filter(|&i| i < n)
            .ok_or_else(|| {
                pyo3::exceptions::PyIndexError::new_err(format!(
                    "item number {number} is not in the index ({n} item numbers)"
                ))
            })?;
        if parts.is_removed(i as u32) {
            return Err(pyo3::exceptions::PyIndexError::new_err(format!(
                "item number {number} is removed from the index"
            )));
        }
        Ok(i)
    }

    /// Queries from Python: a list of strings, or for a vector index a 2-D array (or a
    /// list of sequences of numbers).
    fn query_texts(&self, queries: &Bound<'_, PyAny>) -> PyResult<Vec<String>> {
        let index = self.index();
        if queries.is_instance_of::<PyString>() {
            return Err(bad("queries must be a list of queries, not one string"));
        }
        if let Ok(a) = queries.extract::<PyReadonlyArray2<'_, f32>>() {
            if !matches!(index.meta().metric_spec, MetricSpec::Vector { .. }) {
                return Err(bad("an array of vectors queries a vector index only"));
            }
            let v = a.as_array();
            return Ok(v
                .rows()
                .into_iter()
                .map(|r| vector_text(r.iter().map(|&x| f64::from(x))))
                .collect());
        }
        if let Ok(a) = queries.extract::<PyReadonlyArray2<'_, f64>>() {
            if !matches!(index.meta().metric_spec, MetricSpec::Vector { .. }) {
                return Err(bad("an array of vectors queries a vector index only"));
            }
            let v = a.as_array();
            return Ok(v
                .rows()
                .into_iter()
                .map(|r| vector_text(r.iter().copied()))
                .collect());
        }
        let list = queries
            .try_iter()
            .map_err(|_| bad("queries must be a list of queries"))?;
        list.map(|q| query_text(index, &q?)).collect()
    }

    fn map_numbers(
        &self,
        py: Python<'_>,
        numbers: &Bound<'_, PyAny>,
        f: impl Fn(Python<'_>, &Parts, usize) -> PyResult<Py<PyAny>>,
    ) -> PyResult<Py<PyAny>> {
        let parts = self.parts();
        let one = |x: i64| -> PyResult<Py<PyAny>> {
            if x == -1 {
                return Ok(py.None());
            }
            f(py, parts, self.item_number(x)?)
        };
        if let Ok(a) = numbers.extract::<PyReadonlyArray2<'_, i64>>() {
            let rows = a
                .as_array()
                .rows()
                .into_iter()
                .map(|r| {
                    let row = r.iter().map(|&x| one(x)).collect::<PyResult<Vec<_>>>()?;
                    Ok(PyList::new(py, row)?.into_any().unbind())
                })
                .collect::<PyResult<Vec<_>>>()?;
            return Ok(PyList::new(py, rows)?.into_any().unbind());
        }
        let flat: Vec<i64> = numbers
            .extract()
            .map_err(|_| bad("numbers must be a sequence of item numbers or a 2-D int64 array"))?;
        let row = flat.into_iter().map(one).collect::<PyResult<Vec<_>>>()?;
        Ok(PyList::new(py, row)?.into_any().unbind())
    }
}

/// An error of the query at 0-based position `i`, with the position in its message.
fn at_query(e: Error, i: usize) -> Error {
    match e {
        Error::InvalidQuery(m) => Error::InvalidQuery(format!("queries[{i}]: {m}")),
        Error::Usage(m) => Error::Usage(format!("queries[{i}]: {m}")),
        other => other,
    }
}

/// A JSON value (the library's reports) as Python values: dicts, lists, str, int, float,
/// bool and None.
fn json_to_py(py: Python<'_>, v: &serde_json::Value) -> PyResult<Py<PyAny>> {
    use serde_json::Value;
    Ok(match v {
        Value::Null => py.None(),
        Value::Bool(b) => b.into_pyobject(py)?.to_owned().into_any().unbind(),
        Value::Number(n) => match (n.as_i64(), n.as_u64()) {
            (Some(i), _) => i.into_pyobject(py)?.into_any().unbind(),
            (None, Some(u)) => u.into_pyobject(py)?.into_any().unbind(),
            _ => n
                .as_f64()
                .unwrap_or(f64::NAN)
                .into_pyobject(py)?
                .into_any()
                .unbind(),
        },
        Value::String(s) => PyString::new(py, s).into_any().unbind(),
        Value::Array(a) => {
            let items = a
                .iter()
                .map(|x| json_to_py(py, x))
                .collect::<PyResult<Vec<_>>>()?;
            PyList::new(py, items)?.into_any().unbind()
        }
        Value::Object(o) => {
            let d = PyDict::new(py);
            for (k, x) in o {
                d.set_item(k, json_to_py(py, x)?)?;
            }
            d.into_any().unbind()
        }
    })
}

/// The extension module.
/// Groups near-duplicates from pairs of item labels, by the rules of `waymark groups`. See
/// `python/waymark/__init__.pyi`.
#[pyfunction]
#[pyo3(signature = (a, b, distance, *, grouping="centre", singletons=false))]
fn group_pairs(
    py: Python<'_>,
    a: Vec<i64>,
    b: Vec<i64>,
    distance: Vec<f64>,
    grouping: &str,
    singletons: bool,
) -> PyResult<Py<PyList>> {
    if a.len() != b.len() || a.len() != distance.len() {
        return Err(bad(format!(
            "group_pairs: a, b and distance must have one length (got {}, {} and {})",
            a.len(),
            b.len(),
            distance.len()
        )));
    }
    if let Some(i) = distance.iter().position(|d| !(d.is_finite() && *d >= 0.0)) {
        return Err(bad(format!(
            "group_pairs: distance[{i}] is {}: distances must be finite and at least 0",
            distance[i]
        )));
    }
    let how = match grouping {
        "centre" => Grouping::Centre,
        "clique" => Grouping::Clique,
        "components" => Grouping::Components,
        other => {
            return Err(bad(format!(
                "group_pairs: unknown grouping {other:?}: use centre, clique or components"
            )))
        }
    };
    // Labels become item numbers in their own order, so the rules' ties (smaller item number
    // first) fall as they would over the labels themselves.
    let mut labels: Vec<i64> = a.iter().chain(b.iter()).copied().collect();
    labels.sort_unstable();
    labels.dedup();
    if labels.len() > u32::MAX as usize {
        return Err(bad("group_pairs: more than 4,294,967,295 distinct labels"));
    }
    let number = |x: i64| labels.binary_search(&x).expect("every label is listed") as u32;
    let pairs: Vec<Pair> = a
        .iter()
        .zip(&b)
        .zip(&distance)
        .map(|((&x, &y), &d)| {
            let (x, y) = (number(x), number(y));
            Pair {
                a: x.min(y),
                b: x.max(y),
                distance: d,
            }
        })
        .collect();
    let groups = py.detach(|| group(labels.len(), &pairs, how, singletons));
    let out = PyList::empty(py);
    for g in groups {
        let members: Vec<i64> = g.members.iter().map(|&m| labels[m as usize]).collect();
        let centre = g.centre.map(|c| labels[c as usize]);
        out.append((members, centre))?;
    }
    Ok(out.unbind())
}

// ---------------------------------------------------------------------------------------
// Sharded builds (`waymark::index::shards`).

/// Writes one shard of a sharded index against the seed index at `like`. See
/// `python/waymark/__init__.pyi`.
#[pyfunction]
#[pyo3(signature = (items, folder, shard, *, like, ids=None, first_number=None))]
fn build_shard(
    py: Python<'_>,
    items: &Bound<'_, PyAny>,
    folder: PathBuf,
    #[pyo3(from_py_with = arg_shard)] shard: usize,
    like: PathBuf,
    ids: Option<&Bound<'_, PyAny>>,
    #[pyo3(from_py_with = opt_first_number)] first_number: Option<i64>,
) -> PyResult<String> {
    let seed = py.detach(|| Index::open(&like)).map_err(py_err)?;
    let given = ids_from(ids)?;
    let ids_for = |n: usize| -> PyResult<Ids> {
        match (given.clone(), first_number) {
            (Some(i), None) => Ok(i),
            (None, Some(f)) => Ok(waymark::index::shards::record_ids(f, n)),
            (None, None) => Err(bad(
                "give the shard's ids (ids=, one per item) or the record number of its first \
                 item across all the shards (first_number=)",
            )),
            (Some(_), Some(_)) => Err(bad("give ids or first_number, not both")),
        }
    };
    let meta = seed.meta();
    let corpus = if let Ok(array) = items.extract::<PyReadonlyArray2<'_, f32>>() {
        if !matches!(meta.metric_spec, MetricSpec::Vector { .. }) {
            return Err(bad(format!(
                "the seed {} indexes text: give the items as a list of strings",
                like.display()
            )));
        }
        let view = array.as_array();
        let (n, d) = view.dim();
        let vectors = waymark::ingest::vectors::vectors_from_values(n, d, "items", |r, c| {
            f64::from(view[[r, c]])
        })
        .map_err(|e| py_err(e.into()))?;
        Corpus::new(vectors.rows, Some(vectors.items), ids_for(n)?).map_err(|e| py_err(e.into()))?
    } else {
        if items.is_instance_of::<PyString>() {
            return Err(bad("items must be a list of strings, not one string"));
        }
        let texts: Vec<String> = items
            .extract()
            .map_err(|_| bad("items must be a list of strings or a 2-D float32 numpy array"))?;
        let ids = ids_for(texts.len())?;
        let ingest = IngestOptions {
            normalize: meta.normalize,
            ..IngestOptions::default()
        };
        corpus_from_items(texts, Some(ids), &ingest, "items").map_err(|e| py_err(e.into()))?
    };
    let path = py
        .detach(|| {
            waymark::index::shards::build_shard(&corpus, "items", &seed, &folder, shard, Vec::new())
        })
        .map_err(py_err)?;
    Ok(path.display().to_string())
}

/// Writes the list file of a sharded index. See `python/waymark/__init__.pyi`.
#[pyfunction]
fn write_parts(py: Python<'_>, index_path: PathBuf, part_paths: Vec<PathBuf>) -> PyResult<()> {
    py.detach(|| waymark::index::shards::write_parts(&index_path, &part_paths))
        .map_err(py_err)?;
    Ok(())
}

/// The parts of an index. See `python/waymark/__init__.pyi`.
#[pyfunction]
fn list_parts(py: Python<'_>, index_path: PathBuf) -> PyResult<Py<PyList>> {
    let parts = py.detach(|| Parts::open(&index_path)).map_err(py_err)?;
    let dir = parts_dir(&index_path);
    let out = PyList::empty(py);
    for p in parts.parts() {
        let path = if parts.is_listed() {
            dir.join(&p.file)
        } else {
            index_path.clone()
        };
        let d = PyDict::new(py);
        d.set_item("path", path.display().to_string())?;
        d.set_item("items", p.index.len())?;
        d.set_item("removed", p.removed.clone())?;
        d.set_item("first", p.offset)?;
        out.append(d)?;
    }
    Ok(out.unbind())
}

/// The default candidates a build of `n` items stores.
/// Reads the queries of a file. See `python/waymark/__init__.pyi`.
#[pyfunction]
#[pyo3(signature = (path, *, format=None))]
fn read_queries(
    py: Python<'_>,
    path: PathBuf,
    format: Option<&str>,
) -> PyResult<Vec<(u64, Option<String>, String)>> {
    use waymark::ingest::{QueryLayout, SequenceFormat};
    let layout = match format {
        None => None,
        Some("text") => Some(QueryLayout::Lines),
        Some("fasta") => Some(QueryLayout::Sequences(SequenceFormat::Fasta)),
        Some("fastq") => Some(QueryLayout::Sequences(SequenceFormat::Fastq)),
        Some(other) => {
            return Err(bad(format!(
                "format `{other}` is not one of text, fasta, fastq"
            )))
        }
    };
    let records = py
        .detach(|| waymark::ingest::read_queries(&path, layout))
        .map_err(|e| py_err(e.into()))?;
    Ok(records
        .into_iter()
        .map(|r| (r.line, r.name, r.text))
        .collect())
}

#[pyfunction]
fn _default_candidates(n: usize) -> usize {
    waymark::index::default_candidates(n)
}

#[pymodule]
fn _waymark(m: &Bound<'_, PyModule>) -> PyResult<()> {
    let py = m.py();
    m.add_class::<PyIndex>()?;
    m.add_function(wrap_pyfunction!(build, m)?)?;
    m.add_function(wrap_pyfunction!(build_file, m)?)?;
    m.add_function(wrap_pyfunction!(group_pairs, m)?)?;
    m.add_function(wrap_pyfunction!(build_shard, m)?)?;
    m.add_function(wrap_pyfunction!(write_parts, m)?)?;
    m.add_function(wrap_pyfunction!(list_parts, m)?)?;
    m.add_function(wrap_pyfunction!(read_queries, m)?)?;
    m.add_function(wrap_pyfunction!(_default_candidates, m)?)?;
    m.add("WaymarkError", py.get_type::<WaymarkError>())?;
    m.add("BadInputError", py.get_type::<BadInputError>())?;
    m.add("BadArgumentError", bad_argument_type(py)?)?;
    m.add("CorruptIndexError", py.get_type::<CorruptIndexError>())?;
    m.add("MetricFailedError", py.get_type::<MetricFailedError>())?;
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    Ok(())
}
