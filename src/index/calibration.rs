//! The recall calibration an index may carry: the threshold recall@k its approximate search
//! reached at each of a ladder of candidate counts, measured on queries whose exact answers
//! were known (the build's own sampled items, or a user's queries through `waymark eval
//! --calibrate`). [`Calibration::choose`] turns an asked recall into a candidate count and a
//! visit budget; `crate::search::SearchParams::for_recall` is the search's entry.
//!
//! The curve is data in the metadata JSON (field `calibration`, optional: a file without it
//! still opens); a crafted curve is refused when it is used ([`Calibration::check`]).

use serde::{Deserialize, Serialize};

/// The most points a curve may hold (a larger one in a file is refused as crafted).
pub const MAX_POINTS: usize = 64;

/// The most length bands a curve may hold (more in a file are refused as crafted).
pub const MAX_BANDS: usize = 16;

/// The recall curve of the calibration queries of one range of lengths: queries of at least
/// `from_chars` characters (and fewer than the next band's `from_chars`). Long queries need
/// more candidates than short ones for the same recall (on 104,334 words, 400 candidates
/// gave edited items of 10 or more characters 0.82 and those under 7 0.95), so a curve
/// measured on items of typical length promises too much to a set of long queries; the
/// bands let [`Calibration::for_lengths`] weigh the curve by the lengths of the queries
/// actually asked.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CalibrationBand {
    /// Shortest query of the band, in characters (0 for the first band).
    pub from_chars: u64,
    /// Calibration queries in the band.
    pub queries: u64,
    /// Mean threshold recall@k of the band's queries at each point of the curve (same
    /// order and number as [`Calibration::points`]).
    pub recall: Vec<f64>,
}

/// One point of a calibration curve.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct CalibrationPoint {
    /// Candidates re-ranked per query.
    pub candidates: u64,
    /// With cells: rows compared per query (0: every row). Ignored by the scan.
    pub visit: u64,
    /// Mean threshold recall@k the calibration queries reached.
    pub recall: f64,
}

/// A recall curve measured on an index, stored in its metadata.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Calibration {
    /// Neighbours per query the curve was measured for.
    pub k: u64,
    /// Where the calibration queries came from: `items` (items of the index sampled with
    /// `seed`, each asked without itself) or `queries` (a queries file, named in `file`).
    pub from: String,
    /// The queries file of a calibration from queries (its name as given).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub file: Option<String>,
    /// Number of calibration queries.
    pub queries: u64,
    /// Seed of the item sample (calibration from items).
    #[serde(default)]
    pub seed: u64,
    /// The points, in increasing candidates.
    pub points: Vec<CalibrationPoint>,
    /// Text metrics: the curve of the calibration queries split by length, shortest first
    /// (see [`CalibrationBand`]); empty for other metrics and in curves written before.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub bands: Vec<CalibrationBand>,
}

/// What [`Calibration::choose`] picked for an asked recall.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct RecallChoice {
    /// Candidates to re-rank.
    pub candidates: usize,
    /// Rows to compare with cells (0: every row).
    pub visit: usize,
    /// The recall the curve predicts at that setting (interpolated between points).
    pub expected: f64,
    /// Whether the curve reaches the asked recall; when it does not, the choice is the
    /// curve's last (largest) point.
    pub reached: bool,
}

impl Calibration {
    /// Checks a curve read from a file: 1 to [`MAX_POINTS`] points, candidates rising from 1,
    /// at most [`MAX_BANDS`] length bands rising from 0 characters, each with a recall per point,
    /// recalls in 0..=1, k at least 1. The message says what is wrong.
    pub fn check(&self) -> Result<(), String> {
        if self.k == 0 {
            return Err("calibration for k = 0".into());
        }
        if self.points.is_empty() || self.points.len() > MAX_POINTS {
            return Err(format!(
                "calibration with {} points (1 to {MAX_POINTS} allowed)",
                self.points.len()
            ));
        }
        let mut last = 0;
        for p in &self.points {
            if p.candidates <= last {
                return Err("calibration points whose candidates do not rise from 1".into());
            }
            last = p.candidates;
            if !(0.0..=1.0).contains(&p.recall) {
                return Err(format!("calibration recall {} outside 0 to 1", p.recall));
            }
        }
        if self.bands.len() > MAX_BANDS {
            return Err(format!(
                "calibration with {} length bands (at most {MAX_BANDS} allowed)",
                self.bands.len()
            ));
        }
        for (i, b) in self.bands.iter().enumerate() {
            let rises = match i {
                0 => b.from_chars == 0,
                _ => b.from_chars > self.bands[i - 1].from_chars,
            };
            if !rises {
                return Err("calibration length bands that do not rise from 0 characters".into());
            }
            if b.queries == 0 || b.recall.len() != self.points.len() {
                return Err(format!(
                    "calibration length band from {} characters with {} queries and {} \
                     recalls for {} points",
                    b.from_chars,
                    b.queries,
                    b.recall.len(),
                    self.points.len()
                ));
            }
            if let Some(r) = b.recall.iter().find(|r| !(0.0..=1.0).contains(*r)) {
                return Err(format!("calibration recall {r} outside 0 to 1"));
            }
        }
        Ok(())
    }

