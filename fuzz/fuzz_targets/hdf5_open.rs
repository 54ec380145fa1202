//! Fuzz HDF5 opening and attribute reading (the default strain layout and
//! a custom one), then a bounded read. No panic; errors are one line; an
//! accepted file has a positive length, a finite start and a rate > 0.
#![no_main]
use glitchbook::io::hdf5::{Hdf5Layout, Hdf5Series};
use glitchbook::scan::SampleSource;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let path = std::path::PathBuf::from(format!("/dev/shm/glitchbook-fuzz-{}.h5", std::process::id()));
    std::fs::write(&path, data).unwrap();
    let custom = Hdf5Layout {
        dataset: "data/h".into(),
        start_attr: "t0".into(),
        spacing_attr: "dt".into(),
    };
    for layout in [Hdf5Layout::default(), custom] {
        match Hdf5Series::open(&path, &layout) {
            Ok(s) => {
                assert!(s.len() > 0 && s.start_gps().is_finite());
                assert!(s.rate_hz().is_finite() && s.rate_hz() > 0.0);
                let mut buf = vec![0.0; s.len().min(1024)];
                if let Err(e) = s.read_samples(0, &mut buf) {
                    assert!(!format!("{e:#}").contains('\n'), "multi-line error: {e:#}");
                }
            }
            Err(e) => assert!(!format!("{e:#}").contains('\n'), "multi-line error: {e:#}"),
        }
    }
});
