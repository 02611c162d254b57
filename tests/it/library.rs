//! The library as another crate uses it: a metric written in Rust builds and answers from a
//! real index; public functions refuse what they cannot do instead of panicking.

use std::io::Cursor;

use proptest::prelude::*;
use waymark::index::{build_index, build_index_with_metric, BuildOptions, Index};
use waymark::ingest::{read_corpus_from, Corpus, IngestOptions};
use waymark::metric::{CustomMetric, Metric, PreparedQuery};
use waymark::search::order::{keep_best, Neighbor};
use waymark::search::{SearchParams, Searcher};

/// strsim's Levenshtein (a general-purpose reference crate, counting chars) as a metric of
/// the library user's own.
struct Strsim;
struct StrsimQuery(String);

impl Metric for Strsim {
    type Prepared = StrsimQuery;
    fn name(&self) -> &str {
        "strsim-levenshtein"
    }
    fn is_integral(&self) -> bool {
        true
    }
    fn prepare(&self, q: &[u8]) -> StrsimQuery {
        StrsimQuery(String::from_utf8_lossy(q).into_owned())
    }
}

impl PreparedQuery for StrsimQuery {
    fn distance(&self, item: &[u8]) -> f64 {
        strsim::levenshtein(&self.0, &String::from_utf8_lossy(item)) as f64
    }
}

/// Same name, other answer to `is_integral`: must be refused at open.
struct Fractional;
impl Metric for Fractional {
    type Prepared = StrsimQuery;
    fn name(&self) -> &str {
        "strsim-levenshtein"
    }
    fn prepare(&self, q: &[u8]) -> StrsimQuery {
        Strsim.prepare(q)
    }
}

fn corpus(items: &[String]) -> Corpus {
    read_corpus_from(
        Cursor::new(items.join("\n")),
        "test",
        &IngestOptions::default(),
    )
    .expect("corpus")
}

/// Every item as (distance, item number) in answer order, by strsim.
fn brute(items: &[String], q: &str) -> Vec<(f64, u32)> {
    let mut all: Vec<(f64, u32)> = items
        .iter()
        .enumerate()
        .map(|(i, s)| (strsim::levenshtein(q, s) as f64, i as u32))
        .collect();
    all.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
    all
}

fn pairs(n: &[Neighbor]) -> Vec<(f64, u32)> {
    n.iter().map(|n| (n.distance, n.index)).collect()
}

fn word() -> impl Strategy<Value = String> {
    "[a-eé]{1,7}"
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(24))]

    /// A metric written in Rust against the library: exact and range answers, and
    /// approximate answers with every item a candidate, equal strsim's brute force.
    #[test]
    fn a_custom_metric_answers_like_brute_force(
        items in proptest::collection::vec(word(), 1..80),
        queries in proptest::collection::vec(word(), 1..4),
        k in 1usize..6,
        r in 0u32..4,
    ) {
        let items: Vec<String> = items;
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("c.wmk");
        let metric = CustomMetric::new(Strsim);
        let opts = BuildOptions { dim: 4, seed: 3, ..BuildOptions::default() };
        build_index_with_metric(&corpus(&items), "test", &opts, &metric, &path, &()).unwrap();
        let index = Index::open_with_metric(&path, &metric).unwrap();
        let s = Searcher::new(&index);
        for q in &queries {
            let truth = brute(&items, q);
            let k = k.min(items.len());
            let exact = s.search_exact(q, k, &mut Default::default()).unwrap();
            prop_assert_eq!(pairs(&exact.neighbors), truth[..k].to_vec());
            let within = s.search_within(q, f64::from(r), None, &mut Default::default()).unwrap();
            let want: Vec<(f64, u32)> = truth.iter().copied().filter(|p| p.0 <= f64::from(r)).collect();
            prop_assert_eq!(pairs(&within.neighbors), want);
            let p = SearchParams::from_index(&index, k).with_candidates(items.len());
            let approx = s.search(q, &p, &mut Default::default()).unwrap();
            prop_assert_eq!(pairs(&approx.neighbors), truth[..k].to_vec());
        }
    }
}

