//! The command line, as the README uses it: build, query, inspect, exit codes, bad input.

use serde::Deserialize;

use crate::util::{json_lines, waymark_path, Dir};

/// The documented JSON Lines schema of `waymark query`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Answer {
    line: usize,
    query: String,
    neighbors: Vec<Hit>,
    #[serde(default)]
    distances: Option<u64>,
    #[serde(default)]
    pruned: Option<u64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Hit {
    id: serde_json::Value,
    item: String,
    distance: u64,
}

fn answers(stdout: &[u8]) -> Vec<Answer> {
    json_lines(stdout)
}

const NAMES: &str = "Orvane Quay\nTessamir Row\nLower Kaldrith\nUpper Kaldrith\nOrvane Strand\n\nKeth Landing\nMirrow Steps\nTessamir Reach\n";

#[test]
fn build_then_query_finds_the_nearest_names_in_input_order() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "4", "--seed", "3"]);
    let out = d
        .cmd()
        .args(["query"])
        .arg(&idx)
        .args(["-k", "2"])
        .write_stdin("Orvane Qauy\nlower kaldrith\nTesamir Row\n")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let a = answers(&out);
    assert_eq!(a.len(), 3);
    assert_eq!(a[0].query, "Orvane Qauy");
    assert_eq!(a[0].neighbors[0].item, "Orvane Quay");
    // Transposition "ua"→"au" costs 2 under unit-cost Levenshtein (common practice).
    assert_eq!(a[0].neighbors[0].distance, 2);
    // Record numbers count the blank line 5: "Keth Landing" is record 6.
    assert_eq!(a[0].neighbors[0].id, serde_json::json!(0));
    assert_eq!(a[1].neighbors[0].item, "Lower Kaldrith");
    // Without --fold-case, case counts: two substitutions (l→L, k→K).
    assert_eq!(a[1].neighbors[0].distance, 2);
    assert_eq!(a[2].neighbors[0].item, "Tessamir Row");
    assert_eq!(a[2].neighbors[0].distance, 1);
    assert!(a
        .iter()
        .all(|x| x.distances.is_none() && x.pruned.is_none()));
}

#[test]
fn ids_point_back_at_records_and_skip_nothing() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "3"]);
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1"])
        .write_stdin("Keth Landing\n")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let a = answers(&out);
    assert_eq!(a[0].neighbors[0].id, serde_json::json!(6));
    assert_eq!(a[0].neighbors[0].distance, 0);
}

#[test]
fn fold_case_is_stored_and_applied_to_queries() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "4", "--fold-case"]);
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1"])
        .write_stdin("ORVANE QUAY\n")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let a = answers(&out);
    assert_eq!(a[0].neighbors[0].distance, 0);
    // The item is shown as given, not folded.
    assert_eq!(a[0].neighbors[0].item, "Orvane Quay");
}

#[test]
fn csv_text_ids_are_strings_and_tsv_output_has_one_line_per_neighbour() {
    let d = Dir::new();
    let input = d.write(
        "reg.csv",
        b"code,name\nKV-001,Orvane Quay\nKV-002,\"Tessamir Row, East\"\nKV-003,Lower Kaldrith\n",
    );
    let idx = d.build(
        &input,
        "idx.wmk",
        &["--field", "name", "--id-field", "code", "--dim", "2"],
    );
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "2", "--format", "tsv"])
        .write_stdin("Tessamir Row East\n")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let text = String::from_utf8(out).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 2);
    assert_eq!(
        lines[0],
        "Tessamir Row East\t1\tKV-002\tTessamir Row, East\t1"
    );
    let json = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1", "--stats", "--candidates-from", "scan"])
        .write_stdin("Orvane Quay\n")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let a = answers(&json);
    assert_eq!(a[0].neighbors[0].id, serde_json::json!("KV-001"));
    // The embedding's landmarks and at least one candidate.
    assert!(a[0].distances.unwrap() >= 2);
}

#[test]
fn queries_from_a_file_and_k_larger_than_n() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "2"]);
    let q = d.write("q.txt", b"Mirrow Steps\r\n");
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "50", "--queries"])
        .arg(&q)
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let a = answers(&out);
    assert_eq!(a[0].query, "Mirrow Steps");
    assert_eq!(a[0].neighbors.len(), 8);
    let ds: Vec<u64> = a[0].neighbors.iter().map(|h| h.distance).collect();
    let mut sorted = ds.clone();
    sorted.sort();
    assert_eq!(ds, sorted);
}

