//! Every metric from the command line, as the README shows them, on the bundled demo data:
//! exact answers checked against outside references (strsim, petgraph) or a brute force
//! written here from the metric's textbook definition, plus the errors of bad queries and
//! inputs, and `check-metric` on a planted violation.

use std::collections::{BTreeSet, HashMap};
use std::path::{Path, PathBuf};

use predicates::prelude::*;
use serde::Deserialize;

use crate::util::{demo, demo_lines, json_lines, repo_file, waymark, Dir};

/// Builds `input` with `args` into a temp folder; returns the folder and the index path.
fn build(input: &Path, args: &[&str]) -> (Dir, PathBuf) {
    let d = Dir::new();
    // `-q` before `args`: they may end with `-- PROGRAM ARGS`.
    let out = d.build(input, "idx.wmk", &[&["-q"], args].concat());
    (d, out)
}

#[derive(Deserialize)]
struct Answer {
    query: String,
    neighbors: Vec<Hit>,
}

#[derive(Deserialize)]
struct Hit {
    item: String,
    distance: f64,
}

/// Runs `waymark query INDEX ARGS` with `queries` on stdin; one answer per query.
fn query(index: &Path, queries: &[String], args: &[&str]) -> Vec<Answer> {
    let out = waymark()
        .arg("query")
        .arg(index)
        .args(args)
        .write_stdin(queries.join("\n") + "\n")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let answers: Vec<Answer> = json_lines(&out);
    assert_eq!(answers.len(), queries.len());
    answers
}

/// The `k` smallest of `d` over `items`, sorted.
fn k_smallest(items: &[String], k: usize, d: impl Fn(&str) -> f64) -> Vec<f64> {
    let mut all: Vec<f64> = items.iter().map(|s| d(s)).collect();
    all.sort_by(f64::total_cmp);
    all.truncate(k);
    all
}

fn assert_close(got: &[f64], want: &[f64], what: &str) {
    assert_eq!(got.len(), want.len(), "{what}: {got:?} vs {want:?}");
    for (g, w) in got.iter().zip(want) {
        assert!(
            (g - w).abs() <= 1e-9 * w.abs().max(1.0),
            "{what}: {got:?} vs {want:?}"
        );
    }
}

fn distances(a: &Answer) -> Vec<f64> {
    a.neighbors.iter().map(|h| h.distance).collect()
}

#[test]
fn damerau_exact_answers_match_strsim() {
    // Reference: strsim::damerau_levenshtein, the unrestricted form (strsim's docs).
    let dir = tempfile::tempdir().unwrap();
    let names: Vec<String> = demo_lines("names.txt").into_iter().take(3000).collect();
    let input = dir.path().join("names.txt");
    std::fs::write(&input, names.join("\n")).unwrap();
    let (_d, index) = build(&input, &["--metric", "damerau", "--dim", "32"]);
    let queries: Vec<String> = demo_lines("lookups.txt").into_iter().take(40).collect();
    for a in query(&index, &queries, &["-k", "5", "--exact"]) {
        let want = k_smallest(&names, 5, |s| {
            strsim::damerau_levenshtein(&a.query, s) as f64
        });
        assert_close(&distances(&a), &want, &a.query);
    }
}

#[test]
fn hamming_exact_answers_match_strsim_on_barcodes() {
    // Reference: strsim::hamming.
    let codes = demo_lines("barcodes.txt");
    let (_d, index) = build(
        &demo("barcodes.txt"),
        &["--metric", "hamming", "--dim", "16"],
    );
    let reads: Vec<String> = demo_lines("barcode-reads.txt")
        .into_iter()
        .take(60)
        .collect();
    for a in query(&index, &reads, &["-k", "3", "--exact"]) {
        let want = k_smallest(&codes, 3, |s| {
            strsim::hamming(&a.query, s).expect("equal lengths") as f64
        });
        assert_close(&distances(&a), &want, &a.query);
        assert!(
            a.neighbors[0].distance <= 2.0,
            "reads have 1-2 substitutions"
        );
    }
}

#[test]
fn hamming_refuses_items_and_queries_of_another_length() {
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("codes.txt");
    std::fs::write(&input, "ACGTACGT\nACGTACGA\nACGTAC\n").unwrap();
    waymark()
        .arg("build")
        .arg(&input)
        .args(["-o", "x.wmk", "--metric", "hamming"])
        .current_dir(dir.path())
        .assert()
        .code(2)
        .stderr(predicate::str::contains("record 3: 6 characters"));
    assert!(!dir.path().join("x.wmk").exists());
    let (_d, index) = build(
        &demo("barcodes.txt"),
        &["--metric", "hamming", "--dim", "8"],
    );
    waymark()
        .arg("query")
        .arg(&index)
        .write_stdin("ACGTACGTACGT\nACGT\n")
        .assert()
        .code(2)
        .stderr(predicate::str::contains(
            "<stdin>:2: the query has 4 characters",
        ));
}

