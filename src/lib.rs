//! waymark: near-neighbour search for items that are not vectors.
//!
//! The pipeline has one module per stage:
//!
//! - [`ingest`] reads items (text lines, a CSV/TSV column, a JSON Lines field) and their ids;
//! - [`metric`] computes true distances (bit-parallel Levenshtein);
//! - [`embed`] maps every item to landmark coordinates, whose L∞ distance is a lower bound of
//!   the true distance;
//! - [`index`] stores items, ids, coordinates and a kd-tree in one checked, memory-mapped file;
//! - [`search`] takes candidates by embedded distance and re-ranks them by the true distance;
//! - [`eval`] measures recall against brute force;
//! - [`cli`] is the command line (the binary only calls [`cli::main`]).
#![warn(missing_docs)]

pub mod cli;
pub mod embed;
pub mod error;
pub mod eval;
pub mod index;
pub mod ingest;
pub mod metric;
pub mod scan;
pub mod search;

pub use error::{Error, Result};
