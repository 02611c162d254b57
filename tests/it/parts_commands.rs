//! `eval`, `pairs`, `groups` and `install` on an index in parts (grown by `add`, with
//! `remove`s and an id given twice): their answers equal those of the same live items built
//! in one go or compacted, and the exact ones a brute force with strsim's Levenshtein (an
//! outside reference), on Debian's american-english word list (wamerican) as data.

use std::collections::{BTreeSet, HashSet};
use std::path::{Path, PathBuf};

use predicates::prelude::PredicateBooleanExt;
use predicates::str::contains;
use serde_json::Value;

use crate::util::*;
use waymark::index::parts::Parts;

fn lev(a: &str, b: &str) -> f64 {
    strsim::levenshtein(a, b) as f64
}

/// Every 5th word of the word list from `from`, `n` of them.
fn words(from: usize, n: usize) -> Vec<String> {
    word_list()
        .lines()
        .skip(from)
        .step_by(5)
        .take(n)
        .map(str::to_string)
        .collect()
}

fn csv(rows: &[(String, String)]) -> Vec<u8> {
    let mut s = String::from("id,name\n");
    for (id, item) in rows {
        s.push_str(&format!("{id},{item}\n"));
    }
    s.into_bytes()
}

const FIELDS: [&str; 4] = ["--field", "name", "--id-field", "id"];

/// An index grown from 1,000 words by two additions (two parts after the merge policy), the second holding a new word under the
/// id of one already there (`w7`), then three ids removed (of the first part and of an added
/// one). Returns the index and its live `(id, item)` rows, in item-number order.
fn grown(d: &Dir) -> (PathBuf, Vec<(String, String)>) {
    let all: Vec<(String, String)> = words(0, 1400)
        .into_iter()
        .enumerate()
        .map(|(i, w)| (format!("w{i}"), w))
        .collect();
    let base = d.write("base.csv", &csv(&all[..1000]));
    let mut args = vec!["-q", "--dim", "10"];
    args.extend(FIELDS);
    let idx = d.build(&base, "grown.wmk", &args);
    let mut second = all[1200..1350].to_vec();
    second.push(("w7".into(), format!("{}s", all[7].1)));
    for (j, more) in [all[1000..1200].to_vec(), second.clone()]
        .iter()
        .enumerate()
    {
        let f = d.write(&format!("more{j}.csv"), &csv(more));
        d.cmd()
            .arg("add")
            .arg(&idx)
            .arg(&f)
            .args(FIELDS)
            .assert()
            .success();
    }
    let gone = ["w3", "w950", "w1300"];
    let f = d.write("gone.txt", gone.join("\n").as_bytes());
    d.cmd()
        .arg("remove")
        .arg(&idx)
        .arg("--ids")
        .arg(&f)
        .assert()
        .success();
    let mut live: Vec<(String, String)> = all[..1200].to_vec();
    live.extend(second);
    live.retain(|(id, _)| !gone.contains(&id.as_str()));
    let parts = Parts::open(&idx).unwrap();
    assert!(parts.parts().len() >= 2, "an index in parts");
    assert_eq!(parts.live(), live.len());
    (idx, live)
}

/// The same live rows built in one go.
fn built_in_one_go(d: &Dir, live: &[(String, String)]) -> PathBuf {
    let f = d.write("one.csv", &csv(live));
    let mut args = vec!["-q", "--dim", "10"];
    args.extend(FIELDS);
    d.build(&f, "one.wmk", &args)
}

/// A copy of the index in parts (list and parts folder), compacted.
fn compacted_copy(d: &Dir, idx: &Path) -> PathBuf {
    let copy = d.path("copy.wmk");
    std::fs::copy(idx, &copy).unwrap();
    let from = d.path("grown.wmk.parts");
    let to = d.path("copy.wmk.parts");
    std::fs::create_dir(&to).unwrap();
    for e in std::fs::read_dir(&from).unwrap() {
        let e = e.unwrap();
        std::fs::copy(e.path(), to.join(e.file_name())).unwrap();
    }
    d.cmd().arg("compact").arg(&copy).assert().success();
    assert!(!Parts::open(&copy).unwrap().is_listed());
    copy
}

