//! A graph index that grows: `add` of an edge list (new towns joined to old ones, a bypass
//! that shortens old routes, an island of its own), `remove` and `compact`. Exact k-NN,
//! range answers and `pairs` equal a brute force with petgraph's Dijkstra (a general-purpose
//! graph crate) over the live items; approximate answers keep a sane recall.
//!
//! The road network is invented here: a 16 × 16 grid of towns in the Tarnvale hills,
//! roads between neighbours with pseudo-random lengths in quarter minutes (sums of them are
//! exact in floating point, so distances compare with `==`).

use std::collections::{BTreeSet, HashMap};
use std::path::{Path, PathBuf};

use petgraph::graph::{NodeIndex, UnGraph};
use predicates::prelude::PredicateBooleanExt;
use predicates::str::contains;
use serde_json::Value;

use crate::util::*;

type Edge = (String, String, f64);

fn town(r: usize, c: usize) -> String {
    format!("Tarn-{r:02}-{c:02}")
}

/// The roads of rows `rows` of the grid (16 columns): each town to its right and lower
/// neighbour, lengths 1 to 40 minutes in quarter minutes from a fixed sequence.
fn roads(rows: std::ops::Range<usize>) -> Vec<Edge> {
    let mut state = 0x2545_f491_u64 ^ rows.start as u64;
    let mut len = move || {
        state = state
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        f64::from((state >> 33) as u32 % 157 + 4) / 4.0
    };
    let mut out = Vec::new();
    for r in rows {
        for c in 0..16 {
            if c + 1 < 16 {
                out.push((town(r, c), town(r, c + 1), len()));
            }
            out.push((town(r, c), town(r + 1, c), len()));
        }
    }
    out
}

fn edge_list(edges: &[Edge]) -> Vec<u8> {
    let mut s = String::from("# Tarnvale roads: town, town, minutes\n");
    for (a, b, w) in edges {
        s.push_str(&format!("{a} {b} {w}\n"));
    }
    s.into_bytes()
}

/// The metric by brute force: petgraph's Dijkstra on every edge given (parallel edges
/// included), and the distance between components the graph metric documents: the sum of
/// the graph's edge weights (an edge given twice counted once, at its smaller weight) plus 1.
struct Reference {
    g: UnGraph<String, f64>,
    node: HashMap<String, NodeIndex>,
    far: f64,
}

impl Reference {
    fn new(edges: &[Edge]) -> Reference {
        let mut g = UnGraph::<String, f64>::new_undirected();
        let mut node: HashMap<String, NodeIndex> = HashMap::new();
        let mut min: HashMap<(String, String), f64> = HashMap::new();
        for (a, b, w) in edges {
            for n in [a, b] {
                if !node.contains_key(n) {
                    node.insert(n.clone(), g.add_node(n.clone()));
                }
            }
            g.add_edge(node[a], node[b], *w);
            let k = if a < b {
                (a.clone(), b.clone())
            } else {
                (b.clone(), a.clone())
            };
            let e = min.entry(k).or_insert(*w);
            *e = e.min(*w);
        }
        let mut sorted: Vec<f64> = min.into_values().collect();
        sorted.sort_by(f64::total_cmp);
        let far = sorted.iter().sum::<f64>() + 1.0;
        Reference { g, node, far }
    }

    /// Distances from `q` to every live town, nearest first (ties by name).
    fn from(&self, q: &str, live: &BTreeSet<String>) -> Vec<(f64, String)> {
        let d = petgraph::algo::dijkstra(&self.g, self.node[q], None, |e| *e.weight());
        let mut out: Vec<(f64, String)> = live
            .iter()
            .map(|t| (d.get(&self.node[t]).copied().unwrap_or(self.far), t.clone()))
            .collect();
        out.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        out
    }

    fn distance(&self, a: &str, b: &str) -> f64 {
        let d =
            petgraph::algo::dijkstra(&self.g, self.node[a], Some(self.node[b]), |e| *e.weight());
        d.get(&self.node[b]).copied().unwrap_or(self.far)
    }
}

