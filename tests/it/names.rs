//! Name normalisations (`--fold-punct`, `--sort-tokens`): what they make of names, that an
//! index stores them and applies them to every query, that `inspect` shows them, that indexes
//! without them are written as before, that exact answers under them equal a brute force,
//! and that inputs they do not fit are refused.

use predicates::prelude::*;
use serde::Deserialize;
use waymark::ingest::{read_corpus_from, IngestOptions, InputFormat, Normalize};

use crate::util::{json_lines, section, Dir};

const PUNCT: Normalize = Normalize {
    fold_case: false,
    trim: false,
    fold_punct: true,
    sort_tokens: false,
};

#[test]
fn fold_punct_turns_punctuation_into_single_spaces_and_keeps_symbols() {
    // Expected forms written by hand from the rule: Unicode punctuation (general category P)
    // to a space, runs of white space to one, ends trimmed.
    for (given, want) in [
        ("Keth-Marine, Ltd.", "Keth Marine Ltd"),
        ("  Keth   Marine\tSupply ", "Keth Marine Supply"),
        (
            "Størk’s «Fish» Merchants – Skär",
            "Størk s Fish Merchants Skär",
        ),
        ("Orm & Tolle (Rope)", "Orm Tolle Rope"),
        ("A+B $5 ©", "A+B $5 ©"),
        ("plain name", "plain name"),
        ("...", ""),
    ] {
        assert_eq!(PUNCT.apply(given), want, "{given:?}");
    }
    // Unchanged text is borrowed, not copied.
    assert!(matches!(
        PUNCT.apply("plain name"),
        std::borrow::Cow::Borrowed(_)
    ));
}

#[test]
fn sort_tokens_makes_word_order_not_count() {
    let n = Normalize {
        fold_case: true,
        sort_tokens: true,
        ..Normalize::default()
    };
    assert_eq!(n.apply("Marine Supply Keth"), "keth marine supply");
    assert_eq!(n.apply(" keth  SUPPLY marine "), "keth marine supply");
    assert_eq!(n.apply(""), "");
    // Byte order after lower-casing: "ø" (U+00F8) after ASCII letters.
    assert_eq!(n.apply("Øra Amber"), "amber øra");
}

#[test]
fn an_item_of_only_punctuation_is_a_blank_record() {
    let o = IngestOptions {
        format: Some(InputFormat::Text),
        normalize: PUNCT,
        ..Default::default()
    };
    let c = read_corpus_from(&b"Keth Marine\n-- . --\nOrm, Tolle\n"[..], "n.txt", &o).unwrap();
    assert_eq!(c.items, ["Keth Marine", "Orm, Tolle"]);
    assert_eq!(c.blank_skipped, 1);
}