/// Weighted edit distance by the Wagner–Fischer dynamic program (common practice), with the
/// costs of demo-data/nucleotide-costs.txt written out here.
fn nucleotide_distance(a: &str, b: &str) -> f64 {
    let sub = |x: char, y: char| -> f64 {
        match (x.min(y), x.max(y)) {
            _ if x == y => 0.0,
            ('A', 'G') | ('C', 'T') => 0.5,
            _ => 1.0,
        }
    };
    let (a, b): (Vec<char>, Vec<char>) = (a.chars().collect(), b.chars().collect());
    let indel = 1.5;
    let mut prev: Vec<f64> = (0..=b.len()).map(|j| j as f64 * indel).collect();
    for i in 1..=a.len() {
        let mut cur = vec![i as f64 * indel];
        for j in 1..=b.len() {
            let v = (prev[j] + indel)
                .min(cur[j - 1] + indel)
                .min(prev[j - 1] + sub(a[i - 1], b[j - 1]));
            cur.push(v);
        }
        prev = cur;
    }
    prev[b.len()]
}

#[test]
fn weighted_exact_answers_match_the_dynamic_program() {
    let codes = demo_lines("barcodes.txt");
    let costs = demo("nucleotide-costs.txt");
    let (_d, index) = build(
        &demo("barcodes.txt"),
        &[
            "--metric",
            "weighted",
            "--costs",
            costs.to_str().unwrap(),
            "--dim",
            "16",
        ],
    );
    let reads: Vec<String> = demo_lines("barcode-reads.txt")
        .into_iter()
        .take(30)
        .collect();
    for a in query(&index, &reads, &["-k", "4", "--exact"]) {
        let want = k_smallest(&codes, 4, |s| nucleotide_distance(&a.query, s));
        assert_close(&distances(&a), &want, &a.query);
    }
}

#[test]
fn weighted_needs_a_cost_file_and_refuses_a_bad_one() {
    let dir = tempfile::tempdir().unwrap();
    waymark()
        .arg("build")
        .arg(demo("barcodes.txt"))
        .args(["-o", "x.wmk", "--metric", "weighted"])
        .current_dir(dir.path())
        .assert()
        .code(2)
        .stderr(predicate::str::contains(
            "--metric weighted needs --costs FILE",
        ));
    // A → C through G costs 1 + 1 < 3: the triangle inequality over symbols fails.
    let bad = dir.path().join("bad.txt");
    std::fs::write(&bad, "sub A G 1\nsub G C 1\nsub A C 3\n").unwrap();
    waymark()
        .arg("build")
        .arg(demo("barcodes.txt"))
        .args(["-o", "x.wmk", "--metric", "weighted", "--costs"])
        .arg(&bad)
        .current_dir(dir.path())
        .assert()
        .code(2)
        .stderr(predicate::str::contains("bad.txt:"));
    waymark()
        .arg("build")
        .arg(demo("names.txt"))
        .args(["-o", "x.wmk", "--costs"])
        .arg(&bad)
        .current_dir(dir.path())
        .assert()
        .code(2)
        .stderr(predicate::str::contains(
            "--costs is an option of --metric weighted",
        ));
    assert!(!dir.path().join("x.wmk").exists());
}

fn jaccard(a: &str, b: &str) -> f64 {
    // Jaccard distance 1 − |A∩B| / |A∪B| of white-space token sets (common practice).
    let a: BTreeSet<&str> = a.split_whitespace().collect();
    let b: BTreeSet<&str> = b.split_whitespace().collect();
    let union = a.union(&b).count();
    if union == 0 {
        return 0.0;
    }
    1.0 - a.intersection(&b).count() as f64 / union as f64
}

#[test]
fn jaccard_exact_answers_match_a_set_brute_force() {
    let entries = demo_lines("tags.txt");
    let (_d, index) = build(&demo("tags.txt"), &["--metric", "jaccard", "--dim", "16"]);
    let queries: Vec<String> = demo_lines("tag-queries.txt").into_iter().take(40).collect();
    for a in query(&index, &queries, &["-k", "5", "--exact"]) {
        let want = k_smallest(&entries, 5, |s| jaccard(&a.query, s));
        assert_close(&distances(&a), &want, &a.query);
    }
}

