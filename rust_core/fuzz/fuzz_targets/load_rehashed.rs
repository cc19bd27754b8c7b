//! Like `load`, but every checksum is recomputed after the fuzzer has changed the bytes, so
//! that changes to a valid file get past the checksums to the structural checks behind them
//! (sorted keys, the search indexes, the count cascade's counts and balance, rank counts,
//! balanced cascade blocks, row ids, section placement) and, with a full verification, to
//! the comparison of the count cascade with the one the bits give.

#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let mut bytes = data.to_vec();
    boxwood_core::file::rehash_for_fuzzing(&mut bytes);
    boxwood_core_fuzz::load_and_check(&bytes);
});
