//! The index file's format versions: a version 1 file made by the previous writer still
//! opens and answers as it did; a version 2 file keeps each coordinate row once, no ids
//! that are the record numbers, and a kd-tree over the rows' first coordinates.
//!
//! The fixture `tests/it/data/v1-names.wmk` and the answers beside it were made by the
//! waymark binary of the last commit that wrote format version 1 (`tests/it/data/README.md`
//! gives the commands): the answers are that binary's output, not this one's.

use predicates::str::contains;
use waymark::index::{BuildOptions, Index};
use waymark::search::{CandidateSource, SearchParams, Searcher, Space};

use crate::util::{build_in, corpus, first_words, repo_file, section, Dir};

/// The queries of the fixture and how each recorded answer file was asked.
const ASKED: [(&str, &[&str]); 5] = [
    (
        "scan",
        &["-k", "5", "--candidates", "20", "--candidates-from", "scan"],
    ),
    (
        "cells",
        &[
            "-k",
            "5",
            "--candidates",
            "20",
            "--candidates-from",
            "cells",
        ],
    ),
    (
        "tree",
        &["-k", "5", "--candidates", "20", "--candidates-from", "tree"],
    ),
    ("exact", &["-k", "5", "--exact"]),
    ("within", &["--within", "3"]),
];

fn data(name: &str) -> std::path::PathBuf {
    repo_file("tests/it/data").join(name)
}

/// What the version 1 binary answered for `kind` (see [`ASKED`]); for exact and range
/// answers without their certificates ([`answered`]).
fn recorded(kind: &str) -> String {
    let text = std::fs::read_to_string(data(&format!("v1-answers-{kind}.jsonl"))).expect("fixture");
    answered(kind, &text)
}

/// The answers of `text` (JSON lines) as [`recorded`] compares them: exact and range
/// answers without their certificates (`"exact"`), which count the work the exact path did
/// (items examined and measured), not what it found; approximate answers whole.
fn answered(kind: &str, text: &str) -> String {
    if !matches!(kind, "exact" | "within") {
        return text.to_owned();
    }
    text.lines()
        .map(|line| {
            let mut v: serde_json::Value = serde_json::from_str(line).expect("a JSON line");
            assert!(
                v["exact"].is_object(),
                "an exact answer has its certificate: {line}"
            );
            v.as_object_mut().expect("an object").remove("exact");
            format!("{v}\n")
        })
        .collect()
}

/// `waymark query INDEX --queries v1-lookups.txt ARGS` in `d`, which must succeed.
fn answers(d: &Dir, index: &std::path::Path, args: &[&str]) -> String {
    let out = d
        .cmd()
        .arg("query")
        .arg(index)
        .arg("--queries")
        .arg(data("v1-lookups.txt"))
        .args(args)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).unwrap()
}

#[test]
fn a_version_1_file_made_by_the_previous_writer_opens_and_answers_as_it_did() {
    let d = Dir::new();
    // A copy, so that nothing the test runs can change the fixture.
    let v1 = d.write("v1.wmk", &std::fs::read(data("v1-names.wmk")).unwrap());
    let index = Index::open(&v1).unwrap();
    assert_eq!(index.format_version(), 1);
    index.verify().unwrap();
    let sections: Vec<&str> = index.sections().map(|(name, _)| name).collect();
    assert_eq!(
        sections,
        [
            "meta",
            "item-offsets",
            "items",
            "ids",
            "coordinates",
            "cells",
            "kd-tree"
        ]
    );
    for (kind, args) in ASKED {
        assert_eq!(
            answered(kind, &answers(&d, &v1, args)),
            recorded(kind),
            "{kind}"
        );
    }
    d.cmd()
        .args(["inspect", "--verify", "v1.wmk"])
        .assert()
        .success()
        .stdout(contains("waymark index, version 1"))
        .stdout(contains(
            "kd-tree of dimension 16 (f32) over every coordinate",
        ));
}

