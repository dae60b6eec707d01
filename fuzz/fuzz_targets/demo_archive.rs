//! cargo-fuzz target `demo_archive`. Its body is `goalsmith::fuzzing::demo_archive`,
//! which `cargo test` also runs over fuzz/corpus/demo_archive and fuzz/regressions/demo_archive.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| goalsmith::fuzzing::demo_archive(data));
