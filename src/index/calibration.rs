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
        Ok(())
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
    ///     points: vec![point(1000, 0.90), point(4000, 0.96)],
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