    /// The curve for a set of queries of the given lengths (in characters): at each point,
    /// the mean over the queries of their length band's recall ([`CalibrationBand`]). A
    /// curve without bands, or no lengths, gives the curve as it is. Assumes a checked
    /// curve ([`Calibration::check`]).
    ///
    /// ```
    /// use waymark::index::{Calibration, CalibrationBand, CalibrationPoint};
    ///
    /// let point = |candidates, recall| CalibrationPoint { candidates, visit: 12 * candidates, recall };
    /// let band = |from_chars, recall: [f64; 2]| CalibrationBand { from_chars, queries: 100, recall: recall.to_vec() };
    /// let c = Calibration {
    ///     k: 10, from: "edits".into(), file: None, queries: 200, seed: 0,
    ///     points: vec![point(1000, 0.90), point(4000, 0.96)],
    ///     bands: vec![band(0, [0.95, 0.99]), band(9, [0.85, 0.93])],
    /// };
    /// // Three long queries and one short one.
    /// let mixed = c.for_lengths([12, 15, 3, 9]);
    /// assert!((mixed.points[0].recall - 0.875).abs() < 1e-9);
    /// assert!((mixed.points[1].recall - 0.945).abs() < 1e-9);
    /// // Long queries need more candidates than the whole curve says.
    /// assert!(mixed.choose(0.93, 1_000_000).candidates > c.choose(0.93, 1_000_000).candidates);
    /// ```
    pub fn for_lengths(&self, lengths: impl IntoIterator<Item = usize>) -> Calibration {
        let mut out = self.clone();
        if self.bands.is_empty() {
            return out;
        }
        let mut count = vec![0usize; self.bands.len()];
        for len in lengths {
            let b = self
                .bands
                .iter()
                .rposition(|b| b.from_chars <= len as u64)
                .unwrap_or(0);
            count[b] += 1;
        }
        let total: usize = count.iter().sum();
        if total == 0 {
            return out;
        }
        for (i, p) in out.points.iter_mut().enumerate() {
            let sum: f64 = self
                .bands
                .iter()
                .zip(&count)
                .map(|(b, &c)| b.recall[i] * c as f64)
                .sum();
            p.recall = (sum / total as f64).clamp(0.0, 1.0);
        }
        out
    }

    /// The cheapest setting whose recall, on the curve, is at least `recall`: between two
    /// points the candidate count is interpolated on a log scale (the visit budget keeps
    /// its ratio to the candidates); below the first point, the first point; above the
    /// last, the last point with `reached` false. `n` caps the counts. Assumes a checked
    /// curve ([`Calibration::check`]).
    ///
    /// ```
    /// use waymark::index::{Calibration, CalibrationPoint};
    ///
    /// let point = |candidates, recall| CalibrationPoint { candidates, visit: 12 * candidates, recall };
    /// let c = Calibration {
    ///     k: 10, from: "items".into(), file: None, queries: 300, seed: 0,
    ///     points: vec![point(1000, 0.90), point(4000, 0.96)], bands: vec![],
    /// };
    /// let at = c.choose(0.93, 1_000_000);
    /// assert_eq!(at.candidates, 2000); // halfway on a log scale
    /// assert_eq!(at.visit, 24_000);
    /// assert!(at.reached && (at.expected - 0.93).abs() < 1e-9);
    /// assert_eq!(c.choose(0.5, 1_000_000).candidates, 1000);
    /// assert!(!c.choose(0.99, 1_000_000).reached);
    /// ```
    pub fn choose(&self, recall: f64, n: usize) -> RecallChoice {
        let pts = &self.points;
        let at = |p: &CalibrationPoint, reached| RecallChoice {
            candidates: (p.candidates as usize).clamp(1, n.max(1)),
            visit: (p.visit as usize).min(n),
            expected: p.recall,
            reached,
        };
        let Some(i) = pts.iter().position(|p| p.recall >= recall) else {
            return at(pts.last().expect("a checked curve has points"), false);
        };
        if i == 0 {
            return at(&pts[0], true);
        }
        let (a, b) = (&pts[i - 1], &pts[i]);
        let t = if b.recall > a.recall {
            ((recall - a.recall) / (b.recall - a.recall)).clamp(0.0, 1.0)
        } else {
            1.0
        };
        let (ca, cb) = (a.candidates as f64, b.candidates as f64);
        let c = (ca.ln() + t * (cb.ln() - ca.ln())).exp().round();
        let candidates = (c as usize).clamp(a.candidates as usize, b.candidates as usize);
        // The visit budget per candidate, from the point above (0 stays every row).
        let visit = if b.visit == 0 {
            0
        } else {
            let per = b.visit as f64 / cb;
            (candidates as f64 * per).round() as usize
        };
        RecallChoice {
            candidates: candidates.clamp(1, n.max(1)),
            visit: visit.min(n),
            expected: a.recall + t * (b.recall - a.recall),
            reached: true,
        }
    }
}
