//! Hardening: the bad-input table of DEVELOPERS.md, damaged and crafted index files,
//! interrupted builds and readers of an index that is being replaced.
//!
//! Each test named `bad_input_*` is one row of the table in DEVELOPERS.md ("Bad input").

use std::io::Read;
use std::path::Path;
use std::process::Stdio;
use std::time::{Duration, Instant};

use predicates::prelude::*;
use predicates::str::contains;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use waymark::index::Index;
use waymark::search::{CandidateSource, SearchParams, Searcher};

use crate::util::{
    entry, first_words, fix_checksums, section, u32_at, waymark_path, Dir, ENTRIES, ENTRY, HEADER,
};

fn stdout_of(out: &std::process::Output) -> String {
    String::from_utf8(out.stdout.clone()).expect("utf-8 output")
}

// ---------------------------------------------------------------------------------------
// The bad-input table.

#[test]
fn bad_input_empty_input_is_refused_and_writes_nothing() {
    let d = Dir::new();
    let empty = d.write("empty.txt", b"");
    d.cmd()
        .arg("build")
        .arg(&empty)
        .args(["-o", "x.wmk"])
        .assert()
        .code(2)
        .stderr(contains("no items in").and(contains("empty.txt")));
    assert_eq!(d.others(&["empty.txt"]), Vec::<String>::new());
}

#[test]
fn bad_input_a_single_item_is_its_own_nearest_neighbour() {
    let d = Dir::new();
    let one = d.write("one.txt", b"Skerry Light\n");
    let idx = d.build(&one, "one.wmk", &["-q"]);
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "5", "--format", "tsv"])
        .write_stdin("Skery Light\n")
        .output()
        .unwrap();
    assert!(out.status.success());
    assert_eq!(stdout_of(&out), "Skery Light\t1\t0\tSkerry Light\t1\n");
}

#[test]
fn bad_input_all_identical_items_give_one_coordinate_and_ties_by_id() {
    let d = Dir::new();
    let same = d.write("same.txt", "Quay\n".repeat(50).as_bytes());
    let out = d
        .cmd()
        .arg("build")
        .arg(&same)
        .args(["-o", "same.wmk"])
        .output()
        .unwrap();
    assert!(out.status.success());
    assert!(stdout_of(&out).contains("only 1 coordinates could be made"));
    let out = d
        .cmd()
        .args(["query", "same.wmk", "-k", "3", "--format", "tsv"])
        .write_stdin("Quey\n")
        .output()
        .unwrap();
    assert_eq!(
        stdout_of(&out),
        "Quey\t1\t0\tQuay\t1\nQuey\t2\t1\tQuay\t1\nQuey\t3\t2\tQuay\t1\n"
    );
}

#[test]
fn bad_input_a_one_megabyte_line_is_indexed_and_found() {
    let d = Dir::new();
    let long: String = "ACGT".repeat(1 << 18); // 1 MiB
    let mut input = String::from("Harbour Office\nSalt Store\n");
    input.push_str(&long);
    input.push('\n');
    let path = d.write("long.txt", input.as_bytes());
    let idx = d.build(&path, "long.wmk", &["--dim", "3", "-q"]);
    let mut query = long.clone();
    query.replace_range(10..11, "T");
    query.push('\n');
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1", "--format", "tsv"])
        .write_stdin(query)
        .output()
        .unwrap();
    assert!(out.status.success());
    let line = stdout_of(&out);
    let fields: Vec<&str> = line.trim_end().split('\t').collect();
    assert_eq!(
        fields[1..3],
        ["1", "2"],
        "rank 1 is record 2 (ids count from 0)"
    );
    assert_eq!(fields[4], "1", "one substitution away");
}

#[test]
fn bad_input_invalid_utf8_names_the_line() {
    let d = Dir::new();
    let bad = d.write("bad.txt", b"Skerry\nBro\xc3\x28ken\n");
    d.cmd()
        .arg("build")
        .arg(&bad)
        .args(["-o", "x.wmk"])
        .assert()
        .code(2)
        .stderr(contains("bad.txt:2"))
        .stderr(contains("UTF-8"));
    assert_eq!(d.others(&["bad.txt"]), Vec::<String>::new());
}

#[test]
fn bad_input_nul_bytes_name_the_line() {
    let d = Dir::new();
    let bad = d.write("nul.txt", b"Skerry\nLight\nSalt\0Store\n");
    d.cmd()
        .arg("build")
        .arg(&bad)
        .args(["-o", "x.wmk"])
        .assert()
        .code(2)
        .stderr(contains("nul.txt:3"))
        .stderr(contains("NUL"));
    assert_eq!(d.others(&["nul.txt"]), Vec::<String>::new());
}

#[test]
fn bad_input_mixed_line_endings_and_a_bom_do_not_reach_the_items() {
    let d = Dir::new();
    let path = d.write(
        "mixed.txt",
        b"\xef\xbb\xbfSkerry Light\r\nSalt Store\nNorth Mole\r\n",
    );
    let idx = d.build(&path, "m.wmk", &["--dim", "2", "-q"]);
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "3", "--format", "tsv"])
        .write_stdin("Skerry Light\r\nSalt Store\n")
        .output()
        .unwrap();
    let text = stdout_of(&out);
    assert!(
        text.starts_with("Skerry Light\t1\t0\tSkerry Light\t0\n"),
        "{text}"
    );
    assert!(text.contains("Salt Store\t1\t1\tSalt Store\t0\n"), "{text}");
    assert!(!text.contains('\u{feff}') && !text.contains('\r'));
}

#[test]
fn bad_input_lone_cr_line_ends_are_refused_naming_the_line_and_byte() {
    let d = Dir::new();
    // Each file has a line that ends with a lone CR. Its line and byte (1-based), counted
    // by hand from the bytes before it: text 13 + 10, CSV and TSV 10 + 15 + 12, JSON Lines
    // 21 + 18, vectors 8 + 6.
    // (file, bytes, build options, line and byte of the lone CR)
    type Case = (
        &'static str,
        &'static [u8],
        &'static [&'static str],
        u64,
        u64,
    );
    let cases: [Case; 5] = [
        (
            "old.txt",
            b"Skerry Light\nSalt Store\rNorth Mole\n",
            &[],
            2,
            24,
        ),
        (
            "old.csv",
            b"name,code\nSkerry Light,1\nSalt Store,2\rNorth Mole,3\r",
            &["--field", "name"],
            3,
            38,
        ),
        (
            "old.tsv",
            b"name\tcode\nSkerry Light\t1\nSalt Store\t2\rNorth Mole\t3\r",
            &["--field", "name"],
            3,
            38,
        ),
        (
            "old.jsonl",
            b"{\"t\":\"Skerry Light\"}\n{\"t\":\"Salt Store\"}\r{\"t\":\"North Mole\"}\n",
            &["--field", "t"],
            2,
            40,
        ),
        (
            "old-vectors.csv",
            b"0.5,1.5\n2,3.25\r4,5\n",
            &["--metric", "l2"],
            2,
            15,
        ),
    ];
    for (name, bytes, args, line, byte) in cases {
        let input = d.write(name, bytes);
        d.cmd()
            .arg("build")
            .arg(&input)
            .args(args)
            .args(["-o", "old.wmk", "--dim", "2"])
            .assert()
            .code(2)
            .stderr(
                predicates::str::contains(format!("{name}:{line}: a carriage return")).and(
                    predicates::str::contains(format!("at byte {byte} of the file")),
                ),
            );
        assert!(!d.path("old.wmk").exists(), "{name}: an index was written");
        assert_eq!(std::fs::read(&input).unwrap(), bytes, "{name} was changed");
    }
    // CRLF line ends, a CR ending the file, and a CR inside a quoted CSV field are read.
    let fine: [(&str, &[u8], &[&str]); 2] = [
        (
            "crlf.txt",
            b"Skerry Light\r\nSalt Store\r\nNorth Mole\r",
            &[],
        ),
        (
            "quoted.csv",
            b"name\n\"Skerry\rLight\"\r\nSalt Store\r\n",
            &["--field", "name"],
        ),
    ];
    for (name, bytes, args) in fine {
        let input = d.write(name, bytes);
        d.cmd()
            .arg("build")
            .arg(&input)
            .args(args)
            .args(["-o", "fine.wmk", "--dim", "2", "-q"])
            .assert()
            .success();
    }
    d.cmd()
        .args(["query", "fine.wmk", "-k", "1"])
        .write_stdin("Salt Store\n")
        .assert()
        .success()
        .stdout(predicates::str::contains("\"distance\":0"));
}

/// The end of a refusal of a lone CR: the file and line, the byte, and the advice.
fn lone_cr_refusal(name: &str, line: u64, byte: u64) -> impl Predicate<str> {
    contains(format!(
        "{name}:{line}: a carriage return (\\r) with no line feed after it"
    ))
    .and(contains(format!("at byte {byte} of the file")))
    .and(contains("end the lines with \\n or \\r\\n"))
}

#[test]
fn bad_input_a_lone_cr_in_an_edge_list_is_refused_naming_the_line_and_byte() {
    let d = Dir::new();
    // Line 2 ends with a lone CR: byte 31 (the comment) + 14 + 1 = 46. Read as before, the
    // two legs made one line of six fields.
    let bytes: &[u8] =
        b"# Vessmark ferry legs, minutes\nOrvane Keth 25\rKeth Skarholm 40\nOrvane Skarholm 70\n";
    let legs = d.write("legs.txt", bytes);
    d.cmd()
        .arg("build")
        .arg(&legs)
        .args(["--metric", "graph", "--dim", "2", "-o", "legs.wmk"])
        .assert()
        .code(2)
        .stderr(lone_cr_refusal("legs.txt", 2, 46));
    assert_eq!(d.others(&["legs.txt"]), Vec::<String>::new());
    assert_eq!(std::fs::read(&legs).unwrap(), bytes);

    // `add` reads the edge list the same way: the index is left as it was.
    let crlf = d.write("crlf.txt", b"Orvane Keth 25\r\nKeth Skarholm 40\r\n");
    let idx = d.build(
        &crlf,
        "legs.wmk",
        &["--metric", "graph", "--dim", "2", "-q"],
    );
    let before = std::fs::read(&idx).unwrap();
    d.cmd()
        .arg("add")
        .arg(&idx)
        .arg(&legs)
        .args(["--metric", "graph"])
        .assert()
        .code(2)
        .stderr(lone_cr_refusal("legs.txt", 2, 46));
    assert_eq!(std::fs::read(&idx).unwrap(), before);
    assert_eq!(
        d.others(&["legs.txt", "crlf.txt", "legs.wmk"]),
        Vec::<String>::new()
    );
    // CRLF line ends are read: Orvane–Keth–Skarholm is 25 + 40.
    d.cmd()
        .args(["query", "legs.wmk", "-k", "3", "--exact", "--format", "tsv"])
        .write_stdin("Orvane\n")
        .assert()
        .success()
        .stdout(contains("Orvane\t3\tSkarholm\tSkarholm\t65\t"));
}

