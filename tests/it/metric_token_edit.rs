//! The token edit distance (`--metric token-edit`): its word cost against
//! `strsim::levenshtein` and the published normalisation, its word-level program against
//! `strsim::generic_levenshtein` (a general-purpose crate's edit distance over any sequence),
//! the metric axioms, `check-metric`, and exact answers against a brute force.

use std::collections::HashMap;

use predicates::prelude::*;
use proptest::prelude::*;
use serde::Deserialize;
use waymark::metric::{
    normalized_levenshtein, Levenshtein, Metric, MetricKind, MetricSpec, PreparedQuery, TokenEdit,
    TOLERANCE,
};

use crate::util::{demo, json_lines, waymark, Dir};

/// Words that share letters, so that substitutions of every cost occur.
const WORDS: &[&str] = &[
    "keth", "kath", "keth", "marine", "marime", "supply", "suply", "&", "co", "ltd", "ø", "skär",
    "skar", "a", "ab", "ba",
];

fn words() -> impl Strategy<Value = Vec<&'static str>> {
    prop::collection::vec(prop::sample::select(WORDS), 0..7)
}

/// Words joined by varying white space (one or two spaces, a tab), as items are written.
fn item(ws: &[&str], seps: &[u8]) -> String {
    let mut s = String::new();
    for (i, w) in ws.iter().enumerate() {
        if i > 0 {
            s.push_str(match seps.get(i).copied().unwrap_or(0) % 3 {
                0 => " ",
                1 => "  ",
                _ => "\t",
            });
        }
        s.push_str(w);
    }
    s
}

/// Yujian and Bo's normalised Levenshtein distance, 2L/(|a|+|b|+L), with L from strsim.
fn nld_reference(a: &str, b: &str) -> f64 {
    let l = strsim::levenshtein(a, b) as f64;
    if l == 0.0 {
        0.0
    } else {
        2.0 * l / (a.chars().count() as f64 + b.chars().count() as f64 + l)
    }
}

proptest! {
    #[test]
    fn one_word_items_cost_the_normalised_levenshtein_distance(
        a in "[a-cø]{1,12}", b in "[a-cø]{1,12}",
    ) {
        // Outside reference: strsim::levenshtein, normalised by the published formula.
        let want = nld_reference(&a, &b);
        prop_assert_eq!(normalized_levenshtein(a.as_bytes(), b.as_bytes()), want);
        prop_assert_eq!(TokenEdit.distance(a.as_bytes(), b.as_bytes()), want);
        prop_assert!((0.0..=1.0).contains(&want));
    }

    #[test]
    fn lies_between_bounds_from_strsim_generic_levenshtein(
        a in words(), b in words(), sa in prop::collection::vec(any::<u8>(), 7),
    ) {
        // strsim::generic_levenshtein counts word edits at unit cost: G. Our word costs are at
        // most 1, so d ≤ G; every edit of our cheapest alignment costs at least the smallest
        // cost c of two different words here (or 1), and it has at least G of them, so
        // d ≥ min(1, c)·G.
        let g = strsim::generic_levenshtein(&a, &b) as f64;
        let c = a
            .iter()
            .flat_map(|x| b.iter().map(move |y| (x, y)))
            .filter(|(x, y)| x != y)
            .map(|(x, y)| nld_reference(x, y))
            .fold(1.0, f64::min);
        let d = TokenEdit.distance(item(&a, &sa).as_bytes(), b.join(" ").as_bytes());
        prop_assert!(d <= g + TOLERANCE, "{d} > {g}");
        prop_assert!(d >= c * g - TOLERANCE, "{d} < {c}·{g}");
        // When one side has no words both are the other's word count.
        if a.is_empty() || b.is_empty() {
            prop_assert_eq!(d, g);
        }
    }

    #[test]
    fn metric_axioms(
        a in words(), b in words(), c in words(), sa in prop::collection::vec(any::<u8>(), 7),
    ) {
        let (x, y, z) = (item(&a, &sa), b.join(" "), c.join("  "));
        let d = |p: &str, q: &str| TokenEdit.distance(p.as_bytes(), q.as_bytes());
        prop_assert_eq!(d(&x, &x), 0.0);
        prop_assert_eq!(d(&x, &y), d(&y, &x));
        // Zero exactly when the word sequences are equal (a pseudometric on the items).
        prop_assert_eq!(d(&x, &y) == 0.0, a == b);
        let tol = |v: f64| TOLERANCE * v.max(1.0);
        prop_assert!(d(&x, &z) <= d(&x, &y) + d(&y, &z) + tol(d(&x, &z)));
        prop_assert!(d(&y, &z) <= d(&y, &x) + d(&x, &z) + tol(d(&y, &z)));
        prop_assert!(d(&x, &y) <= d(&x, &z) + d(&z, &y) + tol(d(&x, &y)));
        // The bounded form agrees with the distance.
        let q = TokenEdit.prepare(x.as_bytes());
        let e = q.distance(y.as_bytes());
        prop_assert_eq!(q.distance_within(y.as_bytes(), e), Some(e));
        if e > 0.0 {
            prop_assert_eq!(q.distance_within(y.as_bytes(), e * (1.0 - 1e-12)), None);
        }
    }
}

