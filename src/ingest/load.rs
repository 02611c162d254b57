//! Reading an input as its metric wants it: text records (with the ingest options), vectors,
//! or an edge list whose nodes are the items; and checking that the options given fit the
//! metric. `build`, `sweep` and `check-metric` read their input through [`load_input`].
//!
//! Error messages name the command line's options (`--costs`, `--metric weighted`), which is
//! how the command reports them.

use std::path::{Path, PathBuf};

use super::{read_corpus_with_warnings, vectors, Corpus, Ids, IngestOptions, IngestWarning};
use crate::error::{Error, Result};
use crate::metric::{CostTable, Graph, Jaccard, MetricKind, MetricSpec, Norm, Tokens};

/// The default time limit of an external metric for each batch of distances, in seconds.
pub const DEFAULT_TIMEOUT_SECS: f64 = 30.0;

/// The metric an input is read for, and the options of the metrics that take any. An option
/// given to a metric that does not take it is refused by [`load_input`].
///
/// ```
/// use waymark::ingest::MetricOptions;
/// use waymark::metric::MetricKind;
///
/// let jaccard_on_commas = MetricOptions {
///     kind: MetricKind::Jaccard,
///     separator: Some(",".into()),
///     ..MetricOptions::default()
/// };
/// assert_eq!(MetricOptions::default().kind, MetricKind::Levenshtein);
/// # let _ = jaccard_on_commas;
/// ```
#[derive(Clone, Debug, PartialEq)]
pub struct MetricOptions {
    /// The metric (default: Levenshtein).
    pub kind: MetricKind,
    /// Weighted edit distance: the cost file (required).
    pub costs: Option<PathBuf>,
    /// Jaccard: tokens are the pieces between this separator (default: white space).
    pub separator: Option<String>,
    /// Jaccard: sets of `q` consecutive characters instead of tokens (takes precedence over
    /// `separator`).
    pub qgrams: Option<usize>,
    /// Vector metrics: the first line of the input names the columns (skipped).
    pub header: bool,
    /// External metric: the program and its arguments (required).
    pub command: Vec<String>,
    /// External metric: the time limit for each batch of distances, in seconds (positive).
    pub timeout_secs: f64,
}

impl Default for MetricOptions {
    fn default() -> Self {
        MetricOptions {
            kind: MetricKind::Levenshtein,
            costs: None,
            separator: None,
            qgrams: None,
            header: false,
            command: Vec::new(),
            timeout_secs: DEFAULT_TIMEOUT_SECS,
        }
    }
}

/// An input read under its metric: what a build needs besides its embedding options.
#[derive(Clone, Debug)]
pub struct LoadedInput {
    /// The items: text records; vectors (the rows as text, the `f32` bytes as keys, record
    /// numbers as ids); or the nodes of a graph (their names as items and ids).
    pub corpus: Corpus,
    /// The metric with its parameters (the cost table, the tokens, the vector dimension, the
    /// program).
    pub spec: MetricSpec,
    /// The graph of the graph metric.
    pub graph: Option<Graph>,
    /// What the reader warned of (see [`IngestWarning`]); the command line prints them.
    pub warnings: Vec<IngestWarning>,
}

/// The metric's name as the command line's `--metric` spells it.
fn option_name(kind: MetricKind) -> &'static str {
    match kind {
        MetricKind::WeightedEdit => "weighted",
        k => k.name(),
    }
}

