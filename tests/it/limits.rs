//! Limits: numeric options at the ends of their range, the memory budget of requests and of
//! endless inputs, the atomic replacement of an index, the ground-truth cache's checks and
//! output names at the length limit. Each `bad_input_*` test is a row of the bad-input table
//! of DEVELOPERS.md ("Hardening").

use std::path::Path;
use std::process::Stdio;

use predicates::prelude::*;
use predicates::str::contains;

use crate::util::{demo_lines, json_lines, Dir};

/// The extremes every numeric option is tried with: u64::MAX, one past it, 2^63, 2^63 − 1,
/// 2^32, numbers in other notations, negative, zero, not-a-number and infinity.
const EXTREMES: [&str; 10] = [
    "18446744073709551615",
    "18446744073709551616",
    "9223372036854775808",
    "9223372036854775807",
    "4294967296",
    "1e30",
    "-1",
    "0",
    "NaN",
    "inf",
];

const ITEMS: &str = "Orvane Quay\nKeth Landing\nMirrow Steps\nSkerrow Pier\nBrinholm Slip\n\
                     Vessa Tuha\nHolbre Wynd\nStoth Hollow\n";

/// An answer line of `waymark query`.
#[derive(serde::Deserialize)]
struct Answer {
    neighbors: Vec<Neighbor>,
}

#[derive(serde::Deserialize)]
struct Neighbor {
    item: String,
    distance: f64,
}

/// Every numeric option of every command, at each of [`EXTREMES`]: a clear usage error
/// naming the flag (exit 2) or an answer (exit 0), never a panic, an abort or an attempt to
/// allocate by the number asked for (the budget is 2 GB, far below what `-k 2^32` would
/// take).
#[test]
fn bad_input_numeric_options_at_the_ends_of_their_range_are_refused_or_capped() {
    let d = Dir::new();
    let input = d.write("places.txt", ITEMS.as_bytes());
    let queries = d.write("q.txt", b"Orvane Kay\nKeth Lnding\n");
    let index = d.build(&input, "places.wmk", &["-q", "--dim", "4"]);
    let s = |p: &Path| p.display().to_string();
    let small_sweep = [
        "--embeddings",
        "landmarks",
        "--dims",
        "2",
        "--spaces",
        "l1",
        "--candidates",
        "4",
    ];
    // (command and fixed arguments, numeric options to try)
    let cases: Vec<(Vec<String>, Vec<&str>)> = vec![
        (
            vec![
                "build".into(),
                s(&input),
                "-o".into(),
                "b.wmk".into(),
                "-q".into(),
            ],
            vec![
                "--dim",
                "--pool",
                "--seed",
                "--candidates",
                "--landmark-sample",
                "--timeout",
            ],
        ),
        (
            vec![
                "build".into(),
                s(&input),
                "-o".into(),
                "j.wmk".into(),
                "-q".into(),
                "--metric".into(),
                "jaccard".into(),
            ],
            vec!["--qgrams"],
        ),
        (
            vec!["query".into(), s(&index), "--queries".into(), s(&queries)],
            vec!["-k", "--within", "--candidates", "--visit"],
        ),
        (
            vec![
                "query".into(),
                s(&index),
                "--queries".into(),
                s(&queries),
                "--exact".into(),
            ],
            vec!["-k", "--within"],
        ),
        (
            vec![
                "eval".into(),
                s(&index),
                "--queries".into(),
                s(&queries),
                "--distortion".into(),
                "--candidates".into(),
                "4".into(),
            ],
            vec!["-k", "--visit", "--pairs"],
        ),
        (
            vec!["eval".into(), s(&index), "--queries".into(), s(&queries)],
            vec!["--candidates"],
        ),
        (
            vec![
                "sweep".into(),
                s(&input),
                "--queries".into(),
                s(&queries),
                "--out".into(),
                "sweep".into(),
                "-q".into(),
            ],
            vec![
                "-k",
                "--dims",
                "--candidates",
                "--seed",
                "--pool",
                "--landmark-sample",
            ],
        ),
        (
            vec!["check-metric".into(), s(&input)],
            vec!["--sample", "--seed", "--timeout"],
        ),
    ];
    let mut runs = 0;
    for (fixed, options) in &cases {
        for option in options {
            for value in EXTREMES {
                let mut c = d.cmd();
                c.args(fixed);
                if fixed[0] == "sweep" {
                    // The option under test replaces the sweep's small default.
                    for pair in small_sweep.chunks(2).filter(|p| p[0] != *option) {
                        c.args(pair);
                    }
                }
                c.arg(format!("{option}={value}"))
                    .env("WAYMARK_MEMORY_BUDGET", "2000000000")
                    .timeout(std::time::Duration::from_secs(60));
                let out = c.output().expect("run");
                let err = String::from_utf8_lossy(&out.stderr);
                let what = format!("{} {option}={value}: {err}", fixed[0]);
                runs += 1;
                assert!(!err.contains("panicked"), "{what}");
                match out.status.code() {
                    Some(0) => {}
                    Some(2) => {
                        // The message names the flag (clap: `-k <K>` or the value; ours: the flag).
                        let bare = option.trim_start_matches('-');
                        assert!(
                            err.contains(bare) || err.contains(&format!("'{value}'")),
                            "the message does not name {option}: {what}"
                        );
                    }
                    other => panic!("exit {other:?}: {what}"),
                }
            }
        }
    }
    assert!(runs > 250, "{runs}");
}

