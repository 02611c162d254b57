//! Evaluation as the README runs it: recall by hand-worked cases, the ground-truth cache, and
//! the sweep's output files.

use std::path::{Path, PathBuf};

use waymark::eval::{plain_recall, threshold_recall};

use crate::util::{demo_lines, waymark};

#[test]
fn threshold_recall_by_hand_with_ties_and_duplicates() {
    // Worked by hand from the definition (threshold recall, ε = 1e-3; Aumüller, Bernhardsson,
    // Faithfull, SISAP 2017): true 3-NN distances [1, 2, 2].
    let truth = [1.0, 2.0, 2.0];
    // Another item at the tied distance 2 is as good as the true third: 3/3.
    assert_eq!(
        threshold_recall(&truth, &[(1, 1.0), (2, 2.0), (9, 2.0)], 3),
        1.0
    );
    // A duplicated id counts once: items 1, 1, 2 give 2 distinct right answers: 2/3.
    assert_eq!(
        threshold_recall(&truth, &[(1, 1.0), (1, 1.0), (2, 2.0)], 3),
        2.0 / 3.0
    );
    // Distance 3 exceeds the 3rd true distance 2 + ε: 2/3.
    assert_eq!(
        threshold_recall(&truth, &[(1, 1.0), (2, 2.0), (5, 3.0)], 3),
        2.0 / 3.0
    );
    // Within ε of the k-th distance still counts.
    assert_eq!(
        threshold_recall(&truth, &[(1, 1.0), (2, 2.0), (5, 2.0005)], 3),
        1.0
    );
    // Plain recall counts ids: the tied item 9 is not one of the true ids {1, 2, 3}: 2/3.
    assert_eq!(plain_recall(&[1, 2, 3], &[1, 2, 9]), 2.0 / 3.0);
    assert_eq!(plain_recall(&[1, 2, 3], &[1, 1, 2]), 2.0 / 3.0);
}

/// The first 3,000 demo names and 60 look-ups, copied into `dir`.
fn small_demo(dir: &Path) -> (PathBuf, PathBuf) {
    let first = |name: &str, n: usize| -> String {
        demo_lines(name)
            .into_iter()
            .take(n)
            .map(|l| format!("{l}\n"))
            .collect()
    };
    let (n, q) = (dir.join("names.txt"), dir.join("lookups.txt"));
    std::fs::write(&n, first("names.txt", 3000)).unwrap();
    std::fs::write(&q, first("lookups.txt", 60)).unwrap();
    (n, q)
}