/// Reads the input at `path` as `metric` wants it: text records (with the `ingest` options),
/// one vector per line or a `.npy` file (vector metrics), or an edge list whose nodes are the
/// items (graph metric). Refuses options that do not fit the metric (an option of another
/// metric, text options for a vector or graph input, a missing cost file or program), a cost
/// file or edge list that is not valid, and any input error of the readers.
pub fn load_input(
    path: &Path,
    ingest: &IngestOptions,
    metric: &MetricOptions,
) -> Result<LoadedInput> {
    let usage = |msg: String| Error::Usage(msg);
    let name = option_name(metric.kind);
    let only = |flag: &str, set: bool, for_metric: MetricKind| -> Result<()> {
        if set && metric.kind != for_metric {
            let for_metric = option_name(for_metric);
            return Err(usage(format!(
                "{flag} is an option of --metric {for_metric}, not of --metric {name}"
            )));
        }
        Ok(())
    };
    only("--costs", metric.costs.is_some(), MetricKind::WeightedEdit)?;
    only(
        "--separator",
        metric.separator.is_some(),
        MetricKind::Jaccard,
    )?;
    only("--qgrams", metric.qgrams.is_some(), MetricKind::Jaccard)?;
    only(
        "a command after --",
        !metric.command.is_empty(),
        MetricKind::External,
    )?;
    let vector = match metric.kind {
        MetricKind::L1 => Some(Norm::L1),
        MetricKind::L2 => Some(Norm::L2),
        MetricKind::Linf => Some(Norm::Linf),
        MetricKind::Angular => Some(Norm::Angular),
        _ => None,
    };
    if metric.header && vector.is_none() {
        return Err(usage(format!(
            "--header is for vector inputs (--metric l1, l2, linf or angular), not --metric {name}"
        )));
    }
    let text_options_given = ingest.field.is_some()
        || ingest.id_field.is_some()
        || ingest.format.is_some()
        || !ingest.normalize.is_identity();
    if (vector.is_some() || metric.kind == MetricKind::Graph) && text_options_given {
        return Err(usage(format!(
            "--field, --id-field, --input-format, --fold-case, --trim, --fold-punct and \
             --sort-tokens are for text inputs; \
             --metric {name} reads {}",
            if vector.is_some() {
                "one vector per line (or a .npy file)"
            } else {
                "an edge list"
            }
        )));
    }
    let spec = match metric.kind {
        MetricKind::L1 => return load_vectors(path, Norm::L1, metric.header),
        MetricKind::L2 => return load_vectors(path, Norm::L2, metric.header),
        MetricKind::Linf => return load_vectors(path, Norm::Linf, metric.header),
        MetricKind::Angular => return load_vectors(path, Norm::Angular, metric.header),
        MetricKind::Graph => return load_graph(path),
        _ => text_metric_spec(metric)?,
    };
    let (corpus, warnings) = read_corpus_with_warnings(path, ingest)?;
    Ok(LoadedInput {
        corpus,
        spec,
        graph: None,
        warnings,
    })
}