#[test]
fn inspect_reports_what_the_index_holds_and_verifies() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "3", "--seed", "9"]);
    let out = d
        .cmd()
        .arg("inspect")
        .arg(&idx)
        .args(["--verify", "--json"])
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let v: serde_json::Value = serde_json::from_slice(&out).unwrap();
    assert_eq!(v["meta"]["n"], 8);
    assert_eq!(v["meta"]["dim"], 3);
    assert_eq!(v["meta"]["seed"], 9);
    assert_eq!(v["meta"]["metric"], "levenshtein");
    assert_eq!(v["meta"]["blank_skipped"], 1);
    assert_eq!(v["format_version"], 2);
    assert_eq!(v["verified"], true);
    d.cmd()
        .arg("inspect")
        .arg(&idx)
        .assert()
        .success()
        .stdout(predicates::str::contains("landmarks"));
}

#[test]
fn same_seed_same_file() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let a = d.path("a.wmk");
    let b = d.path("b.wmk");
    for p in [&a, &b] {
        d.cmd()
            .arg("build")
            .arg(&input)
            .arg("-o")
            .arg(p)
            .args(["--seed", "5", "--dim", "4", "-q"])
            .assert()
            .success();
    }
    assert_eq!(std::fs::read(a).unwrap(), std::fs::read(b).unwrap());
}

#[test]
fn candidates_from_the_tree_give_answers_too() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "4"]);
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1", "--candidates-from", "tree", "--space", "linf"])
        .write_stdin("Upper Kaldrit\n")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    assert_eq!(answers(&out)[0].neighbors[0].item, "Upper Kaldrith");
}

#[test]
fn candidates_from_cells_and_visit_are_accepted() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "4"]);
    for extra in [
        &["--candidates-from", "cells"][..],
        &["--candidates-from", "cells", "--visit", "3"],
        &["--visit", "0"],
        &["--candidates-from", "scan"],
    ] {
        let out = d
            .cmd()
            .arg("query")
            .arg(&idx)
            .args(["-k", "2"])
            .args(extra)
            .write_stdin("Upper Kaldrit\n")
            .assert()
            .success()
            .get_output()
            .stdout
            .clone();
        let a = answers(&out);
        assert_eq!(a[0].neighbors.len(), 2, "{extra:?}");
        // One deletion (common practice: unit-cost Levenshtein).
        assert_eq!(a[0].neighbors[0].item, "Upper Kaldrith", "{extra:?}");
        assert_eq!(a[0].neighbors[0].distance, 1, "{extra:?}");
    }
}

// ---- exit codes and bad input -------------------------------------------------------

#[test]
fn bad_usage_exits_2() {
    let d = Dir::new();
    d.cmd().arg("frobnicate").assert().code(2);
    d.cmd().args(["build"]).assert().code(2);
    let input = d.write("names.txt", NAMES.as_bytes());
    d.cmd()
        .arg("build")
        .arg(&input)
        .args(["-o", "x.wmk", "--dim", "0"])
        .assert()
        .code(2)
        .stderr(predicates::str::contains("--dim"));
    d.cmd()
        .arg("build")
        .arg(&input)
        .args(["-o", "x.wmk", "--dim", "65"])
        .assert()
        .code(2);
    d.cmd()
        .arg("build")
        .arg(&input)
        .args(["-o", "x.wmk", "--candidates", "0"])
        .assert()
        .code(2)
        .stderr(predicates::str::contains("--candidates"));
    assert!(!d.path("x.wmk").exists());
    let idx = d.build(&input, "idx.wmk", &["--dim", "2"]);
    for exact in ["--exact", "--within=2"] {
        d.cmd()
            .arg("query")
            .arg(&idx)
            .args([exact, "--visit", "5"])
            .write_stdin("a\n")
            .assert()
            .code(2)
            .stderr(predicates::str::contains("--visit"));
    }
    d.cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "0"])
        .write_stdin("a\n")
        .assert()
        .code(2)
        .stderr(predicates::str::contains("-k must be at least 1"));
}

