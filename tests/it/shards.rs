//! Sharded builds: `waymark build --shards N` and the library's seed, shard and list steps.
//! Exact answers over the shards are checked against the ordinary index of the same items
//! and against brute force with strsim's Levenshtein; approximate recall@10 of both against
//! that brute force, on Debian's american-english word list (wamerican) as data.

use std::collections::HashSet;
use std::path::{Path, PathBuf};

use predicates::str::contains;
use serde_json::Value;

use crate::util::*;
use waymark::index::parts::{self, Parts};
use waymark::index::shards::{
    build_seed, build_shard, record_ids, seed_sample, shard_number, write_parts, MAX_SHARDS,
};
use waymark::index::{BuildOptions, Index};
use waymark::ingest::Corpus;

/// Every 5th word of the word list, `n` of them.
fn words(n: usize) -> Vec<String> {
    word_list()
        .lines()
        .step_by(5)
        .take(n)
        .map(str::to_string)
        .collect()
}

/// Queries: words of the list that are not indexed (every 5th from the 3rd), with one
/// letter doubled, `n` of them.
fn queries(n: usize) -> Vec<String> {
    word_list()
        .lines()
        .skip(2)
        .step_by(5)
        .step_by(17)
        .take(n)
        .map(|w| {
            let mut c: Vec<char> = w.chars().collect();
            let at = c.len() / 2;
            c.insert(at, c[at.min(c.len() - 1)]);
            c.into_iter().collect()
        })
        .collect()
}

/// `(id, item, distance)` of every answer, per query line.
fn run(d: &Dir, idx: &Path, qs: &[String], args: &[&str]) -> Vec<Vec<(i64, String, f64)>> {
    let out = d
        .cmd()
        .arg("query")
        .arg(idx)
        .args(args)
        .write_stdin(qs.join("\n"))
        .output()
        .unwrap();
    assert!(out.status.success(), "{out:?}");
    json_lines::<Value>(&out.stdout)
        .iter()
        .map(|l| {
            l["neighbors"]
                .as_array()
                .unwrap()
                .iter()
                .map(|n| {
                    (
                        n["id"].as_i64().unwrap(),
                        n["item"].as_str().unwrap().to_string(),
                        n["distance"].as_f64().unwrap(),
                    )
                })
                .collect()
        })
        .collect()
}

fn lev(a: &str, b: &str) -> f64 {
    strsim::levenshtein(a, b) as f64
}

#[test]
fn sharded_exact_answers_equal_the_ordinary_index_and_brute_force() {
    let d = Dir::new();
    let items = words(6000);
    let input = d.write("words.txt", items.join("\n").as_bytes());
    let plain = d.build(&input, "plain.wmk", &["-q", "--dim", "16"]);
    let sharded = d.build(
        &input,
        "sharded.wmk",
        &["-q", "--dim", "16", "--shards", "3"],
    );
    let p = Parts::open(&sharded).unwrap();
    assert!(p.is_listed());
    assert_eq!(p.parts().len(), 3);
    assert_eq!(p.len(), items.len());
    // Shard s holds its range of the items, ids counted across the shards.
    let files: Vec<Option<usize>> = p.parts().iter().map(|x| shard_number(&x.file)).collect();
    assert_eq!(files, [Some(0), Some(1), Some(2)]);
    assert_eq!(p.parts()[1].offset as usize, 2000);
    assert_eq!(p.id(2000), waymark::index::IdRef::Int(2000));
    assert_eq!(p.item(4321), items[4321].as_bytes());
    let qs = queries(40);
    for args in [&["--exact", "-k", "10"][..], &["--within", "2"][..]] {
        let a = run(&d, &plain, &qs, args);
        let b = run(&d, &sharded, &qs, args);
        assert_eq!(a, b, "{args:?}");
        // And brute force: the distances of the k nearest (or every item within 2).
        for (q, got) in qs.iter().zip(&b) {
            let mut all: Vec<f64> = items.iter().map(|w| lev(q, w)).collect();
            all.sort_by(f64::total_cmp);
            let want: Vec<f64> = if args[0] == "--exact" {
                all[..10].to_vec()
            } else {
                all.into_iter().filter(|&x| x <= 2.0).collect()
            };
            let dists: Vec<f64> = got.iter().map(|x| x.2).collect();
            assert_eq!(dists, want, "{q} {args:?}");
            for (id, item, dist) in got {
                assert_eq!(&items[*id as usize], item);
                assert_eq!(lev(q, item), *dist);
            }
        }
    }
}

