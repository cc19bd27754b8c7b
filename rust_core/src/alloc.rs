//! Large buffers backed by transparent huge pages.
//!
//! On Linux, first touching freshly mapped memory costs a page fault per 4 KiB page, which
//! makes first writing a new gigabyte-sized level array cost more than the pass's own work. Asking
//! for huge pages (`MADV_HUGEPAGE`) before the first write turns that into one fault per
//! 2 MiB. The advice is only a hint: where it is refused, nothing changes but the speed.

use rayon::prelude::*;

/// Buffers smaller than this are not worth the system call.
const ADVISE_FROM_BYTES: usize = 4 << 20;

/// Ask the kernel to back `bytes` bytes at `ptr` with huge pages.
fn advise_huge_pages(ptr: *const u8, bytes: usize) {
    #[cfg(target_os = "linux")]
    {
        if bytes < ADVISE_FROM_BYTES {
            return;
        }
        const PAGE: usize = 4096;
        let start = (ptr as usize).div_ceil(PAGE) * PAGE;
        let end = (ptr as usize + bytes) / PAGE * PAGE;
        if end > start {
            // SAFETY: madvise only changes how the kernel backs pages; [start, end) lies
            // inside one live allocation of ours (rounded inward to page boundaries) and
            // MADV_HUGEPAGE never changes its contents. Failure is harmless and ignored.
            // Exercised by every build of more than a few hundred thousand points in the tests.
            unsafe {
                libc::madvise(start as *mut libc::c_void, end - start, libc::MADV_HUGEPAGE);
            }
        }
    }
    #[cfg(not(target_os = "linux"))]
    {
        let _ = (ptr, bytes);
    }
}

/// An empty vector with room for `len` elements, its memory advised to use huge pages.
pub fn with_capacity<T>(len: usize) -> Vec<T> {
    let v = Vec::with_capacity(len);
    advise_huge_pages(v.as_ptr() as *const u8, len * std::mem::size_of::<T>());
    v
}

/// `len` copies of `value`, written after the huge-page advice.
pub fn filled<T: Copy + Send + Sync>(len: usize, value: T) -> Vec<T> {
    let mut v = with_capacity(len);
    v.par_extend(rayon::iter::repeat_n(value, len));
    v
}

/// The items of an indexed parallel iterator, collected into huge-page-advised memory.
pub fn collect<T: Send, I>(iter: I) -> Vec<T>
where
    I: IndexedParallelIterator<Item = T>,
{
    let mut v = with_capacity(iter.len());
    v.par_extend(iter);
    v
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn advised_buffers_hold_what_was_written() {
        let n = 3 << 20; // 12 MiB of u32: above the advice threshold
        let v = filled(n, 7u32);
        assert_eq!(v.len(), n);
        assert!(v.iter().all(|&x| x == 7));
        let w = collect((0..n).into_par_iter().map(|i| i as u64 * 3));
        assert_eq!(w.len(), n);
        assert_eq!(w[n - 1], (n as u64 - 1) * 3);
    }
}