/// `-k` above the number of items means every item, in order: the answer of `query` (and of
/// `query --exact`) at `-k 2^63` is the whole list, with distances equal to strsim's
/// Levenshtein (reference crate).
#[test]
fn bad_input_k_at_the_top_of_its_range_means_every_item() {
    let d = Dir::new();
    let input = d.write("places.txt", ITEMS.as_bytes());
    let index = d.build(&input, "places.wmk", &["-q", "--dim", "4"]);
    let items: Vec<&str> = ITEMS.lines().collect();
    for k in ["9223372036854775808", "4294967296", "18446744073709551615"] {
        for exact in [false, true] {
            let mut c = d.cmd();
            c.arg("query").arg(&index).args(["-k", k]);
            if exact {
                c.arg("--exact");
            }
            let out = c.write_stdin("Orvane Kay\n").output().expect("run");
            assert_eq!(
                out.status.code(),
                Some(0),
                "-k {k}: {}",
                String::from_utf8_lossy(&out.stderr)
            );
            let answers: Vec<Answer> = json_lines(&out.stdout);
            let got = &answers[0].neighbors;
            assert_eq!(got.len(), items.len(), "-k {k}");
            for w in got.windows(2) {
                assert!(w[0].distance <= w[1].distance);
            }
            for n in got {
                assert_eq!(
                    n.distance,
                    strsim::levenshtein("Orvane Kay", &n.item) as f64
                );
            }
        }
    }
    // eval measures recall at such a k against a brute force of every item: recall 1.
    let q = d.write("q.txt", b"Orvane Kay\n");
    let out = d
        .cmd()
        .arg("eval")
        .arg(&index)
        .arg("--queries")
        .arg(&q)
        .args(["-k", "9223372036854775808", "--candidates", "4", "--json"])
        .output()
        .expect("run");
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
    let recall = v.to_string();
    assert!(recall.contains("\"recall\":1.0"), "{recall}");
}

/// `--landmark-sample 0` made an index that its own open refused (exit 3, "corrupt index: a
/// sample of 0 items"); build and sweep now refuse the option up front.
#[test]
fn bad_input_a_landmark_sample_of_zero_is_a_usage_error() {
    let d = Dir::new();
    let input = d.write("places.txt", ITEMS.as_bytes());
    let queries = d.write("q.txt", b"Orvane Kay\n");
    d.cmd()
        .arg("build")
        .arg(&input)
        .args(["-o", "x.wmk", "--landmark-sample", "0"])
        .assert()
        .code(2)
        .stderr(contains("--landmark-sample must be at least 1"));
    d.cmd()
        .arg("sweep")
        .arg(&input)
        .arg("--queries")
        .arg(&queries)
        .args(["--out", "sw", "--landmark-sample", "0"])
        .assert()
        .code(2)
        .stderr(contains("--landmark-sample must be at least 1"));
    assert_eq!(d.others(&["places.txt", "q.txt"]), Vec::<String>::new());
}

