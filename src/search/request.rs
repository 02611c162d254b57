//! What a query asks for ([`Request`], [`SearchParams`]) and what it gets back ([`Found`]).

use serde::{Deserialize, Serialize};

use super::order::Neighbor;
use crate::coords::Space;
use crate::error::{Error, Param, Result};
use crate::index::{Calibration, Index, RecallChoice};

/// The smallest index whose default candidate source is its cells ([`CandidateSource::Cells`]).
/// Below it the scan of every row is cheap, and cells of a few dozen items group little;
/// `benches/end_to_end.rs` measures both sources (figures in the README).
pub const CELLS_MIN_ITEMS: usize = 50_000;

/// Rows compared per candidate when candidates come from cells
/// ([`CandidateSource::Cells`]): cells are visited until `VISIT_PER_CANDIDATE · C` rows have
/// been compared. Chosen with `benches/big.rs` (figures in the README).
pub const VISIT_PER_CANDIDATE: usize = 12;

/// Where candidates come from.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum CandidateSource {
    /// A SIMD pass over the compact coordinates with histogram selection.
    #[default]
    Scan,
    /// The same pass over the rows of the cells nearest the query only (the index's cells,
    /// see [`crate::index::cells`]), until [`SearchParams::visit`] rows are compared; the
    /// default for indexes of [`CELLS_MIN_ITEMS`] items or more.
    Cells,
    /// kiddo's `nearest_n` on the kd-tree.
    Tree,
    /// Plain Levenshtein only, and its default: the items in increasing char-count bound
    /// (the chars of each item counted in 32 bins, a lower bound of the distance; see
    /// `Searcher::search_exact`), each measured, until the `k`-th distance held settles
    /// the answers. They are those of a brute force up to the order of ties: threshold
    /// recall 1. `candidates` and `visit` are not used, except where the counts rule out
    /// few items (strings over few letters, as DNA: judged on a searcher's first 32
    /// queries); queries then go on to the embedding's own source
    /// ([`SearchParams::embedded`]) with them.
    Counts,
}

impl CandidateSource {
    /// The name used by the command line and Python (`--candidates-from`).
    pub fn name(self) -> &'static str {
        match self {
            CandidateSource::Scan => "scan",
            CandidateSource::Cells => "cells",
            CandidateSource::Tree => "tree",
            CandidateSource::Counts => "counts",
        }
    }
}

/// Parameters of a query.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct SearchParams {
    /// Number of neighbours wanted.
    pub k: usize,
    /// Number of candidates re-ranked by the true distance.
    pub candidates: usize,
    /// The space candidates are ranked in.
    pub space: Space,
    /// Where candidates come from.
    pub source: CandidateSource,
    /// With [`CandidateSource::Cells`]: cells are visited nearest first until at least this
    /// many rows have been compared (at least `candidates`; 0: every row). Ignored by the
    /// other sources.
    pub visit: usize,
    /// How many times the candidates (and the rows visited) may be doubled for a query
    /// whose answer reaches deep into its candidate list (0: never). After each round of
    /// re-ranking, when an answer held came from the last [`WIDEN_TAIL`] of the list, the
    /// next round takes twice the candidates (those already measured are not measured
    /// again), until an answer comes from nearer the front or the doublings are used up.
    pub widen: u32,
}

/// The share at the end of a candidate list that, holding an answer, makes a query take
/// twice the candidates ([`SearchParams::widen`]). Chosen with `benches/families.rs`
/// (README, "How it finds neighbours, and the defaults").
pub const WIDEN_TAIL: f64 = 0.25;

impl SearchParams {
    /// The index's stored defaults with `k` neighbours: as [`SearchParams::embedded`], but
    /// with the char counts as the source ([`CandidateSource::Counts`]) when the index's
    /// metric is plain Levenshtein.
    pub fn from_index(index: &Index, k: usize) -> SearchParams {
        let p = Self::embedded(index, k);
        if super::tally::applies(index) {
            SearchParams {
                source: CandidateSource::Counts,
                ..p
            }
        } else {
            p
        }
    }

    /// The index's stored defaults for a search of its embedding, with `k` neighbours: its
    /// candidates and space, cells as the source when the index has them and at least
    /// [`CELLS_MIN_ITEMS`] items (else the scan), and [`VISIT_PER_CANDIDATE`] rows
    /// compared per candidate. What recall against candidates and dimension measures.
    pub fn embedded(index: &Index, k: usize) -> SearchParams {
        let candidates = index.meta().candidates as usize;
        SearchParams {
            k,
            candidates,
            space: index.meta().space,
            source: if index.has_cells() && index.len() >= CELLS_MIN_ITEMS {
                CandidateSource::Cells
            } else {
                CandidateSource::Scan
            },
            visit: candidates.saturating_mul(VISIT_PER_CANDIDATE),
            widen: index.meta().widen,
        }
    }