/// `--visit` on an index small enough to be searched by a scan of every row runs, and
/// says once that it changes nothing there; without `--visit` nothing is said.
#[test]
fn visit_on_a_scanned_index_is_noted() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "2"]);
    let queries = d.write("q.txt", b"Orvane Qauy\nKeth Lnding\n");
    let q = queries.to_str().unwrap();
    let out = d
        .cmd()
        .args([
            "query",
            idx.to_str().unwrap(),
            "-k",
            "2",
            "--visit",
            "5",
            "--queries",
            q,
        ])
        .assert()
        .success();
    let err = String::from_utf8_lossy(&out.get_output().stderr).into_owned();
    assert_eq!(
        err.matches("--visit counts only with cells").count(),
        1,
        "{err}"
    );
    assert_eq!(
        String::from_utf8_lossy(&out.get_output().stdout)
            .lines()
            .count(),
        2
    );
    d.cmd()
        .args(["query", idx.to_str().unwrap(), "-k", "2", "--queries", q])
        .assert()
        .success()
        .stderr(predicates::prelude::PredicateBooleanExt::not(
            predicates::str::contains("--visit"),
        ));
}

/// Options that tune the approximate k-NN search are refused, naming both options, where
/// the chosen mode would ignore them; a combination that counts still runs.
#[test]
fn options_a_mode_would_ignore_are_refused() {
    use predicates::prelude::PredicateBooleanExt;
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "2"]);
    let queries = d.write("q.txt", b"Orvane Qauy\n");
    let q = queries.to_str().unwrap();
    let refused: &[(&[&str], &str, &str)] = &[
        (
            &[
                "query",
                "--visit",
                "5",
                "--candidates-from",
                "scan",
                "--queries",
                q,
            ],
            "--visit",
            "scan",
        ),
        (
            &[
                "query",
                "--visit",
                "5",
                "--candidates-from",
                "tree",
                "--queries",
                q,
            ],
            "--visit",
            "tree",
        ),
        (
            &[
                "eval",
                "--queries",
                q,
                "--visit",
                "5",
                "--candidates-from",
                "scan",
            ],
            "--visit",
            "scan",
        ),
        (
            &["eval", "--distortion", "--candidates", "5"],
            "--candidates",
            "--queries",
        ),
        (
            &["eval", "--distortion", "--space", "l1"],
            "--space",
            "--queries",
        ),
        (
            &["eval", "--distortion", "--candidates-from", "scan"],
            "--candidates-from",
            "--queries",
        ),
        (
            &["eval", "--distortion", "--visit", "5"],
            "--visit",
            "--queries",
        ),
        (
            &["eval", "--distortion", "--widen", "1"],
            "--widen",
            "--queries",
        ),
        (
            &["eval", "--distortion", "--recall", "0.9"],
            "--recall",
            "--queries",
        ),
        (
            &["pairs", "--within", "2", "--candidates", "5"],
            "--candidates",
            "--within",
        ),
        (
            &["pairs", "--within-fraction", "0.2", "--candidates", "5"],
            "--candidates",
            "--within-fraction",
        ),
        (
            &["pairs", "--within", "2", "--candidates-from", "scan"],
            "--candidates-from",
            "--within",
        ),
        (
            &["pairs", "--within", "2", "--refine-rounds", "2"],
            "--refine-rounds",
            "--within",
        ),
        (
            &["pairs", "-k", "2", "--exact", "--refine-rounds", "2"],
            "--refine-rounds",
            "--exact",
        ),
        (
            &["pairs", "-k", "2", "--queries", q, "--refine-rounds", "2"],
            "--refine-rounds",
            "--queries",
        ),
        (
            &["pairs", "-k", "2", "--no-variant-table"],
            "--no-variant-table",
            "-k",
        ),
        (
            &[
                "pairs",
                "--within",
                "2",
                "--queries",
                q,
                "--no-variant-table",
            ],
            "--no-variant-table",
            "--queries",
        ),
        (
            &["query", "--within", "2", "--candidates", "500"],
            "--candidates",
            "--within",
        ),
        (&["query", "--exact", "--widen", "1"], "--widen", "--exact"),
        (
            &["query", "--stats", "--format", "tsv", "--queries", q],
            "--stats",
            "tsv",
        ),
    ];
    for (args, ignored, mode) in refused {
        let (command, rest) = args.split_first().unwrap();
        d.cmd()
            .arg(command)
            .arg(&idx)
            .args(rest.iter())
            .write_stdin("Orvane Qauy\n")
            .assert()
            .code(2)
            .stderr(predicates::str::contains(*ignored).and(predicates::str::contains(*mode)))
            .stdout("");
    }
    // The same options where they count.
    let counted: &[&[&str]] = &[
        &[
            "query",
            "--visit",
            "5",
            "--candidates-from",
            "cells",
            "--queries",
            q,
        ],
        &[
            "eval",
            "--queries",
            q,
            "-k",
            "1",
            "--candidates",
            "5",
            "--space",
            "l1",
            "--widen",
            "1",
        ],
        &[
            "pairs",
            "-k",
            "2",
            "--candidates",
            "5",
            "--candidates-from",
            "tree",
            "--refine-rounds",
            "2",
        ],
        &["pairs", "--within", "2", "--no-variant-table"],
        &["pairs", "-k", "1", "--queries", q, "--candidates", "5"],
    ];
    for args in counted {
        let (command, rest) = args.split_first().unwrap();
        d.cmd()
            .arg(command)
            .arg(&idx)
            .args(rest.iter())
            .assert()
            .success();
    }
}