/// The metric of text items that `metric` names, with its parameters: the cost table of
/// `--metric weighted` (read and checked), the tokens of Jaccard, the program of an
/// external metric. Refused for the metrics whose items are not text (vectors, graph
/// nodes, a metric written in Rust), and for missing or impossible options. `load_input`
/// uses it for text inputs; a caller with items in memory can too.
///
/// ```
/// use waymark::ingest::{text_metric_spec, MetricOptions};
/// use waymark::metric::{MetricKind, MetricSpec};
///
/// let opts = MetricOptions { kind: MetricKind::Damerau, ..MetricOptions::default() };
/// assert!(matches!(text_metric_spec(&opts)?, MetricSpec::Damerau));
/// # Ok::<(), waymark::Error>(())
/// ```
pub fn text_metric_spec(metric: &MetricOptions) -> Result<MetricSpec> {
    let usage = |msg: String| Error::Usage(msg);
    Ok(match metric.kind {
        MetricKind::Levenshtein => MetricSpec::Levenshtein,
        MetricKind::Damerau => MetricSpec::Damerau,
        MetricKind::TokenEdit => MetricSpec::TokenEdit,
        MetricKind::Hamming => MetricSpec::Hamming { length: 0 },
        MetricKind::WeightedEdit => {
            let file = metric
                .costs
                .as_ref()
                .ok_or_else(|| usage("--metric weighted needs --costs FILE".into()))?;
            let table = CostTable::parse(&read_text(file)?, &file.display().to_string())?;
            MetricSpec::WeightedEdit {
                costs: table.rules().clone(),
            }
        }
        MetricKind::Jaccard => {
            let tokens = match (&metric.qgrams, &metric.separator) {
                (Some(0), _) => return Err(usage("--qgrams must be at least 1, not 0".into())),
                (Some(q), _) => Tokens::QGrams(*q),
                (None, Some(s)) => Tokens::Separator(s.clone()),
                (None, None) => Tokens::Whitespace,
            };
            Jaccard::new(tokens.clone())?;
            MetricSpec::Jaccard { tokens }
        }
        MetricKind::External => {
            if metric.command.is_empty() {
                return Err(usage(
                    "--metric external needs the program after `--`, e.g. \
                     `-- python3 my_metric.py`"
                        .into(),
                ));
            }
            let t = metric.timeout_secs;
            if !(t.is_finite() && t > 0.0) {
                return Err(usage(format!(
                    "--timeout must be a positive number of seconds, not {t}"
                )));
            }
            MetricSpec::External {
                command: metric.command.clone(),
                timeout_ms: (t * 1000.0).ceil() as u64,
            }
        }
        MetricKind::Custom => {
            return Err(usage(
                "a custom metric is written in Rust and supplied by the program that builds \
                 with it (index::build_index_with_metric); read its items with read_corpus"
                    .into(),
            ))
        }
        kind @ (MetricKind::L1
        | MetricKind::L2
        | MetricKind::Linf
        | MetricKind::Angular
        | MetricKind::Graph) => {
            return Err(usage(format!(
                "--metric {} does not compare text items",
                option_name(kind)
            )))
        }
    })
}

/// Reads one vector per line (or a `.npy` file) as the items of a vector metric.
fn load_vectors(path: &Path, norm: Norm, header: bool) -> Result<LoadedInput> {
    let v = vectors::read_vectors(
        path,
        &vectors::VectorOptions {
            format: None,
            header,
        },
    )?;
    let n = v.items.len();
    let dim = u32::try_from(v.dim)
        .map_err(|_| Error::Usage(format!("{}: too many columns", path.display())))?;
    let corpus = Corpus::new(v.rows, Some(v.items), Ids::Int((0..n as i64).collect()))?;
    Ok(LoadedInput {
        corpus,
        spec: MetricSpec::Vector { norm, dim },
        graph: None,
        warnings: Vec::new(),
    })
}

/// The text of a side file or edge list, read within the memory budget as every other
/// input (an endless device stops with an error), then checked as the library's readers
/// check it ([`crate::metric::side_file_text`], which `Graph::from_path` and
/// `CostTable::from_path` use): a line that ends with a lone carriage return and invalid
/// UTF-8 are refused with their line.
fn read_text(path: &Path) -> Result<String> {
    use std::io::Read;
    let name = path.display().to_string();
    let io = |error| super::IngestError::Io {
        source_name: name.clone(),
        error,
    };
    let mut bytes = Vec::new();
    super::bounded(std::fs::File::open(path).map_err(io)?, &name)?
        .read_to_end(&mut bytes)
        .map_err(io)?;
    Ok(crate::metric::side_file_text(bytes, &name)?)
}