#[test]
fn a_moved_word_costs_two_where_levenshtein_charges_its_length() {
    // Worked by hand: delete "Keth" at the front, insert it at the end. Substituting word for
    // word costs c(Keth, Marine) + c(Marine, Supply) + c(Supply, Keth) = 0.75 + 2/3 + 0.75
    // (L = 6 each, from strsim below), more than 2.
    let (a, b) = ("Keth Marine Supply", "Marine Supply Keth");
    assert_eq!(strsim::levenshtein("Keth", "Marine"), 6);
    assert_eq!(strsim::levenshtein("Marine", "Supply"), 6);
    assert_eq!(strsim::levenshtein("Supply", "Keth"), 6);
    assert_eq!(TokenEdit.distance(a.as_bytes(), b.as_bytes()), 2.0);
    // Char-level Levenshtein (strsim) charges the move 10 edits.
    assert_eq!(strsim::levenshtein(a, b), 10);
    assert_eq!(Levenshtein.distance(a.as_bytes(), b.as_bytes()), 10.0);
    assert_eq!(
        MetricSpec::TokenEdit.open(None).unwrap().kind(),
        MetricKind::TokenEdit
    );
}

/// code -> (firm, kind), as `traders-truth.csv` has them.
type Truth = HashMap<String, (String, String)>;

/// (code, name) of the bundled trading register, and its truth.
fn traders() -> (Vec<(String, String)>, Truth) {
    let mut rows = Vec::new();
    let mut r = csv::Reader::from_path(demo("traders.csv")).unwrap();
    for rec in r.records() {
        let rec = rec.unwrap();
        rows.push((rec[0].to_string(), rec[1].to_string()));
    }
    let text = std::fs::read_to_string(demo("traders-truth.csv")).unwrap();
    let truth = text
        .lines()
        .skip(1)
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            (f[0].to_string(), (f[1].to_string(), f[2].to_string()))
        })
        .collect();
    (rows, truth)
}

#[test]
fn check_metric_passes_on_the_trading_register() {
    for extra in [&[][..], &["--sort-tokens"][..]] {
        waymark()
            .arg("check-metric")
            .arg(demo("traders.csv"))
            .args([
                "--field",
                "name",
                "--metric",
                "token-edit",
                "--fold-case",
                "--fold-punct",
            ])
            .args(extra)
            .args(["--sample", "120"])
            .assert()
            .success()
            .stdout(predicate::str::contains("no violation on this sample"));
    }
}

#[derive(Deserialize)]
struct Answer {
    query: String,
    neighbors: Vec<Hit>,
}

#[derive(Deserialize)]
struct Hit {
    item: String,
    distance: f64,
}

