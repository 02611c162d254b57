//! The external-program protocol, run against `examples/metric_server.py` (python3), whose
//! Levenshtein is checked against `strsim::levenshtein` (a general-purpose crate); and the
//! failures: exit, hang, garbage, wrong count, wrong hello.

use std::time::Duration;

use waymark::metric::{ExternalMetric, Metric, MetricError, PreparedQuery};

use crate::util::repo_file;

fn server(args: &[&str]) -> Vec<String> {
    let mut v = vec![
        "python3".to_string(),
        repo_file("examples/metric_server.py")
            .to_str()
            .expect("a UTF-8 path")
            .to_string(),
    ];
    v.extend(args.iter().map(|s| s.to_string()));
    v
}

fn have_python() -> bool {
    std::process::Command::new("python3")
        .arg("--version")
        .output()
        .is_ok()
}

#[test]
fn distances_match_strsim() {
    if !have_python() {
        eprintln!("skipped: no python3");
        return;
    }
    let m = ExternalMetric::spawn(&server(&[]), Duration::from_secs(20)).unwrap();
    let items = [
        "Orvane Kay",
        "Keth Landing",
        "Skärholm",
        "",
        "Orvane Quay",
        "Vessmark \"Nord\"\\",
    ];
    let bytes: Vec<&[u8]> = items.iter().map(|s| s.as_bytes()).collect();
    for query in ["Orvane Quay", "Skarholm", ""] {
        let q = m.prepare(query.as_bytes());
        let d = q.try_distances(&bytes).unwrap();
        let expected: Vec<f64> = items
            .iter()
            .map(|i| strsim::levenshtein(query, i) as f64)
            .collect();
        assert_eq!(d, expected, "{query}");
        let mut out = vec![0.0; items.len()];
        q.distances(&bytes, &mut out);
        assert_eq!(out, expected);
        assert_eq!(q.distance(b"Orvane Kay"), expected[0]);
        assert_eq!(q.distance_within(b"Orvane Kay", expected[0] - 1.0), None);
    }
    assert!(m.check().is_ok());
    // Larger than one request: split into batches.
    let many: Vec<String> = (0..5000).map(|i| format!("buoy {i}")).collect();
    let many_b: Vec<&[u8]> = many.iter().map(|s| s.as_bytes()).collect();
    let d = m.prepare(b"buoy 42").try_distances(&many_b).unwrap();
    assert_eq!(d.len(), 5000);
    assert_eq!(d[42], 0.0);
    assert_eq!(d[4200], strsim::levenshtein("buoy 42", "buoy 4200") as f64);
}

fn failure(args: &[&str], timeout: Duration) -> String {
    let m = ExternalMetric::spawn(&server(args), timeout).unwrap();
    let q = m.prepare(b"Orvane");
    let e = q.try_distances(&[b"Keth".as_slice(), b"Holm"]).unwrap_err();
    assert!(matches!(e, MetricError::Program { .. }));
    // After a failure the trait methods give NaN and `check` keeps the error.
    assert!(q.distance(b"Keth").is_nan());
    assert_eq!(m.check().unwrap_err().to_string(), e.to_string());
    e.to_string()
}

#[test]
fn failures_are_reported() {
    if !have_python() {
        eprintln!("skipped: no python3");
        return;
    }
    let t = Duration::from_secs(20);
    let e = failure(&["--misbehave", "exit"], t);
    assert!(
        e.contains("exited") && e.contains("exiting on purpose"),
        "{e}"
    );
    let e = failure(&["--misbehave", "garbage"], t);
    assert!(e.contains("not a response: `this is not json`"), "{e}");
    let e = failure(&["--misbehave", "count"], t);
    assert!(e.contains("answered 1 distances for 2 items"), "{e}");
    let e = failure(&["--misbehave", "hang"], Duration::from_millis(300));
    assert!(e.contains("within 0.3 s"), "{e}");
}

