//! Fuzz the segments-file parser: no panic, one-line errors and warnings,
//! and an accepted list is sorted, disjoint and finite.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
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
});