fn query(d: &Dir, idx: &Path, queries: &[String], args: &[&str]) -> Vec<Value> {
    let out = d
        .cmd()
        .arg("query")
        .arg(idx)
        .args(args)
        .write_stdin(queries.join("\n"))
        .output()
        .unwrap();
    assert!(out.status.success(), "{out:?}");
    json_lines(&out.stdout)
}

fn remove(d: &Dir, idx: &Path, ids: &[&str]) {
    let f = d.write("gone.txt", ids.join("\n").as_bytes());
    d.cmd()
        .arg("remove")
        .arg(idx)
        .arg("--ids")
        .arg(&f)
        .assert()
        .success();
}

/// Exact k-NN and range answers of `idx` equal the brute force over `live`.
fn check_exact(d: &Dir, idx: &Path, reference: &Reference, live: &BTreeSet<String>) {
    let queries: Vec<String> = [
        town(0, 0),
        town(3, 7),
        town(9, 15),
        town(11, 2),
        town(12, 15),
        town(15, 8),
        town(14, 0),
        "Tarn-Ferrydock".into(),
        "Isle-Vard".into(),
        town(5, 5), // removed: still a node, still a query
    ]
    .into_iter()
    .collect();
    for (q, line) in queries
        .iter()
        .zip(query(d, idx, &queries, &["--exact", "-k", "7"]))
    {
        let want = reference.from(q, live);
        let got = line["neighbors"].as_array().unwrap();
        assert_eq!(got.len(), 7, "{line}");
        for (n, w) in got.iter().zip(&want) {
            let item = n["item"].as_str().unwrap();
            assert!(live.contains(item), "{q}: a removed item answered: {line}");
            assert_eq!(n["distance"].as_f64().unwrap(), w.0, "{q}: {line}");
            assert_eq!(n["distance"].as_f64().unwrap(), reference.distance(q, item));
        }
    }
    for (q, line) in queries
        .iter()
        .zip(query(d, idx, &queries, &["--exact", "--within", "30"]))
    {
        let want: BTreeSet<String> = reference
            .from(q, live)
            .into_iter()
            .filter(|(d, _)| *d <= 30.0)
            .map(|(_, t)| t)
            .collect();
        let got: BTreeSet<String> = line["neighbors"]
            .as_array()
            .unwrap()
            .iter()
            .map(|n| n["item"].as_str().unwrap().to_string())
            .collect();
        assert_eq!(got, want, "{q}");
    }
}

struct Grown {
    d: Dir,
    idx: PathBuf,
    reference: Reference,
    live: BTreeSet<String>,
    old: Reference,
}

/// Rows 0 to 11 built, five towns removed, then rows 12 to 15 added with the roads that
/// join them to row 11, a bypass between two old towns, a ferry dock (a new node) between
/// two old ones, an old road given again longer (kept at its length) and an island.
fn grown() -> Grown {
    let d = Dir::new();
    let base = roads(0..11);
    let f = d.write("tarnvale.txt", &edge_list(&base));
    let idx = d.build(
        &f,
        "tarnvale.wmk",
        &["-q", "--metric", "graph", "--dim", "8"],
    );
    let gone = [town(5, 5), town(0, 1), town(11, 15), town(7, 3), town(2, 9)];
    remove(
        &d,
        &idx,
        &gone.iter().map(String::as_str).collect::<Vec<_>>(),
    );
    let mut more = roads(11..15);
    more.extend([
        (town(0, 0), town(10, 15), 2.5),
        ("Tarn-Ferrydock".into(), town(0, 15), 1.0),
        ("Tarn-Ferrydock".into(), town(11, 0), 1.25),
        (town(3, 3), town(3, 4), 999.0),
        ("Isle-Vard".into(), "Isle-Holm".into(), 6.0),
    ]);
    let m = d.write("tarnvale-more.txt", &edge_list(&more));
    d.cmd()
        .arg("add")
        .arg(&idx)
        .arg(&m)
        .args(["--metric", "graph"])
        .assert()
        .success()
        .stderr(
            contains("added 67 new nodes")
                .and(contains("a graph add rewrites the index"))
                .and(contains("new edges can shorten paths between old nodes"))
                .and(contains(
                    "tarnvale-more.txt gives a longer weight than the index's and \
                     was ignored (first: line 129, Tarn-03-03–Tarn-03-04 999, the index keeps",
                )),
        );
    let old = Reference::new(&base);
    let mut all = base;
    all.extend(more);
    let reference = Reference::new(&all);
    let mut live: BTreeSet<String> = reference.node.keys().cloned().collect();
    for g in &gone {
        live.remove(g);
    }
    Grown {
        d,
        idx,
        reference,
        live,
        old,
    }
}