fn stdout_of(d: &Dir, args: &[&str], idx: &Path, more: &[&str]) -> String {
    let out = d.cmd().args(args).arg(idx).args(more).output().unwrap();
    assert!(
        out.status.success(),
        "{args:?} {more:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).unwrap()
}

/// `(id, item)` of a pair side or an answer.
fn side(v: &Value) -> (String, String) {
    (
        v["id"].as_str().unwrap().to_string(),
        v["item"].as_str().unwrap().to_string(),
    )
}

#[test]
fn eval_on_an_index_in_parts_measures_the_parts_answers_against_the_live_items() {
    let d = Dir::new();
    let (idx, live) = grown(&d);
    // Queries: words with a letter changed, and the removed words themselves (a ground truth
    // that kept removed items would put them at distance 0, and recall would fall).
    let mut queries: Vec<String> = words(2, 30)
        .into_iter()
        .map(|w| {
            let mut c: Vec<char> = w.chars().collect();
            let m = c.len() / 2;
            c[m] = 'o';
            c.into_iter().collect()
        })
        .collect();
    let all = words(0, 1400);
    queries.extend([all[3].clone(), all[950].clone(), all[1300].clone()]);
    let qfile = d.write("q.txt", queries.join("\n").as_bytes());
    let run = |more: &[&str]| -> Value {
        let out = d
            .cmd()
            .arg("eval")
            .arg(&idx)
            .arg("--queries")
            .arg(&qfile)
            .args(["--json", "-k", "5"])
            .args(more)
            .output()
            .unwrap();
        assert!(out.status.success(), "{out:?}");
        serde_json::from_slice(&out.stdout).unwrap()
    };
    let v = run(&["--candidates", "40,5000"]);
    assert_eq!(v["items"], live.len());
    let rows = v["recall"].as_array().unwrap();
    // Every live item re-ranked: the answers are the brute force's.
    assert_eq!(rows[1]["recall"], 1.0, "{v}");
    assert_eq!(rows[1]["plain_recall"], 1.0, "{v}");
    // 40 candidates: the recall eval reports is the one `query` gets with the same setting,
    // scored here against a brute force over the live items (threshold recall@5: an answer
    // counts when it is no farther than the true 5th).
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "5", "--candidates", "40"])
        .write_stdin(queries.join("\n"))
        .output()
        .unwrap();
    assert!(out.status.success());
    let lines: Vec<Value> = json_lines(&out.stdout);
    let mut sum = 0.0;
    for (q, line) in queries.iter().zip(&lines) {
        let mut dist: Vec<f64> = live.iter().map(|(_, s)| lev(q, s)).collect();
        dist.sort_by(f64::total_cmp);
        let kth = dist[4];
        let got = line["neighbors"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|n| n["distance"].as_f64().unwrap() <= kth)
            .count()
            .min(5);
        sum += got as f64 / 5.0;
    }
    let want = sum / queries.len() as f64;
    let got = rows[0]["recall"].as_f64().unwrap();
    assert!((got - want).abs() < 1e-9, "eval {got}, query {want}");

    // --recall takes the first part's curve and measures the parts' answers.
    let asked = run(&["--recall", "0.9"]);
    assert!(
        asked["recall"][0]["recall"].as_f64().unwrap() > 0.5,
        "{asked}"
    );

    // The ground truth cache keys on the live items: after another remove it is not read.
    assert_eq!(
        run(&["--candidates", "5000"])["ground_truth"]["cached"],
        true
    );
    let f = d.write("gone2.txt", b"w11\n");
    d.cmd()
        .arg("remove")
        .arg(&idx)
        .arg("--ids")
        .arg(&f)
        .assert()
        .success();
    let after = run(&["--candidates", "5000"]);
    assert_eq!(after["ground_truth"]["cached"], false, "{after}");
    assert_eq!(after["recall"][0]["recall"], 1.0);
    assert_eq!(after["items"], live.len() - 1);

    // The distortion is that of the live items' coordinates: the compacted index's.
    let distortion = |i: &Path| -> Value {
        let out = stdout_of(&d, &["eval", "--json", "--distortion"], i, &[]);
        let v: Value = serde_json::from_str(&out).unwrap();
        v["distortion"].clone()
    };
    let copy = compacted_copy(&d, &idx);
    assert_eq!(distortion(&idx), distortion(&copy));

    // --calibrate would store a curve in one index file: refused on a list, which stays.
    let before = std::fs::read(&idx).unwrap();
    d.cmd()
        .arg("eval")
        .arg(&idx)
        .arg("--queries")
        .arg(&qfile)
        .arg("--calibrate")
        .assert()
        .failure()
        .code(2)
        .stderr(contains("an index in parts").and(contains("waymark compact")));
    assert_eq!(std::fs::read(&idx).unwrap(), before);
}