/// The buoy readings as the index stores them: f32, then compared in f64.
fn buoy_rows(name: &str, header: bool) -> Vec<(String, Vec<f64>)> {
    demo_lines(name)
        .into_iter()
        .skip(usize::from(header))
        .map(|l| {
            let v = l
                .split(',')
                .map(|x| f64::from(x.parse::<f32>().expect("number")))
                .collect();
            (l, v)
        })
        .collect()
}

#[test]
fn vector_exact_answers_match_a_brute_force_in_every_norm() {
    let rows = buoy_rows("buoys.csv", true);
    let queries: Vec<(String, Vec<f64>)> = buoy_rows("buoy-queries.csv", false)
        .into_iter()
        .take(25)
        .collect();
    let texts: Vec<String> = queries.iter().map(|q| q.0.clone()).collect();
    // The norms by their definitions (common practice).
    type Norm = fn(&[f64], &[f64]) -> f64;
    let norms: [(&str, Norm); 3] = [
        ("l1", |a, b| {
            a.iter().zip(b).map(|(x, y)| (x - y).abs()).sum()
        }),
        ("l2", |a, b| {
            a.iter()
                .zip(b)
                .map(|(x, y)| (x - y) * (x - y))
                .sum::<f64>()
                .sqrt()
        }),
        ("linf", |a, b| {
            a.iter()
                .zip(b)
                .map(|(x, y)| (x - y).abs())
                .fold(0.0, f64::max)
        }),
    ];
    for (name, norm) in norms {
        let (_d, index) = build(
            &demo("buoys.csv"),
            &["--metric", name, "--header", "--dim", "8"],
        );
        for (a, q) in query(&index, &texts, &["-k", "5", "--exact"])
            .iter()
            .zip(&queries)
        {
            let mut all: Vec<f64> = rows.iter().map(|r| norm(&q.1, &r.1)).collect();
            all.sort_by(f64::total_cmp);
            assert_close(&distances(a), &all[..5], &format!("{name} {}", a.query));
        }
    }
}

#[test]
fn vector_queries_and_inputs_are_checked_with_line_and_column() {
    let (_d, index) = build(
        &demo("buoys.csv"),
        &["--metric", "l2", "--header", "--dim", "4"],
    );
    for (q, msg) in [
        ("1,2,3", "<stdin>:2: the query has 3 components"),
        ("1,2,3,4,5,6,7,x", "<stdin>:2: column 8"),
        ("1,2,3,4,5,6,7,NaN", "NaN is not allowed"),
    ] {
        waymark()
            .arg("query")
            .arg(&index)
            .write_stdin(format!("1,2,3,4,5,6,7,8\n{q}\n"))
            .assert()
            .code(2)
            .stderr(predicate::str::contains(msg));
    }
    let dir = tempfile::tempdir().unwrap();
    for (text, msg) in [
        ("1,2\n3,4,5\n", "2: "),
        ("1,2\n3,nan\n", "NaN"),
        ("1,2\n3,abc\n", "column 2"),
    ] {
        let input = dir.path().join("v.csv");
        std::fs::write(&input, text).unwrap();
        waymark()
            .arg("build")
            .arg(&input)
            .args(["-o", "v.wmk", "--metric", "l1"])
            .current_dir(dir.path())
            .assert()
            .code(2)
            .stderr(predicate::str::contains("v.csv:").and(predicate::str::contains(msg)));
        assert!(!dir.path().join("v.wmk").exists());
    }
    waymark()
        .arg("build")
        .arg(demo("buoys.csv"))
        .args(["-o", "v.wmk", "--metric", "l1", "--field", "wave_m"])
        .current_dir(dir.path())
        .assert()
        .code(2)
        .stderr(predicate::str::contains("are for text inputs"));
}

