//! HDF5 strain files against fixtures written by h5py 3.16.0 (HDF5 2.0.0;
//! `tests/data/hdf5/make_fixtures.py`, README there): contiguous, chunked +
//! gzip, chunked + shuffle + gzip, float32/float64, NaN gaps, a custom
//! layout, bad files; and a scan of an HDF5 dataset equal to the scan of
//! the same samples in memory.
#![cfg(feature = "hdf5")]

use glitchbook::io::hdf5::{Hdf5Layout, Hdf5Series};
use glitchbook::io::NpyReader;
use glitchbook::scan::{scan_source, InMemory, SampleSource, ScanParams};
use std::path::{Path, PathBuf};

fn dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/hdf5")
}

fn npy(name: &str) -> Vec<f64> {
    let r = NpyReader::open(&dir().join("expected").join(name)).unwrap();
    let mut v = vec![0.0; r.len];
    r.read_f64(0, &mut v).unwrap();
    v
}

#[track_caller]
fn assert_err<T: std::fmt::Debug>(r: anyhow::Result<T>, needles: &[&str]) {
    let msg = format!("{:#}", r.expect_err("expected an error"));
    assert!(!msg.contains('\n'), "error is not one line: {msg:?}");
    for n in needles {
        assert!(msg.contains(n), "error {msg:?} does not contain {n:?}");
    }
}

#[test]
fn h5py_files_read_sample_for_sample() {
    // Reference: the arrays h5py 3.16.0 wrote (saved as .npy by NumPy 2.4.6).
    for (file, expected) in [
        ("contiguous_f64.h5", "contiguous_f64.npy"),
        ("chunked_gzip_f32.h5", "chunked_gzip_f32.npy"),
        ("chunked_shuffle_f64.h5", "chunked_shuffle_f64.npy"),
    ] {
        let s = Hdf5Series::open(&dir().join(file), &Hdf5Layout::default()).unwrap();
        let want = npy(expected);
        assert_eq!(s.len(), want.len(), "{file}");
        assert_eq!(s.start_gps(), 1_400_000_000.0, "{file}");
        assert_eq!(s.rate_hz(), 256.0, "{file}");
        let mut got = vec![0.0; s.len()];
        s.read_samples(0, &mut got).unwrap();
        for (i, (g, w)) in got.iter().zip(&want).enumerate() {
            assert_eq!(g.to_bits(), w.to_bits(), "{file} sample {i}");
        }
        // Ranges inside and across chunks.
        for (a, n) in [(4090, 12), (1, 1), (999, 1002), (want.len() - 5, 5)] {
            let mut part = vec![0.0; n];
            s.read_samples(a, &mut part).unwrap();
            assert!(part
                .iter()
                .zip(&want[a..a + n])
                .all(|(g, w)| g.to_bits() == w.to_bits()));
        }
        assert_err(
            s.read_samples(want.len() - 1, &mut [0.0; 2]),
            &[file, "requested"],
        );
    }
}

#[test]
fn custom_layout_is_configurable() {
    let layout = Hdf5Layout {
        dataset: "data/h".into(),
        start_attr: "t0".into(),
        spacing_attr: "dt".into(),
    };
    let s = Hdf5Series::open(&dir().join("custom_layout.h5"), &layout).unwrap();
    assert_eq!(s.start_gps(), 1_400_000_000.5);
    assert_eq!(s.rate_hz(), 512.0);
    let want = npy("contiguous_f64.npy");
    let mut got = vec![0.0; s.len()];
    s.read_samples(0, &mut got).unwrap();
    assert_eq!(got, want[..4096]);
    // The default layout is not there.
    assert_err(
        Hdf5Series::open(&dir().join("custom_layout.h5"), &Hdf5Layout::default()),
        &["custom_layout.h5", "strain/Strain"],
    );
}

#[test]
fn bad_files_give_one_line_errors() {
    let d = Hdf5Layout::default();
    let open = |f: &str| Hdf5Series::open(&dir().join(f), &d);
    assert_err(
        open("bad_missing_attr.h5"),
        &["bad_missing_attr.h5", "Xspacing"],
    );
    assert_err(open("bad_2d.h5"), &["bad_2d.h5", "strain/Strain", "1-D"]);
    assert_err(
        open("bad_string_spacing.h5"),
        &["bad_string_spacing.h5", "Xspacing", "not a number"],
    );
    assert_err(
        open("bad_zero_spacing.h5"),
        &["bad_zero_spacing.h5", "Xspacing", "> 0"],
    );
    assert_err(open("bad_empty.h5"), &["bad_empty.h5", "no samples"]);
    assert_err(open("missing.h5"), &["missing.h5", "cannot open"]);
    // Not HDF5 at all.
    assert_err(
        Hdf5Series::open(
            &Path::new(env!("CARGO_MANIFEST_DIR")).join("Cargo.toml"),
            &d,
        ),
        &["Cargo.toml", "HDF5"],
    );
}

#[test]
fn scan_of_hdf5_equals_scan_of_the_same_samples() {
    // A NaN gap (1.5 s) and a loud sine-Gaussian at 40.3 s: same samples,
    // same triggers, analysed time and checksum.
    let s = Hdf5Series::open(&dir().join("chunked_gzip_f32.h5"), &Hdf5Layout::default()).unwrap();
    let mem = InMemory {
        data: npy("chunked_gzip_f32.npy"),
        rate_hz: 256.0,
        start_gps: 1_400_000_000.0,
    };
    let p = ScanParams::default();
    let (p1, a1, t1, c1) = scan_source(&s, &p, (None, None), None, &|_| {}).unwrap();
    let (p2, a2, t2, c2) = scan_source(&mem, &p, (None, None), None, &|_| {}).unwrap();
    assert_eq!((p1, a1.clone(), c1), (p2, a2, c2));
    assert_eq!(t1, t2);
    assert!(a1.total() < 64.0 - 1.5, "the NaN gap is not analysed");
    assert!(
        t1.iter().any(|t| (t.t_peak - 1_400_000_040.3).abs() < 0.1),
        "{t1:?}"
    );
}