fn eval_json(index: &Path, queries: &Path) -> (serde_json::Value, String) {
    let out = waymark()
        .args(["eval"])
        .arg(index)
        .arg("--queries")
        .arg(queries)
        .args(["-k", "5", "--candidates", "50,3000", "--json"])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    (
        serde_json::from_slice(&out.stdout).unwrap(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn eval_caches_the_exact_answers_and_refuses_a_damaged_cache() {
    let dir = tempfile::tempdir().unwrap();
    let (names, queries) = small_demo(dir.path());
    let index = dir.path().join("n.wmk");
    waymark()
        .args(["build", "-q"])
        .arg(&names)
        .arg("-o")
        .arg(&index)
        .assert()
        .success();
    let (first, _) = eval_json(&index, &queries);
    assert_eq!(first["ground_truth"]["cached"], false);
    let rows = first["recall"].as_array().unwrap();
    assert_eq!(rows.len(), 2);
    // 3,000 candidates of 3,000 items re-rank everything: the answers are exact.
    assert_eq!(rows[1]["recall"], 1.0);
    assert_eq!(rows[1]["plain_recall"], 1.0);
    let (second, _) = eval_json(&index, &queries);
    assert_eq!(second["ground_truth"]["cached"], true);
    assert_eq!(first["recall"][0]["recall"], second["recall"][0]["recall"]);

    // Damage the cache: change one distance, keep the JSON valid.
    let cache = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().path())
        .find(|p| p.to_string_lossy().contains(".truth-"))
        .expect("a cache file beside the queries");
    let text = std::fs::read_to_string(&cache).unwrap();
    let mut v: serde_json::Value = serde_json::from_str(&text).unwrap();
    v["answers"][0][0][1] = serde_json::json!(0.5);
    std::fs::write(&cache, serde_json::to_string(&v).unwrap()).unwrap();
    let (third, note) = eval_json(&index, &queries);
    assert_eq!(third["ground_truth"]["cached"], false);
    assert!(note.contains("damaged"), "{note}");
    assert_eq!(first["recall"][0]["recall"], third["recall"][0]["recall"]);
    // Truncated: does not parse, recomputed.
    std::fs::write(&cache, &text[..text.len() / 2]).unwrap();
    let (_, note) = eval_json(&index, &queries);
    assert!(note.contains("damaged"), "{note}");
    // Other queries under the same name: stale, recomputed.
    std::fs::write(&queries, "Orvane Qauy\nTessamir Rwo\n").unwrap();
    let (fourth, note) = eval_json(&index, &queries);
    assert!(note.contains("stale"), "{note}");
    assert_eq!(fourth["queries"], 2);
}

#[test]
fn eval_reports_distortion_of_every_space() {
    let dir = tempfile::tempdir().unwrap();
    let (names, _) = small_demo(dir.path());
    let index = dir.path().join("n.wmk");
    waymark()
        .args(["build", "-q", "--dim", "8"])
        .arg(&names)
        .arg("-o")
        .arg(&index)
        .assert()
        .success();
    let out = waymark()
        .arg("eval")
        .arg(&index)
        .args(["--distortion", "--pairs", "5000", "--json"])
        .output()
        .unwrap();
    assert!(out.status.success());
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let d = &v["distortion"];
    assert!(d["pairs"].as_u64().unwrap() >= 4900);
    let spaces = d["spaces"].as_array().unwrap();
    assert_eq!(spaces.len(), 3);
    // Landmarks are contractive in L∞ (triangle inequality): no pair expands.
    assert_eq!(spaces[2]["space"], "linf");
    assert_eq!(spaces[2]["expanded"], 0.0);
    for s in spaces {
        let hist: u64 = s["histogram"]
            .as_array()
            .unwrap()
            .iter()
            .map(|b| b["count"].as_u64().unwrap())
            .sum();
        assert_eq!(hist, d["pairs"].as_u64().unwrap());
        assert!(s["distortion"].as_f64().unwrap() >= 1.0);
    }
    // Nothing to measure is a usage error.
    waymark().arg("eval").arg(&index).assert().code(2);
}

#[test]
fn sweep_writes_one_row_per_configuration() {
    let dir = tempfile::tempdir().unwrap();
    let (names, queries) = small_demo(dir.path());
    let out = dir.path().join("sweep");
    waymark()
        .arg("sweep")
        .arg(&names)
        .arg("--queries")
        .arg(&queries)
        .args([
            "-k",
            "5",
            "--dims",
            "2,4,8",
            "--embeddings",
            "landmarks,refsets,fastmap",
        ])
        .args(["--spaces", "l1,linf", "--candidates", "100,200", "--out"])
        .arg(&out)
        .assert()
        .success();
    let mut csv = csv::Reader::from_path(out.join("sweep.csv")).unwrap();
    let rows: Vec<csv::StringRecord> = csv.records().map(|r| r.unwrap()).collect();
    assert_eq!(rows.len(), 3 * 3 * 2 * 2);
    let header = csv.headers().unwrap().clone();
    let col = |name: &str| header.iter().position(|h| h == name).unwrap();
    let mut seen = std::collections::HashSet::new();
    for r in &rows {
        let key = (
            r[col("method")].to_string(),
            r[col("dim")].to_string(),
            r[col("space")].to_string(),
            r[col("candidates")].to_string(),
        );
        assert!(seen.insert(key), "one row per configuration");
        let recall: f64 = r[col("recall")].parse().unwrap();
        assert!((0.0..=1.0).contains(&recall));
    }
    let json: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("sweep.json")).unwrap()).unwrap();
    assert_eq!(json["rows"].as_array().unwrap().len(), rows.len());
    for svg in [
        "recall_vs_dim_c100.svg",
        "recall_vs_dim_c200.svg",
        "recall_vs_qps.svg",
    ] {
        let text = std::fs::read_to_string(out.join(svg)).unwrap();
        assert!(text.starts_with("<svg"), "{svg}");
        assert!(text.contains("threshold recall@5"), "{svg}: axis title");
        assert!(text.contains("landmarks, l1"), "{svg}: legend");
    }
    // The temporary indexes are gone.
    let left: Vec<_> = std::fs::read_dir(&out)
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    assert_eq!(left.len(), 5, "{left:?}");
}

