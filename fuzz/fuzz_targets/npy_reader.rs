//! cargo-fuzz target `npy_reader`. Its body is `goalsmith_core::fuzzing::npy_reader`,
//! which `cargo test` also runs over fuzz/corpus/npy_reader and fuzz/regressions/npy_reader.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| goalsmith_core::fuzzing::npy_reader(data));
