//! Fuzz the `.npy` header parser: no panic, one-line errors, and an accepted
//! header is self-consistent.
//! The checks are in `../checks.rs` (also compiled and run on the seeds by
//! `cargo test`).
#![no_main]
#[path = "../checks.rs"]
mod checks;

libfuzzer_sys::fuzz_target!(|data: &[u8]| checks::npy_header(data));