#[test]
fn sharded_approximate_recall_is_like_the_ordinary_index() {
    let d = Dir::new();
    let items = words(20_000);
    let input = d.write("words.txt", items.join("\n").as_bytes());
    let plain = d.build(&input, "plain.wmk", &["-q", "--no-calibration"]);
    let sharded = d.build(&input, "sharded.wmk", &["-q", "--shards", "4"]);
    let qs = queries(150);
    // recall@10 against brute force, ties at the 10th distance counted as found.
    let recall = |answers: &[Vec<(i64, String, f64)>]| -> f64 {
        let mut hit = 0usize;
        for (q, got) in qs.iter().zip(answers) {
            let mut all: Vec<f64> = items.iter().map(|w| lev(q, w)).collect();
            all.sort_by(f64::total_cmp);
            let kth = all[9];
            hit += got.iter().filter(|x| x.2 <= kth).count().min(10);
        }
        hit as f64 / (10 * qs.len()) as f64
    };
    let args = ["-k", "10", "--candidates", "300"];
    let rp = recall(&run(&d, &plain, &qs, &args));
    let rs = recall(&run(&d, &sharded, &qs, &args));
    assert!(rp > 0.8, "plain recall {rp}");
    assert!(rs > rp - 0.05, "sharded recall {rs}, plain {rp}");
}

/// The seed of `items` (a sample of 500) in `dir/seed.wmk`, opened.
fn seed_of(dir: &Path, items: &[String], seed: u64) -> Index {
    let opts = BuildOptions {
        dim: 12,
        seed,
        ..BuildOptions::default()
    };
    let path = dir.join(format!("seed{seed}.wmk"));
    build_seed(
        &seed_sample(&corpus(items), 500, seed),
        "test",
        &opts,
        Some(items.len()),
        &path,
    )
    .unwrap();
    Index::open(&path).unwrap()
}

/// Shard `s` of `items` in `n` shards: its items with their record numbers as ids.
fn shard_corpus(items: &[String], n: usize, s: usize) -> Corpus {
    let r = waymark::index::shards::split(items.len(), n)[s].clone();
    Corpus::new(
        items[r.clone()].to_vec(),
        None,
        record_ids(r.start as i64, r.len()),
    )
    .unwrap()
}