#[test]
fn bad_input_a_lone_cr_in_a_cost_file_is_refused_naming_the_line_and_byte() {
    let d = Dir::new();
    let barcodes = d.write(
        "barcodes.txt",
        b"TTAGGCGCATCC\nTTCGCCTTCAAC\nTGGGCCGGCTGT\n",
    );
    // Line 2 ends with a lone CR: byte 13 + 11 + 1 = 25. Read as before, the two rules
    // made one line of eight fields.
    let bytes: &[u8] = b"indel * 1.5\r\nsub A G 0.5\rsub C T 0.5\n";
    let costs = d.write("dna.costs", bytes);
    d.cmd()
        .arg("build")
        .arg(&barcodes)
        .args(["--metric", "weighted", "--costs"])
        .arg(&costs)
        .args(["--dim", "2", "-o", "w.wmk"])
        .assert()
        .code(2)
        .stderr(lone_cr_refusal("dna.costs", 2, 25));
    assert_eq!(
        d.others(&["barcodes.txt", "dna.costs"]),
        Vec::<String>::new()
    );
    assert_eq!(std::fs::read(&costs).unwrap(), bytes);
    // With CRLF line ends the same rules are read: A→G costs 0.5.
    d.write(
        "dna.costs",
        b"indel * 1.5\r\nsub A G 0.5\r\nsub C T 0.5\r\n",
    );
    d.build(
        &barcodes,
        "w.wmk",
        &[
            "--metric",
            "weighted",
            "--costs",
            "dna.costs",
            "--dim",
            "2",
            "-q",
        ],
    );
    d.cmd()
        .args(["query", "w.wmk", "-k", "1", "--exact", "--format", "tsv"])
        .write_stdin("TTGGGCGCATCC\n")
        .assert()
        .success()
        .stdout(predicates::str::starts_with(
            "TTGGGCGCATCC\t1\t0\tTTAGGCGCATCC\t0.5\t",
        ));
}

/// A side file's error from the library: the message, and its line.
fn line_error(e: &waymark::metric::MetricError) -> (String, u64) {
    match e {
        waymark::metric::MetricError::Line { line, .. } => (e.to_string(), *line),
        other => panic!("not an error of a line: {other:?}"),
    }
}

#[test]
fn bad_input_a_lone_cr_in_an_edge_list_is_refused_by_graph_from_path() {
    use waymark::metric::Graph;
    let d = Dir::new();
    // The edge list of the command-line test: line 2 ends with a lone CR at byte 46.
    let bytes: &[u8] =
        b"# Vessmark ferry legs, minutes\nOrvane Keth 25\rKeth Skarholm 40\nOrvane Skarholm 70\n";
    let legs = d.write("legs.txt", bytes);
    let e = Graph::from_path(&legs).unwrap_err();
    let (message, line) = line_error(&e);
    assert_eq!(line, 2);
    assert!(
        lone_cr_refusal(&legs.display().to_string(), 2, 46).eval(&message),
        "{message}"
    );
    assert_eq!(std::fs::read(&legs).unwrap(), bytes);
    // A lone CR on the first line, at its first byte: line 1, byte 1.
    let first = d.write("first.txt", b"\rOrvane Keth 25\n");
    let (message, _) = line_error(&Graph::from_path(&first).unwrap_err());
    assert!(
        lone_cr_refusal("first.txt", 1, 1).eval(&message),
        "{message}"
    );

    // CRLF line ends are read: three nodes, Keth–Skarholm weighs 40 (not `40\r`).
    let crlf = d.write(
        "crlf.txt",
        b"Orvane Keth 25\r\nKeth Skarholm 40\r\nOrvane Skarholm 70\r\n",
    );
    let g = Graph::from_path(&crlf).unwrap();
    assert_eq!(g.len(), 3);
    let node = |n: &[u8]| g.node(n).expect("a node");
    assert_eq!(g.weight(node(b"Keth"), node(b"Skarholm")), Some(40.0));
    // Orvane–Keth–Skarholm is 25 + 40, shorter than the direct 70.
    assert_eq!(
        g.distances_from(node(b"Orvane"))[node(b"Skarholm") as usize],
        65.0
    );
}

#[test]
fn bad_input_a_lone_cr_in_a_cost_file_is_refused_by_cost_table_from_path() {
    use waymark::metric::{CostTable, Metric, PreparedQuery, WeightedEdit};
    let d = Dir::new();
    // The cost file of the command-line test: line 2 ends with a lone CR at byte 25.
    let bytes: &[u8] = b"indel * 1.5\r\nsub A G 0.5\rsub C T 0.5\n";
    let costs = d.write("dna.costs", bytes);
    for e in [
        CostTable::from_path(&costs).unwrap_err(),
        WeightedEdit::from_path(&costs).unwrap_err(),
    ] {
        let (message, line) = line_error(&e);
        assert_eq!(line, 2);
        assert!(
            lone_cr_refusal(&costs.display().to_string(), 2, 25).eval(&message),
            "{message}"
        );
    }
    assert_eq!(std::fs::read(&costs).unwrap(), bytes);
    // Invalid UTF-8 is refused with its line, as the command line refuses it.
    let latin1 = d.write("latin1.costs", b"indel * 1\nsub \xe9 e 0.5\n");
    let (message, line) = line_error(&CostTable::from_path(&latin1).unwrap_err());
    assert_eq!(line, 2);
    assert!(
        message.contains("latin1.costs:2: invalid UTF-8"),
        "{message}"
    );

    // With CRLF line ends the same rules are read: A→G costs 0.5, C→T 0.5, an insertion 1.5.
    let crlf = d.write(
        "crlf.costs",
        b"indel * 1.5\r\nsub A G 0.5\r\nsub C T 0.5\r\n",
    );
    let m = WeightedEdit::new(CostTable::from_path(&crlf).unwrap());
    let q = m.prepare(b"TTAGGCGCATCC");
    assert_eq!(q.distance(b"TTGGGCGCATCC"), 0.5);
    assert_eq!(q.distance(b"TTAGGCGTATCC"), 0.5);
    assert_eq!(q.distance(b"TTAGGCGCATCCA"), 1.5);
}

#[test]
fn bad_input_a_lone_cr_in_queries_is_refused_naming_the_line_and_byte() {
    let d = Dir::new();
    let names = d.write("names.txt", b"Skerry Light\nSalt Store\nNorth Mole\n");
    d.build(&names, "n.wmk", &["--dim", "2", "-q"]);
    // Line 2 ends with a lone CR: byte 12 + 9 + 1 = 22. Read as before, "Salt Stor\rNorth
    // Mol" was one query.
    let bytes: &[u8] = b"Skerry Lite\nSalt Stor\rNorth Mol\nKeth\n";
    let queries = d.write("lookups.txt", bytes);
    // A queries file and standard input: the line before is answered, then the refusal.
    let from_file = d
        .cmd()
        .args(["query", "n.wmk", "-k", "1", "--format", "tsv", "--queries"])
        .arg(&queries)
        .assert();
    let from_stdin = d
        .cmd()
        .args(["query", "n.wmk", "-k", "1", "--format", "tsv"])
        .write_stdin(bytes)
        .assert();
    for (assert, name) in [(from_file, "lookups.txt"), (from_stdin, "<stdin>")] {
        assert
            .code(2)
            .stdout("Skerry Lite\t1\t0\tSkerry Light\t3\n")
            .stderr(lone_cr_refusal(name, 2, 22));
    }
    // --errors-inline does not take it for one bad query: the lines are not the file's.
    d.cmd()
        .args(["query", "n.wmk", "-k", "1", "--errors-inline", "--queries"])
        .arg(&queries)
        .assert()
        .code(2)
        .stderr(lone_cr_refusal("lookups.txt", 2, 22));
    // eval reads the file whole first: refused before any answer, no ground-truth cache.
    d.cmd()
        .args(["eval", "n.wmk", "-k", "1", "--queries"])
        .arg(&queries)
        .assert()
        .code(2)
        .stderr(lone_cr_refusal("lookups.txt", 2, 22));
    assert_eq!(
        d.others(&["names.txt", "n.wmk", "lookups.txt"]),
        Vec::<String>::new()
    );
    assert_eq!(std::fs::read(&queries).unwrap(), bytes);
}

#[test]
fn bad_input_k_larger_than_n_returns_every_item() {
    let d = Dir::new();
    let path = d.write("few.txt", b"Ness\nNeap\nNook\n");
    let idx = d.build(&path, "few.wmk", &["--dim", "2", "-q"]);
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1000", "--format", "tsv"])
        .write_stdin("Nest\n")
        .output()
        .unwrap();
    assert_eq!(stdout_of(&out).lines().count(), 3);
}

#[test]
fn bad_input_d_larger_than_n_is_capped_with_a_note() {
    let d = Dir::new();
    let path = d.write("few.txt", b"Ness\nNeap\nNook\n");
    let out = d
        .cmd()
        .arg("build")
        .arg(&path)
        .args(["-o", "few.wmk", "--dim", "40"])
        .output()
        .unwrap();
    assert!(out.status.success());
    assert!(stdout_of(&out).contains("only 3 coordinates could be made (asked for 40)"));
}

#[test]
fn bad_input_d_zero_and_d_too_large_are_usage_errors() {
    let d = Dir::new();
    let path = d.write("few.txt", b"Ness\nNeap\n");
    for dim in ["0", "65"] {
        d.cmd()
            .arg("build")
            .arg(&path)
            .args(["-o", "x.wmk", "--dim", dim])
            .assert()
            .code(2)
            .stderr(contains("--dim must be between 1 and 64"));
    }
    assert_eq!(d.others(&["few.txt"]), Vec::<String>::new());
}

#[test]
fn bad_input_unknown_option_or_value_is_a_usage_error() {
    let d = Dir::new();
    let path = d.write("few.txt", b"Ness\nNeap\n");
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["-o", "x.wmk", "--no-such-option"])
        .assert()
        .code(2)
        .stderr(contains("--no-such-option"));
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["-o", "x.wmk", "--space", "cosine"])
        .assert()
        .code(2)
        .stderr(contains("cosine"));
    assert_eq!(d.others(&["few.txt"]), Vec::<String>::new());
}

#[test]
fn bad_input_an_empty_query_is_answered_as_the_empty_string() {
    let d = Dir::new();
    let path = d.write("few.txt", b"Ness\nNeap\nHo\n");
    let idx = d.build(&path, "few.wmk", &["--dim", "2", "-q"]);
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1", "--format", "tsv"])
        .write_stdin("\n")
        .output()
        .unwrap();
    assert!(out.status.success());
    // The empty string is a string: its nearest item is the shortest one.
    assert_eq!(stdout_of(&out), "\t1\t2\tHo\t2\n");
}

#[test]
fn bad_input_a_query_longer_than_every_item() {
    let d = Dir::new();
    let path = d.write("few.txt", b"Ness\nNeap\nHo\n");
    let idx = d.build(&path, "few.wmk", &["--dim", "2", "-q"]);
    let query = format!("Ness{}\n", "x".repeat(10_000));
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1", "--format", "tsv"])
        .write_stdin(query.clone())
        .output()
        .unwrap();
    assert!(out.status.success());
    assert!(stdout_of(&out).ends_with("\t1\t0\tNess\t10000\n"));
}

