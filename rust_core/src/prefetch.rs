//! Software prefetch, so that a batch of queries keeps many cache misses in flight.

/// Hint that the cache line at `ptr` will be read soon. Never faults, whatever `ptr` is.
#[inline(always)]
pub fn prefetch_read(ptr: *const u8) {
    #[cfg(target_arch = "x86_64")]
    {
        use std::arch::x86_64::{_mm_prefetch, _MM_HINT_T0};
        // SAFETY: a prefetch is only a hint; it never dereferences `ptr` architecturally and
        // cannot fault even for an invalid address, and SSE is part of the x86_64 baseline.
        // Exercised by every batched count in the test suite.
        unsafe { _mm_prefetch(ptr as *const i8, _MM_HINT_T0) };
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        let _ = ptr;
    }
}
