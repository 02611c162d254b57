//! Weighted edit distance: unit costs against `strsim::levenshtein` (a general-purpose
//! string-similarity crate), the cost-file checks, and the metric axioms on random cost
//! tables that are metrics by construction.

use proptest::prelude::*;
use waymark::metric::{CostTable, Metric, MetricError, PreparedQuery, WeightedEdit};

const DNA: &str = "\
# transitions (A<->G, C<->T) cost half a transversion
indel * 1
sub * * 1
sub A G 0.5
sub C T 0.5
";

fn line_of(e: &MetricError) -> u64 {
    match e {
        MetricError::Line { line, .. } => *line,
        other => panic!("expected an error naming a line, got {other:?}"),
    }
}

#[test]
fn nucleotide_costs() {
    let m = WeightedEdit::new(CostTable::parse(DNA, "dna.costs").unwrap());
    // Worked by hand: one transition; one transversion; one deletion; transition + deletion.
    assert_eq!(m.distance(b"GATTACA", b"GATTGCA"), 0.5);
    assert_eq!(m.distance(b"GATTACA", b"GATTCCA"), 1.0);
    assert_eq!(m.distance(b"GATTACA", b"GATACA"), 1.0);
    assert_eq!(m.distance(b"GATTACA", b"GACACA"), 1.5);
    let q = m.prepare(b"GATTACA");
    assert_eq!(q.distance_within(b"GACACA", 1.5), Some(1.5));
    assert_eq!(q.distance_within(b"GACACA", 1.4), None);
}

#[test]
fn planted_triangle_violation_is_refused_with_its_line() {
    let text = "sub A G 0.5\nsub G C 0.5\n# A->C direct costs more than via G\nsub A C 2\n";
    let e = CostTable::parse(text, "planted.costs").unwrap_err();
    assert_eq!(line_of(&e), 4);
    let msg = e.to_string();
    assert!(
        msg.starts_with("planted.costs:4: sub A C 2 exceeds"),
        "{msg}"
    );
    assert!(msg.contains("triangle inequality"), "{msg}");
    // Substitution dearer than delete + insert.
    let e = CostTable::parse("indel * 1\nsub x y 3\n", "x.costs").unwrap_err();
    assert_eq!(line_of(&e), 2);
    assert!(e.to_string().contains("sub x y 3 exceeds"), "{e}");
    // Deleting dearer than substituting then deleting the cheaper symbol.
    let e = CostTable::parse("indel a 5\nindel b 1\nsub a b 1\n", "d.costs").unwrap_err();
    assert!(e.to_string().contains("del a 5"), "{e}");
}

#[test]
fn other_rules_are_checked_with_their_line() {
    let cases: &[(&str, u64, &str)] = &[
        ("sub A G 0.5\nsub G A 0.7\n", 2, "symmetric"),
        ("ins A 2\n", 1, "must be equal"),
        ("ins * 1\ndel * 2\n", 2, "must be equal"),
        ("sub A G -1\n", 1, "non-negative"),
        ("sub A G nan\n", 1, "finite"),
        ("sub A G x\n", 1, "not a number"),
        ("sub A A 1\n", 1, "by itself"),
        ("sub A * 1\n", 1, "wildcard"),
        ("swap A G 1\n", 1, "unknown rule"),
        ("sub AB G 1\n", 1, "one character"),
        ("sub A 1\n", 1, "expected"),
    ];
    for (text, line, what) in cases {
        let e = CostTable::parse(text, "c.costs").unwrap_err();
        assert_eq!(line_of(&e), *line, "{text}: {e}");
        assert!(e.to_string().contains(what), "{text}: {e}");
    }
    // Escapes: U+0020 is a space symbol.
    let t = CostTable::parse("indel U+0020 0.25\n", "c.costs").unwrap();
    assert_eq!(t.indel(' '), 0.25);
}

#[test]
fn serde_round_trip_and_refusal() {
    let t = CostTable::parse(DNA, "dna.costs").unwrap();
    let json = serde_json::to_string(&t).unwrap();
    let back: CostTable = serde_json::from_str(&json).unwrap();
    assert_eq!(back, t);
    assert_eq!(back.sub('G', 'A'), 0.5);
    // A crafted table breaking the triangle inequality is refused on load.
    let bad = r#"{"default_indel":1,"default_sub":1,"indel":{},"sub":[["A","C",2],["A","G",0.5],["C","G",0.5]]}"#;
    let e = serde_json::from_str::<CostTable>(bad).unwrap_err();
    assert!(e.to_string().contains("triangle"), "{e}");
}

fn string() -> impl Strategy<Value = String> {
    prop::collection::vec(
        prop::sample::select(&['a', 'b', 'c', 'd', 'é', 'z'][..]),
        0..16,
    )
    .prop_map(|v| v.into_iter().collect())
}

/// A cost table that is a metric by construction: symbols and the empty symbol are points
/// of the plane, costs their Euclidean distances (rounded up to 1e-6 so decimal text keeps
/// the triangle inequality within the load check's tolerance).
fn costs() -> impl Strategy<Value = String> {
    prop::collection::vec((0.0f64..3.0, 0.0f64..3.0), 5).prop_map(|p| {
        let syms = ['a', 'b', 'c', 'd', 'é'];
        let empty = (1.5, -1.0);
        let d =
            |x: (f64, f64), y: (f64, f64)| ((x.0 - y.0).hypot(x.1 - y.1) * 1e6).ceil() / 1e6 + 0.01;
        let mut s = String::from("indel * 5\nsub * * 5\n");
        for i in 0..5 {
            s += &format!("indel {} {}\n", syms[i], d(p[i], empty));
            for j in i + 1..5 {
                s += &format!("sub {} {} {}\n", syms[i], syms[j], d(p[i], p[j]));
            }
        }
        s
    })
}

proptest! {
    #[test]
    fn unit_costs_are_levenshtein(a in string(), b in string()) {
        // Outside reference: strsim::levenshtein.
        let m = WeightedEdit::new(CostTable::default());
        prop_assert_eq!(m.distance(a.as_bytes(), b.as_bytes()), strsim::levenshtein(&a, &b) as f64);
    }

    #[test]
    fn metric_axioms(text in costs(), a in string(), b in string(), c in string()) {
        let table = match CostTable::parse(&text, "random.costs") {
            Ok(t) => t,
            // Plane distances plus a constant are a metric, but the 5 of the defaults may
            // be too small for far-apart points: such tables are rightly refused.
            Err(e) => { prop_assert!(e.to_string().contains("triangle"), "{}", e); return Ok(()); }
        };
        let m = WeightedEdit::new(table);
        let d = |x: &str, y: &str| m.distance(x.as_bytes(), y.as_bytes());
        let tol = 1e-9;
        prop_assert_eq!(d(&a, &a), 0.0);
        prop_assert!((d(&a, &b) - d(&b, &a)).abs() < tol);
        if a != b { prop_assert!(d(&a, &b) > 0.0); }
        prop_assert!(d(&a, &c) <= d(&a, &b) + d(&b, &c) + tol);
        let q = m.prepare(a.as_bytes());
        let ab = d(&a, &b);
        prop_assert!((q.distance_within(b.as_bytes(), ab + tol).unwrap() - ab).abs() < tol);
        if ab > 0.01 { prop_assert_eq!(q.distance_within(b.as_bytes(), ab - 0.01), None); }
    }
}