#[test]
fn graph_exact_answers_match_petgraph_dijkstra() {
    // Reference: petgraph's Dijkstra on the same edge list, parsed here.
    let mut g = petgraph::graph::UnGraph::<(), f64>::new_undirected();
    let mut node: HashMap<String, petgraph::graph::NodeIndex> = HashMap::new();
    for l in demo_lines("ferries.txt") {
        if l.starts_with('#') || l.trim().is_empty() {
            continue;
        }
        let f: Vec<&str> = l.split_whitespace().collect();
        let mut id = |s: &str| *node.entry(s.to_string()).or_insert_with(|| g.add_node(()));
        let (a, b) = (id(f[0]), id(f[1]));
        g.add_edge(a, b, f[2].parse().unwrap());
    }
    let (_d, index) = build(&demo("ferries.txt"), &["--metric", "graph", "--dim", "16"]);
    let stops: Vec<String> = demo_lines("ferry-queries.txt")
        .into_iter()
        .take(30)
        .collect();
    for a in query(&index, &stops, &["-k", "6", "--exact"]) {
        let d = petgraph::algo::dijkstra(&g, node[&a.query], None, |e| *e.weight());
        let mut all: Vec<f64> = d.values().copied().collect();
        all.sort_by(f64::total_cmp);
        assert_close(&distances(&a), &all[..6], &a.query);
        assert_eq!(a.neighbors[0].item, a.query);
    }
    waymark()
        .arg("query")
        .arg(&index)
        .write_stdin("Nowhere-Quay\n")
        .assert()
        .code(2)
        .stderr(predicate::str::contains(
            "<stdin>:1: `Nowhere-Quay` is not a node of the graph",
        ));
}

#[test]
fn graph_input_refuses_negative_weights_with_the_line() {
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("legs.txt");
    std::fs::write(&input, "# legs\nKeth Orvane 25\nOrvane Lille -3\n").unwrap();
    waymark()
        .arg("build")
        .arg(&input)
        .args(["-o", "g.wmk", "--metric", "graph"])
        .current_dir(dir.path())
        .assert()
        .code(2)
        .stderr(predicate::str::contains("legs.txt:3:"));
}

#[test]
fn external_program_answers_like_strsim_levenshtein() {
    // Reference: strsim::levenshtein; examples/metric_server.py computes Levenshtein.
    let dir = tempfile::tempdir().unwrap();
    let names: Vec<String> = demo_lines("names.txt").into_iter().take(200).collect();
    let input = dir.path().join("names.txt");
    std::fs::write(&input, names.join("\n")).unwrap();
    let server = repo_file("examples/metric_server.py");
    let (_d, index) = build(
        &input,
        &[
            "--metric",
            "external",
            "--dim",
            "8",
            "--",
            "python3",
            server.to_str().unwrap(),
        ],
    );
    let queries: Vec<String> = demo_lines("lookups.txt").into_iter().take(10).collect();
    // Every item is a candidate: the answers are exact.
    for a in query(&index, &queries, &["-k", "3", "--candidates", "200"]) {
        let want = k_smallest(&names, 3, |s| strsim::levenshtein(&a.query, s) as f64);
        assert_close(&distances(&a), &want, &a.query);
    }
    waymark()
        .arg("build")
        .arg(&input)
        .args(["-o", "e.wmk", "--metric", "external"])
        .current_dir(dir.path())
        .assert()
        .code(2)
        .stderr(predicate::str::contains("needs the program after `--`"));
}

/// A program that answers squared edit distances: not a metric (1 + 1 < 2²).
const SQUARED: &str = r#"
import json, sys
print(json.dumps({"protocol": "waymark-metric", "version": 1}), flush=True)
def lev(a, b):
    prev = list(range(len(b) + 1))
    for i, x in enumerate(a, 1):
        cur = [i]
        for j, y in enumerate(b, 1):
            cur.append(min(prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (x != y)))
        prev = cur
    return prev[-1]
for line in sys.stdin:
    r = json.loads(line)
    print(json.dumps({"distances": [lev(r["query"], s) ** 2 for s in r["items"]]}), flush=True)
"#;