/// The pairs of `pairs` JSON output as unordered pairs of `(id, item)` with their distance.
/// An item as `(id, item)`.
type Named = (String, String);

fn pair_set(out: &str) -> BTreeSet<(Named, Named, u64)> {
    out.lines()
        .map(|l| {
            let v: Value = serde_json::from_str(l).unwrap();
            let (a, b) = (side(&v["a"]), side(&v["b"]));
            let d = v["distance"].as_f64().unwrap() as u64;
            if a <= b {
                (a, b, d)
            } else {
                (b, a, d)
            }
        })
        .collect()
}

#[test]
fn pairs_and_groups_on_an_index_in_parts_answer_as_on_the_same_items_in_one_index() {
    let d = Dir::new();
    let (idx, live) = grown(&d);
    let one = built_in_one_go(&d, &live);
    let copy = compacted_copy(&d, &idx);
    let removed: HashSet<&str> = ["w3", "w950", "w1300"].into();

    // Every pair within 1, across and within parts, each once: the brute force's.
    let got = stdout_of(&d, &["pairs"], &idx, &["--within", "1"]);
    assert_eq!(got, stdout_of(&d, &["pairs"], &one, &["--within", "1"]));
    assert_eq!(got, stdout_of(&d, &["pairs"], &copy, &["--within", "1"]));
    let mut want = BTreeSet::new();
    for (i, a) in live.iter().enumerate() {
        for b in &live[i + 1..] {
            let dist = lev(&a.1, &b.1);
            if dist <= 1.0 {
                let (x, y) = if a <= b { (a, b) } else { (b, a) };
                want.insert((x.clone(), y.clone(), dist as u64));
            }
        }
    }
    assert!(want.len() > 20, "enough pairs to compare: {}", want.len());
    assert_eq!(pair_set(&got), want);
    // The word added under id w7 pairs with the first w7 (one letter apart).
    assert!(want.iter().any(|(a, b, _)| a.0 == "w7" && b.0 == "w7"));
    for (a, b, _) in pair_set(&got) {
        assert!(!removed.contains(a.0.as_str()) && !removed.contains(b.0.as_str()));
    }
    // The column path too (no deletion-variant table), and TSV.
    let cols = stdout_of(
        &d,
        &["pairs"],
        &idx,
        &["--within", "2", "--no-variant-table"],
    );
    assert_eq!(
        cols,
        stdout_of(
            &d,
            &["pairs"],
            &one,
            &["--within", "2", "--no-variant-table"]
        )
    );
    let tsv = ["--within", "1", "--format", "tsv"];
    assert_eq!(
        stdout_of(&d, &["pairs"], &idx, &tsv),
        stdout_of(&d, &["pairs"], &one, &tsv)
    );

    // -k exact: each live item's 3 nearest, at the brute force's distances. A pair found
    // from both sides is written once, so an item's 3 nearest are the 3 nearest of all the
    // pairs it is in (a pair nearer than its 3rd nearest would be among them).
    let near = stdout_of(&d, &["pairs"], &idx, &["-k", "3", "--exact"]);
    assert_eq!(
        near,
        stdout_of(&d, &["pairs"], &one, &["-k", "3", "--exact"])
    );
    let mut per_item: std::collections::HashMap<(String, String), Vec<f64>> = Default::default();
    for l in near.lines() {
        let v: Value = serde_json::from_str(l).unwrap();
        let dist = v["distance"].as_f64().unwrap();
        per_item.entry(side(&v["a"])).or_default().push(dist);
        per_item.entry(side(&v["b"])).or_default().push(dist);
    }
    assert_eq!(per_item.len(), live.len());
    for v in per_item.values_mut() {
        v.sort_by(f64::total_cmp);
        v.truncate(3);
    }
    for (i, a) in live.iter().enumerate().step_by(37) {
        let mut dist: Vec<f64> = live
            .iter()
            .enumerate()
            .filter(|&(j, _)| j != i)
            .map(|(_, b)| lev(&a.1, &b.1))
            .collect();
        dist.sort_by(f64::total_cmp);
        assert_eq!(per_item[a], dist[..3], "{a:?}");
    }
    // -k approximate: the compacted index's answers (the same candidates over the same rows).
    assert_eq!(
        stdout_of(&d, &["pairs"], &idx, &["-k", "3"]),
        stdout_of(&d, &["pairs"], &copy, &["-k", "3"])
    );
    // Look-ups of a queries file.
    let q = d.write("q.txt", b"harbor\nlanding\n");
    for more in [&["--within", "2"][..], &["-k", "4", "--exact"]] {
        let mut args = more.to_vec();
        args.extend(["--queries", q.to_str().unwrap()]);
        assert_eq!(
            stdout_of(&d, &["pairs"], &idx, &args),
            stdout_of(&d, &["pairs"], &one, &args)
        );
    }

    // Groups: the same groups, in the same order, as the one index; as components they are
    // the connected components of the brute force's pairs (union-find here).
    for more in [
        &["--within", "1"][..],
        &["--within", "2", "--grouping", "components"],
    ] {
        assert_eq!(
            stdout_of(&d, &["groups"], &idx, more),
            stdout_of(&d, &["groups"], &one, more)
        );
    }
    let comps = stdout_of(
        &d,
        &["groups"],
        &idx,
        &["--within", "1", "--grouping", "components"],
    );
    let got: BTreeSet<BTreeSet<String>> = comps
        .lines()
        .map(|l| {
            let v: Value = serde_json::from_str(l).unwrap();
            v["items"]
                .as_array()
                .unwrap()
                .iter()
                .map(|s| s.as_str().unwrap().to_string())
                .collect()
        })
        .collect();
    let index_of: std::collections::HashMap<&str, usize> = live
        .iter()
        .enumerate()
        .map(|(i, (_, s))| (s.as_str(), i))
        .collect();
    let mut parent: Vec<usize> = (0..live.len()).collect();
    fn root(p: &mut [usize], mut i: usize) -> usize {
        while p[i] != i {
            p[i] = p[p[i]];
            i = p[i];
        }
        i
    }
    for (a, b, _) in &want {
        let (x, y) = (
            root(&mut parent, index_of[a.1.as_str()]),
            root(&mut parent, index_of[b.1.as_str()]),
        );
        parent[x] = y;
    }
    let mut comps_want: std::collections::HashMap<usize, BTreeSet<String>> = Default::default();
    for (i, (_, s)) in live.iter().enumerate() {
        let r = root(&mut parent, i);
        comps_want.entry(r).or_default().insert(s.clone());
    }
    let want: BTreeSet<BTreeSet<String>> =
        comps_want.into_values().filter(|g| g.len() > 1).collect();
    assert_eq!(got, want);
}

