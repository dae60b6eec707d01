//! cargo-fuzz target `goal_document`. Its body is `goalsmith::fuzzing::goal_document`,
//! which `cargo test` also runs over fuzz/corpus/goal_document and fuzz/regressions/goal_document.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| goalsmith::fuzzing::goal_document(data));