#[test]
fn shards_written_twice_leave_one_file_and_the_list_takes_add_remove_compact() {
    let d = Dir::new();
    let items = words(3000);
    let seed = seed_of(d.dir.path(), &items, 1);
    let folder = d.path("out");
    let mut files = Vec::new();
    for s in (0..3).rev() {
        files.push(
            build_shard(
                &shard_corpus(&items, 3, s),
                "test",
                &seed,
                &folder,
                s,
                vec![],
            )
            .unwrap(),
        );
    }
    // A retried task: the same name, one file, nothing else left in the folder.
    let again = build_shard(
        &shard_corpus(&items, 3, 1),
        "test",
        &seed,
        &folder,
        1,
        vec![],
    )
    .unwrap();
    assert_eq!(again, files[1]);
    let mut names: Vec<String> = std::fs::read_dir(&folder)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    assert_eq!(names.len(), 3, "{names:?}");
    assert!(names.iter().all(|n| shard_number(n).is_some()));
    let idx = d.path("words.wmk");
    let w = write_parts(&idx, &files).unwrap();
    assert_eq!((w.shards, w.items), (3, 3000));
    let p = Parts::open(&idx).unwrap();
    assert_eq!(p.len(), 3000);
    assert_eq!(p.id(1999), waymark::index::IdRef::Int(1999));
    assert_eq!(p.item(2999), items[2999].as_bytes());
    // Exact answers equal brute force.
    let qs = queries(10);
    let b = run(&d, &idx, &qs, &["--exact", "-k", "5"]);
    for (q, got) in qs.iter().zip(&b) {
        let mut all: Vec<f64> = items.iter().map(|w| lev(q, w)).collect();
        all.sort_by(f64::total_cmp);
        assert_eq!(got.iter().map(|x| x.2).collect::<Vec<_>>(), all[..5]);
    }
    // add, remove and compact work on it.
    let more = d.write("more.txt", b"harbourmaster\nharbourmasters\n");
    d.cmd().arg("add").arg(&idx).arg(&more).assert().success();
    let ids = d.write("gone.txt", b"0\n3000\n");
    d.cmd()
        .arg("remove")
        .arg(&idx)
        .arg("--ids")
        .arg(&ids)
        .assert()
        .success();
    d.cmd().arg("compact").arg(&idx).assert().success();
    let c = Index::open(&idx).unwrap();
    assert_eq!(c.len(), 3000);
    let got = run(
        &d,
        &idx,
        &["harbourmaster".to_string()],
        &["--exact", "-k", "1"],
    );
    assert_eq!(got[0][0], (3001, "harbourmasters".to_string(), 1.0));
}

#[test]
fn bad_input_shards_from_another_seed_a_missing_shard_and_out_of_range_numbers_are_refused() {
    let d = Dir::new();
    let items = words(1200);
    let seed1 = seed_of(d.dir.path(), &items, 1);
    let seed2 = seed_of(d.dir.path(), &items, 2);
    let folder = d.path("out");
    let s0 = build_shard(
        &shard_corpus(&items, 3, 0),
        "test",
        &seed1,
        &folder,
        0,
        vec![],
    )
    .unwrap();
    let s1 = build_shard(
        &shard_corpus(&items, 3, 1),
        "test",
        &seed1,
        &folder,
        1,
        vec![],
    )
    .unwrap();
    let other = d.path("other");
    let s2x = build_shard(
        &shard_corpus(&items, 3, 2),
        "test",
        &seed2,
        &other,
        2,
        vec![],
    )
    .unwrap();
    let idx = d.path("words.wmk");
    let e = write_parts(&idx, &[s0.clone(), s1.clone(), s2x.clone()]).unwrap_err();
    assert!(
        e.to_string()
            .contains("shard 2: its embedding (reference items, scale, metric or normalisation) is not shard 0's"),
        "{e}"
    );
    assert!(e.to_string().contains("different seeds"), "{e}");
    assert!(!idx.exists());
    // A shard left out.
    let e = write_parts(&idx, &[s0.clone(), s2x.clone()]).unwrap_err();
    assert!(e.to_string().contains("shard 1 is missing"), "{e}");
    // A shard file that is not there.
    let gone = folder.join("shard-00002-0123456789abcdef.wmk");
    let e = write_parts(&idx, &[s0.clone(), s1.clone(), gone]).unwrap_err();
    assert!(
        e.to_string().contains("shard 2: the file does not exist"),
        "{e}"
    );
    // Two files of one shard.
    let dup = other.join(s1.file_name().unwrap());
    std::fs::copy(&s1, &dup).unwrap();
    let e = write_parts(&idx, &[s0.clone(), s1.clone(), dup]).unwrap_err();
    assert!(e.to_string().contains("two files of shard 1"), "{e}");
    // A shard number out of range.
    let e = build_shard(
        &shard_corpus(&items, 3, 0),
        "test",
        &seed1,
        &folder,
        MAX_SHARDS,
        vec![],
    )
    .unwrap_err();
    assert_eq!(
        e.to_string(),
        "test: shard number 1024 is out of range (0 to 1023)"
    );
    // A shard changed after it was written (its name's checksum no longer matches).
    let mut bytes = std::fs::read(&s1).unwrap();
    let at = bytes.len() - 1;
    bytes[at] ^= 1;
    std::fs::write(&s1, &bytes).unwrap();
    let e = write_parts(&idx, &[s0, s1]).unwrap_err();
    assert!(
        e.to_string()
            .contains("do not have the checksum its name carries"),
        "{e}"
    );
    assert!(!idx.exists());
    assert!(
        !parts::parts_dir(&idx).exists()
            || std::fs::read_dir(parts::parts_dir(&idx)).unwrap().count() == 0
    );
}

