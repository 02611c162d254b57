//! The reference scan: a general-purpose fuzzy-string library (Python's rapidfuzz,
//! `process.cdist` with the Levenshtein distance on all cores) used as a measuring stick.
//! `scripts/reference-scan.py` runs it on word and query files this module writes, and
//! times only the scan; `scripts/bench-deps.sh` makes the Python that has it.
//!
//! Its answers are checked against waymark's brute force on every query: the two compute
//! the same distances or the bench stops.
#![allow(dead_code)] // each bench uses a part

use std::path::{Path, PathBuf};
use std::process::Command;

use waymark::search::Neighbor;

/// A Python with rapidfuzz and numpy, and the script.
pub struct Reference {
    python: PathBuf,
    script: PathBuf,
}

/// What one reference scan measured, and its answers.
pub struct RefScan {
    /// Reading the word and query files in Python (not part of the scan).
    pub load_s: f64,
    /// Time inside `cdist`, summed over the query blocks.
    pub cdist_s: f64,
    /// The k-nearest selection in numpy.
    pub select_s: f64,
    /// Query blocks the scan went through.
    pub blocks: usize,
    /// Per query: `(word index, distance)`, nearest first, ties by word index.
    pub answers: Vec<Vec<(u32, u32)>>,
}

impl RefScan {
    /// Seconds counted for the reference: the time inside `cdist` alone. The k-nearest
    /// selection in numpy (single-threaded) is measured and printed but not counted, so the
    /// reference's rates are, if anything, on its side.
    pub fn scan_s(&self) -> f64 {
        self.cdist_s
    }

    /// Queries per second of the scan (`cdist` alone, see [`RefScan::scan_s`]).
    pub fn qps(&self) -> f64 {
        self.answers.len() as f64 / self.scan_s()
    }

    /// Word pairs per second inside `cdist` alone (the distance kernel's rate).
    pub fn pairs_per_s(&self, n: usize) -> f64 {
        self.answers.len() as f64 * n as f64 / self.cdist_s
    }

    /// One line for the bench's output.
    pub fn describe(&self, n: usize) -> String {
        format!(
            "reference scan (rapidfuzz cdist, all cores): {:.1} q/s; cdist {:.2} s ({:.1} M pairs/s), \
             {} blocks; not counted: k-nearest selection in numpy {:.2} s, loading the files {:.2} s",
            self.qps(),
            self.cdist_s,
            self.pairs_per_s(n) / 1e6,
            self.blocks,
            self.select_s,
            self.load_s
        )
    }

    /// Panics, loudly, unless every query's distances equal those of `truth` (waymark's
    /// brute force), nearest first, over the first `k`. Returns the number of queries checked.
    pub fn check(&self, truth: &[Vec<Neighbor>], k: usize) -> usize {
        assert_eq!(
            self.answers.len(),
            truth.len(),
            "REFERENCE MISMATCH: the reference answered {} queries, the brute force {}",
            self.answers.len(),
            truth.len()
        );
        for (q, (r, t)) in self.answers.iter().zip(truth).enumerate() {
            let got: Vec<u32> = r.iter().take(k).map(|&(_, d)| d).collect();
            let want: Vec<u32> = t.iter().take(k).map(|nb| nb.distance as u32).collect();
            assert_eq!(
                got, want,
                "REFERENCE MISMATCH on query {q}: rapidfuzz's distances differ from waymark's brute force"
            );
        }
        truth.len()
    }
}

impl Reference {
    /// The reference, or `None` after one line on standard output saying how to get it.
    pub fn find() -> Option<Reference> {
        let root = Path::new(env!("CARGO_MANIFEST_DIR"));
        let python = std::env::var_os("WAYMARK_PYTHON")
            .map(PathBuf::from)
            .unwrap_or_else(|| root.join(".venv-bench/bin/python"));
        let ok = Command::new(&python)
            .args(["-c", "import rapidfuzz, numpy"])
            .output()
            .map(|o| o.status.success())
            .unwrap_or(false);
        if !ok {
            println!(
                "reference scan SKIPPED: {} has no rapidfuzz and numpy; run scripts/bench-deps.sh \
                 (or set WAYMARK_PYTHON to a Python that has both); the reference rows are left out",
                python.display()
            );
            return None;
        }
        Some(Reference {
            python,
            script: root.join("scripts/reference-scan.py"),
        })
    }

    /// The library's version, for the output.
    pub fn version(&self) -> String {
        Command::new(&self.python)
            .args(["-c", "import rapidfuzz; print(rapidfuzz.__version__)"])
            .output()
            .map(|o| String::from_utf8_lossy(&o.stdout).trim().to_string())
            .unwrap_or_default()
    }

    /// Runs the scan of `queries` against the `n` words given by `word`, k nearest each.
    /// Panics if the script fails: a bench never reports a scan that did not run.
    pub fn scan<'a>(
        &self,
        n: usize,
        word: impl Fn(usize) -> &'a [u8],
        queries: &[String],
        k: usize,
    ) -> RefScan {
        let dir = tempfile::tempdir().expect("temp dir");
        let words_path = dir.path().join("words.txt");
        let queries_path = dir.path().join("queries.txt");
        let out_path = dir.path().join("answers.txt");
        let mut text = Vec::new();
        for i in 0..n {
            let w = word(i);
            assert!(!w.contains(&b'\n'), "word {i} holds a line break");
            text.extend_from_slice(w);
            text.push(b'\n');
        }
        std::fs::write(&words_path, text).expect("write words");
        let mut text = String::new();
        for q in queries {
            assert!(!q.contains('\n'), "a query holds a line break");
            text.push_str(q);
            text.push('\n');
        }
        std::fs::write(&queries_path, text).expect("write queries");
        let status = Command::new(&self.python)
            .arg(&self.script)
            .arg(&words_path)
            .arg(&queries_path)
            .arg(k.to_string())
            .arg(&out_path)
            .status()
            .expect("run the reference scan");
        assert!(status.success(), "the reference scan failed: {status}");
        let out = std::fs::read_to_string(&out_path).expect("reference answers");
        let mut lines = out.lines();
        let head: Vec<&str> = lines.next().expect("header").split_whitespace().collect();
        let field = |name: &str| -> f64 {
            let at = head.iter().position(|&h| h == name).expect("header field");
            head[at + 1].parse().expect("number")
        };
        let answers: Vec<Vec<(u32, u32)>> = lines
            .map(|l| {
                l.split_whitespace()
                    .map(|p| {
                        let (i, d) = p.split_once(':').expect("index:distance");
                        (i.parse().expect("index"), d.parse().expect("distance"))
                    })
                    .collect()
            })
            .collect();
        assert_eq!(answers.len(), queries.len(), "reference answers missing");
        RefScan {
            load_s: field("load"),
            cdist_s: field("cdist"),
            select_s: field("select"),
            blocks: field("blocks") as usize,
            answers,
        }
    }
}
