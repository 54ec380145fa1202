//! The checks of the fuzz targets, one function per target: no panic,
//! one-line errors, and the invariants an accepted input must satisfy.
//! `fuzz_targets/*.rs` call them under libFuzzer (`cargo fuzz`, see
//! README.md); `cargo test` compiles them too and replays the seeds in
//! `seeds/` through them (`tests/fuzz_seeds.rs`), so they cannot rot.

/// `glitchbook::io::parse_header`: an accepted header is self-consistent.
pub fn npy_header(data: &[u8]) {
    match glitchbook::io::parse_header(data) {
        Ok(h) => {
            assert!(h.len > 0);
            assert!(h.data_offset >= 10 && h.data_offset as usize <= data.len());
            assert!(h.expected_file_len().is_some());
        }
        Err(e) => assert!(!format!("{e:#}").contains('\n'), "multi-line error: {e:#}"),
    }
}

/// `glitchbook::io::parse_bundle_toml` (without the `.npy` files): accepted
/// channels obey the stated limits.
pub fn bundle_toml(data: &[u8]) {
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
}

/// `glitchbook::io::parse_segments`: one-line warnings; an accepted list
/// is sorted, disjoint and finite.
pub fn segments(data: &[u8]) {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match glitchbook::io::parse_segments(text, "fuzz.txt") {
        Ok((list, warnings)) => {
            assert!(!list.is_empty());
            for w in &warnings {
                assert!(!w.contains('\n'), "multi-line warning: {w}");
            }
            let segs = list.segments();
            for s in segs {
                assert!(s.start.is_finite() && s.end.is_finite() && s.start < s.end);
            }
            for pair in segs.windows(2) {
                assert!(pair[0].end < pair[1].start);
            }
        }
        Err(e) => assert!(!format!("{e:#}").contains('\n'), "multi-line error: {e:#}"),
    }
}

/// `glitchbook::io::parse_trigger_csv` and `parse_injections`: accepted
/// triggers obey the documented invariants.
pub fn trigger_csv(data: &[u8]) {
    match glitchbook::io::parse_trigger_csv(data, "fuzz.csv") {
        Ok(triggers) => {
            for t in &triggers {
                assert!(t.t_start <= t.t_peak && t.t_peak <= t.t_end);
                assert!(t.f_low >= 0.0 && t.f_low <= t.f_peak && t.f_peak <= t.f_high);
                assert!(t.snr > 0.0 && t.f_peak > 0.0);
                assert!(t.q.is_nan() || (t.q.is_finite() && t.q > 0.0));
                for x in [
                    t.t_peak, t.t_start, t.t_end, t.f_peak, t.f_low, t.f_high, t.snr, t.energy,
                ] {
                    assert!(x.is_finite(), "non-finite field in {t:?}");
                }
            }
            for pair in triggers.windows(2) {
                assert!(pair[0].t_peak <= pair[1].t_peak);
            }
        }
        Err(e) => assert!(!format!("{e:#}").contains('\n'), "multi-line error: {e:#}"),
    }
    if let Err(e) = glitchbook::io::parse_injections(data, "fuzz.csv") {
        assert!(!format!("{e:#}").contains('\n'), "multi-line error: {e:#}");
    }
}