#[test]
fn bad_input_build_shards_refuses_more_shards_than_items_and_leaves_the_old_index() {
    let d = Dir::new();
    let input = d.write("few.txt", b"harbour\nharbor\narbour\n");
    let idx = d.build(&input, "few.wmk", &["-q", "--dim", "2"]);
    let before = std::fs::read(&idx).unwrap();
    d.cmd()
        .args(["build", "few.txt", "-o", "few.wmk", "--shards", "4"])
        .assert()
        .failure()
        .code(2)
        .stderr(contains(
            "few.txt: 3 items cannot make 4 shards (a shard holds at least one item)",
        ));
    d.cmd()
        .args(["build", "few.txt", "-o", "few.wmk", "--shards", "0"])
        .assert()
        .failure()
        .stderr(contains("--shards"));
    assert_eq!(std::fs::read(&idx).unwrap(), before);
    let names: HashSet<String> = d.others(&[]).into_iter().collect();
    assert!(!names.iter().any(|n| n.ends_with(".unnamed")), "{names:?}");
    let _: PathBuf = idx;
}

#[test]
fn a_shard_written_again_removes_what_killed_writers_of_it_left() {
    let d = Dir::new();
    let items = words(600);
    let seed = seed_of(d.dir.path(), &items, 1);
    let folder = d.path("out");
    std::fs::create_dir_all(&folder).unwrap();
    // What a task killed while writing shard 1 leaves: its hidden name before the rename,
    // and the partial file that name is written through.
    let stale = [
        ".shard-00001.00000000deadbeef.unnamed",
        "..shard-00001.0123456789abcdef.unnamed.Qx7k2P.waymark-partial",
    ];
    // Files it did not name: another shard's writer (maybe still running), a live writer of
    // shard 1 (it holds its file's lock), and files of the user.
    let live = ".shard-00001.00000000cafef00d.unnamed";
    let others = [
        ".shard-00002.00000000deadbeef.unnamed",
        live,
        "notes.txt",
        ".shard-00001.keep",
    ];
    for name in stale.iter().chain(&others) {
        std::fs::write(folder.join(name), b"half a shard").unwrap();
    }
    let holder = std::fs::File::open(folder.join(live)).unwrap();
    holder.lock().unwrap();
    let written = build_shard(
        &shard_corpus(&items, 3, 1),
        "test",
        &seed,
        &folder,
        1,
        vec![],
    )
    .unwrap();
    let mut names: Vec<String> = std::fs::read_dir(&folder)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    let mut want: Vec<String> = others.iter().map(|s| s.to_string()).collect();
    want.push(written.file_name().unwrap().to_string_lossy().into_owned());
    want.sort();
    assert_eq!(names, want);
    for name in others {
        assert_eq!(std::fs::read(folder.join(name)).unwrap(), b"half a shard");
    }
    // Its writer gone (the lock released), the next write of shard 1 removes it too.
    drop(holder);
    build_shard(
        &shard_corpus(&items, 3, 1),
        "test",
        &seed,
        &folder,
        1,
        vec![],
    )
    .unwrap();
    assert!(!folder.join(live).exists());
    assert!(folder.join(others[0]).exists() && folder.join("notes.txt").exists());
}
