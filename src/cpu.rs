//! What the CPU can do, asked once, and the cache hint the hot loops share.
//!
//! The kernels (coordinate scan, column blocks, Levenshtein lanes) each have a portable form
//! and faster forms for CPU features found at run time; they ask here which to take. The
//! standard library caches the CPUID answers, so each question is one relaxed atomic load.

/// Whether the CPU has AVX2 (the coordinate scan's and the Levenshtein lanes' vector path).
#[inline]
pub fn has_avx2() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::arch::is_x86_feature_detected!("avx2")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// Whether the CPU has `popcnt` and `bmi1` (the scalar Levenshtein kernels' fast form).
#[inline]
pub fn has_popcnt_bmi1() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::arch::is_x86_feature_detected!("popcnt") && std::arch::is_x86_feature_detected!("bmi1")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// Whether the CPU has AVX2 and `popcnt` (the column blocks' vector path).
#[inline]
pub fn has_avx2_popcnt() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        has_avx2() && std::arch::is_x86_feature_detected!("popcnt")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
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
