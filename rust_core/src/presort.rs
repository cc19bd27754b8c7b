//! The two presorts: rows ordered by (key, row) on each axis.

use rayon::prelude::*;

use crate::alloc;

/// Rows ordered by `(key, row)`, and the keys in that order.
///
/// Ties are broken by row so that the order, and with it every answer, is deterministic.
pub fn sort_rows_by_key(keys: &[u64]) -> (Vec<u32>, Vec<u64>) {
    let mut pairs: Vec<(u64, u32)> =
        alloc::collect(keys.par_iter().enumerate().map(|(row, &k)| (k, row as u32)));
    pairs.par_sort_unstable();
    let order = alloc::collect(pairs.par_iter().map(|&(_, row)| row));
    let sorted = alloc::collect(pairs.par_iter().map(|&(k, _)| k));
    (order, sorted)
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #[test]
        fn sorts_by_key_then_row(keys in proptest::collection::vec(0u64..20, 0..300)) {
            let (order, sorted) = sort_rows_by_key(&keys);
            let mut expected: Vec<u32> = (0..keys.len() as u32).collect();
            expected.sort_by_key(|&r| (keys[r as usize], r));
            prop_assert_eq!(&order, &expected);
            let expected_keys: Vec<u64> = expected.iter().map(|&r| keys[r as usize]).collect();
            prop_assert_eq!(sorted, expected_keys);
        }
    }
}