/// Requests whose memory is set by a number are refused up front by the estimate, naming
/// the need and the budget: `eval --distortion --pairs N` (72 bytes a pair) and
/// `check-metric --sample M` (an M × M matrix of distances).
#[test]
fn bad_input_pairs_and_samples_beyond_the_memory_budget_are_refused_up_front() {
    let d = Dir::new();
    let words: Vec<String> = demo_lines("names.txt").into_iter().take(3000).collect();
    assert_eq!(words.len(), 3000);
    let input = d.write("names.txt", words.join("\n").as_bytes());
    let index = d.build(&input, "names.wmk", &["-q", "--dim", "8"]);
    // 3,000 items hold 4,498,500 pairs: 324 MB of pairs, over a budget of 100 MB.
    d.cmd()
        .arg("eval")
        .arg(&index)
        .args(["--distortion", "--pairs", "18446744073709551615"])
        .env("WAYMARK_MEMORY_BUDGET", "100000000")
        .assert()
        .code(2)
        .stderr(
            contains("measuring the distortion over 4498500 pairs")
                .and(contains("--pairs"))
                .and(contains("WAYMARK_MEMORY_BUDGET")),
        );
    // A smaller number of pairs fits and is measured.
    d.cmd()
        .arg("eval")
        .arg(&index)
        .args(["--distortion", "--pairs", "1000"])
        .env("WAYMARK_MEMORY_BUDGET", "100000000")
        .assert()
        .success()
        .stdout(contains("distortion"));
    // check-metric: 3,000 items sampled make a 72 MB matrix, over 50 MB.
    d.cmd()
        .arg("check-metric")
        .arg(&input)
        .args(["--sample", "9223372036854775808"])
        .env("WAYMARK_MEMORY_BUDGET", "50000000")
        .assert()
        .code(2)
        .stderr(
            contains("checking the metric on a sample of 3000 items").and(contains("--sample")),
        );
}

/// An endless input (a pipe from `yes`, `/dev/zero` as one endless line, `/dev/urandom` as
/// vectors, `/dev/zero` as an edge list or as a cost file) stops once more than a third of the budget has been read, with exit 2 and a message, and
/// leaves nothing behind: no index, no temp file.
#[test]
fn bad_input_an_endless_input_stops_at_the_memory_budget_and_writes_nothing() {
    let d = Dir::new();
    // `yes | waymark build /dev/stdin`: short lines without end.
    let mut child = std::process::Command::new(crate::util::waymark_path())
        .current_dir(d.dir.path())
        .args(["build", "/dev/stdin", "-o", "x.wmk"])
        .env("WAYMARK_MEMORY_BUDGET", "30000000")
        .stdin(Stdio::piped())
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .expect("spawn");
    let mut stdin = child.stdin.take().expect("stdin");
    let feeder = std::thread::spawn(move || {
        use std::io::Write;
        let chunk = "y\n".repeat(1 << 15);
        // Stops when waymark closes the pipe.
        while stdin.write_all(chunk.as_bytes()).is_ok() {}
    });
    let out = child.wait_with_output().expect("wait");
    feeder.join().expect("feeder");
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(
        err.contains("/dev/stdin") && err.contains("more than 10000000 bytes"),
        "{err}"
    );
    assert!(err.contains("WAYMARK_MEMORY_BUDGET"), "{err}");
    // One line without end, and random bytes read as vectors (no line ends, no text check).
    let costs = d.write("costs.txt", b"indel * 1\nsub * * 1\n");
    let costs = costs.to_str().expect("utf-8 path");
    for (input, extra) in [
        ("/dev/zero", vec![]),
        ("/dev/urandom", vec!["--metric", "l2"]),
        ("/dev/zero", vec!["--metric", "graph"]),
        (costs, vec!["--metric", "weighted", "--costs", "/dev/zero"]),
    ] {
        let out = d
            .cmd()
            .args(["build", input, "-o", "x.wmk"])
            .args(&extra)
            .env("WAYMARK_MEMORY_BUDGET", "30000000")
            .timeout(std::time::Duration::from_secs(60))
            .output()
            .expect("run");
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{input}: {err}");
        assert!(
            !err.contains("panicked") && !err.contains("memory allocation"),
            "{err}"
        );
    }
    assert_eq!(d.others(&["costs.txt"]), Vec::<String>::new());
}

// ---------------------------------------------------------------------------------------
// Replacing an index atomically.

/// The items of `query -k 3 --format tsv` for `queries`, as one string.
fn query_tsv(d: &Dir, index: &Path, queries: &str) -> String {
    let out = d
        .cmd()
        .arg("query")
        .arg(index)
        .args(["-k", "3", "--format", "tsv"])
        .write_stdin(queries)
        .output()
        .expect("run");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).expect("utf-8")
}

