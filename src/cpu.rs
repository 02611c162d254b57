//! What the CPU can do, asked once, and the cache hint the hot loops share.
//!
//! The kernels (coordinate scan, column blocks, Levenshtein lanes) each have a portable form
//! and faster forms for CPU features found at run time; they ask here which to take. The
//! standard library caches the CPUID answers, so each question is one relaxed atomic load.
//!
//! # Forcing a lower level
//!
//! The environment variable `WAYMARK_SIMD` (read once, at the first question) lowers the
//! [`Level`] every kernel may use, so that each path can be tested and measured on one
//! machine:
//!
//! * `portable`: plain Rust only (no AVX2, and no `popcnt`/`bmi1` forms either);
//! * `avx2`: at most the AVX2 kernels (and the `popcnt`/`bmi1` scalar forms);
//! * `avx512`: at most the AVX-512 kernels (the default: the best the CPU has; kernels whose
//!   AVX-512 form measured no faster than AVX2 use it only when `avx512` is named, see
//!   [`Level::active_avx512_if_forced`]).
//!
//! A level the CPU lacks is clamped to the best it has, and an unknown value is ignored;
//! both print one note on standard error. An empty value counts as unset. Tests and benches that need several levels in one
//! process pass a [`Level`] to the kernels directly
//! (e.g. [`crate::metric::LevenshteinQuery::with_level`]).

use std::sync::OnceLock;

/// The widest family of vector instructions a kernel may use, lowest first.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Level {
    /// Plain Rust, no CPU-specific instructions.
    Portable,
    /// AVX2 with `popcnt` and `bmi1`.
    Avx2,
    /// AVX-512 (F, BW, VL) on top of [`Level::Avx2`].
    Avx512,
}

impl Level {
    /// Every level, lowest first.
    pub const ALL: [Level; 3] = [Level::Portable, Level::Avx2, Level::Avx512];

    /// The name `WAYMARK_SIMD` takes for this level.
    pub fn name(self) -> &'static str {
        match self {
            Level::Portable => "portable",
            Level::Avx2 => "avx2",
            Level::Avx512 => "avx512",
        }
    }

    /// Parses a `WAYMARK_SIMD` value (ASCII case ignored, surrounding spaces trimmed).
    ///
    /// ```
    /// use waymark::cpu::Level;
    ///
    /// assert_eq!(Level::parse(" AVX2 "), Some(Level::Avx2));
    /// assert_eq!(Level::parse("sse9"), None);
    /// ```
    pub fn parse(s: &str) -> Option<Level> {
        let s = s.trim();
        Level::ALL
            .into_iter()
            .find(|l| l.name().eq_ignore_ascii_case(s))
    }

    /// The best level this CPU runs, whatever `WAYMARK_SIMD` says.
    pub fn detected() -> Level {
        #[cfg(target_arch = "x86_64")]
        {
            use std::arch::is_x86_feature_detected as has;
            let avx2 = has!("avx2") && has!("popcnt") && has!("bmi1");
            if avx2 && has!("avx512f") && has!("avx512bw") && has!("avx512vl") {
                Level::Avx512
            } else if avx2 {
                Level::Avx2
            } else {
                Level::Portable
            }
        }
        #[cfg(not(target_arch = "x86_64"))]
        {
            Level::Portable
        }
    }

    /// The level the kernels use: [`Level::detected`], lowered by `WAYMARK_SIMD`.
    pub fn active() -> Level {
        settings().0
    }

    /// The level `WAYMARK_SIMD` named (lowered to what this CPU runs), or `None` when it is
    /// unset, empty or not a level.
    ///
    /// Kernels whose AVX-512 form measured no faster than their AVX2 form take AVX2 unless
    /// AVX-512 is asked for here (see DEVELOPERS.md, "Dispatch levels").
    pub fn forced() -> Option<Level> {
        let (level, _, named) = settings();
        named.then_some(level)
    }

    /// The level for a kernel whose AVX-512 form is kept for when it is asked for:
    /// [`Level::active`], but at most [`Level::Avx2`] unless `WAYMARK_SIMD` named `avx512`.
    pub fn active_avx512_if_forced() -> Level {
        match Level::forced() {
            Some(level) => level,
            None => Level::active().min(Level::Avx2),
        }
    }

    /// Whether this CPU runs the level.
    pub fn available(self) -> bool {
        self <= Level::detected()
    }

    /// `self`, lowered to what this CPU runs.
    pub fn clamped(self) -> Level {
        self.min(Level::detected())
    }
}

/// The active level, whether `WAYMARK_SIMD=portable` turned the scalar forms off too, and
/// whether `WAYMARK_SIMD` named a level.
fn settings() -> (Level, bool, bool) {
    static SETTINGS: OnceLock<(Level, bool, bool)> = OnceLock::new();
    *SETTINGS.get_or_init(|| {
        let detected = Level::detected();
        // Unset or empty: the best level, no note.
        let raw = std::env::var("WAYMARK_SIMD").unwrap_or_default();
        if raw.trim().is_empty() {
            return (detected, false, false);
        }
        match Level::parse(&raw) {
            Some(want) if want <= detected => (want, want == Level::Portable, true),
            Some(want) => {
                eprintln!(
                    "note: WAYMARK_SIMD={} asks for a level this CPU lacks; using {}",
                    want.name(),
                    detected.name()
                );
                (detected, false, true)
            }
            None => {
                eprintln!(
                    "note: WAYMARK_SIMD={raw:?} is not one of portable, avx2, avx512; ignored \
                     (using {})",
                    detected.name()
                );
                (detected, false, false)
            }
        }
    })
}

/// Whether the CPU has AVX2 (the coordinate scan's and the Levenshtein lanes' vector path),
/// and `WAYMARK_SIMD` allows it.
#[inline]
pub fn has_avx2() -> bool {
    Level::active() >= Level::Avx2
}

/// Whether the CPU has AVX-512 F, BW and VL, and `WAYMARK_SIMD` allows it.
#[inline]
pub fn has_avx512() -> bool {
    Level::active() >= Level::Avx512
}

/// Whether the CPU has `popcnt` and `bmi1` (the scalar Levenshtein kernels' fast form), and
/// `WAYMARK_SIMD` is not `portable`.
#[inline]
pub fn has_popcnt_bmi1() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        !settings().1
            && std::arch::is_x86_feature_detected!("popcnt")
            && std::arch::is_x86_feature_detected!("bmi1")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// Whether the CPU has AVX2 and `popcnt` (the column blocks' vector path), and
/// `WAYMARK_SIMD` allows it.
#[inline]
pub fn has_avx2_popcnt() -> bool {
    // The AVX2 level includes popcnt.
    has_avx2()
}

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