#[test]
fn bad_input_missing_or_unreadable_input_names_the_path() {
    let d = Dir::new();
    d.cmd()
        .args(["build", "nope.txt", "-o", "x.wmk"])
        .assert()
        .code(2)
        .stderr(contains("nope.txt"));
    // A folder cannot be read as a file (permission bits do not stop root, a folder does).
    std::fs::create_dir(d.path("folder")).unwrap();
    d.cmd()
        .args(["build", "folder", "-o", "x.wmk"])
        .assert()
        .code(2)
        .stderr(contains("folder"));
    d.cmd()
        .args(["query", "nope.wmk"])
        .write_stdin("x\n")
        .assert()
        .code(2)
        .stderr(contains("nope.wmk"));
    assert_eq!(d.others(&["folder"]), Vec::<String>::new());
}

#[test]
fn bad_input_output_in_a_missing_folder_or_under_a_file() {
    let d = Dir::new();
    let path = d.write("few.txt", b"Ness\nNeap\n");
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["-o", "no/such/x.wmk"])
        .assert()
        .code(2)
        .stderr(contains("no/such: the output folder does not exist"));
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["-o", "few.txt/x.wmk"])
        .assert()
        .code(2)
        .stderr(contains("few.txt: is not a folder"));
    assert_eq!(d.others(&["few.txt"]), Vec::<String>::new());
}

#[test]
fn bad_input_an_output_that_is_an_input_is_refused() {
    // The same file by name, through a symlink and through a hard link: refused with both
    // paths named, and the input left as it was.
    let d = Dir::new();
    let words: Vec<String> = (0..40).map(|i| format!("Ness Point {i}")).collect();
    let text = words.join("\n") + "\n";
    let input = d.write("s.txt", text.as_bytes());
    std::os::unix::fs::symlink(&input, d.path("link.wmk")).unwrap();
    std::fs::hard_link(&input, d.path("hard.wmk")).unwrap();
    for out in ["s.txt", "link.wmk", "hard.wmk"] {
        d.cmd()
            .arg("build")
            .arg("s.txt")
            .args(["-o", out])
            .assert()
            .code(2)
            .stderr(
                contains(out)
                    .and(contains("s.txt"))
                    .and(contains("is the input")),
            );
        assert_eq!(std::fs::read_to_string(&input).unwrap(), text, "{out}");
    }
    // The library refuses it too.
    let corpus = crate::util::corpus(&words);
    let opts = waymark::index::BuildOptions {
        inputs: vec![input.clone()],
        ..Default::default()
    };
    let e = waymark::index::build_index(&corpus, "s.txt", &opts, &d.path("hard.wmk"), &|_| {})
        .unwrap_err();
    assert!(e.to_string().contains("is the input"), "{e}");
    assert_eq!(std::fs::read_to_string(&input).unwrap(), text);
    assert_eq!(
        d.others(&["s.txt", "link.wmk", "hard.wmk"]),
        Vec::<String>::new()
    );

    // A sweep whose output folder holds an input under a name it writes.
    let queries = d.write("q.txt", b"Ness Pont 3\n");
    let out = d.path("out");
    std::fs::create_dir(&out).unwrap();
    std::fs::hard_link(&input, out.join("sweep.csv")).unwrap();
    std::fs::hard_link(&queries, out.join("sweep.json")).unwrap();
    for (hidden, seen) in [("sweep.csv", "s.txt"), ("sweep.json", "q.txt")] {
        d.cmd()
            .arg("sweep")
            .arg("s.txt")
            .args([
                "--queries",
                "q.txt",
                "--dims",
                "2",
                "-k",
                "2",
                "--out",
                "out",
            ])
            .assert()
            .code(2)
            .stderr(
                contains(hidden)
                    .and(contains(seen))
                    .and(contains("is the input")),
            );
        std::fs::remove_file(out.join(hidden)).unwrap();
    }
    assert_eq!(std::fs::read_to_string(&input).unwrap(), text);
    assert_eq!(std::fs::read(&queries).unwrap(), b"Ness Pont 3\n");
}

#[test]
fn bad_input_output_in_a_read_only_folder() {
    // Root ignores permission bits, so a read-only place is made with a read-only file
    // system when one is at hand (/proc is one on Linux); the message names the folder.
    let d = Dir::new();
    let path = d.write("few.txt", b"Ness\nNeap\n");
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["-o", "/proc/x.wmk"])
        .assert()
        .code(2)
        .stderr(contains("/proc"));
}

#[test]
fn bad_input_a_full_disk_fails_cleanly_and_keeps_the_old_index() {
    // A file-size limit (RLIMIT_FSIZE, with SIGXFSZ ignored) makes writes fail the way a
    // full disk does; the shell's `ulimit -f` counts 512-byte blocks here (common practice).
    let d = Dir::new();
    let small = d.write("small.txt", b"Ness\nNeap\n");
    let idx = d.build(&small, "x.wmk", &["--dim", "2", "-q"]);
    let before = std::fs::read(&idx).unwrap();
    let big: String = first_words(20_000).join("\n");
    let big = d.write("big.txt", big.as_bytes());
    let bin = waymark_path();
    let out = std::process::Command::new("sh")
        .current_dir(d.dir.path())
        .arg("-c")
        .arg(format!(
            "trap '' XFSZ; ulimit -f 64; exec '{}' build '{}' -o x.wmk",
            bin.display(),
            big.display()
        ))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "{out:?}");
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("x.wmk: writing the index failed"), "{err}");
    assert!(
        err.contains("the previous file, if any, is untouched"),
        "{err}"
    );
    assert_eq!(std::fs::read(&idx).unwrap(), before);
    assert_eq!(
        d.others(&["small.txt", "big.txt", "x.wmk"]),
        Vec::<String>::new()
    );
}

// ---------------------------------------------------------------------------------------
// Damaged and crafted index files.

/// Opens a (possibly damaged) file and runs queries on it; Err means it was refused.
///
/// Sources: the scan, the cells (visiting a third of the rows; a file without a cells
/// section answers by the scan) and the kd-tree.
fn open_and_query(path: &Path, tree: bool) -> Result<usize, String> {
    let index = Index::open(path).map_err(|e| e.to_string())?;
    let searcher = Searcher::new(&index);
    let mut scratch = Default::default();
    let mut answered = 0;
    for source in [
        Some(CandidateSource::Scan),
        None,
        Some(CandidateSource::Tree),
    ] {
        if source == Some(CandidateSource::Tree) && !tree {
            continue;
        }
        let mut p = SearchParams::from_index(&index, 5);
        p.candidates = p.candidates.min(50);
        match source {
            Some(s) => p.source = s,
            None => {
                p.source = CandidateSource::Cells;
                p.visit = index.len() / 3;
            }
        }
        for q in ["abandon", "Zurich", ""] {
            let found = searcher
                .search(q, &p, &mut scratch)
                .map_err(|e| e.to_string())?;
            for n in &found.neighbors {
                let _ = (index.item(n.index as usize), index.id(n.index as usize));
            }
            answered += 1;
        }
    }
    Ok(answered)
}

#[test]
fn ten_thousand_damaged_or_crafted_files_are_refused_or_answered_without_a_panic() {
    let d = Dir::new();
    let list = first_words(300).join("\n");
    let input = d.write("words.txt", list.as_bytes());
    let idx = d.build(&input, "w.wmk", &["--dim", "8", "--seed", "5", "-q"]);
    let good = std::fs::read(&idx).unwrap();
    let meta = section(&good, 1);
    let probe = d.path("probe.wmk");
    let mut rng = ChaCha8Rng::seed_from_u64(0x5eed);
    let (mut refused, mut answered, mut verify_refused) = (0, 0, 0);
    const CASES: usize = 10_000;
    for case in 0..CASES {
        let mut bytes = good.clone();
        let crafted = case % 2 == 1;
        match rng.gen_range(0..4) {
            0 => bytes.truncate(rng.gen_range(0..good.len())),
            1 => {
                // Flip bits anywhere.
                for _ in 0..rng.gen_range(1..=4) {
                    let at = rng.gen_range(0..bytes.len());
                    bytes[at] ^= 1 << rng.gen_range(0..8);
                }
            }
            2 => {
                // Overwrite a run in the header, table or metadata with random bytes.
                let end = if rng.gen_bool(0.5) {
                    HEADER + ENTRIES * ENTRY
                } else {
                    meta.end
                };
                let at = rng.gen_range(0..end);
                for b in bytes[at..(at + rng.gen_range(1..16)).min(end)].iter_mut() {
                    *b = rng.gen();
                }
            }
            _ => {
                // Overwrite a run in the data sections (items, ids, coordinates, cells, tree).
                let at = rng.gen_range(meta.end..bytes.len());
                for b in bytes[at..(at + rng.gen_range(1..64)).min(good.len())].iter_mut() {
                    *b = rng.gen();
                }
            }
        }
        if crafted {
            fix_checksums(&mut bytes);
        }
        let changed = bytes != good;
        std::fs::write(&probe, &bytes).unwrap();
        // The kd-tree and cells paths run on every variant, crafted ones included: both
        // sections are checked field by field on first use, so they are refused or safe to
        // query.
        match open_and_query(&probe, true) {
            Err(_) => refused += 1,
            Ok(_) => answered += 1,
        }
        if changed && !crafted {
            // Every change that no one covered up must be caught by a full check.
            let caught = match Index::open(&probe) {
                Err(_) => true,
                Ok(ix) => ix.verify().is_err(),
            };
            assert!(caught, "case {case}: damage not detected by --verify");
            verify_refused += 1;
        }
    }
    eprintln!("{CASES} mutated files: {refused} refused, {answered} answered, {verify_refused} damaged files caught by verify");
    assert_eq!(refused + answered, CASES);
    assert!(
        refused > CASES / 4,
        "most damage is refused at open or first use"
    );
}

// kiddo's archived ImmutableKdTree<f32, K>, as rkyv lays it out (repr(C), 32-bit relative
// pointers and lengths): the root struct sits at the end of the section. The test checks
// each offset against what kiddo itself reports before using it.
const ROOT_LEN: usize = 56;
const ROOT_STEMS: usize = 0; // box: i32 offset, u32 length
const ROOT_EXTENTS: usize = 8; // vec of (u32 offset, u32 length) per leaf
const ROOT_ARENA: usize = 16; // box of the leaves' bytes
const ROOT_LEAVES_SIZE: usize = 24;
const ROOT_RESOLUTION: usize = 28; // u8 tag (0 arithmetic), u32 depth, u32 leaf count
const ROOT_SIZE: usize = 44;
const ROOT_MAX_LEVEL: usize = 48;
const ROOT_MAX_LEAF: usize = 52;

type Tree8 = <kiddo::ImmutableKdTree<f32, 8> as rkyv::Archive>::Archived;

/// Byte positions inside a kd-tree section of tree dimension 8.
#[derive(Clone, Copy)]
struct TreeMap {
    root: usize,
    stems: usize,
    extents: usize,
    arena: usize,
}

fn put_u32(b: &mut [u8], at: usize, v: u32) {
    b[at..at + 4].copy_from_slice(&v.to_le_bytes());
}

fn rel(b: &[u8], at: usize) -> usize {
    (at as i64 + i32::from_le_bytes(b[at..at + 4].try_into().unwrap()) as i64) as usize
}

/// Whether rkyv's validation (all the old check did) accepts the tree bytes.
fn rkyv_accepts(tree: &[u8]) -> bool {
    let mut v = rkyv::util::AlignedVec::<128>::new();
    v.extend_from_slice(tree);
    rkyv::access::<Tree8, rkyv::rancor::Error>(&v).is_ok()
}

