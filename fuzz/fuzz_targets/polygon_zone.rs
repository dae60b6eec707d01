//! cargo-fuzz target `polygon_zone`. Its body is `goalsmith_core::fuzzing::polygon_zone`,
//! which `cargo test` also runs over fuzz/corpus/polygon_zone and fuzz/regressions/polygon_zone.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| goalsmith_core::fuzzing::polygon_zone(data));
