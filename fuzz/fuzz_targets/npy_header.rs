//! Fuzz the `.npy` header parser: no panic, one-line errors, and an accepted
//! header is self-consistent.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    match glitchbook::io::parse_header(data) {
        Ok(h) => {
            assert!(h.len > 0);
            assert!(h.data_offset >= 10 && h.data_offset as usize <= data.len());
            assert!(h.expected_file_len().is_some());
        }
        Err(e) => assert!(!format!("{e:#}").contains('\n'), "multi-line error: {e:#}"),
    }
});