/// Two indexes of different halves of the place names, built in `incoming/`.
fn two_indexes(d: &Dir) -> (std::path::PathBuf, std::path::PathBuf) {
    let names = demo_lines("names.txt");
    let a = d.write("a.txt", names[..1500].join("\n").as_bytes());
    let b = d.write("b.txt", names[1500..3000].join("\n").as_bytes());
    std::fs::create_dir(d.path("incoming")).expect("mkdir");
    let ia = d.build(&a, "incoming/a.wmk", &["-q", "--dim", "8"]);
    let ib = d.build(&b, "incoming/b.wmk", &["-q", "--dim", "8"]);
    (ia, ib)
}

/// `waymark install NEW INDEX` replaces the index while a `waymark query` process that has
/// it open keeps answering from the old file (its answers do not change, it does not die),
/// an `Index` opened in this process too, and every process started later answers from
/// the new one. The same through the library call.
#[test]
fn install_replaces_an_index_while_its_readers_keep_answering() {
    use std::io::{BufRead, BufReader, Write};
    let d = Dir::new();
    let (ia, ib) = two_indexes(&d);
    let live = d.path("live.wmk");
    d.cmd()
        .arg("install")
        .arg(&ia)
        .arg(&live)
        .assert()
        .success()
        .stdout(contains("every checksum verified"));
    let queries = "Orvane Quay\nKeth Landing\nSkerrow Pier\n";
    let from_a = query_tsv(&d, &live, queries);
    let from_b = query_tsv(&d, &ib, queries);
    assert_eq!(from_a, query_tsv(&d, &ia, queries));
    assert_ne!(from_a, from_b);

    // A reader process that opened the old file, asked one query at a time.
    let mut reader = std::process::Command::new(crate::util::waymark_path())
        .arg("query")
        .arg(&live)
        .args(["-k", "3", "--format", "tsv"])
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("spawn");
    let mut to_reader = reader.stdin.take().expect("stdin");
    let mut from_reader = BufReader::new(reader.stdout.take().expect("stdout"));
    let mut ask = |q: &str| {
        writeln!(to_reader, "{q}").expect("write a query");
        to_reader.flush().expect("flush");
        let mut lines = String::new();
        for _ in 0..3 {
            from_reader.read_line(&mut lines).expect("read an answer");
        }
        lines
    };
    let first: Vec<&str> = from_a.lines().take(3).collect();
    assert_eq!(ask("Orvane Quay"), format!("{}\n", first.join("\n")));
    let held = waymark::index::Index::open(&live).expect("open");
    let held_items = |ix: &waymark::index::Index| -> Vec<String> {
        (0..3)
            .map(|i| String::from_utf8_lossy(ix.item(i)).into_owned())
            .collect()
    };
    let held_before = held_items(&held);

    for round in 0..6 {
        let new = if round % 2 == 0 { &ib } else { &ia };
        if round < 3 {
            d.cmd()
                .arg("install")
                .arg(new)
                .arg(&live)
                .arg("-q")
                .assert()
                .success();
        } else {
            waymark::index::install_index(new, &live).expect("install_index");
        }
        // The open reader still answers from the old file.
        assert_eq!(
            ask("Orvane Quay"),
            format!("{}\n", first.join("\n")),
            "round {round}"
        );
        // A new process sees the new file.
        let now = query_tsv(&d, &live, queries);
        assert_eq!(
            &now,
            if round % 2 == 0 { &from_b } else { &from_a },
            "round {round}"
        );
    }
    assert_eq!(
        held_items(&held),
        held_before,
        "an open mapping is not disturbed"
    );
    drop(to_reader);
    let status = reader.wait().expect("wait");
    assert!(status.success(), "the reader ended with {status:?}");
    assert_eq!(
        d.others(&["a.txt", "b.txt", "incoming", "live.wmk"]),
        Vec::<String>::new(),
        "a temporary file was left behind"
    );
}