#[test]
fn eval_measures_the_candidate_source_and_visit_asked_for() {
    let dir = tempfile::tempdir().unwrap();
    let (names, queries) = small_demo(dir.path());
    let index = dir.path().join("n.wmk");
    waymark()
        .args(["build", "-q"])
        .arg(&names)
        .arg("-o")
        .arg(&index)
        .assert()
        .success();
    let run = |extra: &[&str]| -> serde_json::Value {
        let out = waymark()
            .arg("eval")
            .arg(&index)
            .arg("--queries")
            .arg(&queries)
            .args(["-k", "5", "--candidates", "50,3000", "--json"])
            .args(extra)
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        serde_json::from_slice(&out.stdout).unwrap()
    };
    // 3,000 items: below the size where cells are the default, so the scan measures.
    let plain = run(&[]);
    assert_eq!(plain["recall"][0]["source"], "scan");
    let cells = run(&["--candidates-from", "cells", "--visit", "0"]);
    for row in cells["recall"].as_array().unwrap() {
        assert_eq!(row["source"], "cells");
        assert_eq!(row["visit"], 0);
    }
    // Every row compared and every item a candidate: exact answers.
    assert_eq!(cells["recall"][1]["recall"], 1.0);
    let few = run(&["--candidates-from", "cells", "--visit", "200"]);
    assert_eq!(few["recall"][0]["visit"], 200);
    assert_eq!(few["recall"][0]["distances_per_query"], 50.0 + 64.0);
    let tree = run(&["--candidates-from", "tree"]);
    assert_eq!(tree["recall"][0]["source"], "tree");
    // The table names the source in its header.
    let out = waymark()
        .arg("eval")
        .arg(&index)
        .arg("--queries")
        .arg(&queries)
        .args(["--candidates", "50", "--candidates-from", "cells"])
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains("from cells (12 rows compared per candidate)"),
        "{text}"
    );
}

/// A corpus of one item: FastMap finds no axis, so it is left out with a note and the other
/// methods are measured; asked for FastMap alone, the sweep is refused with the reason.
#[test]
fn sweep_leaves_out_a_method_that_makes_no_coordinate() {
    let dir = tempfile::tempdir().unwrap();
    let one = dir.path().join("one.txt");
    let queries = dir.path().join("q.txt");
    std::fs::write(&one, "Keth Landing\n").unwrap();
    std::fs::write(&queries, "Kath Landing\n").unwrap();
    let out = dir.path().join("sweep");
    let run = |methods: &str, out: &Path| {
        waymark()
            .arg("sweep")
            .arg(&one)
            .arg("--queries")
            .arg(&queries)
            .args(["-k", "1", "--dims", "1", "--embeddings", methods])
            .args(["--spaces", "l1", "--candidates", "1", "--out"])
            .arg(out)
            .assert()
    };
    let done = run("landmarks,fastmap", &out).success();
    let err = String::from_utf8_lossy(&done.get_output().stderr).into_owned();
    assert!(
        err.contains("fastmap: the items allow no coordinate (too few distinct items); left out"),
        "{err}"
    );
    let mut csv = csv::Reader::from_path(out.join("sweep.csv")).unwrap();
    let methods: Vec<String> = csv.records().map(|r| r.unwrap()[0].to_string()).collect();
    assert_eq!(methods, ["landmarks"]);
    let refused = run("fastmap", &dir.path().join("sweep2")).failure().code(2);
    let err = String::from_utf8_lossy(&refused.get_output().stderr).into_owned();
    assert!(
        err.contains("no embedding method asked for can make a coordinate"),
        "{err}"
    );
}