fn map_tree(tree: &[u8]) -> TreeMap {
    use kiddo::kd_tree::KdTreeAccessor;
    assert_eq!(std::mem::size_of::<Tree8>(), ROOT_LEN);
    let mut v = rkyv::util::AlignedVec::<128>::new();
    v.extend_from_slice(tree);
    let t = rkyv::access::<Tree8, rkyv::rancor::Error>(&v).expect("a built tree validates");
    let root = tree.len() - ROOT_LEN;
    let m = TreeMap {
        root,
        stems: rel(tree, root + ROOT_STEMS),
        extents: rel(tree, root + ROOT_EXTENTS),
        arena: rel(tree, root + ROOT_ARENA),
    };
    // The offsets above read what kiddo reads.
    assert_eq!(u32_at(tree, root + ROOT_SIZE) as usize, t.size());
    assert_eq!(u32_at(tree, root + ROOT_LEAVES_SIZE) as usize, t.size());
    assert_eq!(
        u32_at(tree, root + ROOT_MAX_LEVEL) as i32,
        t.max_stem_level()
    );
    assert_eq!(
        u32_at(tree, root + ROOT_MAX_LEAF) as usize,
        t.max_leaf_len()
    );
    assert_eq!(
        u32_at(tree, root + ROOT_EXTENTS + 4) as usize,
        t.leaf_count()
    );
    assert_eq!(tree[root + ROOT_RESOLUTION], 0, "arithmetic resolution");
    let stems = KdTreeAccessor::stems(t);
    assert_eq!(u32_at(tree, root + ROOT_STEMS + 4) as usize, stems.len());
    assert_eq!(m.stems, stems.as_ptr() as usize - v.as_ptr() as usize);
    assert_eq!(t.leaves().leaf_len(0), u32_at(tree, m.extents + 4) as usize);
    m
}

/// `crafted.wmk` in `d` is refused with exit code 3 by a query whose candidates come from
/// `source` and by `inspect --verify`, naming `section` and `message`, without a panic.
fn assert_refused(d: &Dir, section: &str, source: &str, what: &str, message: &str) {
    for args in [
        vec!["query", "crafted.wmk", "--candidates-from", source],
        vec!["inspect", "--verify", "crafted.wmk"],
    ] {
        let out = d
            .cmd()
            .args(&args)
            .write_stdin("abandon\n")
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(3), "{what}: {args:?}: {err}");
        let head = format!("crafted.wmk: corrupt index: section {section} is refused: ");
        assert!(
            err.contains(&head) && err.contains(message) && !err.contains("panicked"),
            "{what}: {args:?}: {err}"
        );
    }
}

#[test]
fn bad_input_crafted_kd_tree_sections_are_refused_by_query_and_verify() {
    let d = Dir::new();
    let list = first_words(3_000).join("\n");
    let input = d.write("words.txt", list.as_bytes());
    // 6 coordinates in a tree compiled for 8: two padding coordinates that must stay zero.
    let idx = d.build(&input, "w.wmk", &["--dim", "6", "--seed", "3", "-q"]);
    let good = std::fs::read(&idx).unwrap();
    let sec = section(&good, 10);
    let tree = good[sec.clone()].to_vec();
    let m = map_tree(&tree);
    let n = u32_at(&tree, m.root + ROOT_SIZE);
    let leaf0 = m.arena + u32_at(&tree, m.extents) as usize;
    let len0 = u32_at(&tree, m.extents + 4) as usize;
    let w0 = [32, 8, 4, 2, 1].into_iter().find(|&w| len0 >= w).unwrap();
    let coord0 = move |d: usize, j: usize| leaf0 + (d * w0 + j) * 4;
    let item0 = move |j: usize| leaf0 + (8 * w0 + j) * 4;
    let arena_len = u32_at(&tree, m.root + ROOT_ARENA + 4);
    let stem_count = u32_at(&tree, m.root + ROOT_STEMS + 4);
    let leaves = u32_at(&tree, m.root + ROOT_EXTENTS + 4) as usize;
    let last = m.extents + 8 * (leaves - 1);

    type Craft = Box<dyn Fn(&mut Vec<u8>)>;
    let r = m.root;
    let cases: Vec<(&str, Craft, &str)> = vec![
        (
            "leaf offset past the arena",
            Box::new(move |t| put_u32(t, m.extents, arena_len + 64)),
            "leaf 0: ",
        ),
        (
            "leaf length past the arena",
            Box::new(move |t| {
                let len = u32_at(t, last + 4);
                put_u32(t, last + 4, len + 10_000)
            }),
            "do not fit in order",
        ),
        (
            "a misaligned leaf offset",
            Box::new(move |t| {
                let off = u32_at(t, last);
                put_u32(t, last, off + 4)
            }),
            "do not fit in order",
        ),
        (
            "overlapping leaves",
            Box::new(move |t| put_u32(t, last, 0)),
            "do not fit in order",
        ),
        (
            "a leaf one point short",
            // (Its tiles then split differently, so its bytes no longer decode.)
            Box::new(move |t| put_u32(t, m.extents + 4, len0 as u32 - 1)),
            "leaf 0: ",
        ),
        (
            "stem levels past kiddo's fixed stacks",
            Box::new(move |t| put_u32(t, r + ROOT_MAX_LEVEL, 70)),
            "deepest stem level is 70",
        ),
        (
            "stem levels past the stems",
            Box::new(move |t| put_u32(t, r + ROOT_MAX_LEVEL, 12)),
            "deepest stem level is 12",
        ),
        (
            "a negative stem level",
            Box::new(move |t| put_u32(t, r + ROOT_MAX_LEVEL, (-5i32) as u32)),
            "deepest stem level is -5",
        ),
        (
            "a size that is not the item count",
            Box::new(move |t| {
                put_u32(t, r + ROOT_SIZE, n + 1);
                put_u32(t, r + ROOT_LEAVES_SIZE, n + 1)
            }),
            "points",
        ),
        (
            "a pristine (mutable) leaf resolution",
            Box::new(move |t| t[r + ROOT_RESOLUTION] = 1),
            "leaf resolution is not the arithmetic one",
        ),
        (
            "a resolution with the wrong leaf count",
            Box::new(move |t| put_u32(t, r + ROOT_RESOLUTION + 8, leaves as u32 * 4)),
            "leaf resolution records",
        ),
        (
            "fewer stems than its levels use",
            Box::new(move |t| put_u32(t, r + ROOT_STEMS + 4, stem_count / 4)),
            "stems",
        ),
        (
            "a wrong longest-leaf length",
            Box::new(move |t| put_u32(t, r + ROOT_MAX_LEAF, 7)),
            "longest leaf",
        ),
        (
            "an item index past the items",
            Box::new(move |t| put_u32(t, item0(0), n + 5)),
            "out of range or appears twice",
        ),
        (
            "an item twice",
            Box::new(move |t| {
                let other = u32_at(t, item0(1));
                put_u32(t, item0(0), other)
            }),
            "out of range or appears twice",
        ),
        (
            "a NaN coordinate",
            Box::new(move |t| put_u32(t, coord0(2, 0), f32::NAN.to_bits())),
            "coordinate 2 = NaN",
        ),
        (
            "a non-zero padding coordinate",
            Box::new(move |t| put_u32(t, coord0(7, 0), 1f32.to_bits())),
            "coordinate 7 = 1",
        ),
        (
            "a root pivot that puts points on the wrong side",
            Box::new(move |t| put_u32(t, m.stems + 4, 1.0e9f32.to_bits())),
            "wrong side of stem",
        ),
        (
            "a NaN pivot",
            Box::new(move |t| put_u32(t, m.stems + 8, f32::NAN.to_bits())),
            "has the pivot NaN",
        ),
    ];
    let probe = d.path("crafted.wmk");
    for (what, craft, message) in &cases {
        let mut t = tree.clone();
        craft(&mut t);
        assert_ne!(t, tree, "{what}: the craft changes the tree");
        // Each craft passes what the kd-tree check used to be: its checksum (recomputed
        // below) and rkyv's validation.
        assert!(
            rkyv_accepts(&t),
            "{what}: rkyv's validation refuses it already"
        );
        let mut bytes = good.clone();
        bytes[sec.clone()].copy_from_slice(&t);
        fix_checksums(&mut bytes);
        std::fs::write(&probe, &bytes).unwrap();
        assert_refused(&d, "kd-tree", "tree", what, message);
        // The scan does not read the tree: the file still answers through it.
        d.cmd()
            .args(["query", "crafted.wmk"])
            .write_stdin("abandon\n")
            .assert()
            .success();
    }
    // The untouched tree is queried through kiddo and answers.
    d.cmd()
        .args(["query", "w.wmk", "--candidates-from", "tree"])
        .write_stdin("abandon\n")
        .assert()
        .success()
        .stdout(contains("\"neighbors\""));
}

/// Byte positions inside a cells section, from the layout at the top of `index/cells.rs`:
/// a 64-byte head (K, stride, zeros), then centres, starts, members and rows, each on a
/// 64-byte boundary of the section.
#[derive(Clone, Copy)]
struct CellsMap {
    k: usize,
    starts: usize,
    members: usize,
    rows: usize,
    end: usize,
}

fn map_cells(cells: &[u8], n: usize, stride: usize) -> CellsMap {
    let pad = |x: usize| x.div_ceil(64) * 64;
    let k = u32_at(cells, 0) as usize;
    let starts = pad(64 + k * stride);
    let members = pad(starts + (k + 1) * 4);
    let rows = pad(members + n * 4);
    CellsMap {
        k,
        starts,
        members,
        rows,
        end: rows + n * stride,
    }
}