#[test]
fn a_graph_grown_by_add_answers_exactly_over_the_union_graph() {
    let Grown {
        d,
        idx,
        reference,
        mut live,
        old,
    } = grown();
    // The additions shorten routes between old towns: the old coordinates would be wrong.
    let (a, b) = (town(0, 0), town(10, 14));
    assert!(reference.distance(&a, &b) < old.distance(&a, &b));
    let (a, b) = (town(0, 14), town(10, 0));
    assert!(reference.distance(&a, &b) < old.distance(&a, &b));
    assert_eq!(live.len(), 16 * 16 - 5 + 3);
    check_exact(&d, &idx, &reference, &live);
    // More removed (an added town and an island node among them), then compacted.
    remove(&d, &idx, &[&town(13, 4), "Isle-Holm", &town(0, 15)]);
    for g in [town(13, 4), "Isle-Holm".into(), town(0, 15)] {
        live.remove(&g);
    }
    check_exact(&d, &idx, &reference, &live);
    d.cmd().arg("compact").arg(&idx).assert().success();
    assert!(!idx.with_file_name("tarnvale.wmk.parts").exists());
    check_exact(&d, &idx, &reference, &live);
}

#[test]
fn pairs_groups_and_eval_read_a_grown_graph_index_with_removed_nodes() {
    let Grown {
        d,
        idx,
        reference,
        live,
        ..
    } = grown();
    let out = d
        .cmd()
        .arg("pairs")
        .arg(&idx)
        .args(["--within", "4"])
        .output()
        .unwrap();
    assert!(out.status.success(), "{out:?}");
    let got: BTreeSet<(String, String)> = json_lines::<Value>(&out.stdout)
        .iter()
        .map(|p| {
            let (a, b) = (
                p["a"]["item"].as_str().unwrap().to_string(),
                p["b"]["item"].as_str().unwrap().to_string(),
            );
            assert_eq!(p["distance"].as_f64().unwrap(), reference.distance(&a, &b));
            if a < b {
                (a, b)
            } else {
                (b, a)
            }
        })
        .collect();
    let mut want = BTreeSet::new();
    for a in &live {
        for (dist, b) in reference.from(a, &live) {
            if dist > 4.0 {
                break;
            }
            if a < &b {
                want.insert((a.clone(), b));
            }
        }
    }
    assert!(!want.is_empty());
    assert_eq!(got, want);
    for args in [&["groups", "--within", "4"][..], &["eval", "--distortion"]] {
        d.cmd()
            .arg(args[0])
            .arg(&idx)
            .args(&args[1..])
            .assert()
            .success();
    }
}

#[test]
fn approximate_answers_of_a_grown_graph_keep_their_recall() {
    let Grown {
        d,
        idx,
        reference,
        live,
        ..
    } = grown();
    let queries: Vec<String> = live.iter().step_by(7).cloned().collect();
    let mut found = 0usize;
    for (q, line) in queries.iter().zip(query(&d, &idx, &queries, &["-k", "10"])) {
        // A neighbour counts when it is as near as the 10th true one (ties are equal).
        let kth = reference.from(q, &live)[9].0;
        found += line["neighbors"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|n| n["distance"].as_f64().unwrap() <= kth)
            .count();
    }
    let recall = found as f64 / (10 * queries.len()) as f64;
    assert!(recall >= 0.9, "recall@10 {recall}");
}