#[test]
fn missing_empty_and_invalid_inputs_exit_2_and_write_nothing() {
    let d = Dir::new();
    d.cmd()
        .args(["build", "nope.txt", "-o", "x.wmk"])
        .assert()
        .code(2)
        .stderr(predicates::str::contains("nope.txt"));
    let empty = d.write("empty.txt", b"\n\n");
    d.cmd()
        .arg("build")
        .arg(&empty)
        .args(["-o", "x.wmk"])
        .assert()
        .code(2)
        .stderr(predicates::str::contains("no items"));
    let bad = d.write("bad.txt", b"fine\nalso fine\nbro\xffken\n");
    d.cmd()
        .arg("build")
        .arg(&bad)
        .args(["-o", "x.wmk"])
        .assert()
        .code(2)
        .stderr(predicates::str::contains(":3"));
    d.cmd()
        .arg("build")
        .arg(&bad)
        .args(["-o", "no/such/folder/x.wmk"])
        .assert()
        .code(2);
    assert!(!d.path("x.wmk").exists());
    let leftovers: Vec<_> = std::fs::read_dir(d.dir.path())
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().contains("partial"))
        .collect();
    assert!(leftovers.is_empty(), "no temp file is left behind");
}

#[test]
fn a_failed_rebuild_leaves_the_old_index() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "2"]);
    let before = std::fs::read(&idx).unwrap();
    let bad = d.write("bad.txt", b"\xff\n");
    d.cmd()
        .arg("build")
        .arg(&bad)
        .arg("-o")
        .arg(&idx)
        .assert()
        .code(2);
    assert_eq!(std::fs::read(&idx).unwrap(), before);
}

#[test]
fn invalid_utf8_query_names_its_line() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "2"]);
    d.cmd()
        .arg("query")
        .arg(&idx)
        .write_stdin(b"ok\n\xfe\n".to_vec())
        .assert()
        .code(2)
        .stderr(predicates::str::contains("<stdin>:2"));
}

#[test]
fn refused_index_files_exit_3_with_the_reason() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "2"]);
    let good = std::fs::read(&idx).unwrap();

    let not = d.write("not.wmk", b"hello, this is not an index");
    d.cmd()
        .arg("inspect")
        .arg(&not)
        .assert()
        .code(3)
        .stderr(predicates::str::contains("not a waymark index"));

    let trunc = d.write("trunc.wmk", &good[..good.len() - 100]);
    d.cmd()
        .arg("query")
        .arg(&trunc)
        .write_stdin("a\n")
        .assert()
        .code(3)
        .stderr(predicates::str::contains("truncated"));

    let mut v3 = good.clone();
    v3[8..12].copy_from_slice(&3u32.to_le_bytes());
    let v3p = d.write("v3.wmk", &v3);
    d.cmd()
        .arg("inspect")
        .arg(&v3p)
        .assert()
        .code(3)
        .stderr(predicates::str::contains(
            "index format version 3 is not supported: this waymark reads versions 1 to 2; rebuild the index with `waymark build`",
        ));

    // A flipped byte in the item text is found by --verify.
    let mut corrupt = good.clone();
    let at = good
        .windows(b"Mirrow".len())
        .position(|w| w == b"Mirrow")
        .expect("item bytes in file");
    corrupt[at] ^= 0x20;
    let cp = d.write("corrupt.wmk", &corrupt);
    d.cmd().arg("inspect").arg(&cp).assert().success();
    d.cmd()
        .arg("inspect")
        .arg(&cp)
        .arg("--verify")
        .assert()
        .code(3)
        .stderr(predicates::str::contains(
            "checksum mismatch in section items",
        ));

    d.cmd()
        .args(["query", "missing.wmk"])
        .write_stdin("a\n")
        .assert()
        .code(2)
        .stderr(predicates::str::contains("missing.wmk"));
}