#[test]
fn a_version_2_file_holds_each_row_once_and_answers_as_the_version_1_file() {
    let d = Dir::new();
    // The same items and options as the fixture: the same coordinates (and the query space
    // the fixture stores, L1, whose answers it recorded).
    let v2 = d.build(
        &data("v1-names.txt"),
        "v2.wmk",
        &["--dim", "12", "--space", "l1", "-q"],
    );
    let index = Index::open(&v2).unwrap();
    assert_eq!(index.format_version(), 2);
    index.verify().unwrap();
    let n = index.len();
    let sizes: Vec<(&str, usize)> = index.sections().collect();
    let names: Vec<&str> = sizes.iter().map(|s| s.0).collect();
    assert_eq!(
        names,
        [
            "meta",
            "item-offsets",
            "items",
            "cells",
            "positions",
            "kd-tree"
        ],
        "no coordinates section, no ids section"
    );
    assert!(sizes.contains(&("positions", 4 * n)));
    assert_eq!(index.meta().ids_from, Some(0), "ids are the record numbers");
    let v1 = Index::open(&data("v1-names.wmk")).unwrap();
    // The fixture keeps the query defaults it was written with: L1, its count, no widening.
    let old = waymark::search::SearchParams::from_index(&v1, 10);
    assert_eq!(
        (old.space, old.candidates, old.widen),
        (waymark::search::Space::L1, v1.meta().candidates as usize, 0)
    );
    let size = |ix: &Index, name: &str| ix.sections().find(|s| s.0 == name).map(|s| s.1);
    assert_eq!(size(&index, "cells"), size(&v1, "cells"));
    // The tree: 8 of the 12 coordinates, 36 bytes a point, against 68 in the fixture.
    assert!(size(&index, "kd-tree").unwrap() * 3 / 2 < size(&v1, "kd-tree").unwrap());
    for i in 0..n {
        assert_eq!(index.rows().row(i), v1.rows().row(i), "item {i}'s row");
        assert_eq!(index.id(i), v1.id(i), "item {i}'s id");
    }
    // Scan and cells pick the same candidates as the previous writer's file (ties at the
    // cut by item), exact and range answers are exact: every answer is the recorded one.
    for (kind, args) in ASKED.into_iter().filter(|(k, _)| *k != "tree") {
        assert_eq!(
            answered(kind, &answers(&d, &v2, args)),
            recorded(kind),
            "{kind}"
        );
    }
    // The tree now finds the scan's candidates.
    assert_eq!(answers(&d, &v2, ASKED[2].1), recorded("scan"));
    d.cmd()
        .args(["inspect", "v2.wmk"])
        .assert()
        .success()
        .stdout(contains("waymark index, version 2"))
        .stdout(contains(
            "ids           Int, consecutive from 0 (not stored)",
        ))
        .stdout(contains(
            "kd-tree of dimension 8 (f32) over the first 8 coordinates",
        ));
}

#[test]
fn ids_that_are_not_consecutive_are_stored() {
    let d = Dir::new();
    // A blank record: the ids (record numbers) skip 1.
    let input = d.write(
        "quays.txt",
        "Orvane Quay\n\nKeth Landing\nMirrow Steps\n".as_bytes(),
    );
    let idx = d.build(&input, "q.wmk", &["--dim", "2", "-q"]);
    let index = Index::open(&idx).unwrap();
    assert_eq!(index.meta().ids_from, None);
    assert!(index
        .sections()
        .any(|(name, bytes)| name == "ids" && bytes == 3 * 8));
    let ids: Vec<_> = (0..3).map(|i| index.id(i)).collect();
    use waymark::index::IdRef::Int;
    assert_eq!(ids, [Int(0), Int(2), Int(3)]);
    d.cmd()
        .args(["query", "q.wmk", "-k", "1", "--format", "tsv"])
        .write_stdin("Keth Landing\n")
        .assert()
        .success()
        .stdout("Keth Landing\t1\t2\tKeth Landing\t0\n");
}

/// The kd-tree holds 8 of 16 coordinates; from it the search finds exactly the rows the
/// scan picks, in each space and for any count (the answers are compared with the scan's,
/// which reads every row).
#[test]
fn the_tree_over_a_prefix_finds_the_candidates_of_the_scan() {
    let dir = tempfile::tempdir().unwrap();
    let words = first_words(6_000);
    let opts = BuildOptions {
        dim: 16,
        seed: 5,
        ..BuildOptions::default()
    };
    let index = build_in(dir.path(), "w.wmk", &corpus(&words), &opts);
    assert_eq!(index.tree_dims(), 8);
    let s = Searcher::new(&index);
    let queries = waymark::eval::typo_queries(&words, 30, 9);
    let mut scratch = Default::default();
    for space in [Space::L1, Space::L2, Space::Linf] {
        for c in [10, 200, 1500] {
            let with = |source| SearchParams {
                source,
                space,
                candidates: c,
                ..SearchParams::from_index(&index, 5)
            };
            for q in &queries {
                let tree = s.search(q, &with(CandidateSource::Tree), &mut scratch);
                let scan = s.search(q, &with(CandidateSource::Scan), &mut scratch);
                assert_eq!(
                    tree.unwrap().neighbors,
                    scan.unwrap().neighbors,
                    "{space:?}, {c} candidates, {q:?}"
                );
            }
        }
    }
}