#[test]
fn bad_input_a_graph_add_is_refused_with_the_reason_and_nothing_changes() {
    let d = Dir::new();
    let f = d.write("tarnvale.txt", &edge_list(&roads(0..4)));
    let idx = d.build(
        &f,
        "tarnvale.wmk",
        &["-q", "--metric", "graph", "--dim", "4"],
    );
    let before = std::fs::read(&idx).unwrap();
    for (text, message) in [
        (
            "Tarn-00-00 Tarn-Newmoor 3\nTarn-Newmoor Tarn-01-01 -2\n",
            "tarnvale-more.txt:2: weight -2 must be finite and non-negative",
        ),
        (
            "Tarn-00-00 Tarn-Newmoor 3\nTarn-Newmoor Tarn-01-01\n",
            "tarnvale-more.txt:2: expected `NODE NODE WEIGHT`, found 2 fields",
        ),
        (
            "Tarn-00-00 Tarn-Newmoor three\n",
            "tarnvale-more.txt:1: weight `three` is not a number",
        ),
        ("# nothing yet\n", "tarnvale-more.txt: no edges"),
    ] {
        let m = d.write("tarnvale-more.txt", text.as_bytes());
        d.cmd()
            .arg("add")
            .arg(&idx)
            .arg(&m)
            .args(["--metric", "graph"])
            .assert()
            .failure()
            .code(2)
            .stderr(contains(message));
        assert_eq!(std::fs::read(&idx).unwrap(), before);
    }
    // Names read as text for a graph index, an edge list for an index of names.
    let m = d.write("tarnvale-more.txt", b"Tarn-00-00 Tarn-Newmoor 3\n");
    d.cmd()
        .arg("add")
        .arg(&idx)
        .arg(&m)
        .assert()
        .failure()
        .code(2)
        .stderr(contains("is an index of the graph metric").and(contains("--metric graph")));
    let names = d.write("towns.txt", b"Tarn-00-00\nTarn-00-01\nTarn-00-02\n");
    let nidx = d.build(&names, "towns.wmk", &["-q", "--dim", "2"]);
    d.cmd()
        .arg("add")
        .arg(&nidx)
        .arg(&m)
        .args(["--metric", "graph"])
        .assert()
        .failure()
        .code(2)
        .stderr(contains("an edge list, and").and(contains("levenshtein metric")));
    assert_eq!(std::fs::read(&idx).unwrap(), before);
    assert!(d
        .others(&[
            "tarnvale.txt",
            "tarnvale.wmk",
            "tarnvale-more.txt",
            "towns.txt",
            "towns.wmk",
            ".tarnvale.wmk.waymark-lock",
            ".towns.wmk.waymark-lock",
            "tarnvale.wmk.parts",
            "towns.wmk.parts"
        ])
        .is_empty());
    // The parts folder a refused add may have made holds no part.
    for dir in ["tarnvale.wmk.parts", "towns.wmk.parts"] {
        if let Ok(entries) = std::fs::read_dir(d.path(dir)) {
            assert_eq!(entries.count(), 0, "{dir}");
        }
    }
}

#[test]
fn a_sharded_graph_build_answers_as_the_ordinary_build() {
    // Each shard carries the whole graph: exact answers equal the one-file build's.
    let d = Dir::new();
    let edges = roads(0..9);
    let f = d.write("tarnvale.txt", &edge_list(&edges));
    let one = d.build(&f, "one.wmk", &["-q", "--metric", "graph", "--dim", "6"]);
    let sharded = d.build(
        &f,
        "sharded.wmk",
        &["-q", "--metric", "graph", "--dim", "6", "--shards", "3"],
    );
    let reference = Reference::new(&edges);
    let live: BTreeSet<String> = reference.node.keys().cloned().collect();
    let queries: Vec<String> = live.iter().step_by(11).cloned().collect();
    let a = query(&d, &one, &queries, &["--exact", "-k", "5"]);
    let b = query(&d, &sharded, &queries, &["--exact", "-k", "5"]);
    for ((q, x), y) in queries.iter().zip(&a).zip(&b) {
        let want: Vec<f64> = reference.from(q, &live)[..5].iter().map(|w| w.0).collect();
        for line in [x, y] {
            let got: Vec<f64> = line["neighbors"]
                .as_array()
                .unwrap()
                .iter()
                .map(|n| n["distance"].as_f64().unwrap())
                .collect();
            assert_eq!(got, want, "{q}");
        }
    }
}