#[test]
fn a_closed_pipe_is_not_an_error() {
    // Many queries, stdout closed after the first line: the exit code stays 0.
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "2"]);
    let queries = "Orvane\n".repeat(20000);
    let q = d.write("q.txt", queries.as_bytes());
    let out = std::process::Command::new("bash")
        .arg("-c")
        .arg(format!(
            "{} query {} --queries {} 2>err.txt | head -n 1 >/dev/null; echo \"${{PIPESTATUS[0]}}\"",
            waymark_path().display(),
            idx.display(),
            q.display()
        ))
        .current_dir(d.dir.path())
        .output()
        .unwrap();
    assert_eq!(String::from_utf8_lossy(&out.stdout).trim(), "0");
    assert_eq!(std::fs::read_to_string(d.path("err.txt")).unwrap(), "");
}

/// `waymark ARGS --help` with every run of white space made one space, so that clap's line
/// wrapping does not matter.
fn help_of(args: &[&str]) -> String {
    let out = crate::util::waymark()
        .args(args)
        .arg("--help")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let text = String::from_utf8(out).expect("utf-8");
    text.split_whitespace().collect::<Vec<_>>().join(" ")
}

/// `n` with a comma between groups of three digits, as help texts print counts.
fn grouped(n: usize) -> String {
    let digits = n.to_string();
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(',');
        }
        out.push(c);
    }
    out
}

#[test]
fn help_texts_quote_the_library_defaults() {
    let cells = format!(
        "cells for indexes of {} items or more, else scan",
        grouped(waymark::search::CELLS_MIN_ITEMS)
    );
    for command in ["query", "eval"] {
        let help = help_of(&[command]);
        assert!(help.contains(&cells), "{command} --help: {help}");
    }
    let stored = format!(
        "the number of items / 160, at least {} and at most {}",
        waymark::search::DEFAULT_CANDIDATES,
        waymark::search::default_candidates(usize::MAX)
    );
    let help = help_of(&["build"]);
    assert!(help.contains(&stored), "build --help: {help}");
}

#[test]
fn top_level_help_says_what_waymark_is() {
    let about = env!("CARGO_PKG_DESCRIPTION");
    for words in [
        "not vectors",
        "graph nodes",
        "landmark",
        "re-ranked by the true distance",
    ] {
        assert!(about.contains(words), "{about}");
    }
    assert!(!about.contains("kd-tree"), "{about}");
    let about = about.split_whitespace().collect::<Vec<_>>().join(" ");
    assert!(help_of(&[]).contains(&about));
}

#[test]
fn the_external_program_is_named_as_such_in_usage_lines() {
    // The positional after `--` is the external metric's program; named COMMAND it read as a
    // subcommand placeholder.
    for command in ["build", "sweep", "check-metric"] {
        let help = help_of(&[command]);
        assert!(
            help.contains("[-- <PROGRAM>...]"),
            "{command} --help: {help}"
        );
        assert!(!help.contains("COMMAND"), "{command} --help: {help}");
    }
}

/// What `--errors-inline` writes for a query it cannot answer.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Refused {
    line: usize,
    query: String,
    error: String,
}

/// One output line of `--errors-inline`: an answer or a refused query.
#[derive(Debug, Deserialize)]
#[serde(untagged)]
enum Reply {
    Answer(Answer),
    Refused(Refused),
}

