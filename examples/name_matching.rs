//! How well each way of comparing names finds the planted duplicates of the Vessmark trading
//! register (`demo-data/traders.csv`, truth in `demo-data/traders-truth.csv`).
//!
//! For every choice of normalisation and metric, every pair of entries is measured through
//! the library (`Metric::prepare`, `PreparedQuery::distance_within`: a brute force over all
//! pairs, no index), and a pair counts as found when its distance is within the radius. A
//! found pair is right when both codes belong to one firm. Printed: a Markdown table of
//! precision and recall of same-firm pairs per choice and radius, and the recall of the pairs
//! (original name, variant) per kind of variant.
//!
//! A relative radius (`R = f × chars`) compares `d ≤ f · max(|a|, |b|)`, the lengths in chars
//! of the two comparison forms, computed here, not by the library.
//!
//! Run: `cargo run --release --example name_matching` (optionally with the register and
//! truth paths as arguments).

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use rayon::prelude::*;
use waymark::ingest::{read_corpus, Ids, IngestOptions, Normalize};
use waymark::metric::{LevenshteinQuery, Metric, MetricSpec, PreparedQuery};

/// The kinds of planted variant, as `traders-truth.csv` names them.
const KINDS: [&str; 6] = ["typo", "case", "swap", "drop", "suffix", "punct"];

#[derive(Clone, Copy)]
enum Radius {
    /// `d ≤ R`.
    Abs(f64),
    /// `d ≤ f · max(chars)`.
    Rel(f64),
}

impl Radius {
    fn limit(self, a_chars: usize, b_chars: usize) -> f64 {
        match self {
            Radius::Abs(r) => r,
            Radius::Rel(f) => f * a_chars.max(b_chars) as f64,
        }
    }

    fn label(self) -> String {
        match self {
            Radius::Abs(r) => format!("{r}"),
            Radius::Rel(f) => format!("{f} × chars"),
        }
    }
}

struct Choice {
    name: &'static str,
    normalize: Normalize,
    metric: MetricSpec,
    radii: Vec<Radius>,
}

/// Counts for one radius: pairs found, same-firm pairs found, (original, variant) pairs found
/// per kind.
#[derive(Clone, Default)]
struct Tally {
    found: u64,
    right: u64,
    kinds: [u64; KINDS.len()],
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<PathBuf> = std::env::args_os().skip(1).map(PathBuf::from).collect();
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data");
    let register = args.first().cloned().unwrap_or(root.join("traders.csv"));
    let truth_path = args
        .get(1)
        .cloned()
        .unwrap_or(root.join("traders-truth.csv"));

    // code -> (firm, kind)
    let mut truth: HashMap<String, (String, String)> = HashMap::new();
    for (n, line) in std::fs::read_to_string(&truth_path)?
        .lines()
        .enumerate()
        .skip(1)
    {
        let f: Vec<&str> = line.split(',').collect();
        if f.len() != 3 {
            return Err(format!(
                "{}:{}: expected code,firm,kind",
                truth_path.display(),
                n + 1
            )
            .into());
        }
        truth.insert(f[0].into(), (f[1].into(), f[2].into()));
    }

    let plain = Normalize::default();
    let case = Normalize {
        fold_case: true,
        ..plain
    };
    let punct = Normalize {
        fold_punct: true,
        ..case
    };
    let sorted = Normalize {
        sort_tokens: true,
        ..punct
    };
    let lev = [1.0, 2.0, 3.0, 4.0].map(Radius::Abs).to_vec();
    let choices = [
        Choice {
            name: "levenshtein",
            normalize: plain,
            metric: MetricSpec::Levenshtein,
            radii: lev.clone(),
        },
        Choice {
            name: "levenshtein --fold-case",
            normalize: case,
            metric: MetricSpec::Levenshtein,
            radii: lev.clone(),
        },
        Choice {
            name: "levenshtein --fold-case --fold-punct",
            normalize: punct,
            metric: MetricSpec::Levenshtein,
            radii: lev.clone(),
        },
        Choice {
            name: "levenshtein --fold-case --fold-punct --sort-tokens",
            normalize: sorted,
            metric: MetricSpec::Levenshtein,
            radii: lev.clone(),
        },
        Choice {
            name: "levenshtein --fold-case --fold-punct, relative radius",
            normalize: punct,
            metric: MetricSpec::Levenshtein,
            radii: [0.1, 0.2, 0.3].map(Radius::Rel).to_vec(),
        },
        Choice {
            name: "token-edit --fold-case --fold-punct",
            normalize: punct,
            metric: MetricSpec::TokenEdit,
            radii: [0.25, 0.5, 1.0, 2.0].map(Radius::Abs).to_vec(),
        },
        Choice {
            name: "token-edit --fold-case --fold-punct --sort-tokens",
            normalize: sorted,
            metric: MetricSpec::TokenEdit,
            radii: [0.25, 0.5, 1.0, 2.0].map(Radius::Abs).to_vec(),
        },
    ];

