//! Recall and speed per query family, at the default settings and at asked recalls.
//!
//! Families (each queried against an index of its own list, k = 10, threshold recall@10
//! against the full scan):
//!
//! - `edits-1`, `edits-2`, `edits-3`: 1–3 random edits of random words of Debian's
//!   wamerican-insane list (663,473 words) in the list's own alphabet
//!   ([`waymark::eval::edit_queries`]), three independent seeds;
//! - `british`: words of Debian's wbritish that wamerican lacks (natural spelling variants),
//!   against wamerican (104,334 words);
//! - `french`, `german`: edits of words of Debian's wfrench and wngerman in their own
//!   (accented) alphabets, against those lists;
//! - `register`: the demo register's misspelt look-ups (`demo-data/lookups.txt`, multi-word
//!   names) against `demo-data/names.txt`;
//! - `barcodes`: reads with errors (`demo-data/barcode-reads.txt`) against
//!   `demo-data/barcodes.txt`.
//!
//! Every family has two query sets: a calibration set and a held-out set (independent
//! seeds; the british, register and barcode queries split in two at random). Printed per
//! family, on the held-out set: recall and q/s of the default (char counts on a plain
//! Levenshtein index, which hand on to the embedding where they rule out too few items), of
//! the embedding's own default, and of the embedding's defaults before the recall work (L1,
//! fewer candidates); for each asked recall (0.9,
//! 0.95, 0.99) the candidates the build's curve (from the index's own items) chose and the
//! recall reached; the same with the curve measured on the calibration set
//! (`eval --calibrate`). Beside today's landmarks (farthest-first from a sample), the
//! defaults' recall and q/s with the alternative rule (farthest-first from the sample
//! without its outliers, `build --landmark-rule trimmed`), on an index of its own.
//!
//! Run with `cargo bench --bench families`. Settings through the environment:
//! - `WAYMARK_FAMILIES` comma-separated family names [all whose lists are installed]
//! - `WAYMARK_FAMILIES_QUERIES` queries per set for generated families [500]
//!
//! Missing lists: `apt-get install -y wamerican wamerican-insane wbritish wfrench wngerman`.

use std::path::{Path, PathBuf};
use std::time::Instant;

use waymark::eval::{
    calibrate_from_items, calibrate_from_queries, edit_queries, measure_recall, scan_many,
    variants_missing_from, CalibrateOptions, Scan, Truth,
};
use waymark::index::{build_index, store_calibration, BuildOptions, Index};
use waymark::ingest::{read_corpus, IngestOptions};
use waymark::search::SearchParams;

const K: usize = 10;
const ASKED: [f64; 3] = [0.9, 0.95, 0.99];

struct Family {
    name: &'static str,
    list: PathBuf,
    calibration: Vec<String>,
    heldout: Vec<String>,
}

fn lines(path: &Path) -> Option<Vec<String>> {
    let text = std::fs::read_to_string(path).ok()?;
    Some(
        text.lines()
            .filter(|l| !l.is_empty())
            .map(String::from)
            .collect(),
    )
}

/// Splits `qs` in two at random (seeded), keeping each half in input order.
fn halves(qs: Vec<String>, seed: u64) -> (Vec<String>, Vec<String>) {
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let (mut a, mut b) = (Vec::new(), Vec::new());
    for q in qs {
        if rng.gen_bool(0.5) {
            a.push(q);
        } else {
            b.push(q);
        }
    }
    (a, b)
}

fn families(nq: usize, wanted: &Option<Vec<String>>) -> Vec<Family> {
    let want = |name: &str| wanted.as_ref().is_none_or(|w| w.iter().any(|x| x == name));
    let dict = |name: &str| PathBuf::from("/usr/share/dict").join(name);
    let demo = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("demo-data");
    let mut out = Vec::new();
    let insane = dict("american-english-insane");
    if let Some(words) = lines(&insane) {
        for (name, seed) in [("edits-1", 101), ("edits-2", 202), ("edits-3", 303)] {
            if want(name) {
                out.push(Family {
                    name,
                    list: insane.clone(),
                    calibration: edit_queries(&words, nq, seed + 1),
                    heldout: edit_queries(&words, nq, seed),
                });
            }
        }
    }
    let american = dict("american-english");
    if let (true, Some(us), Some(gb)) = (
        want("british"),
        lines(&american),
        lines(&dict("british-english")),
    ) {
        let (a, b) = halves(variants_missing_from(&us, &gb, usize::MAX, 0), 7);
        out.push(Family {
            name: "british",
            list: american,
            calibration: a,
            heldout: b,
        });
    }
    for (name, file, seed) in [("french", "french", 401), ("german", "ngerman", 501)] {
        if let (true, Some(words)) = (want(name), lines(&dict(file))) {
            out.push(Family {
                name,
                list: dict(file),
                calibration: edit_queries(&words, nq, seed + 1),
                heldout: edit_queries(&words, nq, seed),
            });
        }
    }
    for (name, list, queries) in [
        ("register", "names.txt", "lookups.txt"),
        ("barcodes", "barcodes.txt", "barcode-reads.txt"),
    ] {
        if let (true, Some(qs)) = (want(name), lines(&demo.join(queries))) {
            let (a, b) = halves(qs, 11);
            out.push(Family {
                name,
                list: demo.join(list),
                calibration: a,
                heldout: b,
            });
        }
    }
    out
}

