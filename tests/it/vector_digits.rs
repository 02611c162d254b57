//! Vector k-NN on an open dataset: scikit-learn's bundled handwritten digits (1,797 images of
//! 8×8 pixels, values 0–16; `sklearn.datasets.load_digits`, shipped inside the scikit-learn
//! package on PyPI). The ground truth comes from NumPy, outside the project;
//! scripts/test-data.sh installs scikit-learn (and NumPy with it) with pip into the test
//! environment `.venv-test/`, whose Python runs the export.

use std::path::Path;

use crate::util::{json_lines, waymark};

/// Writes items.csv (first 1,597 images), queries.csv (the other 200) and truth.json (per
/// query the 10 smallest L2 distances by NumPy) into `dir`.
const EXPORT: &str = r#"
import json, sys
import numpy as np
from sklearn.datasets import load_digits
X = load_digits().data.astype(np.float64)
items, queries = X[:1597], X[1597:]
out = sys.argv[1]
def rows(a):
    return "".join(",".join(str(int(v)) for v in r) + "\n" for r in a)
open(out + "/items.csv", "w").write(rows(items))
open(out + "/queries.csv", "w").write(rows(queries))
d = np.sqrt(((queries[:, None, :] - items[None, :, :]) ** 2).sum(axis=2))
json.dump([sorted(r)[:10] for r in d.tolist()], open(out + "/truth.json", "w"))
"#;

/// The Python of the test environment that scripts/test-data.sh makes.
fn test_python() -> std::path::PathBuf {
    let python = Path::new(env!("CARGO_MANIFEST_DIR")).join(".venv-test/bin/python");
    assert!(
        python.exists(),
        "{} is missing: run scripts/test-data.sh first (it makes the test environment with \
         NumPy and scikit-learn)",
        python.display()
    );
    python
}

fn export(dir: &Path) {
    let python = test_python();
    let out = std::process::Command::new(&python)
        .arg("-c")
        .arg(EXPORT)
        .arg(dir)
        .output()
        .expect("the test environment's Python runs");
    assert!(
        out.status.success(),
        "exporting the digits needs NumPy and scikit-learn in {} (scripts/test-data.sh \
         installs them): {}",
        python.display(),
        String::from_utf8_lossy(&out.stderr)
    );
}

#[test]
fn digits_exact_answers_match_numpy_and_recall_meets_the_target_at_d16() {
    let dir = tempfile::tempdir().unwrap();
    export(dir.path());
    let index = dir.path().join("digits.wmk");
    waymark()
        .arg("build")
        .arg(dir.path().join("items.csv"))
        .arg("-o")
        .arg(&index)
        .args(["--metric", "l2", "--dim", "16", "-q"])
        .assert()
        .success();
    let truth: Vec<Vec<f64>> =
        serde_json::from_slice(&std::fs::read(dir.path().join("truth.json")).unwrap()).unwrap();
    let out = waymark()
        .arg("query")
        .arg(&index)
        .args(["-k", "10", "--exact", "--queries"])
        .arg(dir.path().join("queries.csv"))
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let answers: Vec<serde_json::Value> = json_lines(&out);
    assert_eq!(answers.len(), truth.len());
    for (a, t) in answers.iter().zip(&truth) {
        let got: Vec<f64> = a["neighbors"]
            .as_array()
            .unwrap()
            .iter()
            .map(|n| n["distance"].as_f64().unwrap())
            .collect();
        assert_eq!(got.len(), 10);
        for (g, w) in got.iter().zip(t) {
            assert!((g - w).abs() < 1e-9, "{got:?} vs NumPy {t:?}");
        }
    }
    // Approximate answers: threshold recall@10 ≥ 0.95 (the target for strings) at d = 16,
    // re-ranking 100 candidates (6.3% of the items).
    let out = waymark()
        .arg("eval")
        .arg(&index)
        .arg("--queries")
        .arg(dir.path().join("queries.csv"))
        .args(["-k", "10", "--candidates", "100", "--space", "l2", "--json"])
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let v: serde_json::Value = serde_json::from_slice(&out).unwrap();
    let recall = v["recall"][0]["recall"].as_f64().unwrap();
    assert!(recall >= 0.95, "threshold recall@10 {recall} at C = 100");
}
