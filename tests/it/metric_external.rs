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
