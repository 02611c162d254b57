//! The integration tests, linked as one binary (`cargo test --release --test it`); each
//! module is one group, run alone with a filter: `cargo test --release --test it search::`.
//! Shared plumbing (temp folders, running the `waymark` binary, the word list, the bundled
//! data, the index file's section table) is in `util`.

mod util;

mod bounds;
mod cli;
mod embed;
mod eval;
mod eval_scan;
mod exact;
mod format;
mod graph_growth;
mod growing;
mod hardening;
mod ingest;
mod layout;
mod library;
mod limits;
mod metric_cli;
mod metric_damerau;
mod metric_external;
mod metric_graph;
mod metric_hamming;
mod metric_jaccard;
mod metric_levenshtein;
mod metric_token_edit;
mod metric_vectors;
mod metric_weighted;
mod names;
mod pairs;
mod parts_commands;
mod permissions;
mod recall;
mod search;
mod sequences;
mod shards;
mod small_radius;
mod vector_digits;
