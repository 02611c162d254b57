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
//! - [`coords`] compares stored coordinate rows: the candidate scan, the selection of the
//!   best scores, and the column blocks of exact and range queries;
//! - [`search`] takes candidates by embedded distance and re-ranks them by the true distance;
//! - [`eval`] measures recall against brute force;
//! - [`resources`] refuses builds that would not fit in memory;
//! - [`cpu`] says which vector instructions the kernels may use;
//! - `cli` is the command line (the binary only calls `cli::main`).
//!
//! Cargo features: `cli` (default) builds the `waymark` command and its dependencies (clap,
//! progress bars, anyhow) and turns on `charts`, the SVG charts of `eval::sweep` (plotters).
//! With `default-features = false` the crate is the library alone; a sweep then writes its
//! CSV and JSON and no chart.
#![warn(missing_docs)]

#[cfg(feature = "cli")]
pub mod cli;
pub mod coords;
pub mod cpu;
pub mod embed;
pub mod error;
pub mod escape;
pub mod eval;
pub mod index;
pub mod ingest;
pub mod metric;
pub mod pairs;
pub mod resources;
pub mod search;

pub use error::{Error, Param, Result};

// The README's Rust examples, compiled and run as doctests.
#[cfg(doctest)]
#[doc = include_str!("../README.md")]
struct ReadmeDoctests;