#[test]
fn install_refuses_an_index_in_parts_on_either_side_and_changes_nothing() {
    let d = Dir::new();
    let (idx, live) = grown(&d);
    let one = built_in_one_go(&d, &live);
    let before = std::fs::read(&idx).unwrap();
    d.cmd()
        .arg("install")
        .arg(&one)
        .arg(&idx)
        .assert()
        .failure()
        .code(2)
        .stderr(contains("an index in parts").and(contains("waymark compact")));
    assert_eq!(std::fs::read(&idx).unwrap(), before);
    let target = d.path("target.wmk");
    d.cmd()
        .arg("install")
        .arg(&idx)
        .arg(&target)
        .assert()
        .failure()
        .code(2)
        .stderr(contains("cannot be installed").and(contains("waymark compact")));
    assert!(!target.exists());
    assert_eq!(
        d.others(&[])
            .iter()
            .filter(|n| n.contains("partial"))
            .count(),
        0
    );
}

/// Grows an index of `items` under `metric` (built from the first half, two additions, ids
/// the record numbers, four removed), then checks that exact answers equal a brute force
/// with `dist` over the live items, before and after `compact`.
fn grow_and_check(
    name: &str,
    metric: &[&str],
    ext: &str,
    items: &[String],
    queries: &[String],
    dist: &dyn Fn(&str, &str) -> f64,
) {
    let d = Dir::new();
    let n = items.len();
    let (a, b) = (n / 2, 3 * n / 4);
    let base = d.write(&format!("base.{ext}"), items[..a].join("\n").as_bytes());
    let mut args = vec!["-q", "--dim", "6"];
    args.extend_from_slice(metric);
    let idx = d.build(&base, "m.wmk", &args);
    for (j, more) in [&items[a..b], &items[b..]].iter().enumerate() {
        let f = d.write(&format!("more{j}.{ext}"), more.join("\n").as_bytes());
        d.cmd()
            .arg("add")
            .arg(&idx)
            .arg(&f)
            .args(metric)
            .assert()
            .success();
    }
    let gone = [1, a + 1, b + 2, n - 1];
    let ids: Vec<String> = gone.iter().map(usize::to_string).collect();
    let f = d.write("gone.txt", ids.join("\n").as_bytes());
    d.cmd()
        .arg("remove")
        .arg(&idx)
        .arg("--ids")
        .arg(&f)
        .assert()
        .success();
    let live: Vec<(usize, &String)> = items
        .iter()
        .enumerate()
        .filter(|(i, _)| !gone.contains(i))
        .collect();
    let check = |stage: &str| {
        let out = d
            .cmd()
            .arg("query")
            .arg(&idx)
            .args(["--exact", "-k", "5"])
            .write_stdin(queries.join("\n"))
            .output()
            .unwrap();
        assert!(out.status.success(), "{name} {stage}: {out:?}");
        let lines: Vec<Value> = json_lines(&out.stdout);
        assert_eq!(lines.len(), queries.len());
        for (q, line) in queries.iter().zip(&lines) {
            let mut want: Vec<f64> = live.iter().map(|(_, s)| dist(q, s)).collect();
            want.sort_by(f64::total_cmp);
            let got = line["neighbors"].as_array().unwrap();
            assert_eq!(got.len(), 5, "{name} {stage} {q}: {line}");
            for (g, w) in got.iter().zip(&want) {
                let id = g["id"].as_u64().unwrap() as usize;
                assert!(!gone.contains(&id), "{name} {stage}: removed {id} returned");
                let item = g["item"].as_str().unwrap();
                assert_eq!(item, items[id], "{name} {stage}: id {id}");
                let gd = g["distance"].as_f64().unwrap();
                assert!(
                    (gd - w).abs() < 1e-4 && (dist(q, item) - gd).abs() < 1e-4,
                    "{name} {stage} {q}: {line} vs {:?}",
                    &want[..5]
                );
            }
        }
    };
    assert!(Parts::open(&idx).unwrap().is_listed(), "{name}");
    check("in parts");
    d.cmd().arg("compact").arg(&idx).assert().success();
    assert!(!Parts::open(&idx).unwrap().is_listed(), "{name}");
    check("compacted");
}