#[test]
fn check_metric_catches_a_planted_triangle_violation() {
    let dir = tempfile::tempdir().unwrap();
    let script = dir.path().join("squared.py");
    std::fs::write(&script, SQUARED).unwrap();
    let input = dir.path().join("few.txt");
    // "Keth" → "Kath" → "Katt": 1 + 1 edits, squared 1 + 1 < 4 = d(Keth, Katt)².
    std::fs::write(&input, "Keth\nKath\nKatt\n").unwrap();
    let out = waymark()
        .arg("check-metric")
        .arg(&input)
        .args(["--metric", "external", "--", "python3"])
        .arg(&script)
        .assert()
        .code(4)
        .stderr(predicate::str::contains("is not a metric on this sample"))
        .get_output()
        .stdout
        .clone();
    let out = String::from_utf8(out).unwrap();
    assert!(
        out.contains(r#"d("Keth", "Katt") = 4 > d("Keth", "Kath") + d("Kath", "Katt") = 1 + 1"#),
        "{out}"
    );
    // The build still writes the index, and warns.
    waymark()
        .arg("build")
        .arg(&input)
        .args([
            "-o", "few.wmk", "--metric", "external", "-q", "--", "python3",
        ])
        .arg(&script)
        .current_dir(dir.path())
        .assert()
        .success()
        .stderr(predicate::str::contains(
            "warning: the external distance breaks the metric rules",
        ));
    // Real metrics pass.
    waymark()
        .arg("check-metric")
        .arg(demo("names.txt"))
        .args(["--metric", "damerau", "--sample", "60"])
        .assert()
        .success()
        .stdout(predicate::str::contains("no violation on this sample"));
    waymark()
        .arg("check-metric")
        .arg(demo("ferries.txt"))
        .args(["--metric", "graph"])
        .assert()
        .success();
}

#[test]
fn eval_and_sweep_work_on_other_metrics() {
    let (dir, index) = build(&demo("tags.txt"), &["--metric", "jaccard", "--dim", "16"]);
    let q = dir.path("q.txt");
    std::fs::copy(demo("tag-queries.txt"), &q).unwrap();
    let out = waymark()
        .arg("eval")
        .arg(&index)
        .arg("--queries")
        .arg(&q)
        .args(["-k", "5", "--candidates", "6000", "--json"])
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let v: serde_json::Value = serde_json::from_slice(&out).unwrap();
    // Every item a candidate: recall is exactly 1.
    assert_eq!(v["recall"][0]["recall"], 1.0, "{v}");
    let bq = dir.path("buoy-queries.csv");
    std::fs::copy(demo("buoy-queries.csv"), &bq).unwrap();
    waymark()
        .arg("sweep")
        .arg(demo("buoys.csv"))
        .args([
            "--metric",
            "l1",
            "--header",
            "--dims",
            "4,8",
            "--embeddings",
            "landmarks",
        ])
        .args([
            "--spaces",
            "l1",
            "--candidates",
            "3000",
            "-k",
            "5",
            "-q",
            "--queries",
        ])
        .arg(&bq)
        .arg("--out")
        .arg(dir.path("sweep"))
        .assert()
        .success();
    let csv = std::fs::read_to_string(dir.path("sweep/sweep.csv")).unwrap();
    assert_eq!(csv.lines().count(), 3, "{csv}");
}

#[test]
fn unknown_metric_is_a_usage_error() {
    waymark()
        .arg("build")
        .arg(demo("names.txt"))
        .args(["-o", "x.wmk", "--metric", "cosine-ish"])
        .assert()
        .code(2)
        .stderr(predicate::str::contains(
            "invalid value 'cosine-ish' for '--metric <METRIC>'",
        ));
}

#[test]
fn errors_inline_goes_past_a_vector_of_another_dimension_and_an_unknown_node() {
    let d = Dir::new();
    // Euclidean distances by hand: (0,1)–(0,0) = 1, (3,3)–(3,4) = 1.
    let vectors = d.write("v.csv", b"0,0\n3,4\n10,10\n");
    // Shortest paths by hand: a–b 1, b–c 2.
    let edges = d.write("e.txt", b"a b 1\nb c 2\n");
    for (input, args, queries, refused, expected) in [
        (
            &vectors,
            ["--metric", "l2"],
            "0,1\n1,2,3\n3,3\n",
            "the query has 3 components",
            [("0,0", 1.0), ("3,4", 1.0)],
        ),
        (
            &edges,
            ["--metric", "graph"],
            "a\nzz\nc\n",
            "`zz` is not a node of the graph",
            [("a", 0.0), ("c", 0.0)],
        ),
    ] {
        let index = d.build(
            input,
            "idx.wmk",
            &[&["-q", "--dim", "2"], &args[..]].concat(),
        );
        let out = waymark()
            .arg("query")
            .arg(&index)
            .args(["-k", "1", "--exact", "--errors-inline"])
            .write_stdin(queries)
            .assert()
            .success()
            .get_output()
            .stdout
            .clone();
        let lines: Vec<serde_json::Value> = json_lines(&out);
        assert_eq!(lines.len(), 3, "{lines:?}");
        let q: Vec<&str> = queries.lines().collect();
        assert_eq!(lines[1]["line"], 2);
        assert_eq!(lines[1]["query"], q[1]);
        let error = lines[1]["error"].as_str().unwrap();
        assert!(error.contains(refused), "{error}");
        for (line, (item, distance)) in [(0, expected[0]), (2, expected[1])] {
            assert_eq!(lines[line]["line"], line + 1);
            assert_eq!(lines[line]["query"], q[line]);
            assert_eq!(lines[line]["neighbors"][0]["item"], item);
            assert_eq!(
                lines[line]["neighbors"][0]["distance"].as_f64(),
                Some(distance)
            );
        }
    }
}
