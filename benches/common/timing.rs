//! Timing of short batches: a batch that lasts a few milliseconds is at the mercy of one
//! scheduler hiccup, so it runs again until the runs last [`MIN_SECS`] in all, and the mean
//! is reported (a mean, not the best: every run counts).

use std::time::Instant;

/// Least time the runs of one batch take in all.
pub const MIN_SECS: f64 = 0.5;

/// Runs `f` once, then again until the runs have taken [`MIN_SECS`] in all; returns the
/// mean seconds per run, the last run's result and the number of runs.
pub fn mean_secs<T>(mut f: impl FnMut() -> T) -> (f64, T, usize) {
    let start = Instant::now();
    let mut runs = 1;
    let mut out = f();
    while start.elapsed().as_secs_f64() < MIN_SECS {
        out = f();
        runs += 1;
    }
    (start.elapsed().as_secs_f64() / runs as f64, out, runs)
}