#[test]
fn exact_answers_match_a_brute_force_on_the_register() {
    // Built through the command line; the reference is a brute force over the items with
    // the same normalisation, written here from the definitions (lower case, words sorted).
    let (rows, _) = traders();
    let d = Dir::new();
    let index = d.build(
        &demo("traders.csv"),
        "t.wmk",
        &[
            "--field",
            "name",
            "--id-field",
            "code",
            "--metric",
            "token-edit",
            "--fold-case",
            "--sort-tokens",
            "--dim",
            "16",
            "-q",
        ],
    );
    let form = |s: &str| {
        let lower = s.to_lowercase();
        let mut w: Vec<&str> = lower.split_whitespace().collect();
        w.sort_unstable();
        w.join(" ")
    };
    let forms: Vec<String> = rows.iter().map(|(_, n)| form(n)).collect();
    let queries: Vec<String> = rows
        .iter()
        .step_by(97)
        .map(|(_, n)| n.to_uppercase())
        .collect();
    let out = waymark()
        .arg("query")
        .arg(&index)
        .args(["-k", "4", "--exact"])
        .write_stdin(queries.join("\n") + "\n")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let answers: Vec<Answer> = json_lines(&out);
    assert_eq!(answers.len(), queries.len());
    for a in answers {
        let q = TokenEdit.prepare(form(&a.query).as_bytes());
        let mut want: Vec<f64> = forms.iter().map(|f| q.distance(f.as_bytes())).collect();
        want.sort_by(f64::total_cmp);
        let got: Vec<f64> = a.neighbors.iter().map(|h| h.distance).collect();
        assert_eq!(got.len(), 4);
        for (g, w) in got.iter().zip(&want) {
            assert!(
                (g - w).abs() <= 1e-9,
                "{}: {got:?} vs {:?}",
                a.query,
                &want[..4]
            );
        }
        // Its own entry is among the answers at distance 0 (upper case folded).
        assert_eq!(got[0], 0.0, "{}", a.query);
        assert!(
            a.neighbors.iter().any(|h| h.item.to_uppercase() == a.query),
            "{}",
            a.query
        );
    }
}

#[test]
fn sorted_tokens_and_token_edit_find_the_swapped_names_levenshtein_misses() {
    // The planted truth fixes which entries are word-order variants of which original; the
    // pairs plain Levenshtein misses within R = 2 must all be within R for Levenshtein after
    // --sort-tokens and within 2 (one deletion and one insertion) for token-edit.
    let (rows, truth) = traders();
    let name: HashMap<&str, &str> = rows.iter().map(|(c, n)| (c.as_str(), n.as_str())).collect();
    let original: HashMap<&str, &str> = truth
        .iter()
        .filter(|(_, (_, k))| k == "original")
        .map(|(c, (f, _))| (f.as_str(), c.as_str()))
        .collect();
    let sorted = waymark::ingest::Normalize {
        sort_tokens: true,
        ..Default::default()
    };
    let (mut swaps, mut missed) = (0, 0);
    for (code, (firm, kind)) in &truth {
        if kind != "swap" {
            continue;
        }
        swaps += 1;
        let (a, b) = (name[original[firm.as_str()]], name[code.as_str()]);
        if Levenshtein.distance(a.as_bytes(), b.as_bytes()) <= 2.0 {
            continue;
        }
        missed += 1;
        let (sa, sb) = (sorted.apply(a), sorted.apply(b));
        assert!(
            Levenshtein.distance(sa.as_bytes(), sb.as_bytes()) <= 2.0,
            "--sort-tokens misses {a:?} / {b:?}"
        );
        assert!(
            TokenEdit.distance(a.as_bytes(), b.as_bytes()) <= 2.0,
            "token-edit misses {a:?} / {b:?}"
        );
    }
    // The register must hold such pairs, or this test would check nothing.
    assert!(swaps >= 100, "{swaps} swap variants");
    assert!(
        missed * 10 >= swaps * 9,
        "Levenshtein missed only {missed} of {swaps}"
    );
}