#[test]
fn a_graph_add_says_which_longer_weights_it_ignored() {
    let d = Dir::new();
    let base = roads(0..4);
    let f = d.write("tarnvale.txt", &edge_list(&base));
    let idx = d.build(
        &f,
        "tarnvale.wmk",
        &["-q", "--metric", "graph", "--dim", "4"],
    );
    let old = |a: &str, b: &str| {
        base.iter()
            .find(|(x, y, _)| (x == a && y == b) || (x == b && y == a))
            .map(|e| e.2)
            .expect("an old road")
    };
    let (t00, t01, t10, t22, t23) = (town(0, 0), town(0, 1), town(1, 0), town(2, 2), town(2, 3));
    // Line 1 is the header comment. Line 3 gives an old road longer, line 4 one shorter
    // (taken), line 5 another old road longer (written the other way round), lines 6 and 7
    // one old road twice, once longer and once shorter (the shorter taken: not counted).
    let more: Vec<Edge> = vec![
        (t00.clone(), "Tarn-Newmoor".into(), 3.0),
        (t00.clone(), t01.clone(), old(&t00, &t01) + 50.0),
        (t22.clone(), t23.clone(), old(&t22, &t23) / 2.0),
        (t10.clone(), t00.clone(), old(&t00, &t10) + 0.25),
        (town(3, 3), town(3, 4), old(&town(3, 3), &town(3, 4)) + 9.0),
        (town(3, 4), town(3, 3), 0.5),
    ];
    let m = d.write("tarnvale-more.txt", &edge_list(&more));
    let out = d
        .cmd()
        .arg("add")
        .arg(&idx)
        .arg(&m)
        .args(["--metric", "graph"])
        .output()
        .unwrap();
    assert!(out.status.success(), "{out:?}");
    let stderr = String::from_utf8(out.stderr).unwrap();
    let warnings: Vec<&str> = stderr
        .lines()
        .filter(|l| l.contains("longer weight"))
        .collect();
    assert_eq!(
        warnings,
        [format!(
            "waymark: warning: 2 edges of {} give a longer weight than the index's and were \
             ignored (first: line 3, {t00}–{t01} {}, the index keeps {})",
            m.display(),
            old(&t00, &t01) + 50.0,
            old(&t00, &t01)
        )]
    );
    // The answers are those of the union with the smaller weights: petgraph's Dijkstra over
    // every edge given (parallel edges included) agrees.
    let mut all = base.clone();
    all.extend(more);
    let reference = Reference::new(&all);
    for (a, b) in [
        (&t00, &t01),
        (&t00, &t10),
        (&t22, &t23),
        (&town(3, 3), &town(3, 4)),
    ] {
        let got = query(&d, &idx, std::slice::from_ref(a), &["-k", "300", "--exact"]);
        let dist = got[0]["neighbors"]
            .as_array()
            .unwrap()
            .iter()
            .find(|n| n["item"] == b.as_str())
            .unwrap()["distance"]
            .as_f64()
            .unwrap();
        assert_eq!(dist, reference.distance(a, b), "{a}–{b}");
    }
    // One such edge: the singular, and no line at all when every weight is taken.
    let m = d.write("tarnvale-one.txt", format!("{t22} {t23} 500\n").as_bytes());
    d.cmd()
        .arg("add")
        .arg(&idx)
        .arg(&m)
        .args(["--metric", "graph"])
        .assert()
        .success()
        .stderr(contains(format!(
            "1 edge of {} gives a longer weight than the index's and was ignored (first: line 1, {t22}–{t23} 500, the index keeps {})",
            m.display(),
            old(&t22, &t23) / 2.0
        )));
    let m = d.write(
        "tarnvale-short.txt",
        format!("{t22} {t23} 0.25\nTarn-Eastmoor {t00} 2\n").as_bytes(),
    );
    d.cmd()
        .arg("add")
        .arg(&idx)
        .arg(&m)
        .args(["--metric", "graph"])
        .assert()
        .success()
        .stderr(contains("added 1 new nodes").and(contains("longer weight").not()));
}
