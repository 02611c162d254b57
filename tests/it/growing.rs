//! Indexes that grow: `waymark add`, `remove` and `compact`, and every query mode over the
//! parts, checked against brute force over the live items with outside references (strsim's
//! Levenshtein, a `HashSet` Jaccard, the Euclidean distance computed here), on Debian's
//! american-english word list (wamerican) as data; crash safety, readers and writers.

use std::collections::HashSet;
use std::path::Path;
use std::process::Stdio;
use std::time::Duration;

use predicates::prelude::PredicateBooleanExt;
use predicates::str::contains;
use serde_json::Value;

use crate::util::*;
use waymark::index::parts::Parts;
use waymark::search::parts::PartsSearcher;
use waymark::search::Request;

/// Every 7th word of the word list from `from`, `n` of them.
fn words(from: usize, n: usize) -> Vec<String> {
    word_list()
        .lines()
        .skip(from)
        .step_by(7)
        .take(n)
        .map(str::to_string)
        .collect()
}

/// `(id, item, distance)` of each answer of one JSON answer line.
fn answers(line: &Value) -> Vec<(String, String, f64)> {
    line["neighbors"]
        .as_array()
        .unwrap()
        .iter()
        .map(|n| {
            (
                n["id"].to_string(),
                n["item"].as_str().unwrap().to_string(),
                n["distance"].as_f64().unwrap(),
            )
        })
        .collect()
}