#[test]
fn bad_input_crafted_cells_sections_are_refused_by_query_and_verify() {
    let d = Dir::new();
    let list = first_words(400).join("\n");
    let input = d.write("words.txt", list.as_bytes());
    let idx = d.build(&input, "w.wmk", &["--dim", "8", "--seed", "4", "-q"]);
    let (n, stride) = {
        let ix = Index::open(&idx).unwrap();
        (ix.len(), ix.stride())
    };
    assert_eq!((n, stride), (400, 8), "400 distinct words, 8 coordinates");
    let good = std::fs::read(&idx).unwrap();
    let sec = section(&good, 12);
    let cells = good[sec.clone()].to_vec();
    let m = map_cells(&cells, n, stride);
    // The layout read above is the one the file holds: it fills the section exactly, the
    // stride is the index's, starts run from 0 to n, and the positions section (kind 13),
    // read independently of the cells, is the inverse of the members.
    assert_eq!(m.end, cells.len(), "the section is exactly its parts");
    assert_eq!(u32_at(&cells, 4) as usize, stride);
    assert!(m.k >= 2, "{} cells", m.k);
    assert_eq!(u32_at(&cells, m.starts), 0);
    assert_eq!(u32_at(&cells, m.starts + 4 * m.k) as usize, n);
    let positions = &good[section(&good, 13)];
    let member = |c: &[u8], pos: usize| u32_at(c, m.members + 4 * pos) as usize;
    for pos in 0..n {
        let i = member(&cells, pos);
        assert_eq!(u32_at(positions, 4 * i) as usize, pos, "position {pos}");
    }
    let m0 = member(&cells, 0);
    let start = |c: usize| u32_at(&cells, m.starts + 4 * c);
    assert!(start(2) < n as u32, "cell 2 is not the last to end");

    // Each craft edits the section bytes (and may shorten its table entry, in which case the
    // bytes cut off are zeroed, as padding must be); checksums are recomputed afterwards.
    type Craft = Box<dyn Fn(&mut Vec<u8>, &mut u64)>;
    let k = m.k as u32;
    let cases: Vec<(&str, Craft, String)> = vec![
        (
            "no cells",
            Box::new(|c, _| put_u32(c, 0, 0)),
            format!("0 cells for {n} items"),
        ),
        (
            "more cells than items",
            Box::new(move |c, _| put_u32(c, 0, n as u32 + 1)),
            format!("{} cells for {n} items", n + 1),
        ),
        (
            "a cell count that does not fit the section",
            Box::new(move |c, _| put_u32(c, 0, k - 1)),
            format!("; {} cells of {n} items need ", k - 1),
        ),
        (
            "a stride other than the index's",
            Box::new(move |c, _| put_u32(c, 4, 2 * stride as u32)),
            format!("stride {}, the index's is {stride}", 2 * stride),
        ),
        (
            "a non-zero byte in the header padding",
            Box::new(|c, _| c[40] = 1),
            "header bytes past the stride are not zero".into(),
        ),
        (
            "starts that stop short of the item count",
            Box::new(move |c, _| put_u32(c, m.starts + 4 * m.k, n as u32 - 1)),
            "cell starts do not run from 0 to the number of items".into(),
        ),
        (
            "starts that begin past 0",
            Box::new(move |c, _| put_u32(c, m.starts, 1)),
            "cell starts do not run from 0 to the number of items".into(),
        ),
        (
            "decreasing starts",
            Box::new(move |c, _| {
                let s2 = u32_at(c, m.starts + 8);
                put_u32(c, m.starts + 4, s2 + 1)
            }),
            "cell 1 ends before it starts".into(),
        ),
        (
            "a member twice",
            Box::new(move |c, _| put_u32(c, m.members + 4, m0 as u32)),
            format!("item {m0} is in more than one cell"),
        ),
        (
            "a member past the items",
            Box::new(move |c, _| put_u32(c, m.members, n as u32)),
            format!("position 0 names item {n}, past the last"),
        ),
        (
            "two members swapped (the positions no longer their inverse)",
            Box::new(move |c, _| {
                let m1 = u32_at(c, m.members + 4);
                put_u32(c, m.members, m1);
                put_u32(c, m.members + 4, m0 as u32)
            }),
            format!(
                "item {} is recorded at position 1, but its row is at position 0",
                { u32_at(&cells, m.members + 4) }
            ),
        ),
        (
            "a section one byte short",
            Box::new(|c, len| {
                *len -= 1;
                let last = c.len() - 1;
                c[last] = 0;
            }),
            format!(
                "{} bytes; {} cells of {n} items need {}",
                cells.len() - 1,
                m.k,
                cells.len()
            ),
        ),
        (
            "a section shorter than its header",
            Box::new(|c, len| {
                *len = 32;
                c[32..].fill(0);
            }),
            "32 bytes, shorter than its header".into(),
        ),
    ];
    let len_at = entry(&good, 12) + 16;
    let probe = d.path("crafted.wmk");
    for (what, craft, message) in &cases {
        let mut c = cells.clone();
        let mut len = sec.len() as u64;
        craft(&mut c, &mut len);
        assert!(
            c != cells || len != sec.len() as u64,
            "{what}: the craft changes the section"
        );
        let mut bytes = good.clone();
        bytes[sec.clone()].copy_from_slice(&c);
        bytes[len_at..len_at + 8].copy_from_slice(&len.to_le_bytes());
        fix_checksums(&mut bytes);
        std::fs::write(&probe, &bytes).unwrap();
        // The rows of a version 2 file are in the cells section: every source, the scan
        // too, and the exact path refuse it.
        let section = if message.contains("is recorded at position") {
            "positions"
        } else {
            "cells"
        };
        for source in ["cells", "scan", "tree"] {
            assert_refused(&d, section, source, what, message);
        }
        let out = d
            .cmd()
            .args(["query", "crafted.wmk", "--exact", "-k", "1"])
            .write_stdin("A\n")
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(3), "{what}: {err}");
        assert!(err.contains(message.as_str()), "{what}: {err}");
    }
    // A changed byte of a row with the checksums recomputed changes a coordinate, which no
    // check can tell from a real one: the file answers (the word still finds itself, at
    // distance 0; query, rank, id, item, distance; the first word of Debian's list is "A",
    // record 0).
    let mut bytes = good.clone();
    bytes[sec.start + m.rows + stride - 1] ^= 1;
    fix_checksums(&mut bytes);
    std::fs::write(&probe, &bytes).unwrap();
    d.cmd()
        .args(["query", "crafted.wmk", "-k", "1", "--format", "tsv"])
        .write_stdin("A\n")
        .assert()
        .success()
        .stdout(contains("A\t1\t0\tA\t0\n"));
    // A changed byte without its checksum recomputed is caught by the checksum first.
    let mut bytes = good.clone();
    bytes[sec.start + m.rows] ^= 1;
    std::fs::write(&probe, &bytes).unwrap();
    for args in [
        vec!["query", "crafted.wmk", "--candidates-from", "cells"],
        vec!["inspect", "--verify", "crafted.wmk"],
    ] {
        d.cmd()
            .args(&args)
            .write_stdin("abandon\n")
            .assert()
            .code(3)
            .stderr(contains(
                "crafted.wmk: corrupt index: checksum mismatch in section cells",
            ));
    }
    // The untouched section passes and answers through the cells.
    d.cmd()
        .args(["inspect", "--verify", "w.wmk"])
        .assert()
        .success();
    d.cmd()
        .args(["query", "w.wmk", "-k", "1", "--format", "tsv"])
        .args(["--candidates-from", "cells"])
        .write_stdin("A\n")
        .assert()
        .success()
        .stdout(contains("A\t1\t0\tA\t0\n"));
}

// ---------------------------------------------------------------------------------------
// Interrupted builds and readers of a replaced index.

/// Answers of `waymark query` for `queries`, as TSV.
fn query_tsv(d: &Dir, idx: &Path, queries: &str) -> String {
    let out = d
        .cmd()
        .arg("query")
        .arg(idx)
        .args(["-k", "3", "--format", "tsv"])
        .write_stdin(queries.to_string())
        .output()
        .unwrap();
    assert!(out.status.success(), "{out:?}");
    stdout_of(&out)
}

#[test]
fn a_build_killed_midway_leaves_the_old_index_intact() {
    let d = Dir::new();
    let small = d.write("small.txt", first_words(2_000).join("\n").as_bytes());
    let idx = d.build(&small, "x.wmk", &["--dim", "8", "-q"]);
    let before = std::fs::read(&idx).unwrap();
    let answers = query_tsv(&d, &idx, "abandon\nZurich\n");
    let big = d.write("big.txt", first_words(200_000).join("\n").as_bytes());
    let bin = waymark_path();
    let mut killed_during_write = false;
    // Kill at several moments; at least one of them must catch the temp file on disk.
    for delay_ms in [5u64, 40, 120, 250] {
        let mut child = std::process::Command::new(&bin)
            .current_dir(d.dir.path())
            .arg("build")
            .arg(&big)
            .args(["-o", "x.wmk", "-q"])
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_millis(delay_ms));
        killed_during_write |= !d.others(&["small.txt", "big.txt", "x.wmk"]).is_empty();
        child.kill().unwrap(); // SIGKILL
        let status = child.wait().unwrap();
        if status.success() {
            // It finished first: the new index replaced the old one whole. Put it back.
            std::fs::write(&idx, &before).unwrap();
            continue;
        }
        assert_eq!(std::fs::read(&idx).unwrap(), before, "old index untouched");
        assert_eq!(query_tsv(&d, &idx, "abandon\nZurich\n"), answers);
        // A leftover temp file is never mistaken for an index. It stays until the next
        // build to the same destination starts (the next round's, or the one below).
        for stray in d.others(&["small.txt", "big.txt", "x.wmk"]) {
            assert!(stray.ends_with(".waymark-partial"), "{stray}");
            d.cmd()
                .args(["inspect", &stray])
                .assert()
                .code(3)
                .stderr(contains("not a waymark index"));
        }
    }
    assert!(
        killed_during_write,
        "no kill landed while the temp file existed"
    );
    // A build that runs to the end removes what the killed ones left.
    d.build(&small, "x.wmk", &["--dim", "8", "-q"]);
    assert_eq!(
        d.others(&["small.txt", "big.txt", "x.wmk"]),
        Vec::<String>::new()
    );
}

#[test]
fn a_build_removes_temp_files_of_dead_builds_of_its_destination_only() {
    let d = Dir::new();
    let input = d.write("a.txt", first_words(500).join("\n").as_bytes());
    d.build(&input, "x.wmk", &["--dim", "4", "-q"]);
    // Left by a killed writer: no process holds its lock.
    let dead = [
        ".x.wmk.Ab3xQ9.waymark-partial",
        ".x.wmk.000000.waymark-partial",
    ];
    // Not temp files of x.wmk: another destination's (x.wmk.b, y.wmk), a name of another
    // shape, and a folder.
    let others = [
        ".x.wmk.b.Ab3xQ9.waymark-partial",
        ".y.wmk.Ab3xQ9.waymark-partial",
        ".x.wmk.Ab3x.waymark-partial",
        "x.wmk.Ab3xQ9.waymark-partial",
    ];
    for name in dead.iter().chain(&others) {
        d.write(name, &[0u8; 4096]);
    }
    std::fs::create_dir(d.path(".x.wmk.Dir123.waymark-partial")).unwrap();
    // A live writer: another process holds the lock, as a concurrent build would. (Held in
    // this process, the lock could outlive `drop` in a child that another test forks at that
    // moment, until the child's exec closes it.)
    let live = d.write(".x.wmk.LiVe42.waymark-partial", &[0u8; 4096]);
    let mut holder = std::process::Command::new("python3")
        .args([
            "-c",
            "import fcntl, sys\n\
             f = open(sys.argv[1])\n\
             fcntl.flock(f, fcntl.LOCK_EX)\n\
             print('locked', flush=True)\n\
             sys.stdin.read()",
        ])
        .arg(&live)
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .spawn()
        .expect("python3 runs (scripts/test-data.sh needs it too)");
    let mut said = String::new();
    std::io::BufRead::read_line(
        &mut std::io::BufReader::new(holder.stdout.take().unwrap()),
        &mut said,
    )
    .unwrap();
    assert_eq!(said.trim(), "locked");

    d.build(&input, "x.wmk", &["--dim", "4", "-q"]);
    for name in dead {
        assert!(!d.path(name).exists(), "{name} removed");
    }
    for name in others {
        assert!(d.path(name).exists(), "{name} kept");
    }
    assert!(d.path(".x.wmk.Dir123.waymark-partial").is_dir());
    assert!(live.exists(), "the live writer's file is kept");
    assert_eq!(
        std::fs::read(&live).unwrap(),
        vec![0u8; 4096],
        "and untouched"
    );
    // Once its writer is gone, the next build removes it too.
    drop(holder.stdin.take());
    assert!(holder.wait().unwrap().success());
    d.build(&input, "x.wmk", &["--dim", "4", "-q"]);
    assert!(!live.exists());
    d.cmd()
        .args(["query", "x.wmk"])
        .write_stdin("abandon\n")
        .assert()
        .success();
}

