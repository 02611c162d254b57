//! waymark: near-neighbour search for items that are not vectors.
//!
//! The pipeline has one module per stage:
//!
//! - [`ingest`] reads items (text lines, a CSV/TSV column, a JSON Lines field, vectors, the
//!   nodes of an edge list) and their ids, as the metric wants them ([`ingest::load_input`]);
//! - [`metric`] computes true distances (bit-parallel Levenshtein and the other metrics);
//! - [`embed`] maps every item to landmark coordinates, whose L∞ distance is a lower bound of
//!   the true distance;
//! - [`index`] stores items, ids, coordinates and a kd-tree in one checked, memory-mapped file;
//! - [`bounds`] finds the items whose stored lower bound is within a threshold (exact and
//!   range queries);
//! - [`search`] takes candidates by embedded distance and re-ranks them by the true distance;
//! - [`eval`] measures recall against brute force;
//! - [`resources`] refuses builds that would not fit in memory;
//! - `cli` is the command line (the binary only calls `cli::main`).
//!
//! Cargo features: `cli` (default) builds the `waymark` command and its dependencies (clap,
//! progress bars, anyhow) and turns on `charts`, the SVG charts of `eval::sweep` (plotters).
//! With `default-features = false` the crate is the library alone; a sweep then writes its
//! CSV and JSON and no chart.
#![warn(missing_docs)]

pub mod bounds;
#[cfg(feature = "cli")]
pub mod cli;
pub mod embed;
pub mod error;
pub mod eval;
pub mod index;
pub mod ingest;
pub mod metric;
pub mod resources;
pub mod scan;
pub mod search;

pub use error::{Error, Result};

// The README's Rust examples, compiled and run as doctests.
#[cfg(doctest)]
#[doc = include_str!("../README.md")]
struct ReadmeDoctests;

/// Hints the CPU to load the cache line at `p`; re-ranking visits items in an order the
/// hardware cannot predict, and each item costs two dependent loads (offset, then bytes).
#[inline(always)]
pub(crate) fn prefetch(p: *const u8) {
    #[cfg(target_arch = "x86_64")]
    // SAFETY: a prefetch is only a hint: it never faults and reads nothing into the
    // program's state, whatever the address; SSE is part of the x86_64 baseline.
    unsafe {
        std::arch::x86_64::_mm_prefetch::<{ std::arch::x86_64::_MM_HINT_T0 }>(p as *const i8);
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = p;
}
