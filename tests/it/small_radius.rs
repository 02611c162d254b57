//! The deletion-variant table (`build --small-radius R`): range queries, exact k-NN and
//! pairs through it give the answers of brute force and of the column blocks; a damaged or
//! crafted table is refused.
//!
//! References: Debian's wamerican word list (`util::WORD_LIST`) and strsim, a general-purpose
//! string-distance crate (`levenshtein`, `damerau_levenshtein`, the unrestricted form, and
//! `hamming`).

use predicates::str::contains;
use waymark::eval::typo_queries;
use waymark::index::{BuildOptions, IdRef, Index};
use waymark::metric::MetricSpec;
use waymark::pairs::{JoinBy, JoinPath, Pair, Radius, SelfJoin};
use waymark::search::{Neighbor, Request, Scratch, Searcher};

use crate::util::{build_in, corpus, first_words, fix_checksums, section, word_list, Dir};

/// Section kind of the table (DEVELOPERS.md, "The index file").
const VARIANTS: u32 = 14;

fn opts(metric: MetricSpec, small: Option<u32>) -> BuildOptions {
    BuildOptions {
        metric,
        dim: 16,
        seed: 3,
        small_radius: small,
        ..BuildOptions::default()
    }
}

/// Every item within `r` of `q` by `dist`, in the answer order (distance, id, item).
fn brute(idx: &Index, q: &str, r: f64, dist: &dyn Fn(&str, &str) -> usize) -> Vec<Neighbor> {
    let mut v: Vec<(usize, IdRef<'_>, u32)> = (0..idx.len())
        .filter_map(|i| {
            let d = dist(q, std::str::from_utf8(idx.key(i)).unwrap());
            (d as f64 <= r).then_some((d, idx.id(i), i as u32))
        })
        .collect();
    v.sort();
    v.into_iter()
        .map(|(d, _, i)| Neighbor {
            index: i,
            distance: d as f64,
        })
        .collect()
}

/// Checks range queries (radius 0, 1, 1.5 and 2, one at a time and in bulk) and exact
/// 10-NN queries of an index with a table against brute force by `dist`.
fn check_against_brute(idx: &Index, queries: &[String], dist: &dyn Fn(&str, &str) -> usize) {
    let s = Searcher::new(idx);
    let mut scratch = Scratch::default();
    let table = idx.variants().unwrap().expect("a table");
    for r in [0.0, 1.0, 1.5, 2.0] {
        let bulk = s.answer_many(queries, &Request::Within { radius: r, k: None });
        for (q, b) in queries.iter().zip(bulk) {
            let want = brute(idx, q, r, dist);
            let got = s.search_within(q, r, None, &mut scratch).unwrap();
            assert_eq!(got.neighbors, want, "{q:?} within {r}");
            assert_eq!(b.unwrap().neighbors, want, "{q:?} within {r}, in bulk");
            if f64::from(table.radius()) >= r.floor() {
                // Through the table: no landmark distances, the bound just past the radius.
                let c = got.certificate.unwrap();
                assert_eq!(got.distances, c.computed);
                assert_eq!(c.bound, Some(r.floor() + 1.0));
                assert_eq!(c.examined + got.pruned, idx.len());
            }
        }
    }
    // Exact 10-NN: the ten first of the brute-force order over every item.
    for q in queries.iter().take(60) {
        let mut all = brute(idx, q, f64::INFINITY, dist);
        all.truncate(10);
        let got = s.search_exact(q, 10, &mut scratch).unwrap();
        assert_eq!(got.neighbors, all, "{q:?} exact 10-NN");
        let c = got.certificate.unwrap();
        assert!(c.bound.is_none_or(|b| b >= all[9].distance));
    }
}

#[test]
fn range_and_exact_answers_through_the_table_equal_brute_force_on_debian_words() {
    let words = first_words(20_000);
    let dir = tempfile::tempdir().unwrap();
    let idx = build_in(
        dir.path(),
        "w.wmk",
        &corpus(&words),
        &opts(MetricSpec::Levenshtein, Some(2)),
    );
    let mut queries = typo_queries(&words, 150, 11);
    queries.extend(["", "a", "zz", "Zürich", "antidisestablishment"].map(String::from));
    check_against_brute(&idx, &queries, &|a, b| strsim::levenshtein(a, b));
    // A table of radius 1 answers radius 1 itself and leaves radius 2 to the column blocks.
    let one = build_in(
        dir.path(),
        "w1.wmk",
        &corpus(&words),
        &opts(MetricSpec::Levenshtein, Some(1)),
    );
    check_against_brute(&one, &queries[..60], &|a, b| strsim::levenshtein(a, b));
}

#[test]
fn the_table_is_exact_for_damerau_and_hamming_too() {
    let words = first_words(6_000);
    let dir = tempfile::tempdir().unwrap();
    let idx = build_in(
        dir.path(),
        "d.wmk",
        &corpus(&words),
        &opts(MetricSpec::Damerau, Some(2)),
    );
    // Transpositions included: swapped neighbours are one edit under Damerau.
    let mut queries = typo_queries(&words, 80, 5);
    queries.extend(["Aarnoh", "baduoin", "abcuts"].map(String::from));
    check_against_brute(&idx, &queries, &|a, b| strsim::damerau_levenshtein(a, b));

    // Hamming: the six-letter words of the list.
    let six: Vec<String> = word_list()
        .lines()
        .filter(|w| w.chars().count() == 6)
        .take(8_000)
        .map(str::to_string)
        .collect();
    let idx = build_in(
        dir.path(),
        "h.wmk",
        &corpus(&six),
        &opts(MetricSpec::Hamming { length: 0 }, Some(2)),
    );
    let queries: Vec<String> = typo_queries(&six, 300, 9)
        .into_iter()
        .filter(|q| q.chars().count() == 6)
        .take(80)
        .collect();
    assert!(queries.len() > 20);
    check_against_brute(&idx, &queries, &|a, b| strsim::hamming(a, b).unwrap());
}

fn join(idx: &Index, r: Radius, by: JoinBy) -> (Vec<Pair>, JoinPath) {
    let j = SelfJoin::with(idx, r, by).unwrap();
    let path = j.path();
    (j.collect_all().unwrap().0, path)
}

#[test]
fn pairs_through_a_table_are_the_pairs_of_the_column_blocks_in_the_same_order() {
    // Words of at most 10 chars, so that a fraction of 0.2 needs at most 2 edits.
    let words: Vec<String> = first_words(14_000)
        .into_iter()
        .filter(|w| w.chars().count() <= 10)
        .collect();
    let dir = tempfile::tempdir().unwrap();
    let plain = build_in(
        dir.path(),
        "p.wmk",
        &corpus(&words),
        &opts(MetricSpec::Levenshtein, None),
    );
    let stored = build_in(
        dir.path(),
        "s.wmk",
        &corpus(&words),
        &opts(MetricSpec::Levenshtein, Some(2)),
    );
    for r in [
        Radius::Fixed(0.0),
        Radius::Fixed(1.0),
        Radius::Fixed(2.0),
        Radius::Fraction(0.2),
    ] {
        let (want, path) = join(&plain, r, JoinBy::Columns);
        assert_eq!(path, JoinPath::Columns);
        let (built, path) = join(&plain, r, JoinBy::Auto);
        assert!(
            matches!(path, JoinPath::BuiltVariants { .. }),
            "{r:?}: {path:?}"
        );
        assert_eq!(built, want, "{r:?}: built in memory");
        let (from_file, path) = join(&stored, r, JoinBy::Auto);
        assert_eq!(path, JoinPath::StoredVariants, "{r:?}");
        assert_eq!(from_file, want, "{r:?}: the index's table");
        // Against brute force by strsim on a sample of the pairs' first items.
        for p in want.iter().step_by(97) {
            let (a, b) = (&words[p.a as usize], &words[p.b as usize]);
            assert_eq!(strsim::levenshtein(a, b) as f64, p.distance);
        }
    }
    // Beyond radius 2 the join takes the column blocks.
    let (_, path) = join(&stored, Radius::Fixed(3.0), JoinBy::Auto);
    assert_eq!(path, JoinPath::Columns);
}

#[test]
fn the_command_line_builds_shows_and_uses_the_table() {
    let d = Dir::new();
    let words: String = first_words(3_000).join("\n");
    let input = d.write("words.txt", words.as_bytes());
    let plain = d.build(&input, "plain.wmk", &["-q"]);
    let small = d.build(&input, "small.wmk", &["-q", "--small-radius", "2"]);
    d.cmd()
        .args(["inspect"])
        .arg(&small)
        .assert()
        .success()
        .stdout(contains(
            "deletion-variant table, exact range queries and pairs up to 2",
        ))
        .stdout(contains("section     deletion-variants"));
    d.cmd()
        .args(["inspect", "--verify"])
        .arg(&small)
        .assert()
        .success();
    let queries = d.write("q.txt", b"abandn\nAbby's\nzzzz\n\n");
    for args in [
        &["--within", "1"][..],
        &["--within", "2", "-k", "3"],
        &["--exact", "-k", "5"],
        &["--within-fraction", "0.2"],
    ] {
        let run = |idx: &std::path::Path| {
            let out = d
                .cmd()
                .arg("query")
                .arg(idx)
                .arg("--queries")
                .arg(&queries)
                .args(args)
                .output()
                .unwrap();
            assert!(out.status.success());
            let v: Vec<serde_json::Value> = crate::util::json_lines(&out.stdout);
            v.into_iter()
                .map(|a| a["neighbors"].clone())
                .collect::<Vec<_>>()
        };
        assert_eq!(run(&small), run(&plain), "{args:?}");
    }
    for (cmd, r) in [("pairs", "1"), ("pairs", "2"), ("groups", "1")] {
        let run = |idx: &std::path::Path, extra: &[&str]| {
            d.cmd()
                .arg(cmd)
                .arg(idx)
                .args(["--within", r, "-q"])
                .args(extra)
                .output()
                .unwrap()
                .stdout
        };
        let want = run(&plain, &["--no-variant-table"]);
        assert!(!want.is_empty());
        assert_eq!(run(&plain, &[]), want, "{cmd} {r}: built in memory");
        assert_eq!(run(&small, &[]), want, "{cmd} {r}: the index's table");
    }
}

#[test]
fn bad_input_small_radius_out_of_range_or_on_another_metric_is_refused() {
    let d = Dir::new();
    let input = d.write("w.txt", b"quay\nkey\nstrand\n");
    for (extra, msg) in [
        (
            &["--small-radius", "3"][..],
            "--small-radius must be 1 or 2, not 3",
        ),
        (
            &["--small-radius", "0"],
            "--small-radius must be 1 or 2, not 0",
        ),
        (
            &["--small-radius", "1", "--metric", "jaccard"],
            "needs the levenshtein, damerau or hamming metric",
        ),
    ] {
        d.cmd()
            .arg("build")
            .arg(&input)
            .args(["-o", "x.wmk"])
            .args(extra)
            .assert()
            .code(2)
            .stderr(contains(msg));
        assert!(!d.path("x.wmk").exists());
    }
}

#[test]
fn bad_input_a_damaged_or_crafted_table_is_refused() {
    let d = Dir::new();
    let words: String = first_words(2_000).join("\n");
    let input = d.write("words.txt", words.as_bytes());
    let good = std::fs::read(d.build(&input, "good.wmk", &["-q", "--small-radius", "1"])).unwrap();
    let range = section(&good, VARIANTS);
    let query = |bytes: &[u8], args: &[&str]| {
        let p = d.write("bad.wmk", bytes);
        d.cmd()
            .arg("query")
            .arg(&p)
            .args(args)
            .write_stdin("abandn\n")
            .assert()
    };
    let verify = |bytes: &[u8]| {
        let p = d.write("bad.wmk", bytes);
        d.cmd().args(["inspect", "--verify"]).arg(&p).assert()
    };
    // A flipped bit in the entries, checksums left: refused on first use and by --verify.
    let mut b = good.clone();
    b[range.end - 3] ^= 0x10;
    query(&b, &["--within", "1"])
        .code(3)
        .stderr(contains("checksum mismatch in section deletion-variants"));
    verify(&b).code(3);
    // Crafted (checksums recomputed): an entry naming an item past the index.
    let mut b = good.clone();
    b[range.end - 8..range.end - 4].copy_from_slice(&5_000u32.to_le_bytes());
    fix_checksums(&mut b);
    query(&b, &["--within", "1"])
        .code(3)
        .stderr(contains("section deletion-variants is refused: entry"));
    verify(&b).code(3);
    // Crafted header: a radius of 3 is refused at open, whatever the query.
    let mut b = good.clone();
    b[range.start] = 3;
    fix_checksums(&mut b);
    query(&b, &["-k", "1"])
        .code(3)
        .stderr(contains("section deletion-variants is refused: radius 3"));
    // Crafted: one bit of the last entry's fingerprint flipped. Either the field check
    // (the bucket out of order) or --verify's rebuild (not the keys' table) refuses it.
    let mut b = good.clone();
    let last = range.end - 8;
    let e = u64::from_le_bytes(b[last..last + 8].try_into().unwrap());
    b[last..last + 8].copy_from_slice(&(e ^ (1u64 << 40)).to_le_bytes());
    fix_checksums(&mut b);
    verify(&b)
        .code(3)
        .stderr(contains("section deletion-variants is refused"));
}

#[test]
fn bad_input_a_table_beyond_the_memory_budget_is_refused_before_the_build() {
    // 200 items of 1,000 chars: about 500,000 variants each within 2 deletions (8 bytes an
    // entry: 0.8 GB), while the index itself needs some 20 MB.
    let d = Dir::new();
    let items: Vec<String> = (0..200)
        .map(|i| {
            (0..1000)
                .map(|j| char::from(b'a' + ((i * 7 + j * 13) % 26) as u8))
                .collect()
        })
        .collect();
    let input = d.write("long.txt", items.join("\n").as_bytes());
    d.cmd()
        .env("WAYMARK_MEMORY_BUDGET", "100000000")
        .arg("build")
        .arg(&input)
        .args(["-o", "x.wmk", "--small-radius", "2", "--dim", "4"])
        .assert()
        .code(2)
        .stderr(contains("with a deletion-variant table"))
        .stderr(contains("leave out --small-radius"));
    assert!(!d.path("x.wmk").exists());
    d.cmd()
        .env("WAYMARK_MEMORY_BUDGET", "100000000")
        .arg("build")
        .arg(&input)
        .args(["-o", "x.wmk", "--dim", "4", "-q", "--no-calibration"])
        .assert()
        .success();
}