#[test]
fn readers_see_the_old_or_the_new_index_whole_while_it_is_replaced() {
    let d = Dir::new();
    let all = first_words(6_000);
    let a = d.write("a.txt", all[..3_000].join("\n").as_bytes());
    let b = d.write("b.txt", all[3_000..].join("\n").as_bytes());
    let idx = d.build(&a, "x.wmk", &["--dim", "8", "-q"]);
    let queries = "abandon\nZurich\nmeadow\n";
    let from_a = query_tsv(&d, &idx, queries);
    let ib = d.build(&b, "b.wmk", &["--dim", "8", "-q"]);
    let from_b = query_tsv(&d, &ib, queries);
    assert_ne!(from_a, from_b);

    // A reader that opened the old file keeps its mapping and its answers across renames.
    let held = Index::open(&idx).unwrap();
    let held_answer = |ix: &Index| {
        let s = Searcher::new(ix);
        let p = SearchParams::from_index(ix, 3);
        s.search("abandon", &p, &mut Default::default())
            .unwrap()
            .neighbors
            .iter()
            .map(|n| String::from_utf8_lossy(ix.item(n.index as usize)).into_owned())
            .collect::<Vec<_>>()
    };
    let held_before = held_answer(&held);

    let stop = std::sync::atomic::AtomicBool::new(false);
    let bin = waymark_path();
    let seen = std::sync::Mutex::new((0usize, 0usize));
    std::thread::scope(|s| {
        for _ in 0..3 {
            s.spawn(|| {
                while !stop.load(std::sync::atomic::Ordering::Relaxed) {
                    let mut child = std::process::Command::new(&bin)
                        .arg("query")
                        .arg(&idx)
                        .args(["-k", "3", "--format", "tsv"])
                        .stdin(Stdio::piped())
                        .stdout(Stdio::piped())
                        .stderr(Stdio::piped())
                        .spawn()
                        .unwrap();
                    use std::io::Write;
                    child
                        .stdin
                        .take()
                        .unwrap()
                        .write_all(queries.as_bytes())
                        .unwrap();
                    let mut out = String::new();
                    child
                        .stdout
                        .take()
                        .unwrap()
                        .read_to_string(&mut out)
                        .unwrap();
                    let status = child.wait().unwrap();
                    assert!(status.success(), "a reader failed during a replace");
                    let mut g = seen.lock().unwrap();
                    if out == from_a {
                        g.0 += 1;
                    } else if out == from_b {
                        g.1 += 1;
                    } else {
                        panic!("an answer from neither index:\n{out}");
                    }
                }
            });
        }
        let t = Instant::now();
        let mut flips = 0;
        while t.elapsed() < Duration::from_secs(4) || flips < 6 {
            let src = if flips % 2 == 0 { &b } else { &a };
            d.cmd()
                .arg("build")
                .arg(src)
                .args(["-o", "x.wmk", "--dim", "8", "-q"])
                .assert()
                .success();
            flips += 1;
        }
        stop.store(true, std::sync::atomic::Ordering::Relaxed);
    });
    let (na, nb) = *seen.lock().unwrap();
    eprintln!("answers from the old index: {na}, from the new: {nb}");
    assert!(na + nb > 0);
    assert_eq!(
        held_answer(&held),
        held_before,
        "an open mapping is not disturbed"
    );
}

#[test]
fn bad_input_an_input_too_large_for_memory_is_refused_up_front() {
    let d = Dir::new();
    let path = d.write("w.txt", first_words(5_000).join("\n").as_bytes());
    // The file's text alone is over the budget: refused before reading.
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["-o", "x.wmk"])
        .env("WAYMARK_MEMORY_BUDGET", "10000")
        .assert()
        .code(2)
        .stderr(contains("needs about").and(contains("WAYMARK_MEMORY_BUDGET")));
    // The text fits but the build's estimate does not: refused after reading, before work.
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["-o", "x.wmk", "--dim", "64"])
        .env("WAYMARK_MEMORY_BUDGET", "2000000")
        .assert()
        .code(2)
        .stderr(contains("building an index of 5000 items"));
    assert_eq!(d.others(&["w.txt"]), Vec::<String>::new());
}

// ---------------------------------------------------------------------------------------
// What an index file says, printed to a terminal.

/// A metric program (difference of lengths) that ignores its arguments.
const LENGTH_PROGRAM: &str = r#"
import json, sys
print(json.dumps({"protocol": "waymark-metric", "version": 1}), flush=True)
for line in sys.stdin:
    r = json.loads(line)
    q = r["query"]
    print(json.dumps({"distances": [abs(len(q) - len(s)) for s in r["items"]]}), flush=True)
"#;

/// Control characters that would move the cursor, erase a line or reverse the text shown.
const PAINT: &str = "\x1b[2K\r\u{9b}1m\u{202e}";
const PAINT_ESCAPED: &str = r"\x1b[2K\r\x9b1m\u{202e}";

fn has_controls(s: &str) -> bool {
    s.chars()
        .any(|c| c == '\x1b' || c == '\r' || c == '\u{9b}' || c == '\u{202e}')
}

#[test]
fn bad_input_control_characters_in_an_index_are_shown_escaped() {
    let d = Dir::new();
    d.write("length.py", LENGTH_PROGRAM.as_bytes());
    let input = d.write(&format!("in{PAINT}.txt"), b"Keth\nHolmsund\nOrvane Kay\n");
    let index = d.build(
        &input,
        "x.wmk",
        &[
            "--metric",
            "external",
            "-q",
            "--dim",
            "2",
            "--",
            "python3",
            "length.py",
            PAINT,
        ],
    );
    // The command and the source name, as text: escaped, never raw.
    let out = d.cmd().arg("inspect").arg(&index).output().unwrap();
    assert!(out.status.success());
    let text = stdout_of(&out);
    assert!(!has_controls(&text), "{text:?}");
    assert!(
        text.contains(&format!("python3 length.py {PAINT_ESCAPED}")),
        "{text}"
    );
    assert!(text.contains(&format!("in{PAINT_ESCAPED}.txt")), "{text}");
    // As JSON: the same values, every control written as a \u escape.
    let out = d
        .cmd()
        .args(["inspect", "--json"])
        .arg(&index)
        .output()
        .unwrap();
    let text = stdout_of(&out);
    assert!(!has_controls(&text), "{text:?}");
    let v: serde_json::Value = serde_json::from_str(&text).unwrap();
    assert_eq!(v["meta"]["metric_spec"]["command"][2], PAINT);
    // `query` and `eval` name the program before starting it, escaped, once; a flag of
    // their own silences it.
    let out = d
        .cmd()
        .arg("query")
        .arg(&index)
        .write_stdin("Kath\nHolm\n")
        .output()
        .unwrap();
    assert!(out.status.success());
    let err = String::from_utf8(out.stderr.clone()).unwrap();
    assert!(!has_controls(&err), "{err:?}");
    assert_eq!(
        err.matches(&format!("python3 length.py {PAINT_ESCAPED}"))
            .count(),
        1,
        "{err}"
    );
    assert_eq!(stdout_of(&out).lines().count(), 2);
    let out = d
        .cmd()
        .args(["query", "--quiet-metric"])
        .arg(&index)
        .write_stdin("Kath\n")
        .output()
        .unwrap();
    assert!(out.status.success() && out.stderr.is_empty(), "{out:?}");
    let out = d
        .cmd()
        .args(["eval", "--distortion", "--pairs", "3"])
        .arg(&index)
        .output()
        .unwrap();
    assert!(out.status.success(), "{out:?}");
    let err = String::from_utf8(out.stderr.clone()).unwrap();
    assert!(err.contains(&format!("length.py {PAINT_ESCAPED}")), "{err}");
    // An error that quotes the command (the program is gone) escapes it too.
    std::fs::remove_file(d.path("length.py")).unwrap();
    let out = d
        .cmd()
        .args(["query", "--quiet-metric"])
        .arg(&index)
        .write_stdin("Kath\n")
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(3), "{out:?}");
    let err = String::from_utf8(out.stderr.clone()).unwrap();
    assert!(!has_controls(&err), "{err:?}");
    assert!(err.contains(PAINT_ESCAPED), "{err}");
}

/// `bytes` (an index) with its metadata changed by `change` and every checksum recomputed,
/// as someone crafting a file would. The JSON is written compactly and padded with spaces
/// to the section's length, so no other section moves.
fn with_meta(bytes: &[u8], change: impl Fn(&mut serde_json::Value)) -> Vec<u8> {
    let meta = section(bytes, 1);
    let mut v: serde_json::Value = serde_json::from_slice(&bytes[meta.clone()]).unwrap();
    change(&mut v);
    let mut json = serde_json::to_vec(&v).unwrap();
    assert!(
        json.len() <= meta.len(),
        "the crafted metadata fits its section"
    );
    json.resize(meta.len(), b' ');
    let mut out = bytes.to_vec();
    out[meta].copy_from_slice(&json);
    fix_checksums(&mut out);
    out
}

