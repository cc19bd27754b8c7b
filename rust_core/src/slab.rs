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
pub struct Slab<T> {
    ptr: *const T,
    len: usize,
    owner: Owner<T>,
}

// SAFETY: a `Slab` is an owned, never-mutated buffer plus a shared view into it, so it is
// exactly as thread-safe as `&[T]` next to an `Arc` or a `Vec` it keeps alive. The raw pointer
// is what stops the compiler from seeing that.
unsafe impl<T: Sync> Send for Slab<T> {}
// SAFETY: as above; nothing ever writes through a `Slab`.
unsafe impl<T: Sync> Sync for Slab<T> {}

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
        // keeps alive: a `Vec`'s heap buffer (which does not move when the `Vec` moves and is
        // never touched again) or a shared byte buffer that never changes (`SharedBytes`),
        // checked for bounds and alignment by `bytemuck` in `view`. No `&mut` to that memory
        // exists anywhere. Exercised by every test, built trees and loaded ones alike.
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

    #[test]
    fn views_out_of_bounds_or_misaligned_are_refused() {
        let buffer: Arc<dyn SharedBytes> = Arc::new(Bytes((0..8).collect()));
        assert!(Slab::<u64>::view(&buffer, 8, 8).is_none()); // one past the end
        assert!(Slab::<u64>::view(&buffer, 4, 1).is_none()); // misaligned
        assert!(Slab::<u64>::view(&buffer, usize::MAX, 1).is_none()); // overflow
        assert!(Slab::<u64>::view(&buffer, 64, 0).is_some()); // empty at the end
    }
}