/// What `install` refuses, each time with the destination byte for byte as it was and no
/// temporary file left: the destination itself (same path, a symbolic link, a hard link);
/// a file that is not an index; an index damaged in a byte only the full check reads (its
/// checksum no longer matches); a folder or a FIFO; a destination in a missing folder.
#[test]
fn bad_input_install_refuses_the_destination_itself_and_anything_but_a_valid_index() {
    let d = Dir::new();
    let (ia, ib) = two_indexes(&d);
    let live = d.path("live.wmk");
    d.cmd()
        .arg("install")
        .arg(&ia)
        .arg(&live)
        .assert()
        .success();
    let before = std::fs::read(&live).expect("read");
    std::os::unix::fs::symlink(&live, d.path("link.wmk")).expect("symlink");
    std::fs::hard_link(&live, d.path("hard.wmk")).expect("hard link");
    for same in ["live.wmk", "link.wmk", "hard.wmk"] {
        d.cmd()
            .arg("install")
            .arg(d.path(same))
            .arg(&live)
            .assert()
            .code(2)
            .stderr(contains("the same file"));
    }
    // Not an index: refused, exit 3, naming the new file.
    let text = d.write("not-an-index.wmk", b"Orvane Quay\n");
    d.cmd()
        .arg("install")
        .arg(&text)
        .arg(&live)
        .assert()
        .code(3)
        .stderr(contains("not-an-index.wmk"));
    // Damaged in the last byte of the items (section kind 3), whose checksum `open` does
    // not read: only the full check sees it.
    let mut damaged = std::fs::read(&ib).expect("read");
    let items = crate::util::section(&damaged, 3);
    damaged[items.end - 1] ^= 0x40;
    let bad = d.write("damaged.wmk", &damaged);
    waymark::index::Index::open(&bad).expect("open does not read every byte");
    d.cmd()
        .arg("install")
        .arg(&bad)
        .arg(&live)
        .assert()
        .code(3)
        .stderr(contains("damaged.wmk").and(contains("corrupt index")));
    // A folder, a FIFO: refused without blocking.
    d.cmd()
        .arg("install")
        .arg(d.path("incoming"))
        .arg(&live)
        .assert()
        .code(3);
    let fifo = d.path("pipe.wmk");
    assert!(std::process::Command::new("mkfifo")
        .arg(&fifo)
        .status()
        .expect("mkfifo")
        .success());
    d.cmd()
        .arg("install")
        .arg(&fifo)
        .arg(&live)
        .timeout(std::time::Duration::from_secs(20))
        .assert()
        .code(3)
        .stderr(contains("not a regular file"));
    // A destination in a missing folder.
    d.cmd()
        .arg("install")
        .arg(&ib)
        .arg(d.path("missing/live.wmk"))
        .assert()
        .code(2)
        .stderr(contains("the output folder does not exist"));
    assert_eq!(
        std::fs::read(&live).expect("read"),
        before,
        "the destination changed"
    );
    let mut left = d.others(&[
        "a.txt",
        "b.txt",
        "incoming",
        "live.wmk",
        "link.wmk",
        "hard.wmk",
        "not-an-index.wmk",
        "damaged.wmk",
        "pipe.wmk",
    ]);
    left.sort();
    assert_eq!(
        left,
        Vec::<String>::new(),
        "a temporary file was left behind"
    );
    // The library call refuses the same way.
    let e = waymark::index::install_index(&bad, &live).unwrap_err();
    assert!(matches!(e, waymark::Error::CorruptIndex { .. }), "{e}");
    let e = waymark::index::install_index(&d.path("hard.wmk"), &live).unwrap_err();
    assert!(e.to_string().contains("the same file"), "{e}");
}

/// A temporary file left by an install killed midway (unlocked, in the shape the writer
/// uses) is removed by the next install to that destination, as by the next build.
#[test]
fn install_removes_the_temporary_file_of_an_install_killed_midway() {
    let d = Dir::new();
    let (ia, _) = two_indexes(&d);
    let stale = d.write(".live.wmk.Ab12Cd.waymark-partial", &[0u8; 4096]);
    d.cmd()
        .arg("install")
        .arg(&ia)
        .arg(d.path("live.wmk"))
        .assert()
        .success();
    assert!(!stale.exists());
    assert_eq!(
        d.others(&["a.txt", "b.txt", "incoming", "live.wmk"]),
        Vec::<String>::new()
    );
}

// ---------------------------------------------------------------------------------------
// Output names at the length limit.

/// A name of exactly 255 bytes (the most a file name may have), ending in `tail`.
fn name_255(tail: &str) -> String {
    let mut s = "v".repeat(255 - tail.len());
    s.push_str(tail);
    assert_eq!(s.len(), 255);
    s
}

