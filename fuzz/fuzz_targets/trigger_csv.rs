//! Fuzz the trigger CSV and injection CSV parsers: no panic, one-line
//! errors, and accepted triggers obey the documented invariants.
//! The checks are in `../checks.rs` (also compiled and run on the seeds by
//! `cargo test`).
#![no_main]
#[path = "../checks.rs"]
mod checks;

libfuzzer_sys::fuzz_target!(|data: &[u8]| checks::trigger_csv(data));
