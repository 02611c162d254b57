//! Memory budget of a build: refuse up front what would not fit, instead of swapping.
//!
//! A build holds the whole corpus and its coordinates in memory. Its peak resident memory was
//! measured against n (`/usr/bin/time -f %M waymark build …` on prefixes of Debian's
//! wamerican-insane list, d = 64; see DEVELOPERS.md, "Resource bounds") and is modelled here
//! with a margin: [`build_estimate`]. The budget is the memory the system says is available
//! (`MemAvailable` in /proc/meminfo, capped by a cgroup v2 `memory.max`), or the number of
//! bytes in the environment variable `WAYMARK_MEMORY_BUDGET` when it is set.
//!
//! ```
//! use waymark::resources::build_estimate;
//!
//! // 663,473 words, 6.9 MB of text, 64 coordinates: a bit above the 1.30 GB measured.
//! let est = build_estimate(663_473, 6_922_426, 64);
//! assert!(est > 1_302_000_000 && est < 1_500_000_000);
//! ```

use crate::error::{Error, Result};

/// Estimated peak memory of a build, in bytes, for `n` items of `bytes` bytes in all, at
/// dimension `dim`: coordinates as f64 and f32 and the kd-tree's copy (`20·dim` bytes per
/// item), the corpus (items and keys as owned strings: about 100 bytes per item plus twice
/// the text), and the file sections being written with the cells (640 bytes per item in
/// all besides the coordinates, measured: 1,272,116 kB peak at 663,473 words, d = 64).
pub fn build_estimate(n: usize, bytes: usize, dim: usize) -> u64 {
    let n = n as u64;
    let per_item = 20 * dim as u64 + 640;
    n * per_item + 3 * bytes as u64 + (16 << 20)
}

/// The memory this process may use, in bytes, if the system tells; `WAYMARK_MEMORY_BUDGET`
/// (a whole number of bytes) overrides it, and a value that is not one is refused.
pub fn budget() -> Result<Option<u64>> {
    match std::env::var("WAYMARK_MEMORY_BUDGET") {
        Ok(v) => {
            return v.trim().parse().map(Some).map_err(|_| {
                Error::Usage(format!(
                    "WAYMARK_MEMORY_BUDGET={v:?} is not a whole number of bytes \
                     (for 2 GB: WAYMARK_MEMORY_BUDGET=2000000000)"
                ))
            });
        }
        Err(std::env::VarError::NotUnicode(v)) => {
            return Err(Error::Usage(format!(
                "WAYMARK_MEMORY_BUDGET={v:?} is not a whole number of bytes"
            )));
        }
        Err(std::env::VarError::NotPresent) => {}
    }
    let available = std::fs::read_to_string("/proc/meminfo").ok().and_then(|m| {
        m.lines()
            .find_map(|l| l.strip_prefix("MemAvailable:"))
            .and_then(|v| v.trim().trim_end_matches("kB").trim().parse::<u64>().ok())
            .map(|kb| kb * 1024)
    });
    let cgroup = std::fs::read_to_string("/sys/fs/cgroup/memory.max")
        .ok()
        .and_then(|v| v.trim().parse::<u64>().ok());
    Ok(match (available, cgroup) {
        (Some(a), Some(c)) => Some(a.min(c)),
        (a, c) => a.or(c),
    })
}

fn refuse(what: &str, need: u64, have: u64) -> Error {
    Error::TooLarge {
        what: what.to_string(),
        need,
        have,
    }
}

/// Refuses to read an input file of `file_bytes` bytes when even its text would not fit
/// (reading keeps about three times the text: items, keys and parse buffers).
pub fn check_input(source: &str, file_bytes: u64) -> Result<()> {
    match budget()? {
        Some(have) if 3 * file_bytes > have => Err(refuse(
            &format!("reading {source} ({:.1} GB)", file_bytes as f64 / 1e9),
            3 * file_bytes,
            have,
        )),
        _ => Ok(()),
    }
}

/// Refuses a build whose estimated peak memory ([`build_estimate`]) exceeds the budget.
pub fn check_build(source: &str, n: usize, bytes: usize, dim: usize) -> Result<()> {
    let need = build_estimate(n, bytes, dim);
    match budget()? {
        Some(have) if need > have => Err(refuse(
            &format!("building an index of {n} items from {source} at dimension {dim}"),
            need,
            have,
        )),
        _ => Ok(()),
    }
}
