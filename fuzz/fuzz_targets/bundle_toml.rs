//! Fuzz the `bundle.toml` parser and validator (without the `.npy` files):
//! no panic, one-line errors, and accepted channels obey the stated limits.
//! The checks are in `../checks.rs` (also compiled and run on the seeds by
//! `cargo test`).
#![no_main]
#[path = "../checks.rs"]
mod checks;

libfuzzer_sys::fuzz_target!(|data: &[u8]| checks::bundle_toml(data));