#[test]
fn a_piped_query_is_answered_before_the_next_line_is_written() {
    use std::io::{BufRead, Write};
    use std::sync::mpsc;
    use std::time::Duration;
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "4"]);
    let mut child = std::process::Command::new(waymark_path())
        .arg("query")
        .arg(&idx)
        .args(["-k", "2"])
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let stdout = child.stdout.take().unwrap();
    let (tx, rx) = mpsc::channel();
    let reader = std::thread::spawn(move || {
        for line in std::io::BufReader::new(stdout).lines() {
            if tx.send(line.unwrap()).is_err() {
                break;
            }
        }
    });
    let mut stdin = child.stdin.take().unwrap();
    // Each answer must come while stdin is still open and the next line not yet written;
    // the timeout only guards against a hang.
    // Unit-cost Levenshtein, by hand: a swap of neighbours costs 2, a missing char 1.
    for (n, (query, nearest, distance)) in [
        ("Orvane Qauy", "Orvane Quay", 2),
        ("Keth Landin", "Keth Landing", 1),
    ]
    .into_iter()
    .enumerate()
    {
        // The second line arrives in two pieces: nothing is answered before its end.
        let (head, tail) = query.split_at(if n == 1 { 4 } else { 0 });
        if !head.is_empty() {
            stdin.write_all(head.as_bytes()).unwrap();
            stdin.flush().unwrap();
            assert!(rx.recv_timeout(Duration::from_millis(300)).is_err());
        }
        stdin.write_all(format!("{tail}\n").as_bytes()).unwrap();
        stdin.flush().unwrap();
        let got = rx
            .recv_timeout(Duration::from_secs(10))
            .unwrap_or_else(|e| panic!("no answer to line {} while stdin is open: {e}", n + 1));
        let a: Answer = serde_json::from_str(&got).unwrap();
        assert_eq!((a.line, a.query.as_str()), (n + 1, query));
        assert_eq!(a.neighbors[0].item, nearest);
        assert_eq!(a.neighbors[0].distance, distance);
    }
    drop(stdin);
    let status = child.wait().unwrap();
    reader.join().unwrap();
    assert!(status.success());
    assert!(
        rx.try_iter().next().is_none(),
        "no output after the two answers"
    );
}

#[test]
fn answers_carry_their_line_blank_lines_included() {
    // A blank line is a query (the empty string), answered like any other.
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "2"]);
    let q = d.write("q.txt", b"Orvane Qauy\r\n\r\nTesamir Row\n\nKeth Landing");
    for from_file in [true, false] {
        let mut cmd = d.cmd();
        cmd.arg("query").arg(&idx).args(["-k", "1"]);
        if from_file {
            cmd.arg("--queries").arg(&q);
        } else {
            cmd.write_stdin(std::fs::read(&q).unwrap());
        }
        let out = cmd.assert().success().get_output().stdout.clone();
        let a = answers(&out);
        let got: Vec<(usize, &str)> = a.iter().map(|x| (x.line, x.query.as_str())).collect();
        assert_eq!(
            got,
            [
                (1, "Orvane Qauy"),
                (2, ""),
                (3, "Tesamir Row"),
                (4, ""),
                (5, "Keth Landing")
            ]
        );
        // The empty query's nearest item is the shortest one, at its length in chars
        // ("Orvane Quay", 11; counted by hand).
        assert_eq!(a[1].neighbors[0].distance, 11);
        assert_eq!(a[4].neighbors[0].distance, 0);
    }
}

/// Eight-base codes for a Hamming index; its answers are checked against `strsim::hamming`.
const CODES: &str = "ACGTACGT\nACGTACGA\nTTGTACGT\nGGGGCCCC\n";