    let mut header_done = false;
    for choice in &choices {
        let corpus = read_corpus(
            &register,
            &IngestOptions {
                field: Some("name".into()),
                id_field: Some("code".into()),
                normalize: choice.normalize,
                ..IngestOptions::default()
            },
        )?;
        let Ids::Text(codes) = &corpus.ids else {
            return Err("the register's codes should be text".into());
        };
        let mut firm = Vec::with_capacity(codes.len());
        let mut kind = Vec::with_capacity(codes.len());
        for c in codes {
            let (f, k) = truth
                .get(c)
                .ok_or_else(|| format!("{c} is not in {}", truth_path.display()))?;
            firm.push(f.clone());
            kind.push(KINDS.iter().position(|x| x == k));
        }
        let n = codes.len();
        let mut sizes: HashMap<&str, u64> = HashMap::new();
        for f in &firm {
            *sizes.entry(f).or_default() += 1;
        }
        let same_total: u64 = sizes.values().map(|s| s * (s - 1) / 2).sum();
        if !header_done {
            println!(
                "{}: {n} entries of {} firms, {} pairs, {same_total} of them same-firm pairs\n",
                register.display(),
                sizes.len(),
                n * (n - 1) / 2
            );
            println!(
                "| choice | R | pairs within R | same-firm pairs found | precision | recall | {} |",
                KINDS.join(" | ")
            );
            println!("|---|---|---|---|---|---|{}", "---|".repeat(KINDS.len()));
            header_done = true;
        }
        // (original, variant) pairs per kind.
        let mut kind_total = [0u64; KINDS.len()];
        let mut originals: HashMap<&str, usize> = HashMap::new();
        for (i, f) in firm.iter().enumerate() {
            if truth[&codes[i]].1 == "original" {
                originals.insert(f, i);
            }
        }
        for k in kind.iter().flatten() {
            kind_total[*k] += 1;
        }

        let keys = corpus.key_bytes();
        let chars: Vec<usize> = keys.iter().map(|k| LevenshteinQuery::item_len(k)).collect();
        let metric = choice.metric.open(None)?;
        let radii = &choice.radii;
        let tallies = (0..n)
            .into_par_iter()
            .fold(
                || vec![Tally::default(); radii.len()],
                |mut acc, i| {
                    let q = metric.prepare(keys[i]);
                    for j in i + 1..n {
                        let widest = radii
                            .iter()
                            .map(|r| r.limit(chars[i], chars[j]))
                            .fold(0.0, f64::max);
                        let Some(d) = q.distance_within(keys[j], widest) else {
                            continue;
                        };
                        let same = firm[i] == firm[j];
                        // The kind of an (original, variant) pair.
                        let pair_kind = if !same {
                            None
                        } else if originals.get(firm[i].as_str()) == Some(&i) {
                            kind[j]
                        } else if originals.get(firm[j].as_str()) == Some(&j) {
                            kind[i]
                        } else {
                            None
                        };
                        for (t, r) in acc.iter_mut().zip(radii) {
                            if d <= r.limit(chars[i], chars[j]) {
                                t.found += 1;
                                if same {
                                    t.right += 1;
                                    if let Some(k) = pair_kind {
                                        t.kinds[k] += 1;
                                    }
                                }
                            }
                        }
                    }
                    acc
                },
            )
            .reduce(
                || vec![Tally::default(); radii.len()],
                |mut a, b| {
                    for (x, y) in a.iter_mut().zip(b) {
                        x.found += y.found;
                        x.right += y.right;
                        for (p, q) in x.kinds.iter_mut().zip(y.kinds) {
                            *p += q;
                        }
                    }
                    a
                },
            );
        for (t, r) in tallies.iter().zip(radii) {
            let precision = if t.found == 0 {
                "–".to_string()
            } else {
                format!("{:.3}", t.right as f64 / t.found as f64)
            };
            let kinds: Vec<String> = t
                .kinds
                .iter()
                .zip(kind_total)
                .map(|(&f, total)| format!("{f}/{total}"))
                .collect();
            println!(
                "| {} | {} | {} | {} | {precision} | {:.3} | {} |",
                choice.name,
                r.label(),
                t.found,
                t.right,
                t.right as f64 / same_total as f64,
                kinds.join(" | ")
            );
        }
    }
    Ok(())
}
