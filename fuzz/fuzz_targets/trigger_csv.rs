//! Fuzz the trigger CSV and injection CSV parsers: no panic, one-line
//! errors, and accepted triggers obey the documented invariants.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
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
});
