//! Ground truth by brute force, and recall against it.
//!
//! Two scans compute exact answers: [`full_scan`] is what a user without an index would run
//! (the unbounded kernel against every item, batched), [`best_scan`] keeps a running k-th
//! distance, skips the items whose length (from the offsets, without reading their bytes)
//! rules them out, and runs the rest through the same batched kernel. Both give the same
//! answers and run on all cores when called through [`scan_many`].
//!
//! Recall follows the common convention for approximate k-NN: a returned item counts when
//! its true distance is at most the true k-th distance plus ε = 1e-3, so that ties do not
//! punish a correct answer (threshold recall); plain recall counts the returned ids that are
//! among the true k ids.
//!
//! ```
//! use waymark::eval::threshold_recall;
//!
//! // True 2-NN distances [1, 2]; an answer at distances [1, 2] via another item with
//! // distance 2 is still fully correct under threshold recall.
//! assert_eq!(threshold_recall(&[1.0, 2.0], &[(7, 1.0), (9, 2.0)], 2), 1.0);
//! ```

mod brute;
pub mod calibrate;
pub mod distortion;
mod measure;
#[cfg(feature = "charts")]
pub mod plot;
mod recall;
mod scan;
pub mod sweep;
pub mod truth;

pub use brute::brute_force;
pub use calibrate::{
    calibrate_file, calibrate_from_items, calibrate_from_queries, CalibrateOptions,
};
pub use distortion::{index_distortion, measure_distortion, DistortionReport};
pub use measure::{measure_recall, measure_recall_parts, RecallRow};
pub use recall::{
    edit_queries, edits_of, plain_recall, threshold_recall, typo_queries, variants_missing_from,
    RECALL_EPSILON,
};
pub use scan::{best_scan, full_scan, scan_many, Scan};
pub use truth::{load_or_compute_truth, Truth, TruthSource};