/// A textbook dynamic programme for an edit distance with the given costs.
fn edit_dp(a: &[char], b: &[char], indel: f64, sub: &dyn Fn(char, char) -> f64) -> f64 {
    let mut prev: Vec<f64> = (0..=b.len()).map(|j| j as f64 * indel).collect();
    for (i, &x) in a.iter().enumerate() {
        let mut cur = vec![(i + 1) as f64 * indel];
        for (j, &y) in b.iter().enumerate() {
            let v = (prev[j] + sub(x, y))
                .min(prev[j + 1] + indel)
                .min(cur[j] + indel);
            cur.push(v);
        }
        prev = cur;
    }
    prev[b.len()]
}

#[test]
fn every_metric_grows_and_compacts_with_exact_answers_equal_to_brute_force() {
    let text = words(4, 240);
    let typos: Vec<String> = words(7, 12).iter().map(|w| format!("{w}x")).collect();
    // Damerau (unrestricted): strsim::damerau_levenshtein.
    grow_and_check(
        "damerau",
        &["--metric", "damerau"],
        "txt",
        &text,
        &typos,
        &|a, b| strsim::damerau_levenshtein(a, b) as f64,
    );
    // Token sets of word pairs under Jaccard, and word edits under token-edit: items of two
    // words of the list, the substitution cost of token-edit the normalised Levenshtein
    // distance 2L/(|a|+|b|+L) (Yujian and Bo), with L from strsim.
    let two: Vec<String> = text
        .chunks(2)
        .map(|c| c.join(" ").to_lowercase().replace('\'', ""))
        .collect();
    let two_q: Vec<String> = two
        .iter()
        .step_by(13)
        .map(|s| format!("{s} quay"))
        .collect();
    let nld = |a: &str, b: &str| {
        let l = strsim::levenshtein(a, b) as f64;
        if l == 0.0 {
            0.0
        } else {
            2.0 * l / (a.chars().count() as f64 + b.chars().count() as f64 + l)
        }
    };
    grow_and_check(
        "token-edit",
        &["--metric", "token-edit"],
        "txt",
        &two,
        &two_q,
        &|a, b| {
            let (x, y): (Vec<&str>, Vec<&str>) = (
                a.split_whitespace().collect(),
                b.split_whitespace().collect(),
            );
            let mut prev: Vec<f64> = (0..=y.len()).map(|j| j as f64).collect();
            for (i, u) in x.iter().enumerate() {
                let mut cur = vec![(i + 1) as f64];
                for (j, v) in y.iter().enumerate() {
                    let c = (prev[j] + nld(u, v))
                        .min(prev[j + 1] + 1.0)
                        .min(cur[j] + 1.0);
                    cur.push(c);
                }
                prev = cur;
            }
            prev[y.len()]
        },
    );
    // DNA barcodes (the invented survey set of demo-data): Hamming by counting positions,
    // and the weighted edit distance of demo-data/nucleotide-costs.txt (indel 1.5, A↔G and
    // C↔T 0.5, other substitutions 1) by the dynamic programme above.
    let codes: Vec<String> = demo_lines("barcodes.txt").into_iter().take(300).collect();
    let code_q: Vec<String> = codes
        .iter()
        .step_by(29)
        .map(|c| format!("{}A", &c[..c.len() - 1]))
        .collect();
    grow_and_check(
        "hamming",
        &["--metric", "hamming"],
        "txt",
        &codes,
        &code_q,
        &|a, b| a.bytes().zip(b.bytes()).filter(|(x, y)| x != y).count() as f64,
    );
    let costs = demo("nucleotide-costs.txt");
    let costs = costs.to_str().unwrap();
    grow_and_check(
        "weighted",
        &["--metric", "weighted", "--costs", costs],
        "txt",
        &codes,
        &code_q,
        &|a, b| {
            let (a, b): (Vec<char>, Vec<char>) = (a.chars().collect(), b.chars().collect());
            edit_dp(&a, &b, 1.5, &|x, y| match (x, y) {
                _ if x == y => 0.0,
                ('A', 'G') | ('G', 'A') | ('C', 'T') | ('T', 'C') => 0.5,
                _ => 1.0,
            })
        },
    );
    // A metric program (examples/metric_server.py, the textbook edit distance in Python),
    // checked against strsim's Levenshtein; skipped without python3.
    if std::process::Command::new("python3")
        .arg("--version")
        .output()
        .is_ok()
    {
        let server = repo_file("examples/metric_server.py");
        let server = server.to_str().unwrap();
        grow_and_check(
            "external",
            &["--metric", "external", "--", "python3", server],
            "txt",
            &text[..120],
            &typos[..6],
            &lev,
        );
    } else {
        eprintln!("external metric skipped: no python3");
    }
    // Vectors: points from the words' letters (a recipe of this test), under L1, L∞ and the
    // angle / π, computed here in f64 from the f32 values.
    let vec_of = |w: &str| -> String {
        let b = w.as_bytes();
        (0..4)
            .map(|j| (f32::from(*b.get(j).unwrap_or(&b'a')) / 10.0 + b.len() as f32).to_string())
            .collect::<Vec<_>>()
            .join(",")
    };
    let points: Vec<String> = text.iter().map(|w| vec_of(w)).collect();
    let point_q: Vec<String> = words(9, 10).iter().map(|w| vec_of(w)).collect();
    let parse = |s: &str| -> Vec<f64> {
        s.split(',')
            .map(|x| x.parse::<f32>().unwrap().into())
            .collect()
    };
    let l1 = |a: &str, b: &str| {
        parse(a)
            .iter()
            .zip(parse(b))
            .map(|(x, y)| (x - y).abs())
            .sum::<f64>()
    };
    let linf = |a: &str, b: &str| {
        parse(a)
            .iter()
            .zip(parse(b))
            .map(|(x, y)| (x - y).abs())
            .fold(0.0, f64::max)
    };
    let angular = |a: &str, b: &str| {
        let (x, y) = (parse(a), parse(b));
        let dot: f64 = x.iter().zip(&y).map(|(p, q)| p * q).sum();
        let norm = |v: &[f64]| v.iter().map(|p| p * p).sum::<f64>().sqrt();
        (dot / (norm(&x) * norm(&y))).clamp(-1.0, 1.0).acos() / std::f64::consts::PI
    };
    grow_and_check("l1", &["--metric", "l1"], "csv", &points, &point_q, &l1);
    grow_and_check(
        "linf",
        &["--metric", "linf"],
        "csv",
        &points,
        &point_q,
        &linf,
    );
    // Directions far apart for the angle (a cosine near 1 leaves acos few digits).
    let dir_of = |w: &str| -> String {
        let b = w.as_bytes();
        (0..4)
            .map(|j| (f32::from(*b.get(j).unwrap_or(&b'a')) - 96.0).to_string())
            .collect::<Vec<_>>()
            .join(",")
    };
    let dirs: Vec<String> = text.iter().map(|w| dir_of(w)).collect();
    let dir_q: Vec<String> = words(9, 10).iter().map(|w| dir_of(w)).collect();
    grow_and_check(
        "angular",
        &["--metric", "angular"],
        "csv",
        &dirs,
        &dir_q,
        &angular,
    );
}

