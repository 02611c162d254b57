//! The latency of one approximate query through the Rust API, one query at a time on one
//! thread, with the index's stored defaults: the Rust side of `scripts/bench-python.py`,
//! which times the same queries from Python.
//!
//! `cargo run --release --example query_latency -- INDEX QUERIES [-k K] [--rounds R]`
//! answers every line of QUERIES R times (default 3; the first round warms the index up
//! and is not timed) and prints one JSON line: the queries timed and the p50, p90 and mean
//! latency in microseconds (wall time of `Searcher::search` alone, with one `Scratch`
//! reused as a long-running program would).

use std::time::Instant;

use waymark::index::Index;
use waymark::search::{Scratch, SearchParams, Searcher};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let usage = "usage: query_latency INDEX QUERIES [-k K] [--rounds R]";
    let (index, queries) = match (args.first(), args.get(1)) {
        (Some(i), Some(q)) => (i.clone(), q.clone()),
        _ => return Err(usage.into()),
    };
    let mut k = 10usize;
    let mut rounds = 3usize;
    let mut rest = args[2..].iter();
    while let Some(flag) = rest.next() {
        let value = rest.next().ok_or(usage)?;
        match flag.as_str() {
            "-k" => k = value.parse()?,
            "--rounds" => rounds = value.parse::<usize>()?.max(2),
            _ => return Err(usage.into()),
        }
    }
    let index = Index::open(index.as_ref())?;
    let queries: Vec<String> = std::fs::read_to_string(&queries)?
        .lines()
        .map(str::to_string)
        .collect();
    let searcher = Searcher::new(&index);
    let params = SearchParams::from_index(&index, k);
    let mut scratch = Scratch::default();
    let mut micros = Vec::with_capacity(queries.len() * (rounds - 1));
    for round in 0..rounds {
        for q in &queries {
            let t = Instant::now();
            let found = searcher.search(q, &params, &mut scratch)?;
            let us = t.elapsed().as_secs_f64() * 1e6;
            std::hint::black_box(found);
            if round > 0 {
                micros.push(us);
            }
        }
    }
    micros.sort_by(f64::total_cmp);
    let at = |q: f64| micros[((micros.len() - 1) as f64 * q).round() as usize];
    let mean = micros.iter().sum::<f64>() / micros.len() as f64;
    println!(
        "{{\"queries\": {}, \"p50_us\": {:.2}, \"p90_us\": {:.2}, \"mean_us\": {:.2}}}",
        micros.len(),
        at(0.5),
        at(0.9),
        mean
    );
    Ok(())
}