/// A version 2 file without one of the sections that hold or map its rows is refused at
/// open, naming the section.
#[test]
fn a_version_2_file_without_its_rows_or_their_positions_is_refused_at_open() {
    let d = Dir::new();
    let idx = d.build(&data("v1-names.txt"), "v2.wmk", &["--dim", "12", "-q"]);
    let good = std::fs::read(&idx).unwrap();
    for (kind, name) in [(12u32, "cells"), (13, "positions")] {
        let mut b = good.clone();
        // The entry's kind becomes one the file has no other of, the graph (11), which a
        // Levenshtein index must not have: remove it from the count instead.
        let at = crate::util::entry(&b, kind);
        let count = crate::util::u32_at(&b, 12) as usize;
        let last = crate::util::HEADER + (count - 1) * crate::util::ENTRY;
        let sec = section(&b, kind);
        b[sec].fill(0);
        b.copy_within(last..last + crate::util::ENTRY, at);
        b[last..last + crate::util::ENTRY].fill(0);
        b[12..16].copy_from_slice(&(count as u32 - 1).to_le_bytes());
        crate::util::fix_table_checksums(&mut b);
        let p = d.write("stripped.wmk", &b);
        let e = Index::open(&p).err().expect("refused");
        assert!(
            e.to_string().contains(&format!("missing section {name}")),
            "{name}: {e}"
        );
    }
}

#[test]
fn bad_input_a_version_1_file_is_not_calibrated_and_is_left_as_it_was() {
    let d = Dir::new();
    let before = std::fs::read(data("v1-names.wmk")).unwrap();
    let v1 = d.write("v1.wmk", &before);
    d.cmd()
        .arg("eval")
        .arg(&v1)
        .arg("--calibrate")
        .arg("--queries")
        .arg(data("v1-lookups.txt"))
        .assert()
        .code(3)
        .stderr(contains("version 1"))
        .stderr(contains("rebuild it with `waymark build`"));
    assert_eq!(std::fs::read(&v1).unwrap(), before);
    let leftovers: Vec<_> = std::fs::read_dir(d.path("."))
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().contains("partial"))
        .collect();
    assert!(leftovers.is_empty(), "{leftovers:?}");
}

#[test]
fn a_deletion_variant_table_is_one_more_section_and_leaves_the_others_as_they_were() {
    let d = Dir::new();
    // The space of the recorded answers (the version 1 binary's default, L1).
    let plain = d.build(
        &data("v1-names.txt"),
        "p.wmk",
        &["--dim", "12", "--space", "l1", "-q"],
    );
    let small = d.build(
        &data("v1-names.txt"),
        "s.wmk",
        &["--dim", "12", "--space", "l1", "-q", "--small-radius", "2"],
    );
    let (p, s) = (
        std::fs::read(&plain).unwrap(),
        std::fs::read(&small).unwrap(),
    );
    // Every section of the file without the table, byte for byte in the one with it.
    for kind in [1, 2, 3, 12, 13, 10] {
        assert_eq!(
            &p[section(&p, kind)],
            &s[section(&s, kind)],
            "section kind {kind}"
        );
    }
    let table = section(&s, 14);
    assert_eq!(table.end, s.len(), "the table is the last section");
    let index = Index::open(&small).unwrap();
    assert_eq!(index.format_version(), 2);
    index.verify().unwrap();
    let names: Vec<&str> = index.sections().map(|s| s.0).collect();
    assert_eq!(names.last(), Some(&"deletion-variants"));
    assert!(!Index::open(&plain).unwrap().has_variants());
    // Neighbours of every kind are the recorded ones (the certificates of answers from
    // the table differ: they count the items sharing a variant), and within 2 those of the
    // file without the table.
    let neighbours = |text: &str| -> Vec<serde_json::Value> {
        crate::util::json_lines::<serde_json::Value>(text.as_bytes())
            .into_iter()
            .map(|a| a["neighbors"].clone())
            .collect()
    };
    for (kind, args) in ASKED.into_iter().filter(|(k, _)| *k != "tree") {
        let got = neighbours(&answers(&d, &small, args));
        assert_eq!(got, neighbours(&recorded(kind)), "{kind}");
    }
    let within2 = &["--within", "2"][..];
    assert_eq!(
        neighbours(&answers(&d, &small, within2)),
        neighbours(&answers(&d, &plain, within2))
    );
}
