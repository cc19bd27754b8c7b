//! Large buffers backed by transparent huge pages.
//!
//! On Linux, first touching freshly mapped memory costs a page fault per 4 KiB page, which
//! makes first writing a new gigabyte-sized level array cost more than the pass's own work. Asking
//! for huge pages (`MADV_HUGEPAGE`) before the first write turns that into one fault per
//! 2 MiB. The advice is only a hint: where it is refused, nothing changes but the speed.
//!
//! Threads doing work nobody waits for (a growing tree's merges) forgo the advice
//! ([`forgo_huge_pages_on_this_thread`]): where the kernel is short of free huge pages, a
//! fault on advised memory compacts memory first, and while it does so the process's other
//! threads stalled too: appends beside merges now and then took ten to thirty times their
//! usual 10 ms, never once the merges' memory went unadvised (measured with 10^5-row
//! appends onto 10^7 rows).

use std::cell::Cell;

use rayon::prelude::*;

/// Buffers smaller than this are not worth the system call.
const ADVISE_FROM_BYTES: usize = 4 << 20;

thread_local! {
    static FORGOES_HUGE_PAGES: Cell<bool> = const { Cell::new(false) };
}

/// Never again advise huge pages for buffers the calling thread makes.
pub fn forgo_huge_pages_on_this_thread() {
    FORGOES_HUGE_PAGES.with(|f| f.set(true));
}

/// Whether a buffer of `bytes` bytes made on the calling thread is advised to use huge pages.
fn advises(bytes: usize) -> bool {
    bytes >= ADVISE_FROM_BYTES && !FORGOES_HUGE_PAGES.with(Cell::get)
}

/// Ask the kernel to back `bytes` bytes at `ptr` with huge pages.
fn advise_huge_pages(ptr: *const u8, bytes: usize) {
    #[cfg(target_os = "linux")]
    {
        if !advises(bytes) {
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

    #[test]
    fn a_thread_that_forgoes_huge_pages_advises_none_and_others_still_do() {
        assert!(advises(ADVISE_FROM_BYTES) && !advises(ADVISE_FROM_BYTES - 1));
        std::thread::spawn(|| {
            forgo_huge_pages_on_this_thread();
            assert!(!advises(ADVISE_FROM_BYTES << 8));
            // Its buffers are still whole and written.
            assert!(filled(3 << 20, 5u32).iter().all(|&x| x == 5));
        })
        .join()
        .unwrap();
        assert!(advises(ADVISE_FROM_BYTES));
    }
}