    /// The index's defaults (as [`SearchParams::from_index`]) with the candidate count and
    /// visit budget that its recall calibration says reach threshold recall@k `recall`
    /// ([`crate::index::Calibration::choose`]; when the curve does not reach it, its largest
    /// setting). `recall` must lie strictly between 0 and 1 ([`check_recall`]).
    ///
    /// Refused (a usage error, with advice) when the index carries no calibration, and as a
    /// corrupt index when its curve is malformed. The curve was measured for its own `k`
    /// (10 unless calibrated otherwise): recall at another `k` may differ, and on queries
    /// unlike the calibration's (the build uses the index's own items) it can fall short;
    /// `waymark eval --queries FILE --recall R` shows what it achieves.
    ///
    /// ```no_run
    /// use waymark::index::Index;
    /// use waymark::search::{SearchParams, Searcher};
    ///
    /// let index = Index::open("words.wmk".as_ref())?;
    /// let params = SearchParams::for_recall(&index, 10, 0.95)?;
    /// let found = Searcher::new(&index).search("harbuor", &params, &mut Default::default())?;
    /// # Ok::<(), waymark::Error>(())
    /// ```
    pub fn for_recall(index: &Index, k: usize, recall: f64) -> Result<SearchParams> {
        Ok(Self::recall_choice(index, k, recall)?.0)
    }

    /// [`SearchParams::for_recall`] with what the curve chose (the recall it predicts, and
    /// whether it reaches the asked one), for queries of the lengths the calibration had.
    pub fn recall_choice(
        index: &Index,
        k: usize,
        recall: f64,
    ) -> Result<(SearchParams, RecallChoice)> {
        Self::recall_choice_on(index, k, Self::curve(index, recall)?, recall)
    }

    /// [`SearchParams::recall_choice`] for the queries about to be asked: the curve is
    /// weighed by their lengths ([`Calibration::for_lengths`]), so that a set of long
    /// queries gets the candidates that long queries need. A curve without length bands
    /// (other metrics, older files) is used as it is.
    ///
    /// ```no_run
    /// use waymark::index::Index;
    /// use waymark::search::{SearchParams, Searcher};
    ///
    /// let index = Index::open("words.wmk".as_ref())?;
    /// let queries = ["harbuor", "lighthosue keeper"];
    /// let (params, choice) = SearchParams::recall_choice_for(&index, 10, 0.95, &queries)?;
    /// println!("{} candidates, expected recall {:.3}", params.candidates, choice.expected);
    /// # Ok::<(), waymark::Error>(())
    /// ```
    pub fn recall_choice_for<S: AsRef<str>>(
        index: &Index,
        k: usize,
        recall: f64,
        queries: &[S],
    ) -> Result<(SearchParams, RecallChoice)> {
        let cal = Self::curve(index, recall)?;
        let mixed = cal.for_lengths(queries.iter().map(|q| q.as_ref().chars().count()));
        Self::recall_choice_on(index, k, &mixed, recall)
    }

    /// The index's curve, checked; refused with advice when it has none.
    fn curve(index: &Index, recall: f64) -> Result<&Calibration> {
        check_recall(recall)?;
        let cal = index.meta().calibration.as_ref().ok_or_else(|| {
            Error::Usage(format!(
                "{}: the index carries no recall calibration (it was written before waymark \
                 calibrated indexes, or built with --no-calibration), so it cannot choose \
                 candidates for a recall; rebuild it with `waymark build`, calibrate it from \
                 queries with `waymark eval {} --queries FILE --calibrate`, or give \
                 --candidates",
                index.path().display(),
                index.path().display()
            ))
        })?;
        cal.check()
            .map_err(|m| Error::corrupt(index.path(), format!("metadata: {m}")))?;
        Ok(cal)
    }