#[test]
fn errors_inline_reports_unanswerable_queries_in_place_and_goes_on() {
    let d = Dir::new();
    let input = d.write("codes.txt", CODES.as_bytes());
    let idx = d.build(
        &input,
        "idx.wmk",
        &["--metric", "hamming", "--dim", "2", "-q"],
    );
    let queries = "ACGTACGG\nACGT\nGGGGCCCA\n";
    // Without the option: the first answer, then exit 2 naming the line.
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1"])
        .write_stdin(queries)
        .assert()
        .code(2)
        .stderr(predicates::str::contains(
            "<stdin>:2: the query has 4 characters",
        ))
        .get_output()
        .stdout
        .clone();
    assert_eq!(answers(&out).len(), 1);
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1", "--errors-inline"])
        .write_stdin(queries)
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let replies: Vec<Reply> = json_lines(&out);
    assert_eq!(replies.len(), 3);
    let items: Vec<&str> = CODES.lines().collect();
    match &replies[0] {
        Reply::Answer(a) => {
            assert_eq!((a.line, a.query.as_str()), (1, "ACGTACGG"));
            let best = items
                .iter()
                .map(|i| strsim::hamming(i, "ACGTACGG").unwrap() as u64)
                .min()
                .unwrap();
            assert_eq!(a.neighbors[0].distance, best);
        }
        other => panic!("line 1 should be answered: {other:?}"),
    }
    match &replies[1] {
        Reply::Refused(r) => {
            assert_eq!((r.line, r.query.as_str()), (2, "ACGT"));
            assert!(
                r.error.contains("the query has 4 characters"),
                "{}",
                r.error
            );
        }
        other => panic!("line 2 should be refused: {other:?}"),
    }
    match &replies[2] {
        Reply::Answer(a) => {
            assert_eq!((a.line, a.query.as_str()), (3, "GGGGCCCA"));
            assert_eq!(a.neighbors[0].item, "GGGGCCCC");
            assert_eq!(
                a.neighbors[0].distance,
                strsim::hamming("GGGGCCCC", "GGGGCCCA").unwrap() as u64
            );
        }
        other => panic!("line 3 should be answered: {other:?}"),
    }
    // TSV: the refused query's line has `error` where answers have their rank.
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1", "--errors-inline", "--format", "tsv"])
        .write_stdin(queries)
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let text = String::from_utf8(out).unwrap();
    let rows: Vec<Vec<&str>> = text.lines().map(|l| l.split('\t').collect()).collect();
    assert_eq!(rows.len(), 3);
    assert_eq!(rows[0][..2], ["ACGTACGG", "1"]);
    assert_eq!(rows[1][..3], ["ACGT", "error", "2"]);
    assert!(rows[1][3].contains("4 characters"), "{}", rows[1][3]);
    assert_eq!(rows[2][..4], ["GGGGCCCA", "1", "3", "GGGGCCCC"]);
}

#[test]
fn errors_inline_reports_invalid_utf8_with_the_bytes_replaced() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "2"]);
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "1", "--errors-inline", "--exact"])
        .write_stdin(b"Keth Landing\nK\xfeth\nMirrow Steps\n".to_vec())
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let text = String::from_utf8(out).unwrap();
    let lines: Vec<serde_json::Value> = text
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    assert_eq!(lines.len(), 3);
    assert_eq!(lines[0]["line"], 1);
    assert_eq!(lines[0]["neighbors"][0]["item"], "Keth Landing");
    assert_eq!(
        lines[1],
        serde_json::json!({"line": 2, "query": "K\u{fffd}th", "error": "the query is not valid UTF-8 (byte 2)"})
    );
    assert_eq!(lines[2]["line"], 3);
    assert_eq!(lines[2]["neighbors"][0]["item"], "Mirrow Steps");
}

#[test]
fn a_folder_as_queries_file_is_a_usage_error() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let idx = d.build(&input, "idx.wmk", &["--dim", "2"]);
    std::fs::create_dir(d.path("qdir")).unwrap();
    for cmd in ["query", "eval"] {
        d.cmd()
            .arg(cmd)
            .arg(&idx)
            .arg("--queries")
            .arg(d.path("qdir"))
            .assert()
            .code(2)
            .stderr(predicates::str::contains("qdir: is a folder"));
    }
}

/// The char counts answer plain Levenshtein only: asked for on a Jaccard index they are
/// refused with what and why, before any answer; on a Levenshtein index they are the
/// default, and asking for them gives the same answers.
#[test]
fn char_counts_are_refused_where_they_do_not_apply() {
    let d = Dir::new();
    let input = d.write("names.txt", NAMES.as_bytes());
    let jac = d.build(&input, "jac.wmk", &["--dim", "2", "--metric", "jaccard"]);
    let queries = d.write("q.txt", b"Orvane Qauy\nKeth Lnding\n");
    let q = queries.to_str().unwrap();
    d.cmd()
        .args([
            "query",
            jac.to_str().unwrap(),
            "--candidates-from",
            "counts",
            "--queries",
            q,
        ])
        .assert()
        .code(2)
        .stdout("")
        .stderr(predicates::str::contains("--candidates-from"))
        .stderr(predicates::str::contains("plain Levenshtein"))
        .stderr(predicates::str::contains("jaccard"));
    let lev = d.build(&input, "lev.wmk", &["--dim", "2"]);
    let run = |extra: &[&str]| {
        let out = d
            .cmd()
            .args(["query", lev.to_str().unwrap(), "-k", "3", "--queries", q])
            .args(extra)
            .assert()
            .success();
        String::from_utf8_lossy(&out.get_output().stdout).into_owned()
    };
    let default = run(&[]);
    assert_eq!(default.lines().count(), 2, "{default}");
    assert_eq!(default, run(&["--candidates-from", "counts"]));
}