/// The positions section of a version 2 file (item → position of its row in the cells
/// section) crafted with its checksums recomputed: refused by every query and by
/// `inspect --verify`, never used; a row changed under the kd-tree is refused by the tree.
#[test]
fn bad_input_crafted_positions_and_tree_points_are_refused_by_query_and_verify() {
    let d = Dir::new();
    let list = first_words(400).join("\n");
    let input = d.write("words.txt", list.as_bytes());
    let idx = d.build(&input, "w.wmk", &["--dim", "8", "--seed", "4", "-q"]);
    let good = std::fs::read(&idx).unwrap();
    let n = 400u32;
    let sec = section(&good, 13);
    assert_eq!(sec.len(), 4 * n as usize, "one u32 per item");
    let pos = |i: usize| u32_at(&good, sec.start + 4 * i);
    let len_at = entry(&good, 13) + 16;
    let probe = d.path("crafted.wmk");
    type Craft = Box<dyn Fn(&mut Vec<u8>)>;
    let at = sec.start;
    let cases: Vec<(&str, Craft, String)> = vec![
        (
            "two items' positions swapped",
            Box::new(move |b| {
                let (p0, p1) = (u32_at(b, at), u32_at(b, at + 4));
                put_u32(b, at, p1);
                put_u32(b, at + 4, p0)
            }),
            "is recorded at position".into(),
        ),
        (
            "a position past the last",
            Box::new(move |b| put_u32(b, at, n + 5)),
            format!(
                "item 0 is recorded at position {}, but its row is at position {}",
                n + 5,
                pos(0)
            ),
        ),
        (
            "every item at position 0",
            Box::new(move |b| b[at..at + 4 * n as usize].fill(0)),
            "is recorded at position 0, but its row is at position".into(),
        ),
    ];
    for (what, craft, message) in &cases {
        let mut bytes = good.clone();
        craft(&mut bytes);
        assert_ne!(bytes, good, "{what}");
        fix_checksums(&mut bytes);
        std::fs::write(&probe, &bytes).unwrap();
        for source in ["scan", "cells", "tree"] {
            assert_refused(&d, "positions", source, what, message);
        }
        for extra in [&["--exact"][..], &["--within", "1"][..]] {
            let out = d
                .cmd()
                .args(["query", "crafted.wmk"])
                .args(extra)
                .write_stdin("A\n")
                .output()
                .unwrap();
            let err = String::from_utf8_lossy(&out.stderr);
            assert_eq!(out.status.code(), Some(3), "{what}: {extra:?}: {err}");
            assert!(err.contains(message.as_str()), "{what}: {extra:?}: {err}");
        }
        let out = d
            .cmd()
            .args(["pairs", "crafted.wmk", "--within", "1"])
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(3), "{what}: pairs: {err}");
        assert!(err.contains(message.as_str()), "{what}: pairs: {err}");
    }
    // A section one entry short is refused at open, by every command.
    let mut bytes = good.clone();
    let short = (sec.len() - 4) as u64;
    bytes[len_at..len_at + 8].copy_from_slice(&short.to_le_bytes());
    bytes[sec.end - 4..sec.end].fill(0);
    fix_checksums(&mut bytes);
    std::fs::write(&probe, &bytes).unwrap();
    d.cmd()
        .args(["inspect", "crafted.wmk"])
        .assert()
        .code(3)
        .stderr(contains(format!(
            "crafted.wmk: corrupt index: section positions has {short} bytes, expected {}",
            4 * n
        )));
    // A row's first coordinate changed (checksums recomputed): the rows still map to the
    // items, so the scan answers, but the kd-tree's point for that item no longer is the
    // row's prefix, and the tree is refused.
    let cells = section(&good, 12);
    let m = map_cells(&good[cells.clone()], n as usize, 8);
    let item = u32_at(&good, cells.start + m.members);
    let mut bytes = good.clone();
    bytes[cells.start + m.rows] ^= 0x10;
    fix_checksums(&mut bytes);
    std::fs::write(&probe, &bytes).unwrap();
    assert_refused(
        &d,
        "kd-tree",
        "tree",
        "a row under the tree",
        &format!("item {item}'s point is not the first 8 coordinates of its row"),
    );
    d.cmd()
        .args(["query", "crafted.wmk", "-k", "1", "--format", "tsv"])
        .write_stdin("A\n")
        .assert()
        .success()
        .stdout(contains("A\t1\t0\tA\t0\n"));
    // The untouched file answers through every source.
    for source in ["scan", "cells", "tree"] {
        d.cmd()
            .args(["query", "w.wmk", "-k", "1", "--format", "tsv"])
            .args(["--candidates-from", source])
            .write_stdin("A\n")
            .assert()
            .success()
            .stdout(contains("A\t1\t0\tA\t0\n"));
    }
}

#[test]
fn bad_input_crafted_meta_fields_are_refused_at_open() {
    let d = Dir::new();
    let words = first_words(3_000);
    let text = d.write("w.txt", words.join("\n").as_bytes());
    let lev = std::fs::read(d.build(&text, "w.wmk", &["-q", "--dim", "8"])).unwrap();
    let jac = d.write("j.txt", b"ab cd\nef gh\nab ef\n");
    let jq = std::fs::read(d.build(
        &jac,
        "jq.wmk",
        &["-q", "--metric", "jaccard", "--qgrams", "2"],
    ))
    .unwrap();
    let js = std::fs::read(d.build(
        &jac,
        "js.wmk",
        &["-q", "--metric", "jaccard", "--separator", ","],
    ))
    .unwrap();
    let vec = d.write("v.csv", b"1,2\n3,4\n5,7\n");
    let vc = std::fs::read(d.build(&vec, "v.wmk", &["-q", "--metric", "l2"])).unwrap();
    let ham = d.write("h.txt", b"abc\nabd\nxyz\n");
    let hm = std::fs::read(d.build(&ham, "h.wmk", &["-q", "--metric", "hamming"])).unwrap();
    let v1 = std::fs::read(crate::util::repo_file("tests/it/data/v1-names.wmk")).unwrap();
    type Change = Box<dyn Fn(&mut serde_json::Value)>;
    let set = |k: &'static str, v: serde_json::Value| -> Change {
        Box::new(move |m: &mut serde_json::Value| m[k] = v.clone())
    };
    let spec = |v: serde_json::Value| -> Change {
        Box::new(move |m: &mut serde_json::Value| m["metric_spec"] = v.clone())
    };
    use serde_json::json;
    let cases: Vec<(&str, &[u8], Change, &str)> = vec![
        // A huge scale made the exact query's bound infinite (a panic in the search).
        (
            "huge scale",
            &lev,
            set("scale", json!(9e307)),
            "coordinate scale",
        ),
        (
            "largest scale",
            &lev,
            set("scale", json!(f64::MAX)),
            "coordinate scale",
        ),
        ("n past u32", &lev, set("n", json!(1u64 << 32)), "items"),
        (
            "candidates 0",
            &lev,
            set("candidates", json!(0)),
            "candidates",
        ),
        ("sample 0", &lev, set("sample", json!(0)), "sample"),
        (
            "sample above n",
            &lev,
            set("sample", json!(3_001)),
            "sample",
        ),
        (
            "records below n",
            &lev,
            set("records", json!(10)),
            "records",
        ),
        (
            "blank past u64",
            &lev,
            set("blank_skipped", json!(u64::MAX)),
            "records",
        ),
        (
            "q-grams 0",
            &jq,
            spec(json!({"kind": "jaccard", "tokens": {"qgrams": 0}})),
            "q-grams",
        ),
        (
            "empty separator",
            &js,
            spec(json!({"kind": "jaccard", "tokens": {"separator": ""}})),
            "separator",
        ),
        (
            "vector dim 0",
            &vc,
            spec(json!({"kind": "vector", "norm": "l2", "dim": 0})),
            "0 components",
        ),
        (
            "vector dim 3",
            &vc,
            spec(json!({"kind": "vector", "norm": "l2", "dim": 3})),
            "vector keys",
        ),
        (
            "hamming length",
            &hm,
            spec(json!({"kind": "hamming", "length": 7})),
            "hamming",
        ),
        (
            "external, no program",
            &lev,
            Box::new(|m: &mut serde_json::Value| {
                m["metric"] = json!("external");
                m["metric_spec"] = json!({"kind": "external", "command": [], "timeout_ms": 1000});
            }),
            "no program",
        ),
        (
            "external, no time",
            &lev,
            Box::new(|m: &mut serde_json::Value| {
                m["metric"] = json!("external");
                m["metric_spec"] = json!({"kind": "external", "command": ["x"], "timeout_ms": 0});
            }),
            "time limit",
        ),
        (
            "ids consecutive past the largest id",
            &lev,
            set("ids_from", json!(i64::MAX)),
            "ids consecutive from 9223372036854775807 pass the largest id for 3000 items",
        ),
        (
            "ids no longer consecutive, none stored",
            &lev,
            set("ids_from", serde_json::Value::Null),
            "missing section ids",
        ),
        (
            "text ids recorded as consecutive",
            &lev,
            set("ids", json!("text")),
            "text ids recorded as consecutive integers",
        ),
        (
            "consecutive ids in a version 1 file",
            &v1,
            set("ids_from", json!(0)),
            "ids recorded as consecutive from 0, which format version 1 does not have",
        ),
    ];
    for (what, good, change, says) in &cases {
        let path = d.write("x.wmk", &with_meta(good, change));
        match Index::open(&path) {
            Err(e @ waymark::Error::CorruptIndex { .. }) => {
                assert!(e.to_string().contains(says), "{what}: {e}")
            }
            Err(e) => panic!("{what}: not refused as corrupt: {e}"),
            Ok(_) => panic!("{what}: opened"),
        }
    }
    // The command line: exit 3, naming the field, for an exact query and the default query.
    let path = d.write("x.wmk", &with_meta(&lev, set("scale", json!(9e307))));
    for extra in [&["--exact"][..], &[][..]] {
        d.cmd()
            .arg("query")
            .arg(&path)
            .args(extra)
            .write_stdin("abcd\n")
            .assert()
            .code(3)
            .stderr(contains("corrupt index").and(contains("coordinate scale")));
    }
    let path = d.write("x.wmk", &with_meta(&lev, set("candidates", json!(0))));
    d.cmd()
        .arg("query")
        .arg(&path)
        .write_stdin("abcd\n")
        .assert()
        .code(3)
        .stderr(contains("corrupt index").and(contains("candidates per query is 0")));
    // The untouched files still open.
    for good in [&lev, &jq, &js, &vc, &hm] {
        let path = d.write("x.wmk", &with_meta(good, |_| {}));
        Index::open(&path).expect("an unchanged index opens");
    }
}

#[test]
fn bad_input_an_index_path_that_is_not_a_regular_file_is_refused() {
    let d = Dir::new();
    std::fs::create_dir(d.path("folder.wmk")).unwrap();
    let fifo = d.path("pipe.wmk");
    let made = std::process::Command::new("mkfifo")
        .arg(&fifo)
        .status()
        .unwrap();
    assert!(made.success(), "mkfifo");
    for (name, what) in [("folder.wmk", "a folder"), ("pipe.wmk", "a named pipe")] {
        // A FIFO hung the open: the child is killed after 20 s, which fails the test.
        let mut child = std::process::Command::new(waymark_path())
            .current_dir(d.dir.path())
            .args(["query", name])
            .stdin(Stdio::piped())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .unwrap();
        drop(child.stdin.take());
        let t0 = Instant::now();
        let status = loop {
            if let Some(s) = child.try_wait().unwrap() {
                break s;
            }
            if t0.elapsed() > Duration::from_secs(20) {
                child.kill().unwrap();
                panic!("{name}: the query hangs");
            }
            std::thread::sleep(Duration::from_millis(20));
        };
        let mut err = String::new();
        child
            .stderr
            .take()
            .unwrap()
            .read_to_string(&mut err)
            .unwrap();
        assert_eq!(status.code(), Some(3), "{name}: {err}");
        assert!(
            err.contains(name) && err.contains(what) && err.contains("not an index file"),
            "{name}: {err}"
        );
        match Index::open(&d.path(name)) {
            Err(e @ waymark::Error::IndexRefused { .. }) => {
                assert!(e.to_string().contains(what), "{e}")
            }
            Err(e) => panic!("{name}: {e}"),
            Ok(_) => panic!("{name}: opened"),
        }
    }
}

#[test]
fn bad_input_an_invalid_memory_budget_is_refused() {
    let d = Dir::new();
    let path = d.write("few.txt", b"Ness\nNeap\n");
    for bad in ["lots", "2GB", "-1", ""] {
        d.cmd()
            .arg("build")
            .arg(&path)
            .args(["-o", "x.wmk"])
            .env("WAYMARK_MEMORY_BUDGET", bad)
            .assert()
            .code(2)
            .stderr(contains("WAYMARK_MEMORY_BUDGET").and(contains("not a whole number")));
    }
    assert_eq!(d.others(&["few.txt"]), Vec::<String>::new());
}