/// Every output name that is a valid file name works: an index (`build -o`, `install`), a
/// queries file whose ground-truth cache is written beside it (`eval`, `sweep`), and a
/// sweep's output folder, each at 255 bytes. The temporary files' names used to add 24
/// bytes to the destination's and failed there.
#[test]
fn bad_input_output_names_of_255_bytes_are_written() {
    let d = Dir::new();
    let input = d.write("places.txt", ITEMS.as_bytes());
    let long_index = name_255(".wmk");
    let index = d.build(&input, &long_index, &["-q", "--dim", "4"]);
    assert!(index.exists());
    // install onto a 255-byte name.
    let other = d.build(&input, "other.wmk", &["-q", "--dim", "3"]);
    let long_live = name_255("-live.wmk");
    d.cmd()
        .arg("install")
        .arg(&other)
        .arg(d.path(&long_live))
        .assert()
        .success();
    // A queries file of 255 bytes: the cache beside it is written and then used.
    let long_queries = name_255(".txt");
    d.write(&long_queries, b"Orvane Kay\nKeth Lnding\n");
    for cached in [false, true] {
        let out = d
            .cmd()
            .arg("eval")
            .arg(&index)
            .arg("--queries")
            .arg(d.path(&long_queries))
            .args(["--candidates", "4", "--json"])
            .output()
            .expect("run");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(out.status.success(), "{err}");
        assert!(!err.contains("could not write"), "{err}");
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
        assert_eq!(v["ground_truth"]["cached"], cached, "{v}");
    }
    // A sweep into a 255-byte folder, with the long queries file.
    let long_out = name_255("-sweep");
    d.cmd()
        .arg("sweep")
        .arg(&input)
        .arg("--queries")
        .arg(d.path(&long_queries))
        .args([
            "--out",
            &long_out,
            "-q",
            "--embeddings",
            "landmarks",
            "--dims",
            "2",
        ])
        .args(["--spaces", "l1", "--candidates", "4"])
        .assert()
        .success();
    assert!(d.path(&long_out).join("sweep.csv").exists());
    let mut names = d.others(&[]);
    names.sort();
    assert!(
        names
            .iter()
            .all(|n| !n.contains("partial") && !n.starts_with(".tmp")),
        "{names:?}"
    );
}

// ---------------------------------------------------------------------------------------
// The ground-truth cache.

/// The one cache file beside `queries` (`NAME.truth-KEY-kK.json`).
fn cache_file(d: &Dir, queries: &str) -> std::path::PathBuf {
    let mut found: Vec<String> = d
        .others(&[])
        .into_iter()
        .filter(|n| n.starts_with(&format!("{queries}.truth-")))
        .collect();
    assert_eq!(found.len(), 1, "{found:?}");
    d.path(&found.remove(0))
}

/// The checksum the cache stores, computed as the cache's writer does: SHA-256 over each
/// answer's length (u64 LE) and pairs (u32 LE item, f64 bits LE), in hex.
fn answers_checksum(answers: &[Vec<(u32, f64)>]) -> String {
    use sha2::{Digest, Sha256};
    let mut h = Sha256::new();
    for a in answers {
        h.update((a.len() as u64).to_le_bytes());
        for (i, dist) in a {
            h.update(i.to_le_bytes());
            h.update(dist.to_bits().to_le_bytes());
        }
    }
    h.finalize().iter().map(|b| format!("{b:02x}")).collect()
}

/// `eval --json` of the index with `queries`: (recall, whether the truth came from the
/// cache, stderr).
fn eval_recall(d: &Dir, index: &Path, queries: &str) -> (f64, bool, String) {
    let out = d
        .cmd()
        .arg("eval")
        .arg(index)
        .arg("--queries")
        .arg(d.path(queries))
        .args(["-k", "10", "--candidates", "10", "--json"])
        .output()
        .expect("run");
    let err = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(out.status.success(), "{err}");
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
    (
        v["recall"][0]["recall"].as_f64().expect("recall"),
        v["ground_truth"]["cached"].as_bool().expect("cached"),
        err,
    )
}