#[test]
fn metadata_written_before_the_new_fields_still_reads() {
    // An index's normalisation as files written before these options hold it.
    let old: Normalize = serde_json::from_str(r#"{"fold_case":true,"trim":false}"#).unwrap();
    assert_eq!(
        old,
        Normalize {
            fold_case: true,
            ..Normalize::default()
        }
    );
    // Options left off are not written, so such files (and the eval cache's keys) stay
    // byte for byte as before.
    assert_eq!(
        serde_json::to_string(&old).unwrap(),
        r#"{"fold_case":true,"trim":false}"#
    );
    let all = Normalize {
        fold_punct: true,
        sort_tokens: true,
        ..old
    };
    let back: Normalize = serde_json::from_str(&serde_json::to_string(&all).unwrap()).unwrap();
    assert_eq!(back, all);
}

#[derive(Deserialize)]
struct Answer {
    neighbors: Vec<Hit>,
}

#[derive(Deserialize)]
struct Hit {
    id: serde_json::Value,
    item: String,
    distance: f64,
}

const TRADERS: &str = "code,name\n\
    T1,Keth Marine Supply\n\
    T2,\"Marine Supply, Keth\"\n\
    T3,Orm & Tolle Rope\n\
    T4,Keth Rope Works\n\
    T5,KETH MARINE-SUPPLY\n";

#[test]
fn the_index_stores_the_normalisation_and_applies_it_to_queries() {
    let d = Dir::new();
    let input = d.write("traders.csv", TRADERS.as_bytes());
    let idx = d.build(
        &input,
        "t.wmk",
        &[
            "--field",
            "name",
            "--id-field",
            "code",
            "--dim",
            "3",
            "-q",
            "--fold-case",
            "--fold-punct",
            "--sort-tokens",
        ],
    );
    // A query in another order, case and punctuation is the same name: three entries tie at
    // 0 and come out by id, items shown as given.
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["-k", "4", "--exact"])
        .write_stdin("supply (MARINE) keth\n")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let a: Vec<Answer> = json_lines(&out);
    let got: Vec<(String, f64)> = a[0]
        .neighbors
        .iter()
        .map(|h| (h.id.as_str().unwrap().to_string(), h.distance))
        .collect();
    assert_eq!(
        &got[..3],
        [("T1".into(), 0.0), ("T2".into(), 0.0), ("T5".into(), 0.0)]
    );
    assert!(got[3].1 > 0.0);
    assert_eq!(a[0].neighbors[1].item, "Marine Supply, Keth");
    // A range query at 0 gives the same three, in the same order.
    let out = d
        .cmd()
        .arg("query")
        .arg(&idx)
        .args(["--within", "0"])
        .write_stdin("Keth Marine Supply\n")
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let a: Vec<Answer> = json_lines(&out);
    let ids: Vec<&str> = a[0]
        .neighbors
        .iter()
        .map(|h| h.id.as_str().unwrap())
        .collect();
    assert_eq!(ids, ["T1", "T2", "T5"]);
    // inspect shows the normalisation, in text and JSON.
    d.cmd()
        .arg("inspect")
        .arg(&idx)
        .assert()
        .success()
        .stdout(predicate::str::contains(
            "fold-case true, trim false, fold-punct true, sort-tokens true",
        ));
    let json = d
        .cmd()
        .args(["inspect", "--json"])
        .arg(&idx)
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let v: serde_json::Value = serde_json::from_slice(&json).unwrap();
    let text = v.to_string();
    assert!(text.contains(r#""fold_punct":true"#), "{text}");
    assert!(text.contains(r#""sort_tokens":true"#), "{text}");
}

#[test]
fn an_index_without_the_new_options_has_no_new_metadata_fields() {
    let d = Dir::new();
    let input = d.write("traders.csv", TRADERS.as_bytes());
    let idx = d.build(
        &input,
        "t.wmk",
        &["--field", "name", "--dim", "2", "-q", "--fold-case"],
    );
    let bytes = std::fs::read(&idx).unwrap();
    let meta: serde_json::Value = serde_json::from_slice(&bytes[section(&bytes, 1)]).unwrap();
    assert_eq!(
        meta["normalize"],
        serde_json::json!({"fold_case": true, "trim": false}),
        "{meta}"
    );
}

#[test]
fn bad_input_name_normalisations_on_vectors_or_graphs_are_refused() {
    let d = Dir::new();
    let vectors = d.write("v.csv", b"1,2\n3,4\n");
    let edges = d.write("e.txt", b"a b 1\n");
    for (input, metric) in [(&vectors, "l2"), (&edges, "graph")] {
        for flag in ["--fold-punct", "--sort-tokens"] {
            d.cmd()
                .arg("build")
                .arg(input)
                .args(["-o", "x.wmk", "--metric", metric, flag])
                .assert()
                .code(2)
                .stderr(predicate::str::contains(
                    "--sort-tokens are for text inputs",
                ));
            assert!(!d.path("x.wmk").exists());
        }
    }
}

#[test]
fn the_trading_register_is_regenerated_byte_for_byte() {
    // The generator (Python 3 standard library, fixed seed) writes into a temp folder; its
    // output must equal the committed files.
    let d = Dir::new();
    let out = std::process::Command::new("python3")
        .arg(crate::util::repo_file("demo-data/generate_traders.py"))
        .arg(d.path(""))
        .output()
        .expect("python3 runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    for f in ["traders.csv", "traders-truth.csv"] {
        let made = std::fs::read(d.path(f)).unwrap();
        let kept = std::fs::read(crate::util::demo(f)).unwrap();
        assert!(made == kept, "{f} differs from what the generator writes");
    }
}

/// `examples/name_matching.rs` measures every pair of the trading register; whatever the
/// radius, sorting the words puts every word-order variant at distance 0 from its original.
#[test]
fn the_name_matching_example_finds_every_swap_once_words_are_sorted() {
    // Integration tests live in target/<profile>/deps; cargo builds examples beside it.
    let exe = std::env::current_exe().unwrap();
    let examples = exe.parent().unwrap().parent().unwrap().join("examples");
    let bin = examples.join(format!("name_matching{}", std::env::consts::EXE_SUFFIX));
    assert!(
        bin.exists(),
        "{} not built (cargo test builds examples)",
        bin.display()
    );
    let out = std::process::Command::new(&bin).output().unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{stdout}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let truth = std::fs::read_to_string(crate::util::demo("traders-truth.csv")).unwrap();
    let swaps = truth.lines().filter(|l| l.ends_with(",swap")).count();
    let rows: Vec<Vec<&str>> = stdout
        .lines()
        .filter(|l| l.contains("--sort-tokens"))
        .map(|l| l.split('|').map(str::trim).collect())
        .collect();
    assert_eq!(rows.len(), 8, "{stdout}");
    for r in rows {
        // | choice | R | pairs | same-firm | precision | recall | typo | case | swap | …
        assert_eq!(r[9], format!("{swaps}/{swaps}"), "{r:?}");
    }
}