#[test]
fn bad_input_distortion_over_no_pairs_says_so() {
    // One item, and two identical ones: no pair at a distance above 0.
    let d = Dir::new();
    for (name, text) in [
        ("one.txt", "Skerry Light\n"),
        ("two.txt", "Skerry Light\nSkerry Light\n"),
    ] {
        let input = d.write(name, text.as_bytes());
        let idx = d.build(&input, &format!("{name}.wmk"), &["-q"]);
        let out = d
            .cmd()
            .arg("eval")
            .arg(&idx)
            .arg("--distortion")
            .output()
            .unwrap();
        assert!(out.status.success());
        let text = stdout_of(&out);
        assert!(text.contains("no pairs to measure"), "{name}: {text}");
        assert!(!text.contains("histogram"), "{name}: {text}");
        let out = d
            .cmd()
            .arg("eval")
            .arg(&idx)
            .args(["--distortion", "--json"])
            .output()
            .unwrap();
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        assert_eq!(v["distortion"]["pairs"], 0, "{name}");
        assert_eq!(v["distortion"]["spaces"], serde_json::json!([]), "{name}");
    }
}

// ---------------------------------------------------------------------------------------
// Delimited input read as its standard says (RFC 4180 for CSV, IANA
// text/tab-separated-values for TSV), and no data lost without a word.

/// 500 rows `Isle N,CN` under a header; row `bad` (0-based) opens a quote it never closes.
fn isles_csv(bad: usize) -> Vec<u8> {
    let mut rows = vec!["name,code".to_string()];
    for i in 0..500 {
        rows.push(if i == bad {
            format!("\"Isle {i},C{i}")
        } else {
            format!("Isle {i},C{i}")
        });
    }
    (rows.join("\n") + "\n").into_bytes()
}

#[test]
fn bad_input_an_unclosed_quote_in_csv_is_refused_with_its_line() {
    // RFC 4180, section 2, rule 5: a field that starts with a quote ends with one. The csv
    // crate ends such a field at the end of the input, so row 3 took the 497 rows after it
    // into one item and the build said "indexed 3 items".
    let d = Dir::new();
    let path = d.write("isles.csv", &isles_csv(2));
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["--field", "name", "-o", "isles.wmk"])
        .assert()
        .code(2)
        .stderr(contains(
            "isles.csv:4: a quoted field opens on this line and is never closed",
        ));
    assert_eq!(d.others(&["isles.csv"]), Vec::<String>::new());
    // The same file with the quote closed is read whole.
    let fixed = String::from_utf8(isles_csv(2))
        .unwrap()
        .replace("\"Isle 2,C2", "\"Isle 2\",C2");
    let path = d.write("fixed.csv", fixed.as_bytes());
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["--field", "name", "-o", "fixed.wmk", "--dim", "4"])
        .assert()
        .success()
        .stdout(contains("indexed 500 items"))
        .stderr(contains("warning").not());
}

#[test]
fn bad_input_csv_quoting_trouble_and_long_rows_are_warned_with_file_and_line() {
    let d = Dir::new();
    // Line 3: a quoted field that runs over lines 3 to 5 (a missing closing quote that a
    // later quote closed); line 7: a quote inside an unquoted field; line 8: text after a
    // closing quote; line 9: a row with more fields than the header.
    let csv = "name,code\n\
               Keth Landing,1\n\
               \"Orvane Quay,2\n\
               Mirrow Steps,3\n\
               Salt Store\",4\n\
               North Mole,5\n\
               The \"Old\" Slip,6\n\
               \"Skerry\" Light,7\n\
               Net Loft,8,spare\n";
    let path = d.write("harbours.csv", csv.as_bytes());
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["--field", "name", "-o", "h.wmk", "--dim", "2"])
        .assert()
        .success()
        .stdout(contains("indexed 6 items"))
        .stderr(
            contains("waymark: warning: /")
                .and(contains(
                    "harbours.csv:3: a quoted field opened on this line runs over 3 lines",
                ))
                .and(contains("7 records were read from 9 lines"))
                .and(contains("harbours.csv:7: a quote inside an unquoted field"))
                .and(contains("(2 such field(s))"))
                .and(contains(
                    "harbours.csv:9: the row has 3 fields and the header 2; 1 row(s)",
                )),
        );
    // A file that is well-formed draws no warning, a multi-line field aside.
    let path = d.write(
        "clean.csv",
        b"name,code\n\"Row, East\",1\n\"The \"\"Old\"\" Slip\",2\n",
    );
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["--field", "name", "-o", "c.wmk", "--dim", "2"])
        .assert()
        .success()
        .stderr(contains("warning").not());
}

#[test]
fn bad_input_repeated_column_names_warn_and_an_ambiguous_field_is_refused() {
    let d = Dir::new();
    let path = d.write(
        "twice.csv",
        b"name,code,name\nKeth,1,Orvane\nMirrow,2,Salt\n",
    );
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["--field", "name", "-o", "t.wmk"])
        .assert()
        .code(2)
        .stderr(contains(
            "twice.csv: column name \"name\" is ambiguous: the header has it 2 times (columns 0, 2",
        ));
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["--field", "code", "--id-field", "name", "-o", "t.wmk"])
        .assert()
        .code(2)
        .stderr(contains("column name \"name\" is ambiguous"));
    // By number it is not ambiguous; the repetition is still warned of.
    d.cmd()
        .arg("build")
        .arg(&path)
        .args(["--field", "2", "-o", "t.wmk", "--dim", "2"])
        .assert()
        .success()
        .stdout(contains("indexed 2 items"))
        .stderr(contains(
            "twice.csv:1: the header names column \"name\" 2 times (columns 0, 2,",
        ));
    let out = d
        .cmd()
        .arg("query")
        .arg(d.path("t.wmk"))
        .args(["-k", "1", "--format", "tsv"])
        .write_stdin("Salt\n")
        .output()
        .unwrap();
    assert_eq!(stdout_of(&out), "Salt\t1\t1\tSalt\t0\n");
}

#[test]
fn bad_input_quotes_in_tsv_are_characters() {
    // IANA text/tab-separated-values: fields hold no tab or line break and nothing is
    // quoted, so a quote is part of its field. Read with CSV quoting, the quote on line 3
    // took every later line into one field.
    let d = Dir::new();
    let tsv = "name\tcode\nKeth Landing\t1\n\"Orvane Quay\t2\nMirrow Steps\t3\n\"Salt Store\"\t4\n";
    let path = d.write("harbours.tsv", tsv.as_bytes());
    let idx = d.build(&path, "h.wmk", &["--field", "name", "--dim", "2", "-q"]);
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1", "--format", "tsv"])
        .write_stdin("\"Orvane Quay\nMirrow Steps\n\"Salt Store\"\n")
        .output()
        .unwrap();
    assert_eq!(
        stdout_of(&out),
        "\"Orvane Quay\t1\t1\t\"Orvane Quay\t0\n\
         Mirrow Steps\t1\t2\tMirrow Steps\t0\n\
         \"Salt Store\"\t1\t3\t\"Salt Store\"\t0\n"
    );
}

#[test]
fn bad_input_a_bom_is_dropped_by_every_reader() {
    const BOM: &str = "\u{feff}";
    let d = Dir::new();
    let exact = |idx: &Path, query_file: Option<&Path>, stdin: &str| -> String {
        let mut c = d.cmd();
        c.arg("query").arg(idx).args(["-k", "1", "--format", "tsv"]);
        if let Some(q) = query_file {
            c.arg("--queries").arg(q);
        } else {
            c.write_stdin(stdin.to_string());
        }
        stdout_of(&c.output().unwrap())
    };
    // Text items; queries from a file and from stdin, each starting with a BOM.
    let names = d.write(
        "names.txt",
        format!("{BOM}Keth Landing\nOrvane Quay\n").as_bytes(),
    );
    let idx = d.build(&names, "n.wmk", &["--dim", "2", "-q"]);
    let q = d.write("q.txt", format!("{BOM}Keth Landing\n").as_bytes());
    assert_eq!(
        exact(&idx, Some(&q), ""),
        "Keth Landing\t1\t0\tKeth Landing\t0\n"
    );
    assert_eq!(
        exact(&idx, None, &format!("{BOM}Keth Landing\n")),
        "Keth Landing\t1\t0\tKeth Landing\t0\n"
    );
    // eval reads its queries file through the same reader: a BOM there would be a query
    // with no exact match (recall would still be 1, so the answers are checked above).
    // CSV with a quoted first header name, TSV, JSON Lines.
    for (file, text, field) in [
        (
            "h.csv",
            format!("{BOM}\"name\",code\nKeth Landing,1\n"),
            "name",
        ),
        (
            "h.tsv",
            format!("{BOM}name\tcode\nKeth Landing\t1\n"),
            "name",
        ),
        (
            "h.jsonl",
            format!("{BOM}{{\"name\":\"Keth Landing\"}}\n"),
            "name",
        ),
    ] {
        let p = d.write(file, text.as_bytes());
        let idx = d.build(&p, "x.wmk", &["--field", field, "--dim", "1", "-q"]);
        assert_eq!(
            exact(&idx, None, "Keth Landing\n"),
            "Keth Landing\t1\t0\tKeth Landing\t0\n",
            "{file}"
        );
    }
    // Vectors, an edge list, a cost file.
    let v = d.write("v.csv", format!("{BOM}1,2\n3,4\n").as_bytes());
    let idx = d.build(&v, "v.wmk", &["--metric", "l1", "--dim", "1", "-q"]);
    assert_eq!(exact(&idx, None, "1,2\n"), "1,2\t1\t0\t1,2\t0\n");
    let g = d.write(
        "g.txt",
        format!("{BOM}Keth Orvane 3\nOrvane Mirrow 4\n").as_bytes(),
    );
    let idx = d.build(&g, "g.wmk", &["--metric", "graph", "--dim", "1", "-q"]);
    assert_eq!(exact(&idx, None, "Keth\n"), "Keth\t1\tKeth\tKeth\t0\n");
    let costs = d.write("c.txt", format!("{BOM}sub A G 0.5\n").as_bytes());
    let codes = d.write("codes.txt", b"ACGT\nGCGT\n");
    let idx = d.build(
        &codes,
        "w.wmk",
        &[
            "--metric",
            "weighted",
            "--costs",
            costs.to_str().unwrap(),
            "--dim",
            "1",
            "-q",
        ],
    );
    assert_eq!(exact(&idx, None, "GCGA\n").split('\t').nth(3), Some("GCGT"));
}

#[test]
fn bad_input_a_text_file_of_fasta_or_fastq_records_is_warned_of() {
    let d = Dir::new();
    let fa = d.write("codes.txt", b">bc1 plate1\nACGTACGT\n>bc2\nTTGCAACG\n");
    d.cmd()
        .arg("build")
        .arg(&fa)
        .args(["-o", "f.wmk", "--dim", "2"])
        .assert()
        .success()
        .stdout(contains("indexed 4 items"))
        .stderr(
            contains(
                "codes.txt:1: the input starts with '>' and 2 of its lines do, \
             like a fasta file",
            )
            .and(contains("--input-format fasta")),
        );
    let fq = d.write("reads.txt", b"@r1\nACGT\n+\nIIII\n");
    d.cmd()
        .arg("build")
        .arg(&fq)
        .args(["-o", "q.wmk", "--dim", "2"])
        .assert()
        .success()
        .stderr(contains("--input-format fastq"));
    // Read as FASTA, the same file gives its two sequences and no warning.
    d.cmd()
        .arg("build")
        .arg(&fa)
        .args(["--input-format", "fasta", "-o", "f.wmk", "--dim", "2"])
        .assert()
        .success()
        .stdout(contains("indexed 2 items"))
        .stderr(contains("warning").not());
}
