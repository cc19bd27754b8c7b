//! Arbitrary bytes into the loader: it must refuse them or hand back a tree whose answers
//! agree with each other. Mostly exercises the header, table and checksum checks.

#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    boxwood_core_fuzz::load_and_check(data);
});
