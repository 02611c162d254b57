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

/// An endless input (a pipe from `yes`, `/dev/zero` as one endless line, `/dev/urandom`)
/// stops once more than a third of the budget has been read, with exit 2 and a message, and
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
    for (input, extra) in [
        ("/dev/zero", vec![]),
        ("/dev/urandom", vec!["--metric", "l2"]),
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
    assert_eq!(d.others(&[]), Vec::<String>::new());
}
