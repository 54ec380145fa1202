//! Fuzz the `bundle.toml` parser and validator (without the `.npy` files):
//! no panic, one-line errors, and accepted channels obey the stated limits.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match glitchbook::io::parse_bundle_toml(text, std::path::Path::new("/fuzz/bundle")) {
        Ok(b) => {
            assert!(!b.channels.is_empty());
            for c in &b.channels {
                assert!(c.rate.is_finite() && c.rate > 0.0);
                assert!(c.start.is_finite());
                assert!(!c.name.is_empty());
                for f in [c.fmin, c.fmax].into_iter().flatten() {
                    assert!(f > 0.0 && f <= c.rate / 2.0);
                }
                if let (Some(lo), Some(hi)) = (c.fmin, c.fmax) {
                    assert!(lo < hi);
                }
            }
        }
        Err(e) => assert!(!format!("{e:#}").contains('\n'), "multi-line error: {e:#}"),
    }
});