#[test]
fn a_graph_index_with_removed_nodes_answers_exactly_before_and_after_compact() {
    // Reference: petgraph's Dijkstra on the edge list of demo-data/ferries.txt (invented
    // ferry and road legs), parsed here.
    let mut g = petgraph::graph::UnGraph::<(), f64>::new_undirected();
    let mut node: std::collections::HashMap<String, petgraph::graph::NodeIndex> =
        Default::default();
    for l in demo_lines("ferries.txt") {
        if l.starts_with('#') || l.trim().is_empty() {
            continue;
        }
        let f: Vec<&str> = l.split_whitespace().collect();
        let mut id = |s: &str| *node.entry(s.to_string()).or_insert_with(|| g.add_node(()));
        let (a, b) = (id(f[0]), id(f[1]));
        g.add_edge(a, b, f[2].parse().unwrap());
    }
    let name_of: std::collections::HashMap<petgraph::graph::NodeIndex, String> =
        node.iter().map(|(k, v)| (*v, k.clone())).collect();
    let d = Dir::new();
    let idx = d.build(
        &demo("ferries.txt"),
        "ferries.wmk",
        &["-q", "--metric", "graph", "--dim", "8"],
    );
    let stops: Vec<String> = demo_lines("ferry-queries.txt")
        .into_iter()
        .take(12)
        .collect();
    let ask = |k: &str| -> Vec<Value> {
        let out = d
            .cmd()
            .arg("query")
            .arg(&idx)
            .args(["--exact", "-k", k])
            .write_stdin(stops.join("\n"))
            .output()
            .unwrap();
        assert!(out.status.success(), "{out:?}");
        json_lines(&out.stdout)
    };
    // Each stop's own node comes first: remove the first two stops' nodes by their ids.
    let before = ask("1");
    let gone: Vec<(String, String)> = before[..2]
        .iter()
        .map(|l| {
            let n = &l["neighbors"][0];
            let id = n["id"].as_str().map_or(n["id"].to_string(), str::to_string);
            (id, n["item"].as_str().unwrap().to_string())
        })
        .collect();
    let f = d.write(
        "gone.txt",
        gone.iter()
            .map(|g| g.0.clone())
            .collect::<Vec<_>>()
            .join("\n")
            .as_bytes(),
    );
    d.cmd()
        .arg("remove")
        .arg(&idx)
        .arg("--ids")
        .arg(&f)
        .assert()
        .success();
    for (q, line) in stops.iter().zip(ask("6")) {
        let dist = petgraph::algo::dijkstra(&g, node[q], None, |e| *e.weight());
        let mut want: Vec<f64> = dist
            .iter()
            .filter(|(n, _)| !gone.iter().any(|g| g.1 == name_of[n]))
            .map(|(_, d)| *d)
            .collect();
        want.sort_by(f64::total_cmp);
        let got = line["neighbors"].as_array().unwrap();
        assert_eq!(got.len(), 6, "{line}");
        for (n, w) in got.iter().zip(&want) {
            assert!(!gone.iter().any(|g| g.1 == n["item"].as_str().unwrap()));
            assert!(
                (n["distance"].as_f64().unwrap() - w).abs() < 1e-6,
                "{q}: {line}"
            );
        }
    }
    // A removed node stays a node of the graph: what reads the live items as one index
    // runs, and the compacted index answers as the index in parts did.
    for args in [
        &["pairs", "--within", "20"][..],
        &["groups", "--within", "20"],
        &["eval", "--distortion"],
    ] {
        d.cmd()
            .arg(args[0])
            .arg(&idx)
            .args(&args[1..])
            .assert()
            .success();
    }
    let grown = ask("6");
    d.cmd().arg("compact").arg(&idx).assert().success();
    let compacted = ask("6");
    let dist = |v: &[Value]| -> Vec<Vec<f64>> {
        v.iter()
            .map(|l| {
                l["neighbors"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|n| n["distance"].as_f64().unwrap())
                    .collect()
            })
            .collect()
    };
    assert_eq!(dist(&compacted), dist(&grown));
}