/// Reads an edge list; its nodes are the items (and their ids).
fn load_graph(path: &Path) -> Result<LoadedInput> {
    let g = Graph::parse(&read_text(path)?, &path.display().to_string())?;
    let names: Vec<String> = (0..g.len() as u32)
        .map(|v| String::from_utf8_lossy(g.name(v)).into_owned())
        .collect();
    let corpus = Corpus::new(names.clone(), None, Ids::Text(names))?;
    Ok(LoadedInput {
        corpus,
        spec: MetricSpec::Graph,
        graph: Some(g),
        warnings: Vec::new(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
        let p = dir.join(name);
        std::fs::write(&p, text).unwrap();
        p
    }

    #[test]
    fn an_option_of_another_metric_is_refused_with_both_names() {
        let dir = tempfile::tempdir().unwrap();
        let p = write(dir.path(), "names.txt", "Keth Landing\n");
        let opts = MetricOptions {
            costs: Some("costs.txt".into()),
            ..MetricOptions::default()
        };
        let e = load_input(&p, &IngestOptions::default(), &opts).unwrap_err();
        assert_eq!(
            e.to_string(),
            "--costs is an option of --metric weighted, not of --metric levenshtein"
        );
        let opts = MetricOptions {
            kind: MetricKind::WeightedEdit,
            separator: Some(",".into()),
            ..MetricOptions::default()
        };
        let e = load_input(&p, &IngestOptions::default(), &opts).unwrap_err();
        assert_eq!(
            e.to_string(),
            "--separator is an option of --metric jaccard, not of --metric weighted"
        );
    }

    #[test]
    fn vectors_become_items_with_their_bytes_as_keys_and_record_numbers_as_ids() {
        let dir = tempfile::tempdir().unwrap();
        let p = write(dir.path(), "buoys.csv", "0.5,1\n2,-3\n");
        let opts = MetricOptions {
            kind: MetricKind::L2,
            ..MetricOptions::default()
        };
        let input = load_input(&p, &IngestOptions::default(), &opts).unwrap();
        assert_eq!(input.corpus.items, ["0.5,1", "2,-3"]);
        assert_eq!(input.corpus.ids, Ids::Int(vec![0, 1]));
        let keys = input.corpus.keys.as_ref().unwrap();
        assert_eq!(
            keys[1],
            [2.0f32.to_le_bytes(), (-3.0f32).to_le_bytes()].concat()
        );
        assert!(matches!(
            input.spec,
            MetricSpec::Vector {
                norm: Norm::L2,
                dim: 2
            }
        ));
        let folded = IngestOptions {
            normalize: crate::ingest::Normalize {
                fold_case: true,
                ..Default::default()
            },
            ..IngestOptions::default()
        };
        let e = load_input(&p, &folded, &opts).unwrap_err();
        assert!(e.to_string().contains("are for text inputs"), "{e}");
    }

    #[test]
    fn graph_nodes_are_the_items_and_their_own_ids() {
        let dir = tempfile::tempdir().unwrap();
        let p = write(
            dir.path(),
            "ferries.txt",
            "Keth Orvane 3\nOrvane Mirrow 4\n",
        );
        let opts = MetricOptions {
            kind: MetricKind::Graph,
            ..MetricOptions::default()
        };
        let input = load_input(&p, &IngestOptions::default(), &opts).unwrap();
        let mut nodes = input.corpus.items.clone();
        nodes.sort();
        assert_eq!(nodes, ["Keth", "Mirrow", "Orvane"]);
        assert_eq!(input.corpus.ids, Ids::Text(input.corpus.items.clone()));
        assert!(input.graph.is_some());
    }

    #[test]
    fn external_needs_its_program_and_a_positive_timeout() {
        let dir = tempfile::tempdir().unwrap();
        let p = write(dir.path(), "names.txt", "Keth Landing\n");
        let mut opts = MetricOptions {
            kind: MetricKind::External,
            ..MetricOptions::default()
        };
        let e = load_input(&p, &IngestOptions::default(), &opts).unwrap_err();
        assert!(
            e.to_string().contains("needs the program after `--`"),
            "{e}"
        );
        opts.command = vec!["python3".into(), "my_metric.py".into()];
        opts.timeout_secs = 0.0;
        let e = load_input(&p, &IngestOptions::default(), &opts).unwrap_err();
        assert!(
            e.to_string().contains("--timeout must be a positive"),
            "{e}"
        );
        opts.timeout_secs = 1.5;
        let input = load_input(&p, &IngestOptions::default(), &opts).unwrap();
        assert!(matches!(
            input.spec,
            MetricSpec::External {
                timeout_ms: 1500,
                ..
            }
        ));
    }
}
