//! Fuzz the segments-file parser: no panic, one-line errors and warnings,
//! and an accepted list is sorted, disjoint and finite.
//! The checks are in `../checks.rs` (also compiled and run on the seeds by
//! `cargo test`).
#![no_main]
#[path = "../checks.rs"]
mod checks;

libfuzzer_sys::fuzz_target!(|data: &[u8]| checks::segments(data));