/// A cache edited with care (the approximate answers written in as the truth, the checksum
/// recomputed) made `eval` report a recall of 1.0. The answers of a random sample of its
/// queries are now recomputed by brute force first: the forgery is caught, warned about,
/// the truth recomputed (the recall is the one measured at first) and the cache rewritten,
/// so that the next run uses it again.
#[test]
fn bad_input_a_ground_truth_cache_with_forged_answers_is_caught_and_recomputed() {
    let d = Dir::new();
    let names: Vec<String> = demo_lines("names.txt").into_iter().take(3000).collect();
    let input = d.write("names.txt", names.join("\n").as_bytes());
    // Two coordinates and 10 candidates: approximate answers far from the true ones.
    let index = d.build(&input, "names.wmk", &["-q", "--dim", "2"]);
    let queries: Vec<String> = demo_lines("lookups.txt").into_iter().take(40).collect();
    d.write("lookups.txt", queries.join("\n").as_bytes());
    let (recall, cached, _) = eval_recall(&d, &index, "lookups.txt");
    assert!(!cached);
    assert!(recall < 0.9, "recall {recall}: the forgery would not show");
    let (again, cached, _) = eval_recall(&d, &index, "lookups.txt");
    assert!(cached && again == recall);

    // Forge: the approximate answers (ids are record numbers, i.e. item numbers) become
    // the truth of every query where they differ from it.
    let path = cache_file(&d, "lookups.txt");
    let mut cache: serde_json::Value =
        serde_json::from_slice(&std::fs::read(&path).expect("read")).expect("json");
    let out = d
        .cmd()
        .arg("query")
        .arg(&index)
        .args(["-k", "10", "--candidates", "10", "--format", "tsv"])
        .arg("--queries")
        .arg(d.path("lookups.txt"))
        .output()
        .expect("query");
    assert!(out.status.success());
    let mut approx: Vec<Vec<(u32, f64)>> = vec![Vec::new(); queries.len()];
    for line in String::from_utf8(out.stdout).expect("utf-8").lines() {
        // query, rank, id, item, distance
        let f: Vec<&str> = line.split('\t').collect();
        let q = queries.iter().position(|q| q == f[0]).expect("a query");
        approx[q].push((f[2].parse().expect("id"), f[4].parse().expect("distance")));
    }
    let truth: Vec<Vec<(u32, f64)>> =
        serde_json::from_value(cache["answers"].clone()).expect("answers");
    let forged = truth.iter().zip(&approx).filter(|(t, a)| t != a).count();
    assert!(forged >= 36, "only {forged} of 40 answers differ");
    cache["answers"] = serde_json::to_value(&approx).expect("json");
    cache["checksum"] = answers_checksum(&approx).into();
    std::fs::write(&path, serde_json::to_vec(&cache).expect("json")).expect("write");

    let (checked, cached, err) = eval_recall(&d, &index, "lookups.txt");
    assert!(!cached, "the forged cache was trusted");
    assert_eq!(checked, recall, "the recall against the forged truth");
    assert!(
        err.contains("warning: ground-truth cache")
            && err.contains("does not hold the true answers"),
        "{err}"
    );
    // Rewritten with the true answers, and trusted again.
    let (last, cached, err) = eval_recall(&d, &index, "lookups.txt");
    assert!(cached && last == recall, "{err}");
}

/// A cache path that is not a regular file is never read: a symbolic link to /dev/zero (read
/// until the memory ran out), a FIFO (would block), a folder. A regular file larger than the
/// answers can take is refused by its size. Each is reported and the truth recomputed, and
/// the link or file is replaced by a valid cache (the link's target untouched).
#[test]
fn bad_input_a_ground_truth_cache_that_is_a_device_a_fifo_or_too_large_is_not_read() {
    let d = Dir::new();
    let input = d.write("places.txt", ITEMS.as_bytes());
    let index = d.build(&input, "places.wmk", &["-q", "--dim", "4"]);
    d.write("q.txt", b"Orvane Kay\nKeth Lnding\n");
    let (recall, _, _) = eval_recall(&d, &index, "q.txt");
    let path = cache_file(&d, "q.txt");
    let good = std::fs::read(&path).expect("read");

    let swap = |make: &dyn Fn(&Path)| {
        if path.is_dir() {
            std::fs::remove_dir(&path).expect("rmdir");
        } else {
            std::fs::remove_file(&path).expect("rm");
        }
        make(&path);
    };
    /// What the cache path is made into, and what the note says.
    type Case<'a> = (&'a str, Box<dyn Fn(&Path) + 'a>, &'a str);
    let cases: Vec<Case> = vec![
        (
            "a link to /dev/zero",
            Box::new(|p| std::os::unix::fs::symlink("/dev/zero", p).expect("symlink")),
            "is a device, not a regular file",
        ),
        (
            "a FIFO",
            Box::new(|p| {
                assert!(std::process::Command::new("mkfifo")
                    .arg(p)
                    .status()
                    .expect("mkfifo")
                    .success())
            }),
            "is a named pipe (FIFO), not a regular file",
        ),
        (
            "a large file",
            Box::new(|p| {
                let mut big = good.clone();
                big.extend(std::iter::repeat_n(b' ', 1 << 20));
                std::fs::write(p, big).expect("write");
            }),
            "is too large",
        ),
    ];
    for (what, make, says) in cases {
        swap(&*make);
        let out = d
            .cmd()
            .arg("eval")
            .arg(&index)
            .arg("--queries")
            .arg(d.path("q.txt"))
            .args(["-k", "10", "--candidates", "10", "--json"])
            .env("WAYMARK_MEMORY_BUDGET", "200000000")
            .timeout(std::time::Duration::from_secs(30))
            .output()
            .expect("run");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(out.status.success(), "{what}: {err}");
        assert!(
            err.contains(says) && err.contains("recomputed"),
            "{what}: {err}"
        );
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("json");
        assert_eq!(v["recall"][0]["recall"].as_f64(), Some(recall), "{what}");
        // Replaced by a valid cache, trusted by the next run.
        let meta = std::fs::symlink_metadata(&path).expect("stat");
        assert!(meta.file_type().is_file(), "{what}");
        let (_, cached, _) = eval_recall(&d, &index, "q.txt");
        assert!(cached, "{what}");
    }
}