fn run_query(d: &Dir, idx: &Path, queries: &[String], args: &[&str]) -> Vec<Value> {
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

/// The brute force: every live `(id, item)` at its distance from `q`, in answer order
/// (distance, then id; ids here are unique or ordered by insertion like item numbers).
fn brute(
    live: &[(String, String)],
    q: &str,
    dist: &dyn Fn(&str, &str) -> f64,
) -> Vec<(String, String, f64)> {
    let mut all: Vec<(String, String, f64)> = live
        .iter()
        .map(|(id, s)| (id.clone(), s.clone(), dist(q, s)))
        .collect();
    all.sort_by(|a, b| a.2.total_cmp(&b.2));
    all
}

/// `got` is the k nearest of `all` (sorted by distance): the same distances, the same items
/// below the k-th distance, and items at it among those tied there.
fn assert_knn(got: &[(String, String, f64)], all: &[(String, String, f64)], k: usize, q: &str) {
    let want = &all[..k.min(all.len())];
    assert_eq!(got.len(), want.len(), "{q}");
    for (g, w) in got.iter().zip(want) {
        assert!((g.2 - w.2).abs() < 1e-9, "{q}: {got:?} vs {want:?}");
    }
    let Some(kth) = want.last().map(|w| w.2) else {
        return;
    };
    let below = |v: &[(String, String, f64)]| -> HashSet<(String, String)> {
        v.iter()
            .filter(|x| x.2 < kth - 1e-9)
            .map(|x| (x.0.clone(), x.1.clone()))
            .collect()
    };
    assert_eq!(below(got), below(want), "{q}");
    let tied: HashSet<(String, String)> = all
        .iter()
        .filter(|x| (x.2 - kth).abs() < 1e-9)
        .map(|x| (x.0.clone(), x.1.clone()))
        .collect();
    for g in got.iter().filter(|x| (x.2 - kth).abs() < 1e-9) {
        assert!(tied.contains(&(g.0.clone(), g.1.clone())), "{q}: {g:?}");
    }
}

/// `got` is exactly the items of `all` within `r`.
fn assert_within(got: &[(String, String, f64)], all: &[(String, String, f64)], r: f64, q: &str) {
    let g: HashSet<(String, String)> = got.iter().map(|x| (x.0.clone(), x.1.clone())).collect();
    let w: HashSet<(String, String)> = all
        .iter()
        .filter(|x| x.2 <= r + 1e-12)
        .map(|x| (x.0.clone(), x.1.clone()))
        .collect();
    assert_eq!(g, w, "{q}");
}

fn lev(a: &str, b: &str) -> f64 {
    strsim::levenshtein(a, b) as f64
}

/// A grown index: built from `base`, then each of `adds` added, then `removed` ids removed.
/// Returns the index path and the live `(id, item)` pairs (ids as JSON text).
fn grow(
    d: &Dir,
    metric: &[&str],
    ext: &str,
    base: &[String],
    adds: &[Vec<String>],
    removed: &[i64],
) -> (std::path::PathBuf, Vec<(String, String)>) {
    let input = d.write(&format!("base.{ext}"), base.join("\n").as_bytes());
    let mut args = vec!["-q", "--dim", "12"];
    args.extend_from_slice(metric);
    let idx = d.build(&input, "grown.wmk", &args);
    let mut live: Vec<(String, String)> = base
        .iter()
        .enumerate()
        .map(|(i, s)| (i.to_string(), s.clone()))
        .collect();
    for (j, more) in adds.iter().enumerate() {
        let f = d.write(&format!("more{j}.{ext}"), more.join("\n").as_bytes());
        d.cmd()
            .arg("add")
            .arg(&idx)
            .arg(&f)
            .args(metric)
            .assert()
            .success();
        let from = live.len();
        live.extend(
            more.iter()
                .enumerate()
                .map(|(i, s)| ((from + i).to_string(), s.clone())),
        );
    }
    if !removed.is_empty() {
        let ids: Vec<String> = removed.iter().map(i64::to_string).collect();
        let f = d.write("gone.txt", ids.join("\n").as_bytes());
        d.cmd()
            .arg("remove")
            .arg(&idx)
            .arg("--ids")
            .arg(&f)
            .assert()
            .success();
        live.retain(|(id, _)| !ids.contains(id));
    }
    (idx, live)
}

/// Queries: words of the list near the indexed ones, with a letter changed.
fn typo_queries(n: usize) -> Vec<String> {
    words(3, n)
        .into_iter()
        .map(|w| {
            let mut c: Vec<char> = w.chars().collect();
            let m = c.len() / 2;
            c[m] = 'e';
            c.into_iter().collect()
        })
        .collect()
}

#[test]
fn exact_and_range_answers_over_parts_equal_a_levenshtein_brute_force_over_the_live_items() {
    let d = Dir::new();
    let all = words(0, 2600);
    // Removed: items of the first part, of an added part, and a reference item's
    // neighbourhood (item 0 is often chosen; either way it must never come back).
    let removed = [0i64, 5, 17, 1500, 2100, 2599];
    let (idx, live) = grow(
        &d,
        &[],
        "txt",
        &all[..1400],
        &[
            all[1400..2000].to_vec(),
            all[2000..2300].to_vec(),
            all[2300..].to_vec(),
        ],
        &removed,
    );
    let listed = Parts::open(&idx).unwrap();
    assert!(listed.parts().len() >= 2, "an index in parts");
    let queries = typo_queries(40);
    let exact = run_query(&d, &idx, &queries, &["--exact", "-k", "7"]);
    let within = run_query(&d, &idx, &queries, &["--within", "2"]);
    let within_k = run_query(&d, &idx, &queries, &["--within", "3", "-k", "4"]);
    let fraction = run_query(&d, &idx, &queries, &["--within-fraction", "0.3"]);
    for (i, q) in queries.iter().enumerate() {
        let b = brute(&live, q, &lev);
        assert_knn(&answers(&exact[i]), &b, 7, q);
        assert!(exact[i]["exact"].is_object(), "a certificate: {}", exact[i]);
        assert_within(&answers(&within[i]), &b, 2.0, q);
        let b3: Vec<_> = b.iter().filter(|x| x.2 <= 3.0).cloned().collect();
        assert_knn(&answers(&within_k[i]), &b3, 4, q);
        // --within-fraction: within 0.3 × the longer of the query and the item, in chars.
        let f: Vec<_> = b
            .iter()
            .filter(|x| x.2 <= 0.3 * (q.chars().count().max(x.1.chars().count()) as f64) + 1e-12)
            .cloned()
            .collect();
        assert_within(&answers(&fraction[i]), &f, f64::INFINITY, q);
    }
    // Removed items are never returned, by any mode, even asked for by their own text.
    let gone: Vec<String> = removed.iter().map(|&r| all[r as usize].clone()).collect();
    for args in [
        &["--exact", "-k", "5"][..],
        &["-k", "5"],
        &["--within", "1"],
        &["--recall", "0.9", "-k", "5"],
    ] {
        for line in run_query(&d, &idx, &gone, args) {
            let got = answers(&line);
            for r in &removed {
                assert!(
                    !got.iter().any(|g| g.0 == r.to_string()),
                    "{args:?}: {line}"
                );
            }
            if args[0] != "--within" {
                assert_eq!(got.len(), 5, "k answers still come back: {line}");
            }
        }
    }
    // Compaction drops the removed items and answers the same.
    d.cmd().arg("compact").arg(&idx).assert().success();
    assert!(!Parts::open(&idx).unwrap().is_listed());
    assert_eq!(Parts::open(&idx).unwrap().len(), live.len());
    let after = run_query(&d, &idx, &queries, &["--exact", "-k", "7"]);
    for (i, q) in queries.iter().enumerate() {
        assert_knn(&answers(&after[i]), &brute(&live, q, &lev), 7, q);
    }
    d.cmd()
        .args(["inspect", "--verify"])
        .arg(&idx)
        .assert()
        .success();
}

#[test]
fn approximate_answers_over_parts_find_the_true_neighbours_as_one_index_does() {
    let d = Dir::new();
    let all = words(0, 3000);
    let (idx, live) = grow(
        &d,
        &[],
        "txt",
        &all[..2000],
        &[all[2000..2500].to_vec(), all[2500..].to_vec()],
        &[],
    );
    let one = d.write("one.txt", all.join("\n").as_bytes());
    let single = d.build(&one, "one.wmk", &["-q", "--dim", "12"]);
    let queries = typo_queries(60);
    let recall = |idx: &Path| -> f64 {
        let got = run_query(&d, idx, &queries, &["-k", "5", "--candidates", "300"]);
        let mut hit = 0;
        for (i, q) in queries.iter().enumerate() {
            let b = brute(&live, q, &lev);
            let kth = b[4].2;
            hit += answers(&got[i])
                .iter()
                .filter(|a| a.2 <= kth)
                .count()
                .min(5);
        }
        hit as f64 / (5 * queries.len()) as f64
    };
    let (parts, whole) = (recall(&idx), recall(&single));
    assert!(
        parts >= whole - 0.05,
        "recall in parts {parts}, one index {whole}"
    );
}

#[test]
fn jaccard_and_vector_indexes_grow_with_exact_answers_equal_to_brute_force() {
    // Jaccard of character bigrams against a HashSet computation.
    fn bigrams(s: &str) -> HashSet<String> {
        let c: Vec<char> = s.chars().collect();
        if c.len() <= 2 {
            return [s.to_string()].into();
        }
        c.windows(2).map(|w| w.iter().collect()).collect()
    }
    let jac = |a: &str, b: &str| {
        let (x, y) = (bigrams(a), bigrams(b));
        1.0 - x.intersection(&y).count() as f64 / x.union(&y).count() as f64
    };
    let d = Dir::new();
    let all = words(1, 900);
    let metric = ["--metric", "jaccard", "--qgrams", "2"];
    let (idx, live) = grow(
        &d,
        &metric,
        "txt",
        &all[..600],
        &[all[600..750].to_vec(), all[750..].to_vec()],
        &[3, 700],
    );
    let queries = typo_queries(25);
    let exact = run_query(&d, &idx, &queries, &["--exact", "-k", "6"]);
    let within = run_query(&d, &idx, &queries, &["--within", "0.4"]);
    for (i, q) in queries.iter().enumerate() {
        let b = brute(&live, q, &jac);
        assert_knn(&answers(&exact[i]), &b, 6, q);
        assert_within(&answers(&within[i]), &b, 0.4, q);
    }

    // Vectors under L2: points made from the words' letters (a deterministic recipe of this
    // test), compared with the Euclidean distance computed here in f64 from the f32 values.
    let d = Dir::new();
    let vec_of = |w: &str| -> Vec<f32> {
        let b = w.as_bytes();
        (0..4)
            .map(|j| f32::from(*b.get(j).unwrap_or(&b'a')) / 10.0 + b.len() as f32)
            .collect()
    };
    let text = |v: &Vec<f32>| v.iter().map(f32::to_string).collect::<Vec<_>>().join(",");
    let points: Vec<String> = all.iter().map(|w| text(&vec_of(w))).collect();
    let metric = ["--metric", "l2"];
    let (idx, live) = grow(
        &d,
        &metric,
        "csv",
        &points[..500],
        &[points[500..800].to_vec(), points[800..].to_vec()],
        &[10, 650],
    );
    let l2 = |a: &str, b: &str| -> f64 {
        let p = |s: &str| -> Vec<f64> {
            s.split(',')
                .map(|x| x.parse::<f32>().unwrap().into())
                .collect()
        };
        p(a).iter()
            .zip(p(b))
            .map(|(x, y)| (x - y) * (x - y))
            .sum::<f64>()
            .sqrt()
    };
    let queries: Vec<String> = words(5, 20).iter().map(|w| text(&vec_of(w))).collect();
    let exact = run_query(&d, &idx, &queries, &["--exact", "-k", "5"]);
    for (i, q) in queries.iter().enumerate() {
        let b = brute(&live, q, &l2);
        let got = answers(&exact[i]);
        assert_eq!(got.len(), 5);
        for (g, w) in got.iter().zip(&b) {
            assert!((g.2 - w.2).abs() < 1e-4, "{q}: {got:?} vs {:?}", &b[..5]);
        }
    }
}

#[test]
fn duplicate_ids_across_parts_are_kept_and_removed_together() {
    let d = Dir::new();
    let base = d.write("base.csv", b"id,name\nq1,Keth Landing\nq2,Orvane Quay\nq3,Mirrow Steps\nq4,Orvane Strand\nq5,Skarn Wharf\n");
    let idx = d.build(
        &base,
        "r.wmk",
        &["-q", "--field", "name", "--id-field", "id", "--dim", "3"],
    );
    let more = d.write("more.csv", b"id,name\nq2,Orvane Quays\nq6,Keth Landings\n");
    d.cmd()
        .arg("add")
        .arg(&idx)
        .arg(&more)
        .args(["--field", "name", "--id-field", "id"])
        .assert()
        .success();
    // Both items with id q2 answer (ties ordered by id, then by insertion).
    let got = run_query(&d, &idx, &["Orvane Quay".into()], &["--exact", "-k", "3"]);
    let ids: Vec<String> = answers(&got[0]).iter().map(|a| a.0.clone()).collect();
    assert_eq!(ids[..2], ["\"q2\"", "\"q2\""]);
    // Removing the id removes every live item that has it.
    let gone = d.write("gone.txt", b"q2\n");
    d.cmd()
        .arg("remove")
        .arg(&idx)
        .arg("--ids")
        .arg(&gone)
        .assert()
        .success()
        .stderr(contains("removed 2 items"));
    let got = run_query(&d, &idx, &["Orvane Quay".into()], &["--exact", "-k", "10"]);
    let ids: Vec<String> = answers(&got[0]).iter().map(|a| a.0.clone()).collect();
    assert_eq!(ids.len(), 5);
    assert!(!ids.contains(&"\"q2\"".to_string()));
}

#[test]
fn bad_input_to_add_and_remove_is_refused_with_what_and_where_and_nothing_changes() {
    let d = Dir::new();
    let base = d.write("base.txt", words(0, 300).join("\n").as_bytes());
    let idx = d.build(&base, "x.wmk", &["-q", "--dim", "8"]);
    let before = std::fs::read(&idx).unwrap();
    let more = d.write("more.txt", words(2, 50).join("\n").as_bytes());
    // A metric or options that are not the index's.
    d.cmd()
        .arg("add")
        .arg(&idx)
        .arg(&more)
        .args(["--metric", "jaccard"])
        .assert()
        .failure()
        .stderr(contains("more.txt").and(contains("the index's")));
    d.cmd()
        .arg("add")
        .arg(&idx)
        .arg(&more)
        .arg("--fold-case")
        .assert()
        .failure()
        .stderr(contains("normalisation"));
    // An unknown id: the file and its line.
    let ids = d.write("ids.txt", b"3\n\n999999\n");
    d.cmd()
        .arg("remove")
        .arg(&idx)
        .arg("--ids")
        .arg(&ids)
        .assert()
        .failure()
        .stderr(contains("ids.txt: line 3").and(contains("999999")));
    let ids = d.write("ids.txt", b"three\n");
    d.cmd()
        .arg("remove")
        .arg(&idx)
        .arg("--ids")
        .arg(&ids)
        .assert()
        .failure()
        .stderr(contains("ids.txt: line 1"));
    assert_eq!(std::fs::read(&idx).unwrap(), before, "nothing changed");
}

/// A grown index with two parts in `d`; returns its path.
fn two_parts(d: &Dir) -> std::path::PathBuf {
    let base = d.write("base.txt", words(0, 400).join("\n").as_bytes());
    let idx = d.build(&base, "x.wmk", &["-q", "--dim", "8"]);
    let more = d.write("more.txt", words(2, 100).join("\n").as_bytes());
    d.cmd().arg("add").arg(&idx).arg(&more).assert().success();
    idx
}

fn list_body(idx: &Path) -> Value {
    let bytes = std::fs::read(idx).unwrap();
    let nl = bytes.iter().position(|&b| b == b'\n').unwrap();
    serde_json::from_slice(&bytes[nl + 1..]).unwrap()
}

/// Writes `body` as the list file at `idx` with a correct checksum.
fn write_list(idx: &Path, body: &Value) {
    use sha2::Digest;
    let text = serde_json::to_vec(body).unwrap();
    let sum: String = sha2::Sha256::digest(&text)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect();
    let mut out = format!("WMKPARTS 1 {sum}\n").into_bytes();
    out.extend_from_slice(&text);
    std::fs::write(idx, out).unwrap();
}

#[test]
fn a_damaged_missing_or_crafted_part_list_is_refused() {
    let d = Dir::new();
    let idx = two_parts(&d);
    let good = std::fs::read(&idx).unwrap();
    let body = list_body(&idx);
    let refused = |what: &str| {
        d.cmd()
            .arg("query")
            .arg(&idx)
            .write_stdin("abbot\n")
            .assert()
            .failure()
            .stderr(contains(what.to_string()));
    };
    // A byte of the body changed: the checksum.
    let mut bad = good.clone();
    let last = bad.len() - 2;
    bad[last] ^= 1;
    std::fs::write(&idx, &bad).unwrap();
    refused("checksum");
    // Parts named outside their folder, a huge count, a part listed twice.
    for (file, what) in [
        ("../x.wmk", "not a plain file name"),
        ("/etc/passwd", "not a plain file name"),
    ] {
        let mut b = body.clone();
        b["parts"][1]["file"] = file.into();
        write_list(&idx, &b);
        refused(what);
    }
    let mut b = body.clone();
    b["parts"][1]["n"] = serde_json::json!(1u64 << 40);
    write_list(&idx, &b);
    refused("items");
    let mut b = body.clone();
    b["parts"][1]["removed"] = serde_json::json!([5, 3]);
    write_list(&idx, &b);
    refused("removed");
    // A part whose bytes or header differ from the list's record.
    std::fs::write(&idx, &good).unwrap();
    let part = parts_folder(&idx).join(body["parts"][1]["file"].as_str().unwrap());
    let kept = std::fs::read(&part).unwrap();
    let mut p = kept.clone();
    p[40] ^= 0xff;
    std::fs::write(&part, &p).unwrap();
    refused("x.wmk");
    // A part missing.
    std::fs::remove_file(&part).unwrap();
    refused("missing");
    std::fs::write(&part, &kept).unwrap();
    d.cmd()
        .args(["inspect", "--verify"])
        .arg(&idx)
        .assert()
        .success();
}

fn parts_folder(idx: &Path) -> std::path::PathBuf {
    let mut n = idx.file_name().unwrap().to_os_string();
    n.push(".parts");
    idx.with_file_name(n)
}

#[test]
fn a_part_of_another_embedding_is_refused_naming_it() {
    let d = Dir::new();
    let idx = two_parts(&d);
    let body = list_body(&idx);
    // Another index over the same items but other landmarks, put in as part 1.
    let other_in = d.write("other.txt", words(2, 100).join("\n").as_bytes());
    let other = d.build(&other_in, "other.wmk", &["-q", "--dim", "8", "--seed", "9"]);
    let name = body["parts"][1]["file"].as_str().unwrap().to_string();
    let part = parts_folder(&idx).join(&name);
    std::fs::copy(&other, &part).unwrap();
    let mut b = body.clone();
    let o = waymark::index::Index::open(&part).unwrap();
    b["parts"][1]["bytes"] = (o.file_len() as u64).into();
    drop(o);
    // The digest no longer matches first; with it fixed, the embedding check names it.
    use sha2::Digest;
    let bytes = std::fs::read(&part).unwrap();
    let digest: String = sha2::Sha256::digest(&bytes[..64 + 16 * 32])
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect();
    b["parts"][1]["digest"] = digest.into();
    write_list(&idx, &b);
    d.cmd()
        .arg("query")
        .arg(&idx)
        .write_stdin("abbot\n")
        .assert()
        .failure()
        .stderr(contains(name.as_str()).and(contains("embedding")));
}

#[test]
fn a_version_1_index_grows_too() {
    let d = Dir::new();
    let v1 = d.write(
        "v1.wmk",
        &std::fs::read(repo_file("tests/it/data/v1-names.wmk")).unwrap(),
    );
    let more = d.write("more.txt", b"Keth Landing\nOrvane Quay\n");
    d.cmd().arg("add").arg(&v1).arg(&more).assert().success();
    let got = run_query(&d, &v1, &["Orvane Quay".into()], &["--exact", "-k", "1"]);
    assert_eq!(answers(&got[0])[0].1, "Orvane Quay");
    d.cmd().arg("compact").arg(&v1).assert().success();
    let got = run_query(&d, &v1, &["Keth Landing".into()], &["--exact", "-k", "1"]);
    assert_eq!(answers(&got[0])[0].2, 0.0);
}

#[test]
fn a_reader_opened_before_a_change_keeps_answering_what_it_opened() {
    let d = Dir::new();
    let idx = two_parts(&d);
    let parts = Parts::open(&idx).unwrap();
    let searcher = PartsSearcher::new(&parts);
    let queries = typo_queries(10);
    let req = Request::Exact { k: 5 };
    let before: Vec<_> = searcher
        .answer_many(&queries, &req)
        .into_iter()
        .map(|r| r.unwrap().neighbors)
        .collect();
    // Another process adds, removes and compacts: the old parts are deleted.
    let more = d.write("more2.txt", words(4, 300).join("\n").as_bytes());
    d.cmd().arg("add").arg(&idx).arg(&more).assert().success();
    let gone = d.write("gone.txt", b"1\n2\n");
    d.cmd()
        .arg("remove")
        .arg(&idx)
        .arg("--ids")
        .arg(&gone)
        .assert()
        .success();
    d.cmd().arg("compact").arg(&idx).assert().success();
    assert!(!parts_folder(&idx).exists());
    let again: Vec<_> = searcher
        .answer_many(&queries, &req)
        .into_iter()
        .map(|r| r.unwrap().neighbors)
        .collect();
    assert_eq!(before, again);
}

#[test]
fn two_writers_at_once_leave_one_whole_index() {
    let d = Dir::new();
    let base = d.write("base.txt", words(0, 3000).join("\n").as_bytes());
    let idx = d.build(&base, "x.wmk", &["-q", "--dim", "16"]);
    let a = d.write("a.txt", words(1, 4000).join("\n").as_bytes());
    let b = d.write("b.txt", words(2, 4000).join("\n").as_bytes());
    let bin = waymark_path();
    let spawn = |f: &Path| {
        std::process::Command::new(&bin)
            .arg("add")
            .arg(&idx)
            .arg(f)
            .stdout(Stdio::null())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap()
    };
    let (ca, cb) = (spawn(&a), spawn(&b));
    let (oa, ob) = (
        ca.wait_with_output().unwrap(),
        cb.wait_with_output().unwrap(),
    );
    let mut expect = 3000;
    for o in [&oa, &ob] {
        if o.status.success() {
            expect += 4000;
        } else {
            // Refused after waiting: the clear message, never a corrupt index.
            assert!(
                String::from_utf8_lossy(&o.stderr).contains("another waymark is changing"),
                "{o:?}"
            );
        }
    }
    let parts = Parts::open(&idx).unwrap();
    assert_eq!(parts.live(), expect);
    parts.verify().unwrap();
}

/// The writers' lock file of the index at `idx` (`.NAME.waymark-lock` beside it).
fn lock_file(idx: &Path) -> std::path::PathBuf {
    let name = idx.file_name().unwrap().to_str().unwrap();
    idx.with_file_name(format!(".{name}.waymark-lock"))
}

/// Whether some process holds the writers' lock of `idx` now (`None`: no lock file). The
/// test takes the lock itself to find out, and lets it go at once.
fn lock_held(idx: &Path) -> Option<bool> {
    let file = std::fs::OpenOptions::new()
        .write(true)
        .open(lock_file(idx))
        .ok()?;
    match file.try_lock() {
        Ok(()) => {
            file.unlock().unwrap();
            Some(false)
        }
        Err(std::fs::TryLockError::WouldBlock) => Some(true),
        Err(std::fs::TryLockError::Error(e)) => panic!("the lock file: {e}"),
    }
}

/// Every file under `dir`, by its path from `dir`.
fn files_under(dir: &Path) -> Vec<String> {
    let mut out = Vec::new();
    let mut todo = vec![dir.to_path_buf()];
    while let Some(at) = todo.pop() {
        for e in std::fs::read_dir(&at).unwrap().flatten() {
            if e.file_type().unwrap().is_dir() {
                todo.push(e.path());
            } else {
                let rel = e.path().strip_prefix(dir).unwrap().to_owned();
                out.push(rel.to_string_lossy().into_owned());
            }
        }
    }
    out.sort();
    out
}

#[test]
fn an_add_that_fails_partway_leaves_the_index_as_it_was_and_its_lock_free() {
    if std::process::Command::new("python3")
        .arg("--version")
        .output()
        .is_err()
    {
        eprintln!("skipped: no python3");
        return;
    }
    let d = Dir::new();
    // The metric is a program (the Levenshtein server of the examples) started through a
    // shell script, which is swapped below for one that starts the server to die on its
    // first request: an `add` then fails while it embeds its items, under the writers'
    // lock, with part 0 already linked into the parts folder and the new part begun.
    let server = repo_file("examples/metric_server.py");
    let script = |misbehave: &str| format!("exec python3 '{}' {misbehave}\n", server.display());
    let program = d.write("metric.sh", script("").as_bytes());
    let external = [
        "--metric",
        "external",
        "--",
        "sh",
        program.to_str().unwrap(),
    ];
    let base = d.write("base.txt", words(0, 300).join("\n").as_bytes());
    let idx = d.build(
        &base,
        "x.wmk",
        &[&["-q", "--dim", "8"][..], &external].concat(),
    );
    let before = std::fs::read(&idx).unwrap();
    let queries = typo_queries(6);
    let answers = |d: &Dir| run_query(d, &idx, &queries, &["--exact", "-k", "3", "--quiet-metric"]);
    let old = answers(&d);
    let add = |input: &Path| {
        let mut c = d.cmd();
        c.arg("add").arg(&idx).arg(input).args(external);
        c
    };
    // What every failed add must leave: the index file as it was (bytes, checksums,
    // answers), no partial file anywhere, and a lock file, if any, that no one holds.
    let unchanged = |what: &str| {
        assert_eq!(std::fs::read(&idx).unwrap(), before, "{what}: the index");
        d.cmd()
            .args(["inspect", "--verify"])
            .arg(&idx)
            .assert()
            .success();
        assert_eq!(answers(&d), old, "{what}: the answers");
        let files = files_under(d.path("").as_path());
        assert!(
            !files.iter().any(|f| f.ends_with(".waymark-partial")),
            "{what}: {files:?}"
        );
        assert_ne!(lock_held(&idx), Some(true), "{what}: the lock is held");
    };

    // A bad line of the input (line 3 is not UTF-8): refused before anything is written.
    let mut bad = words(2, 50).join("\n").into_bytes();
    let third = bad
        .iter()
        .enumerate()
        .filter(|(_, &c)| c == b'\n')
        .nth(1)
        .unwrap()
        .0;
    bad.splice(third + 1..third + 1, *b"\xffbad");
    let bad = d.write("bad.txt", &bad);
    add(&bad).assert().code(2).stderr(contains("bad.txt:3"));
    unchanged("a bad line");

    // The program dies while the new items are embedded.
    std::fs::write(&program, script("--misbehave exit")).unwrap();
    let more = d.write("more.txt", words(2, 50).join("\n").as_bytes());
    add(&more)
        .assert()
        .code(2)
        .stderr(contains("exiting on purpose"));
    std::fs::write(&program, script("")).unwrap();
    unchanged("a metric program that died");
    // The lock file stays (it is an advisory lock on a file that is never removed: see
    // DEVELOPERS.md), free.
    assert_eq!(lock_held(&idx), Some(false));

    // The next add succeeds: the old items and the new, and the folder holds exactly the
    // parts the list names (what the failed add had linked is removed).
    add(&more).assert().success();
    let parts = Parts::open(&idx).unwrap();
    assert_eq!(parts.live(), 350);
    parts.verify().unwrap();
    let listed: Vec<String> = list_body(&idx)["parts"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p["file"].as_str().unwrap().to_string())
        .collect();
    let mut listed = listed;
    listed.sort();
    assert_eq!(files_under(&parts_folder(&idx)), listed);
    assert_eq!(lock_held(&idx), Some(false));
}

#[test]
fn a_held_lock_keeps_a_writer_out_and_a_killed_writers_lock_file_blocks_no_one() {
    let d = Dir::new();
    let base = d.write("base.txt", words(0, 2000).join("\n").as_bytes());
    let idx = d.build(&base, "x.wmk", &["-q", "--dim", "16"]);
    let more = d.write("more.txt", words(1, 100).join("\n").as_bytes());
    let before = std::fs::read(&idx).unwrap();
    let bin = waymark_path();
    let spawn = |input: &Path| {
        std::process::Command::new(&bin)
            .arg("add")
            .arg(&idx)
            .arg(input)
            .stdout(Stdio::null())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap()
    };

    // While another process holds the lock (here the test), a writer waits, then is
    // refused with the clear message, and changes nothing.
    let held = std::fs::OpenOptions::new()
        .create(true)
        .truncate(false)
        .write(true)
        .open(lock_file(&idx))
        .unwrap();
    held.lock().unwrap();
    let t0 = std::time::Instant::now();
    d.cmd()
        .arg("add")
        .arg(&idx)
        .arg(&more)
        .assert()
        .code(2)
        .stderr(contains("another waymark is changing this index"));
    assert!(t0.elapsed() >= waymark::index::parts::WRITER_WAIT);
    assert_eq!(std::fs::read(&idx).unwrap(), before);
    // A writer that starts while the lock is held goes on once it is let go.
    let mut waiting = spawn(&more);
    std::thread::sleep(Duration::from_millis(1500));
    assert!(waiting.try_wait().unwrap().is_none(), "it did not wait");
    assert_eq!(std::fs::read(&idx).unwrap(), before);
    held.unlock().unwrap();
    let out = waiting.wait_with_output().unwrap();
    assert!(out.status.success(), "{out:?}");
    assert_eq!(Parts::open(&idx).unwrap().live(), 2100);
    drop(held);

    // A writer killed while it holds the lock (while it writes its new part, whose partial
    // file is then in the parts folder) leaves the lock file, but the system let its lock
    // go with it: the next writer goes ahead at once.
    let big = d.write("big.txt", words(2, 12000).join("\n").as_bytes());
    let writing = || {
        std::fs::read_dir(parts_folder(&idx)).is_ok_and(|es| {
            es.flatten().any(|e| {
                e.file_name()
                    .to_string_lossy()
                    .ends_with(".waymark-partial")
            })
        })
    };
    let mut held_when_killed = None;
    for _ in 0..5 {
        let mut child = spawn(&big);
        let seen = loop {
            if writing() {
                break true;
            }
            if child.try_wait().unwrap().is_some() {
                break false;
            }
            std::thread::sleep(Duration::from_millis(2));
        };
        let held = lock_held(&idx);
        let _ = child.kill(); // SIGKILL
        if seen && !child.wait().unwrap().success() {
            held_when_killed = Some(held);
            break;
        }
    }
    let Some(held_when_killed) = held_when_killed else {
        panic!("no writer was killed while it wrote its part");
    };
    assert!(lock_file(&idx).exists());
    let n = Parts::open(&idx).unwrap().live();
    let t0 = std::time::Instant::now();
    d.cmd().arg("add").arg(&idx).arg(&more).assert().success();
    assert!(t0.elapsed() < waymark::index::parts::WRITER_WAIT);
    let parts = Parts::open(&idx).unwrap();
    assert_eq!(parts.live(), n + 100);
    parts.verify().unwrap();
    // The killed writer held the lock (so this shows its lock went with it).
    assert_eq!(held_when_killed, Some(true));
    assert_eq!(lock_held(&idx), Some(false));
}

#[test]
fn add_remove_and_compact_killed_at_any_moment_leave_the_old_or_the_new_state_whole() {
    let d = Dir::new();
    let base = d.write("base.txt", words(0, 4000).join("\n").as_bytes());
    let idx = d.build(&base, "x.wmk", &["-q", "--dim", "16"]);
    let big = d.write("big.txt", words(1, 12000).join("\n").as_bytes());
    let gone = d.write("gone.txt", b"1\n2\n3\n4000\n");
    let queries = typo_queries(8);
    // The state as readers see it: every checksum checked, the live items, exact answers.
    let state = || -> (usize, Vec<Value>) {
        d.cmd()
            .args(["inspect", "--verify"])
            .arg(&idx)
            .assert()
            .success();
        let answers = run_query(&d, &idx, &queries, &["--exact", "-k", "4"])
            .into_iter()
            .map(|mut v| {
                v.as_object_mut().unwrap().remove("exact");
                v
            })
            .collect();
        (Parts::open(&idx).unwrap().live(), answers)
    };
    let bin = waymark_path();
    let run = |args: &[&std::ffi::OsStr], delay_ms: u64| -> bool {
        let mut child = std::process::Command::new(&bin)
            .args(args)
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_millis(delay_ms));
        let _ = child.kill(); // SIGKILL
        child.wait().unwrap().success()
    };
    let (add, remove, compact) = (
        [idx.as_os_str(), big.as_os_str()],
        [idx.as_os_str(), "--ids".as_ref(), gone.as_os_str()],
        [idx.as_os_str()],
    );
    let mut interrupted = 0;
    let delays = [1u64, 5, 15, 40, 80, 150, 300];
    for delay in delays {
        let (n, old) = state();
        let done = run(&[&["add".as_ref()][..], &add].concat(), delay);
        let (m, now) = state();
        if m == n {
            assert_eq!(now, old, "killed add: the old state");
            interrupted += usize::from(!done);
        } else {
            assert_eq!(m, n + 12000, "the new state, whole");
        }
    }
    // One add to the end, so that every id removed below exists.
    d.cmd().arg("add").arg(&idx).arg(&big).assert().success();
    for delay in delays {
        let (n, old) = state();
        let done = run(&[&["remove".as_ref()][..], &remove].concat(), delay);
        let (m, now) = state();
        if m == n {
            assert_eq!(now, old, "killed remove: the old state");
            interrupted += usize::from(!done);
        } else {
            assert_eq!(m, n - 4, "the new state, whole");
            break;
        }
    }
    for delay in delays {
        let (n, old) = state();
        let done = run(&[&["compact".as_ref()][..], &compact].concat(), delay);
        let (m, now) = state();
        // Compaction changes no answer, finished or not.
        assert_eq!((m, now), (n, old), "compact");
        interrupted += usize::from(!done);
        if done {
            break;
        }
    }
    assert!(interrupted > 0, "no kill landed before a change finished");
    // Leftovers of killed writers are removed by the next writer.
    d.cmd().arg("add").arg(&idx).arg(&base).assert().success();
    d.cmd().arg("compact").arg(&idx).assert().success();
    assert!(!parts_folder(&idx).exists());
    assert_eq!(
        d.others(&[
            "base.txt",
            "big.txt",
            "gone.txt",
            "x.wmk",
            ".x.wmk.waymark-lock"
        ]),
        Vec::<String>::new()
    );
}
