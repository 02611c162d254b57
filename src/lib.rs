//! waymark: near-neighbour search for items that are not vectors.
//!
//! The pipeline has one module per stage:
//!
//! - [`ingest`] reads items (text lines, a CSV/TSV column, a JSON Lines field) and their ids;
//! - [`metric`] computes true distances (bit-parallel Levenshtein);
//! - [`embed`] maps every item to landmark coordinates, whose L∞ distance is a lower bound of
//!   the true distance;
//! - [`index`] stores items, ids, coordinates and a kd-tree in one checked, memory-mapped file;
//! - [`coords`] compares stored coordinate rows: the candidate scan, the selection of the
//!   best scores, and the column blocks of exact and range queries;
//! - [`search`] takes candidates by embedded distance and re-ranks them by the true distance;
//! - [`eval`] measures recall against brute force;
//! - [`resources`] refuses builds that would not fit in memory;
//! - [`cpu`] says which vector instructions the kernels may use;
//! - [`cli`] is the command line (the binary only calls [`cli::main`]).
#![warn(missing_docs)]

pub mod cli;
pub mod coords;
pub mod cpu;
pub mod embed;
pub mod error;
pub mod eval;
pub mod index;
pub mod ingest;
pub mod metric;
pub mod resources;
pub mod search;

pub use error::{Error, Result};
