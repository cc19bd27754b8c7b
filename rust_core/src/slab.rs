//! Immutable typed arrays that either own their memory or look into a shared byte buffer.
//!
//! A built tree owns its arrays; a tree loaded from an index file looks straight into the
//! file's bytes (memory-mapped or read into one aligned buffer), so loading copies nothing.
//! Both kinds are a [`Slab`], which reads as a plain `&[T]`: the hot query loops see a slice
//! and never learn where it lives.

use std::fmt;
use std::ops::Deref;
use std::sync::Arc;

use bytemuck::Pod;

/// A byte buffer that outlives every slab cut from it and never changes.
pub trait SharedBytes: Send + Sync + 'static {
    fn bytes(&self) -> &[u8];
}

enum Owner<T> {
    Vec(#[allow(dead_code)] Vec<T>),
    Shared(#[allow(dead_code)] Arc<dyn SharedBytes>),
}

/// An immutable array of `T`: a `Vec` of its own, or a range of a [`SharedBytes`] buffer.
///
/// A slab is `Send` and `Sync` exactly when `T` is both: it may own its values (and drop
/// them on whichever thread drops it) and hands out `&[T]` to every thread that shares it.
/// A `T` that may not move between threads therefore makes a slab that may not either:
///
/// ```compile_fail
/// fn needs_send<T: Send>() {}
/// // A mutex guard is `Sync` but must be dropped on the thread that locked it.
/// needs_send::<boxwood_core::Slab<std::sync::MutexGuard<'static, u8>>>();
/// ```
pub struct Slab<T> {
    ptr: *const T,
    len: usize,
    owner: Owner<T>,
}

// SAFETY: a `Slab` is a `Vec<T>` or an `Arc<dyn SharedBytes>` (itself `Send + Sync`) plus a
// pointer into the memory that owner keeps alive; only the raw pointer stops the compiler from
// deriving these. Sending a slab moves the `Vec<T>`, so its values may be dropped on another
// thread (`T: Send`), and keeps `&[T]` views that other threads may hold too (`T: Sync`).
// Nothing ever writes through a slab, so with both bounds it is as thread-safe as the
// `Vec<T>` plus `&[T]` it stands for. Exercised by `slabs_cross_threads` below and by every
// parallel query on a tree.
unsafe impl<T: Send + Sync> Send for Slab<T> {}
// SAFETY: sharing a slab shares only `&[T]` (`T: Sync`) and clones of it, which copy the
// values (`T: Send` for the `Vec` a clone owns) or the `Arc`; see `Send` above.
unsafe impl<T: Send + Sync> Sync for Slab<T> {}

impl<T: Pod> Slab<T> {
    /// The bytes `[start, start + len * size_of::<T>())` of `buffer` as `len` values of `T`,
    /// or `None` when that range is out of bounds or not aligned for `T`.
    pub fn view(buffer: &Arc<dyn SharedBytes>, start: usize, len: usize) -> Option<Self> {
        let bytes = buffer.bytes();
        let size = len.checked_mul(std::mem::size_of::<T>())?;
        let end = start.checked_add(size)?;
        let range = bytes.get(start..end)?;
        let values: &[T] = bytemuck::try_cast_slice(range).ok()?;
        Some(Slab {
            ptr: values.as_ptr(),
            len: values.len(),
            owner: Owner::Shared(Arc::clone(buffer)),
        })
    }
}

impl<T> Slab<T> {
    /// Whether the values live in a shared buffer (a loaded file) rather than in a `Vec`.
    pub fn is_shared(&self) -> bool {
        matches!(self.owner, Owner::Shared(_))
    }
}

impl<T> From<Vec<T>> for Slab<T> {
    fn from(v: Vec<T>) -> Self {
        Slab {
            ptr: v.as_ptr(),
            len: v.len(),
            owner: Owner::Vec(v),
        }
    }
}

impl<T> Default for Slab<T> {
    fn default() -> Self {
        Slab::from(Vec::new())
    }
}

impl<T> Deref for Slab<T> {
    type Target = [T];

    #[inline(always)]
    fn deref(&self) -> &[T] {
        // SAFETY: `ptr` and `len` were taken from a live `&[T]` into memory that `owner`
        // keeps alive for as long as `self`: a `Vec`'s heap buffer (which does not move when
        // the `Vec` moves, and is never touched again) or a shared byte buffer that never
        // changes (`SharedBytes`), checked for bounds and alignment by `bytemuck` in `view`,
        // where `T: Pod` also makes every bit pattern a valid `T`. No `&mut` to that memory
        // exists anywhere. For a memory-mapped file "never changes" rests on no other program
        // writing or truncating the file while it is mapped (see `file::open`). Exercised by
        // the tests below and by every query, on built trees and loaded ones alike.
        unsafe { std::slice::from_raw_parts(self.ptr, self.len) }
    }
}

impl<T: Clone> Clone for Slab<T> {
    fn clone(&self) -> Self {
        match &self.owner {
            Owner::Vec(_) => Slab::from(self.deref().to_vec()),
            Owner::Shared(buffer) => Slab {
                ptr: self.ptr,
                len: self.len,
                owner: Owner::Shared(Arc::clone(buffer)),
            },
        }
    }
}

impl<T: fmt::Debug> fmt::Debug for Slab<T> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("Slab")
            .field("len", &self.len)
            .field("shared", &self.is_shared())
            .finish()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    struct Bytes(Vec<u64>);

    impl SharedBytes for Bytes {
        fn bytes(&self) -> &[u8] {
            bytemuck::cast_slice(&self.0)
        }
    }

    #[test]
    fn owned_and_shared_slabs_read_back_their_values() {
        let owned = Slab::from(vec![3u32, 1, 4]);
        assert_eq!(&owned[..], &[3, 1, 4]);
        assert!(!owned.is_shared());
        let moved = owned.clone();
        drop(owned);
        assert_eq!(&moved[..], &[3, 1, 4]);

        let buffer: Arc<dyn SharedBytes> = Arc::new(Bytes((0..8).collect()));
        let view = Slab::<u64>::view(&buffer, 16, 3).unwrap();
        drop(buffer);
        assert!(view.is_shared());
        assert_eq!(&view[..], &[2, 3, 4]);
        let copy = view.clone();
        drop(view);
        assert_eq!(&copy[..], &[2, 3, 4]);
    }

    /// The `Send`/`Sync` impls: slabs of both kinds move to and are shared by other threads,
    /// which read the same values and drop the owned one there.
    #[test]
    fn slabs_cross_threads() {
        fn send_and_sync<T: Send + Sync>(_: &T) {}
        let owned = Slab::from((0..1000u64).collect::<Vec<_>>());
        let buffer: Arc<dyn SharedBytes> = Arc::new(Bytes((0..8).collect()));
        let shared = Slab::<u64>::view(&buffer, 8, 4).unwrap();
        drop(buffer);
        send_and_sync(&owned);
        let sums = std::thread::scope(|s| {
            let a = s.spawn(|| owned.iter().sum::<u64>());
            let b = s.spawn(|| shared.iter().sum::<u64>());
            (a.join().unwrap(), b.join().unwrap())
        });
        assert_eq!(sums, (499_500, 1 + 2 + 3 + 4));
        let moved = std::thread::spawn(move || (owned.len(), shared[3]))
            .join()
            .unwrap();
        assert_eq!(moved, (1000, 4));
    }

    #[test]
    fn views_out_of_bounds_or_misaligned_are_refused() {
        let buffer: Arc<dyn SharedBytes> = Arc::new(Bytes((0..8).collect()));
        assert!(Slab::<u64>::view(&buffer, 8, 8).is_none()); // one past the end
        assert!(Slab::<u64>::view(&buffer, 4, 1).is_none()); // misaligned
        assert!(Slab::<u64>::view(&buffer, usize::MAX, 1).is_none()); // overflow
        assert!(Slab::<u64>::view(&buffer, 64, 0).is_some()); // empty at the end
    }
}