fn truth(index: &Index, queries: &[String]) -> Truth {
    Truth {
        k: K,
        answers: scan_many(index, queries, K, Scan::Full).expect("k > 0"),
    }
}

/// The candidate count of the defaults before: n / 160 within 1500..4000 (ranked in L1).
fn old_candidates(n: usize) -> usize {
    (n / 160).clamp(1500, 4000)
}

fn main() {
    let nq: usize = std::env::var("WAYMARK_FAMILIES_QUERIES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(500);
    let wanted: Option<Vec<String>> = std::env::var("WAYMARK_FAMILIES")
        .ok()
        .map(|v| v.split(',').map(|s| s.trim().to_string()).collect());
    let curves = std::env::var("WAYMARK_FAMILIES_CURVES").map_or(true, |v| v != "0");
    // Extra settings to measure, `m:widen:options`.
    let tries: Vec<(f64, u32, String)> = std::env::var("WAYMARK_FAMILIES_TRY")
        .ok()
        .map(|v| {
            v.split(',')
                .filter_map(|t| {
                    let mut it = t.split(':');
                    Some((
                        it.next()?.parse().ok()?,
                        it.next()?.parse().ok()?,
                        it.next().unwrap_or("").to_string(),
                    ))
                })
                .collect()
        })
        .unwrap_or_default();
    let cal_opts = CalibrateOptions {
        queries: std::env::var("WAYMARK_FAMILIES_CAL_QUERIES")
            .ok()
            .and_then(|v| v.parse().ok())
            .unwrap_or(waymark::eval::calibrate::CALIBRATION_QUERIES),
        ..CalibrateOptions::default()
    };
    let fams = families(nq, &wanted);
    if fams.is_empty() {
        eprintln!("no family to run: install the word lists (see the top of benches/families.rs)");
        return;
    }
    println!(
        "k = {K}; threshold recall@{K} and q/s on each family's held-out queries; {} threads",
        rayon::current_num_threads()
    );
    let dir = tempfile::tempdir().expect("temp dir");
    let mut table = Vec::new();
    // Families on one list share its index.
    let mut built: Option<(PathBuf, PathBuf)> = None;
    for f in &fams {
        let path = match &built {
            Some((list, p)) if *list == f.list => p.clone(),
            _ => {
                let corpus = read_corpus(&f.list, &IngestOptions::default()).expect("list reads");
                let path = dir.path().join(format!("{}.wmk", f.name));
                let t = Instant::now();
                build_index(
                    &corpus,
                    &f.list.display().to_string(),
                    &BuildOptions::default(),
                    &path,
                    &|_| {},
                )
                .expect("build");
                let built_s = t.elapsed().as_secs_f64();
                let t = Instant::now();
                if curves {
                    let index = Index::open(&path).expect("open");
                    let cal = calibrate_from_items(&index, &cal_opts)
                        .expect("calibration")
                        .expect("items enough");
                    let meta = index.meta().clone();
                    drop(index);
                    store_calibration(&path, &meta, Some(cal)).expect("store");
                }
                println!(
                    "{}: {} items; build {built_s:.2} s, recall curve {:.2} s (measure and store)",
                    f.list.display(),
                    corpus.items.len(),
                    t.elapsed().as_secs_f64()
                );
                built = Some((f.list.clone(), path.clone()));
                path
            }
        };
        let index = Index::open(&path).expect("open");
        let n = index.len();
        let t = Instant::now();
        let held_truth = truth(&index, &f.heldout);
        let cal_truth = if curves {
            Some(truth(&index, &f.calibration))
        } else {
            None
        };
        let scan_s = t.elapsed().as_secs_f64();
        // The default (char counts on a plain Levenshtein index, else the embedding's), the
        // embedding's own default, and the embedding's defaults before the recall work.
        let new = SearchParams::from_index(&index, K);
        let emb = SearchParams::embedded(&index, K);
        let old = SearchParams {
            widen: 0,
            space: waymark::search::Space::L1,
            ..emb.with_candidates(old_candidates(n))
        };
        // Each twice, alternating (the machine is shared: the better of two runs of each
        // stands for its speed).
        let mut rows = Vec::new();
        for p in [old, emb, new, old, emb, new] {
            rows.push(measure_recall(&index, &f.heldout, &held_truth, &p).expect("measure"));
        }
        let qps = |a: &waymark::eval::RecallRow, b: &waymark::eval::RecallRow| a.qps.max(b.qps);
        let (old_row, emb_row, new_row) = (&rows[0], &rows[1], &rows[2]);
        let (old_qps, emb_qps, new_qps) = (
            qps(&rows[0], &rows[3]),
            qps(&rows[1], &rows[4]),
            qps(&rows[2], &rows[5]),
        );
        for (m, w, opt) in &tries {
            let (m, w) = (*m, *w);
            let c = (old_candidates(n) as f64 * m) as usize;
            let mut p = SearchParams {
                widen: w,
                ..emb.with_candidates(c)
            };
            for o in opt.split('+') {
                match o {
                    "s" => p.source = waymark::search::CandidateSource::Scan,
                    "l1" => p.space = waymark::search::Space::L1,
                    "l2" => p.space = waymark::search::Space::L2,
                    "linf" => p.space = waymark::search::Space::Linf,
                    v if v.starts_with('v') => p.visit = v[1..].parse::<usize>().unwrap() * c,
                    _ => {}
                }
            }
            let r = measure_recall(&index, &f.heldout, &held_truth, &p).expect("measure");
            println!(
                "  try {m} × today's C = {c}, widen {w}, {opt}: recall {:.4} at {:.0} q/s, {:.0} distances per query",
                r.recall, r.qps, r.distances_per_query
            );
        }
        let mut cells = vec![
            f.name.to_string(),
            n.to_string(),
            f.heldout.len().to_string(),
            format!("{}, {:.4}, {:.0}", old.candidates, old_row.recall, old_qps),
            format!("{}, {:.4}, {:.0}", emb.candidates, emb_row.recall, emb_qps),
            format!(
                "{}, {:.4}, {:.0}",
                new.source.name(),
                new_row.recall,
                new_qps
            ),
        ];
        if let Some(cal_truth) = &cal_truth {
            let from_queries =
                calibrate_from_queries(&index, &f.calibration, cal_truth, K, "calibration set")
                    .expect("calibration from queries");
            for r in ASKED {
                let (p, _) =
                    SearchParams::recall_choice_for(&index, K, r, &f.heldout).expect("curve");
                let got = measure_recall(&index, &f.heldout, &held_truth, &p).expect("measure");
                let lengths = f.heldout.iter().map(|q| q.chars().count());
                let (pq, _) = SearchParams::recall_choice_on(
                    &index,
                    K,
                    &from_queries.for_lengths(lengths),
                    r,
                )
                .expect("curve");
                let gq = measure_recall(&index, &f.heldout, &held_truth, &pq).expect("measure");
                // The build's curve as it is, not weighed by the queries' lengths.
                let (pw, _) = SearchParams::recall_choice(&index, K, r).expect("curve");
                let gw = measure_recall(&index, &f.heldout, &held_truth, &pw).expect("measure");
                println!(
                    "  R = {r}: edits curve unweighed {} {:.4}, weighed {} {:.4}; queries curve weighed {} {:.4}",
                    pw.candidates, gw.recall, p.candidates, got.recall, pq.candidates, gq.recall
                );
                cells.push(format!(
                    "{} {:.4} / {} {:.4}",
                    p.candidates, got.recall, pq.candidates, gq.recall
                ));
            }
        }
        println!(
            "{}: {} + {} queries, brute force {scan_s:.1} s; embedding before {:.4} at {:.0} q/s ({:.0} distances per query), embedding now {:.4} at {:.0} q/s ({:.0}), default ({}) {:.4} at {:.0} q/s ({:.0})",
            f.name,
            f.calibration.len(),
            f.heldout.len(),
            old_row.recall,
            old_qps,
            old_row.distances_per_query,
            emb_row.recall,
            emb_qps,
            emb_row.distances_per_query,
            new.source.name(),
            new_row.recall,
            new_qps,
            new_row.distances_per_query,
        );
        table.push(cells);
    }
    println!();
    println!("| family | items | held-out queries | embedding before: C (L1), recall@10, q/s | embedding now: C (L2), recall@10, q/s | default: source, recall@10, q/s | R = 0.9: C, recall (items curve / queries curve) | R = 0.95 | R = 0.99 |");
    println!("|---|---:|---:|---:|---:|---:|---:|---:|---:|");
    for c in table {
        println!("| {} |", c.join(" | "));
    }
}