    /// [`SearchParams::recall_choice`] with a curve given here rather than the index's
    /// (for instance one measured on other queries, [`crate::eval::calibrate_from_queries`],
    /// or weighed by lengths, [`Calibration::for_lengths`]).
    pub fn recall_choice_on(
        index: &Index,
        k: usize,
        cal: &Calibration,
        recall: f64,
    ) -> Result<(SearchParams, RecallChoice)> {
        check_recall(recall)?;
        cal.check()
            .map_err(|m| Error::corrupt(index.path(), format!("metadata: {m}")))?;
        let choice = cal.choose(recall, index.len());
        // A recall is asked of the embedding (the char counts would give 1).
        let p = SearchParams::embedded(index, k);
        let visit = match p.source {
            CandidateSource::Cells => choice.visit,
            _ => choice.candidates.saturating_mul(VISIT_PER_CANDIDATE),
        };
        Ok((
            SearchParams {
                candidates: choice.candidates,
                visit,
                ..p
            },
            choice,
        ))
    }

    /// These parameters with the embedding's own source ([`SearchParams::embedded`]) in
    /// place of the char counts ([`CandidateSource::Counts`]); another source is kept.
    /// What asking for candidates, a visit budget or a space means on the command line.
    pub fn on_embedding(self, index: &Index) -> SearchParams {
        if self.source == CandidateSource::Counts {
            SearchParams {
                source: Self::embedded(index, self.k).source,
                ..self
            }
        } else {
            self
        }
    }

    /// These parameters with `candidates` and the matching default `visit`.
    ///
    /// The count is the embedding's: with the char counts as the source (what
    /// [`SearchParams::from_index`] gives on a plain Levenshtein index) it serves only the
    /// queries the counts hand on to the embedding. To search the embedding with it, as
    /// `waymark query --candidates` does, call [`SearchParams::on_embedding`] too.
    pub fn with_candidates(self, candidates: usize) -> SearchParams {
        SearchParams {
            candidates,
            visit: candidates.saturating_mul(VISIT_PER_CANDIDATE),
            ..self
        }
    }
}

/// Checks an asked recall: a number strictly between 0 and 1 (1 is what an exact query
/// gives: `--exact`).
///
/// ```
/// use waymark::search::check_recall;
///
/// assert!(check_recall(0.95).is_ok());
/// for bad in [0.0, 1.0, 1.5, -0.1, f64::NAN, f64::INFINITY] {
///     assert!(check_recall(bad).is_err());
/// }
/// ```
pub fn check_recall(recall: f64) -> Result<()> {
    if recall > 0.0 && recall < 1.0 {
        return Ok(());
    }
    let advice = if recall == 1.0 {
        " (every true neighbour is what an exact query gives: ask for it instead)"
    } else {
        ""
    };
    Err(Error::parameter(
        Param::Recall,
        format!("must be a number strictly between 0 and 1, not {recall}{advice}"),
    ))
}

/// The answer to one query.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Found {
    /// Neighbours sorted by (distance, id).
    pub neighbors: Vec<Neighbor>,
    /// True-distance computations made (landmarks plus re-ranked candidates).
    pub distances: usize,
    /// Candidates skipped because their lower bound exceeded the k-th distance.
    pub pruned: usize,
    /// For exact answers ([`super::Searcher::search_exact`], [`super::Searcher::search_within`]): why no
    /// other item can belong to the answer.
    pub certificate: Option<Certificate>,
}

/// The evidence that an exact answer is complete.
///
/// Items are visited in increasing order of their lower bound: the stored L∞ bound, for
/// Levenshtein k-NN queries raised to the gap of lengths or of char signatures when that is
/// larger (see [`crate::metric::LevenshteinQuery::signature`]). Every item that was not examined has a
/// lower bound of at least [`Certificate::bound`], which is at least the k-th distance
/// returned (k-NN) or above the radius (range query); an item examined but not measured
/// either had a bound equal to the k-th distance and an (id, index) that sorts after the
/// k-th answer's, so it could at best tie and lose the tie, or (Levenshtein) a length or
/// signature gap above the k-th distance or the radius.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Certificate {
    /// Items visited in bound order (each compared with the stopping rule).
    pub examined: usize,
    /// True distances computed on items with the bounded kernel (landmarks not included).
    pub computed: usize,
    /// The smallest lower bound among items not examined; `None` when every item was.
    pub bound: Option<f64>,
}

/// What a query asks for.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Request {
    /// Approximate k-NN ([`super::Searcher::search`]).
    Approximate(SearchParams),
    /// Exact k-NN ([`super::Searcher::search_exact`]).
    Exact {
        /// Number of neighbours.
        k: usize,
    },
    /// Every item within a distance, or the k nearest of them ([`super::Searcher::search_within`]).
    Within {
        /// The largest distance returned.
        radius: f64,
        /// At most this many answers (the nearest), or all.
        k: Option<usize>,
    },
}