/// The index records the metric's name: a plain open cannot make the metric and says so,
/// another metric (or the same name with other distances) is refused at open, and a
/// built-in index is not opened as a custom one.
#[test]
fn a_custom_index_opens_only_with_its_metric() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("c.wmk");
    let items: Vec<String> = ["ferry", "fairy", "berry", "buoy"]
        .map(String::from)
        .to_vec();
    let metric = CustomMetric::new(Strsim);
    build_index_with_metric(
        &corpus(&items),
        "test",
        &BuildOptions::default(),
        &metric,
        &path,
        &(),
    )
    .unwrap();

    let plain = Index::open(&path).unwrap();
    let err = plain.metric().map(|_| ()).unwrap_err().to_string();
    assert!(
        err.contains("custom metric `strsim-levenshtein`") && err.contains("open_with_metric"),
        "{err}"
    );
    assert_eq!(plain.meta().metric.name(), "custom");

    struct Other;
    impl Metric for Other {
        type Prepared = StrsimQuery;
        fn name(&self) -> &str {
            "quay"
        }
        fn prepare(&self, q: &[u8]) -> StrsimQuery {
            Strsim.prepare(q)
        }
    }
    let err = Index::open_with_metric(&path, &CustomMetric::new(Other))
        .err()
        .expect("refused")
        .to_string();
    assert!(
        err.contains("built with the custom metric `strsim-levenshtein`, not `quay`"),
        "{err}"
    );
    let err = Index::open_with_metric(&path, &CustomMetric::new(Fractional))
        .err()
        .expect("refused")
        .to_string();
    assert!(err.contains("whole distances"), "{err}");

    let lev = dir.path().join("l.wmk");
    build_index(
        &corpus(&items),
        "test",
        &BuildOptions::default(),
        &lev,
        &|_| {},
    )
    .unwrap();
    let err = Index::open_with_metric(&lev, &metric)
        .err()
        .expect("refused")
        .to_string();
    assert!(err.contains("built with the levenshtein metric"), "{err}");
}

/// `examples/custom_metric.rs` builds an index with its own metric and checks its exact,
/// range and all-candidate answers against a brute force; it exits non-zero on a
/// difference.
#[test]
fn the_custom_metric_example_runs() {
    // Integration tests live in target/<profile>/deps; cargo builds examples beside it.
    let exe = std::env::current_exe().unwrap();
    let examples = exe.parent().unwrap().parent().unwrap().join("examples");
    let bin = examples.join(format!("custom_metric{}", std::env::consts::EXE_SUFFIX));
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
    assert!(
        stdout.contains("5 queries: exact, range and all-candidate answers equal the brute force"),
        "{stdout}"
    );
    assert!(stdout.contains("custom metric `buoy`"), "{stdout}");
}

/// k = 0 keeps nothing (it used to index `best[k − 1]` and panic).
#[test]
fn keep_best_with_k_zero_keeps_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("l.wmk");
    let items: Vec<String> = ["ferry", "fairy"].map(String::from).to_vec();
    build_index(
        &corpus(&items),
        "test",
        &BuildOptions::default(),
        &path,
        &|_| {},
    )
    .unwrap();
    let index = Index::open(&path).unwrap();
    let mut best = Vec::new();
    let n = Neighbor {
        index: 0,
        distance: 1.0,
    };
    keep_best(&index, &mut best, 0, n);
    assert!(best.is_empty());
    keep_best(&index, &mut best, 1, n);
    assert_eq!(best, [n]);
}

/// `add`, and what writes the live items as one index (`compact`, `pairs` after a
/// `remove`), cannot run a metric of the library's caller: refused by name, nothing changed.
#[test]
fn a_custom_index_refuses_add_and_compact_with_the_metric_named() {
    use predicates::prelude::PredicateBooleanExt;
    use predicates::str::contains;
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("c.wmk");
    let items: Vec<String> = ["ferry", "fairy", "berry", "buoy", "quay"]
        .map(String::from)
        .to_vec();
    let metric = CustomMetric::new(Strsim);
    build_index_with_metric(
        &corpus(&items),
        "test",
        &BuildOptions::default(),
        &metric,
        &path,
        &(),
    )
    .unwrap();
    let more = dir.path().join("more.txt");
    std::fs::write(&more, "jetty\n").unwrap();
    let before = std::fs::read(&path).unwrap();
    crate::util::waymark()
        .arg("add")
        .arg(&path)
        .arg(&more)
        .assert()
        .failure()
        .code(2)
        .stderr(
            contains("cannot be added to an index of a metric of your own")
                .and(contains("`strsim-levenshtein`")),
        );
    assert_eq!(std::fs::read(&path).unwrap(), before);
    assert!(!dir.path().join("c.wmk.parts").exists());
    let gone = dir.path().join("gone.txt");
    std::fs::write(&gone, "1\n").unwrap();
    crate::util::waymark()
        .arg("remove")
        .arg(&path)
        .arg("--ids")
        .arg(&gone)
        .assert()
        .success();
    let list = std::fs::read(&path).unwrap();
    for args in [&["compact"][..], &["pairs", "--within", "1"]] {
        crate::util::waymark()
            .arg(args[0])
            .arg(&path)
            .args(&args[1..])
            .assert()
            .failure()
            .code(2)
            .stderr(
                contains("an index in parts of a metric of your own (`strsim-levenshtein`)")
                    .and(contains("build a new index from the items kept")),
            );
    }
    assert_eq!(std::fs::read(&path).unwrap(), list);
}