#[test]
fn bad_programs_are_refused_at_start() {
    let e = ExternalMetric::spawn(
        &["/nonexistent/metric-program".to_string()],
        Duration::from_secs(5),
    )
    .unwrap_err();
    assert!(e.to_string().contains("could not start"), "{e}");
    let e = ExternalMetric::spawn(
        &[
            "sh".into(),
            "-c".into(),
            "echo '{\"protocol\": \"other\", \"version\": 1}'".into(),
        ],
        Duration::from_secs(5),
    )
    .unwrap_err();
    assert!(e.to_string().contains("speaks protocol \"other\""), "{e}");
    let e = ExternalMetric::spawn(
        &["sh".into(), "-c".into(), "echo hello".into()],
        Duration::from_secs(5),
    )
    .unwrap_err();
    assert!(
        e.to_string().contains("first line must be the hello"),
        "{e}"
    );
    let e = ExternalMetric::spawn(
        &["sh".into(), "-c".into(), "echo oops >&2; exit 4".into()],
        Duration::from_secs(5),
    )
    .unwrap_err();
    assert!(
        e.to_string().contains("exited") && e.to_string().contains("oops"),
        "{e}"
    );
    assert!(ExternalMetric::spawn(&[], Duration::from_secs(1)).is_err());
}

/// `python3 -c SCRIPT`, with the script's own arguments.
fn inline(script: &str, args: &[&str]) -> Vec<String> {
    let mut v = vec!["python3".to_string(), "-c".to_string(), script.to_string()];
    v.extend(args.iter().map(|s| s.to_string()));
    v
}

/// Writes 32 MiB without a newline on stdout, then waits: instead of the hello line, or
/// instead of the first answer.
const STDOUT_FLOOD: &str = r#"
import json, sys, time
hello = json.dumps({"protocol": "waymark-metric", "version": 1})
if sys.argv[1] == "answer":
    print(hello, flush=True)
    sys.stdin.readline()
for _ in range(32):
    sys.stdout.write("1" * (1 << 20))
sys.stdout.flush()
time.sleep(1000)
"#;

#[test]
fn a_line_flooded_without_newline_is_cut_off_with_a_clear_error() {
    if !have_python() {
        eprintln!("skipped: no python3");
        return;
    }
    // Instead of the hello line: refused without waiting for the start time limit.
    let e = ExternalMetric::spawn(&inline(STDOUT_FLOOD, &["hello"]), Duration::from_secs(30))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("the hello line") && e.contains("longer than"),
        "{e}"
    );
    assert!(
        e.len() < 2000,
        "the message quotes too much: {} bytes",
        e.len()
    );
    // Instead of an answer: refused long before the batch's time limit.
    let m =
        ExternalMetric::spawn(&inline(STDOUT_FLOOD, &["answer"]), Duration::from_secs(30)).unwrap();
    let t = std::time::Instant::now();
    let e = m
        .prepare(b"Orvane")
        .try_distances(&[b"Keth".as_slice(), b"Holm"])
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("the distances") && e.contains("longer than"),
        "{e}"
    );
    assert!(
        e.len() < 2000,
        "the message quotes too much: {} bytes",
        e.len()
    );
    assert!(
        t.elapsed() < Duration::from_secs(25),
        "waited for the time limit"
    );
}

/// Writes a line that is not UTF-8, then 4 MiB without a newline on stderr before each answer (distance: the difference of lengths); at the third request it says why it
/// gives up and exits.
const STDERR_FLOOD: &str = r#"
import json, sys
print(json.dumps({"protocol": "waymark-metric", "version": 1}), flush=True)
for n, line in enumerate(sys.stdin):
    sys.stderr.buffer.write(b"\xff\n")
    for _ in range(4):
        sys.stderr.buffer.write(b"e" * (1 << 20))
    sys.stderr.flush()
    if n == 2:
        sys.stderr.write("\ngiving up: the third request\n")
        sys.exit(3)
    r = json.loads(line)
    q = r["query"]
    print(json.dumps({"distances": [abs(len(q) - len(s)) for s in r["items"]]}), flush=True)