// ---------------------------------------------------------------------------------------
// A metric program that writes more than one line per request.

/// Answers the difference of lengths; with `extra` it writes each answer twice, with
/// `hello` a second hello line, with `last` one line more after its second answer.
const TWO_LINES: &str = r#"
import json, sys
hello = json.dumps({"protocol": "waymark-metric", "version": 1})
print(hello, flush=True)
if sys.argv[1] == "hello":
    print(hello, flush=True)
for n, line in enumerate(sys.stdin):
    r = json.loads(line)
    q = r["query"]
    answer = json.dumps({"distances": [abs(len(q) - len(s)) for s in r["items"]]})
    if sys.argv[1] == "extra" or (sys.argv[1] == "last" and n == 1):
        answer = answer + "\n" + answer
    # Both lines in one write.
    sys.stdout.write(answer + "\n")
    sys.stdout.flush()
"#;

/// A second line for one request used to be taken as the answer to the next request (same
/// number of items: wrong distances, no error). It is a protocol error naming the request
/// and quoting the extra line; a second hello line too.
#[test]
fn bad_input_a_metric_program_writing_two_lines_for_one_request_is_refused() {
    use std::time::Duration;
    use waymark::metric::{ExternalMetric, Metric};
    let cmd = |how: &str| -> Vec<String> {
        ["python3", "-c", TWO_LINES, how]
            .iter()
            .map(|s| s.to_string())
            .collect()
    };
    let items: [&[u8]; 2] = [b"Keth", b"Holbre"];
    // Two lines in one write: the second is already read behind the first, and refused at
    // once.
    let m = ExternalMetric::spawn(&cmd("extra"), Duration::from_secs(10)).expect("spawn");
    let e = m
        .prepare(b"Orvane")
        .try_distances(&items)
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("broke the protocol: wrote a second line after its answer to request 1")
            && e.contains(r#"`{"distances": [2, 0]}`"#),
        "{e}"
    );
    assert!(m.check().is_err());
    // A second hello line, found before the first request is sent.
    let m = ExternalMetric::spawn(&cmd("hello"), Duration::from_secs(10)).expect("spawn");
    std::thread::sleep(Duration::from_millis(300));
    let e = m
        .prepare(b"Orvane")
        .try_distances(&items)
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("second line after its hello line") && e.contains("protocol"),
        "{e}"
    );
    // Well-behaved for one request, then two lines for the second.
    let m = ExternalMetric::spawn(&cmd("last"), Duration::from_secs(10)).expect("spawn");
    let q = m.prepare(b"Orvane");
    assert_eq!(q.try_distances(&items).expect("first"), vec![2.0, 0.0]);
    let e = q.try_distances(&items).unwrap_err().to_string();
    assert!(
        e.contains("second line after its answer to request 2"),
        "{e}"
    );

    // The command line: a build with such a program stops with exit 2 and the message.
    let d = Dir::new();
    let input = d.write("places.txt", ITEMS.as_bytes());
    d.cmd()
        .arg("build")
        .arg(&input)
        .args(["-o", "x.wmk", "--metric", "external", "--"])
        .args(cmd("extra"))
        .assert()
        .code(2)
        .stderr(contains("second line after its answer to request"));
    assert!(!d.path("x.wmk").exists());
}
