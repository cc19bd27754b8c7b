//! boxwood-core: a static 2-D range tree in array layout with fractional cascading.
//!
//! Build once from two coordinate columns, then count the points in axis-parallel boxes in
//! O(log n), sum their weights in O(log n), and report their row ids in O(log n + k).
//!
//! ```
//! use boxwood_core::{build, Bound, BoxBounds, Column, Inclusive, Layout, WeightColumn};
//!
//! // Five bike trips: start minute, trip length, fare in cents.
//! let start = [0.0, 10.0, 10.0, 25.0, 40.0];
//! let minutes = [12_i64, 5, 30, 8, 8];
//! let fare = [300_i64, 150, 700, 200, 200];
//! let tree = build(
//!     Column::F64(&start),
//!     Column::I64(&minutes),
//!     Some(WeightColumn::I64(&fare)),
//!     Layout::Fast,
//! )
//! .unwrap();
//!
//! // Trips that started in [10, 40] and lasted between 5 and 10 minutes.
//! let b = BoxBounds {
//!     x_lo: Bound::F64(10.0),
//!     x_hi: Bound::F64(40.0),
//!     y_lo: Bound::I64(5),
//!     y_hi: Bound::I64(10),
//! };
//! assert_eq!(tree.count(&b, Inclusive::Both).unwrap(), 3);
//! let mut rows = Vec::new();
//! tree.report(&b, Inclusive::Both, &mut rows).unwrap();
//! rows.sort();
//! assert_eq!(rows, [1, 3, 4]);
//! assert_eq!(tree.sum(&b, Inclusive::Both).unwrap(), boxwood_core::WeightSum::I64(550));
//! // The right edge open: the trip at minute 40 drops out.
//! assert_eq!(tree.count(&b, Inclusive::Left).unwrap(), 2);
//! ```
//!
//! The build side ([`build`]) and the read side ([`RangeTree`] with the methods in the
//! `query` and `batch` modules) share nothing but the finished arrays.

mod alloc;
mod batch;
mod bits;
mod build;
mod columns;
mod error;
mod estimate;
pub mod file;
mod key_codes;
mod keyed;
mod keys;
mod prefetch;
mod presort;
mod probe;
mod query;
mod replay;
mod rowsort;
mod search;
mod slab;
mod stats;
#[cfg(test)]
mod test_rng;
mod transpose;
mod tree;
mod wide;

pub use alloc::forgo_huge_pages_on_this_thread;
pub use batch::{BoundColumn, Boxes, Report, SumColumn};
pub use build::{build, build_keyed, height_for, WeightColumn, MAX_ROWS};
pub use columns::{Columns, Values};
pub use error::{Axis, Error};
pub use estimate::{estimate, estimate_keyed, Estimate, WeightKind};
pub use key_codes::{code_keys, KeyCodes};
pub use keyed::{KeyColumn, KeyRuns, MAX_KEYS};
pub use keys::{Bound, Column, Domain, Inclusive};
pub use probe::{Part, Read, Tally};
pub use query::{BoxBounds, RankBox, Run, WeightSum};
pub use rowsort::RowSort;
pub use slab::{SharedBytes, Slab};
pub use stats::{CountedBoxes, OrderStats, StatValues};
pub use tree::{BuildStats, Group, Layout, LevelWeights, RangeTree};

/// Panic inside a rayon worker, for tests that check panics are caught at the boundary.
#[doc(hidden)]
pub fn panic_on_worker_for_tests() {
    rayon::join(|| panic!("deliberate panic on a worker thread"), || ());
}
