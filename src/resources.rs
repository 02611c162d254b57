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
//! // Peaks measured with `/usr/bin/time -f %M waymark build … -q` (d = 64): 547,724 kB for
//! // Debian's wamerican-insane (663,473 words, 6.9 MB), 170,520 kB for its first 200,000
//! // lines (1.9 MB). The estimate is a little above each.
//! let est = build_estimate(663_473, 6_922_426, 64);
//! assert!(est > 547_724 * 1024 && est < 620_000_000);
//! let est = build_estimate(200_000, 1_931_057, 64);
//! assert!(est > 170_520 * 1024 && est < 200_000_000);
//! ```

use crate::error::{Error, Result};

/// Estimated peak memory of a build, in bytes, for `n` items of `bytes` bytes in all, at
/// dimension `dim`: the coordinates as f64 and as u8 rows (`9·dim` bytes per item), and 260
/// bytes per item besides (the corpus's items and keys as owned strings, the kd-tree over
/// the rows' first 8 coordinates as f32 with its points, the cells with their member and
/// position tables), plus three times the text. Fitted with a margin to the peaks measured
/// at 663,473 and 200,000 words, d = 64 (the example above; DEVELOPERS.md, "Resource
/// bounds"); other dimensions follow the model, unmeasured.
pub fn build_estimate(n: usize, bytes: usize, dim: usize) -> u64 {
    let n = n as u64;
    let per_item = 9 * dim as u64 + 260;
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

/// Refuses a build whose estimated peak memory ([`build_estimate`], plus `extra` bytes: a
/// deletion-variant table's, `index::variants::build_estimate`) exceeds the budget.
pub fn check_build(source: &str, n: usize, bytes: usize, dim: usize, extra: u64) -> Result<()> {
    let need = build_estimate(n, bytes, dim).saturating_add(extra);
    let table = if extra > 0 {
        format!(
            " with a deletion-variant table ({:.1} GB of it)",
            extra as f64 / 1e9
        )
    } else {
        String::new()
    };
    match budget()? {
        Some(have) if need > have => Err(refuse(
            &format!("building an index of {n} items from {source} at dimension {dim}{table}"),
            need,
            have,
        )),
        _ => Ok(()),
    }
}

/// Whether `need` bytes fit in the budget (`true` when the system tells no budget); a
/// `WAYMARK_MEMORY_BUDGET` that is not a number is an error.
pub fn fits(need: u64) -> Result<bool> {
    Ok(budget()?.is_none_or(|have| need <= have))
}

/// Refuses `what` when `need` bytes exceed the budget.
pub fn check_need(what: &str, need: u64) -> Result<()> {
    match budget()? {
        Some(have) if need > have => Err(refuse(what, need, have)),
        _ => Ok(()),
    }
}

/// The most bytes of an input a build reads: a third of the budget (reading keeps about three
/// times the text), `None` when the system tells no budget.
pub fn input_limit() -> Result<Option<u64>> {
    Ok(budget()?.map(|b| b / 3))
}

/// A reader that fails once more than `limit` bytes have come through it, so that an endless
/// input (`/dev/zero`, a pipe from `yes`) stops with an error instead of filling the memory.
///
/// ```
/// use std::io::Read;
/// use waymark::resources::BoundedRead;
///
/// let mut all = String::new();
/// BoundedRead::new("quay\nstrand\n".as_bytes(), 12).read_to_string(&mut all).unwrap();
/// assert_eq!(all, "quay\nstrand\n");
/// let e = BoundedRead::new(std::io::repeat(b'y'), 1000).read_to_end(&mut Vec::new());
/// assert!(e.unwrap_err().to_string().contains("more than 1000 bytes"));
/// ```
#[derive(Debug)]
pub struct BoundedRead<R> {
    inner: R,
    limit: u64,
    left: u64,
}

impl<R> BoundedRead<R> {
    /// Reads at most `limit` bytes of `inner`; one more is an error.
    pub fn new(inner: R, limit: u64) -> BoundedRead<R> {
        BoundedRead {
            inner,
            limit,
            left: limit,
        }
    }
}

impl<R: std::io::Read> std::io::Read for BoundedRead<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        // One byte past the limit tells an input that ends exactly there from a longer one.
        let room = usize::try_from(self.left.saturating_add(1)).unwrap_or(usize::MAX);
        let take = buf.len().min(room);
        let got = self.inner.read(&mut buf[..take])?;
        if got as u64 > self.left {
            return Err(std::io::Error::other(format!(
                "reading stopped after more than {} bytes: an input this large would not fit \
                 in the memory budget ({} bytes, three times the text; the budget is \
                 MemAvailable or WAYMARK_MEMORY_BUDGET=bytes)",
                self.limit,
                self.limit.saturating_mul(3)
            )));
        }
        self.left -= got as u64;
        Ok(got)
    }
}

/// Peak memory of `eval --distortion` over about `pairs` pairs among `items` items at
/// dimension `dim`: each pair's true and three embedded distances, held twice while the rows
/// are joined (64 bytes), a ratio per pair being sorted (8), the items' coordinates.
pub fn distortion_estimate(pairs: u64, items: u64, dim: usize) -> u64 {
    pairs
        .saturating_mul(72)
        .saturating_add(items.saturating_mul(8 * dim as u64 + 48))
        .saturating_add(16 << 20)
}

/// Refuses `eval --distortion` when [`distortion_estimate`] exceeds the budget. The pairs
/// measured are `max_pairs` or every pair of `n` items, whichever is fewer (with the sample's
/// slack of one item's pairs).
pub fn check_distortion(n: usize, max_pairs: usize, dim: usize) -> Result<()> {
    let n = n as u64;
    let all = n.saturating_sub(1).saturating_mul(n) / 2;
    let pairs = all.min((max_pairs as u64).saturating_add(n));
    let items = if all <= max_pairs as u64 {
        n
    } else {
        // s(s−1)/2 ≥ pairs: s about √(2·pairs) + 1.
        (((2.0 * pairs as f64).sqrt() as u64) + 2).min(n)
    };
    let need = distortion_estimate(pairs, items, dim);
    match budget()? {
        Some(have) if need > have => Err(refuse(
            &format!("measuring the distortion over {pairs} pairs of {items} items"),
            need,
            have,
        )),
        _ => Ok(()),
    }
}

/// Peak memory of the axiom check over a sample of `m` items: the m × m distance matrix.
pub fn axiom_check_estimate(m: u64) -> u64 {
    m.saturating_mul(m)
        .saturating_mul(8)
        .saturating_add(16 << 20)
}

/// Refuses `check-metric` when the sample it would draw (`sample` items, at most `n`) needs
/// more than the budget ([`axiom_check_estimate`]).
pub fn check_axiom_sample(n: usize, sample: usize) -> Result<()> {
    let m = sample.min(n) as u64;
    let need = axiom_check_estimate(m);
    match budget()? {
        Some(have) if need > have => Err(refuse(
            &format!("checking the metric on a sample of {m} items"),
            need,
            have,
        )),
        _ => Ok(()),
    }
}