"#;

#[test]
fn a_flood_on_stderr_neither_blocks_the_program_nor_swells_the_error() {
    if !have_python() {
        eprintln!("skipped: no python3");
        return;
    }
    let m = ExternalMetric::spawn(&inline(STDERR_FLOOD, &[]), Duration::from_secs(5)).unwrap();
    let q = m.prepare(b"Orvane");
    for _ in 0..2 {
        let d = q.try_distances(&[b"Keth".as_slice(), b"Holmsund"]).unwrap();
        assert_eq!(d, [2.0, 2.0]);
    }
    let e = q
        .try_distances(&[b"Keth".as_slice()])
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("exited") && e.contains("giving up: the third request"),
        "{e}"
    );
    assert!(
        e.len() < 8192,
        "the message quotes too much: {} bytes",
        e.len()
    );
}

/// Whether process `pid` still runs (a zombie, ended but not yet reaped, does not).
fn running(pid: u32) -> bool {
    match std::fs::read_to_string(format!("/proc/{pid}/stat")) {
        Ok(stat) => !stat
            .rsplit_once(") ")
            .is_some_and(|(_, rest)| rest.starts_with('Z')),
        Err(_) => false,
    }
}

/// Starts `sleep 1000`, writes its pid to the file named by the first argument, says hello,
/// then hangs on the first request (`hang`) or answers zeros until its input ends (`serve`).
const STARTS_A_CHILD: &str = r#"
import json, subprocess, sys, time
child = subprocess.Popen(["sleep", "1000"])
with open(sys.argv[1], "w") as f:
    f.write(str(child.pid))
print(json.dumps({"protocol": "waymark-metric", "version": 1}), flush=True)
for line in sys.stdin:
    if sys.argv[2] == "hang":
        time.sleep(1000)
    print(json.dumps({"distances": [0] * len(json.loads(line)["items"])}), flush=True)
"#;

/// Ends the process `pid` when dropped (a test that fails must not leave it behind).
struct Reap(u32);

impl Drop for Reap {
    fn drop(&mut self) {
        let _ = std::process::Command::new("kill")
            .args(["-9", &self.0.to_string()])
            .status();
    }
}

fn started_child(dir: &std::path::Path, how: &str) -> (ExternalMetric, Reap) {
    let pid_file = dir.join(format!("{how}.pid"));
    let m = ExternalMetric::spawn(
        &inline(STARTS_A_CHILD, &[pid_file.to_str().unwrap(), how]),
        Duration::from_millis(300),
    )
    .unwrap();
    let pid: u32 = std::fs::read_to_string(&pid_file)
        .unwrap()
        .trim()
        .parse()
        .unwrap();
    assert!(running(pid), "sleep {pid} should run");
    (m, Reap(pid))
}

/// Waits up to 5 s for `pid` to end.
fn ends(pid: u32) -> bool {
    let t = std::time::Instant::now();
    while t.elapsed() < Duration::from_secs(5) {
        if !running(pid) {
            return true;
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    false
}

#[test]
fn a_timeout_or_a_drop_ends_the_processes_the_program_started() {
    if !have_python() {
        eprintln!("skipped: no python3");
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let (m, child) = started_child(dir.path(), "hang");
    let e = m.prepare(b"Orvane").try_distances(&[b"Keth".as_slice()]);
    assert!(e.unwrap_err().to_string().contains("within 0.3 s"));
    assert!(ends(child.0), "sleep {} outlived the timeout", child.0);
    // A program that ends when its input closes, leaving its own child behind.
    let (m, child) = started_child(dir.path(), "serve");
    assert_eq!(
        m.prepare(b"Orvane")
            .try_distances(&[b"Keth".as_slice()])
            .unwrap(),
        [0.0]
    );
    drop(m);
    assert!(ends(child.0), "sleep {} outlived the metric", child.0);
}
