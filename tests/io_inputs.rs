//! Input readers at the library level: `.npy` headers and samples, dropout
//! stretches, `bundle.toml`, segment files, trigger and injection CSV.
//! Each bad-input case builds its file in a temp dir and checks that the
//! one-line error names the file and the field or line at fault.

use glitchbook::io::{
    read_injections, read_segments_file, read_trigger_csv, write_npy, Bundle, NpyDtype, NpyReader,
    Role,
};
use glitchbook::segments::{Segment, SegmentList};
use std::path::{Path, PathBuf};
use tempfile::TempDir;

fn data_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/io")
}

fn write(dir: &Path, name: &str, bytes: &[u8]) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, bytes).unwrap();
    p
}

/// Assert that `r` failed with an input error (a parse error naming the
/// file, or a missing or unreadable file) with a single-line message
/// containing every needle. A needle `:N:` must be the error's line; a
/// needle `column 'c'` its field.
#[track_caller]
fn assert_err<T: std::fmt::Debug>(r: glitchbook::Result<T>, needles: &[&str]) -> String {
    let err = r.expect_err("expected an error");
    let msg = err.to_string();
    assert!(!msg.contains('\n'), "error is not one line: {msg:?}");
    for n in needles {
        assert!(msg.contains(n), "error {msg:?} does not contain {n:?}");
    }
    match &err {
        glitchbook::Error::Parse { line, field, .. } => {
            for n in needles {
                if let Some(l) = n.strip_prefix(':').and_then(|x| x.split(':').next()) {
                    if let Ok(l) = l.parse::<u64>() {
                        assert_eq!(*line, Some(l), "{msg}");
                    }
                }
                if let Some(c) = n
                    .strip_prefix("column '")
                    .and_then(|x| x.split('\'').next())
                {
                    assert_eq!(field.as_deref(), Some(c), "{msg}");
                }
            }
        }
        glitchbook::Error::Io { .. } | glitchbook::Error::NotFound { .. } => {}
        other => panic!("not an input error: {other:?}"),
    }
    msg
}

/// Assert that `r` (a lower-level call that returns `anyhow`) failed with a
/// single-line message containing every needle.
#[track_caller]
fn assert_msg<T: std::fmt::Debug>(r: anyhow::Result<T>, needles: &[&str]) -> String {
    let msg = format!("{:#}", r.expect_err("expected an error"));
    assert!(!msg.contains('\n'), "error is not one line: {msg:?}");
    for n in needles {
        assert!(msg.contains(n), "error {msg:?} does not contain {n:?}");
    }
    msg
}

// ---------------------------------------------------------------- .npy ----

/// Build a `.npy` file by hand: version, header dict text, raw data bytes.
/// The header is padded with spaces and ended by '\n' as NumPy does.
fn npy_bytes(version: (u8, u8), dict: &str, data: &[u8]) -> Vec<u8> {
    let prefix = if version.0 == 1 { 10 } else { 12 };
    let mut header = dict.to_owned();
    let unpadded = prefix + header.len() + 1;
    header.push_str(&" ".repeat((64 - unpadded % 64) % 64));
    header.push('\n');
    let mut out = b"\x93NUMPY".to_vec();
    out.extend([version.0, version.1]);
    if version.0 == 1 {
        out.extend((header.len() as u16).to_le_bytes());
    } else {
        out.extend((header.len() as u32).to_le_bytes());
    }
    out.extend(header.as_bytes());
    out.extend(data);
    out
}

fn f8_data(values: &[f64]) -> Vec<u8> {
    values.iter().flat_map(|x| x.to_le_bytes()).collect()
}

const GOOD_DICT: &str = "{'descr': '<f8', 'fortran_order': False, 'shape': (3,), }";

#[test]
fn npy_reads_numpy_fixtures_v1_v2_v3_f4_f8() {
    // Expected values from NumPy 2.4.6: np.load(name).astype(np.float64)
    // (tests/data/io/make_fixtures_io.py, npy_expected.json).
    let dir = data_dir();
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("npy_expected.json")).unwrap())
            .unwrap();
    assert_eq!(json["numpy_version"], "2.4.6");
    let files = json["files"].as_object().unwrap();
    assert_eq!(files.len(), 6);
    for (name, exp) in files {
        let r = NpyReader::open(&dir.join(name)).unwrap();
        let descr = exp["descr"].as_str().unwrap();
        let dtype = if descr == "<f4" {
            NpyDtype::F32
        } else {
            NpyDtype::F64
        };
        assert_eq!(r.dtype, dtype, "{name}");
        let values = exp["values"].as_array().unwrap();
        assert_eq!(r.len, values.len(), "{name}");
        let mut got = vec![0.0; r.len];
        r.read_f64(0, &mut got).unwrap();
        for (i, (g, e)) in got.iter().zip(values).enumerate() {
            match e.as_f64() {
                // Exact: f32 -> f64 widening is exact, as in NumPy's astype.
                Some(e) => assert_eq!(*g, e, "{name}[{i}]"),
                None => assert!(g.is_nan(), "{name}[{i}] should be NaN"),
            }
        }
        // A range in the middle: only those samples.
        let mut mid = [0.0; 3];
        r.read_f64(4, &mut mid).unwrap();
        assert_eq!(mid[..], got[4..7], "{name}");
    }
    // The versions really are the three formats (from read_magic).
    assert_eq!(files["v2_f8.npy"]["version"][0], 2);
    assert_eq!(files["v3_f4.npy"]["version"][0], 3);
}

#[test]
fn npy_write_read_round_trip_both_dtypes() {
    let tmp = TempDir::new().unwrap();
    // Longer than one positional read chunk (65536 samples) to cross chunk edges.
    let n = 150_001;
    let data: Vec<f64> = (0..n).map(|i| (i as f64 * 0.37).sin() * 1e-21).collect();
    for as_f32 in [false, true] {
        let p = tmp.path().join(format!("rt_{as_f32}.npy"));
        write_npy(&p, &data, as_f32).unwrap();
        let r = NpyReader::open(&p).unwrap();
        assert_eq!(r.len, n);
        assert_eq!(r.dtype, if as_f32 { NpyDtype::F32 } else { NpyDtype::F64 });
        let mut all = vec![0.0; n];
        r.read_f64(0, &mut all).unwrap();
        let mut part = vec![0.0; 70_000];
        r.read_f64(65_000, &mut part).unwrap();
        for i in 0..n {
            let want = if as_f32 {
                data[i] as f32 as f64
            } else {
                data[i]
            };
            assert_eq!(all[i], want, "sample {i}");
        }
        assert_eq!(part[..], all[65_000..135_000]);
        // Reading past the end is an error naming the file.
        let mut over = vec![0.0; 2];
        assert_msg(
            r.read_f64(n - 1, &mut over),
            &[&p.display().to_string(), "holds 150001"],
        );
    }
}

#[test]
fn npy_header_variants_accepted() {
    let tmp = TempDir::new().unwrap();
    let data = f8_data(&[1.0, 2.0, 3.0]);
    for (i, dict) in [
        GOOD_DICT,
        "{'shape': (3,), 'fortran_order': False, 'descr': '<f8'}",
        "{\"descr\": \"<f8\", \"fortran_order\": False, \"shape\": (3, ) , }",
        "{ 'fortran_order' : False , 'shape' : ( 3 , ) , 'descr' : '<f8' , }  ",
    ]
    .iter()
    .enumerate()
    {
        for v in [(1, 0), (2, 0), (3, 0)] {
            let p = write(
                tmp.path(),
                &format!("ok{i}_{}.npy", v.0),
                &npy_bytes(v, dict, &data),
            );
            let r = NpyReader::open(&p).unwrap_or_else(|e| panic!("{dict}: {e:#}"));
            assert_eq!((r.len, r.dtype), (3, NpyDtype::F64));
        }
    }
}

#[test]
fn npy_bad_input_matrix() {
    let tmp = TempDir::new().unwrap();
    let d3 = f8_data(&[1.0, 2.0, 3.0]);
    let cases: Vec<(&str, Vec<u8>, &str)> = vec![
        (
            "magic.npy",
            b"PK\x03\x04 not numpy at all".to_vec(),
            "bad magic",
        ),
        ("short.npy", b"\x93NUM".to_vec(), "bad magic"),
        (
            "v4.npy",
            npy_bytes((4, 0), GOOD_DICT, &d3),
            "unsupported .npy format version 4.0",
        ),
        ("v1_1.npy", npy_bytes((1, 1), GOOD_DICT, &d3), "version 1.1"),
        (
            "syntax.npy",
            npy_bytes((1, 0), "{'descr': '<f8' 'fortran_order': False}", &d3),
            "corrupt header",
        ),
        (
            "notdict.npy",
            npy_bytes((1, 0), "[1, 2, 3]", &d3),
            "corrupt header",
        ),
        (
            "unclosed.npy",
            npy_bytes((1, 0), "{'descr': '<f8', 'shape': (3,", &d3),
            "corrupt header",
        ),
        (
            "missingkey.npy",
            npy_bytes((1, 0), "{'descr': '<f8', 'shape': (3,)}", &d3),
            "missing key 'fortran_order'",
        ),
        (
            "dupkey.npy",
            npy_bytes(
                (1, 0),
                "{'descr': '<f8', 'descr': '<f8', 'fortran_order': False, 'shape': (3,)}",
                &d3,
            ),
            "appears twice",
        ),
        (
            "extrakey.npy",
            npy_bytes(
                (1, 0),
                "{'descr': '<f8', 'fortran_order': False, 'shape': (3,), 'x': 1}",
                &d3,
            ),
            "unexpected key 'x'",
        ),
        (
            "bigendian.npy",
            npy_bytes(
                (1, 0),
                "{'descr': '>f8', 'fortran_order': False, 'shape': (3,)}",
                &d3,
            ),
            "big-endian dtype '>f8'",
        ),
        (
            "int.npy",
            npy_bytes(
                (1, 0),
                "{'descr': '<i8', 'fortran_order': False, 'shape': (3,)}",
                &d3,
            ),
            "integer dtype '<i8'",
        ),
        (
            "complex.npy",
            npy_bytes(
                (1, 0),
                "{'descr': '<c16', 'fortran_order': False, 'shape': (3,)}",
                &d3,
            ),
            "complex dtype '<c16'",
        ),
        (
            "half.npy",
            npy_bytes(
                (1, 0),
                "{'descr': '<f2', 'fortran_order': False, 'shape': (3,)}",
                &d3,
            ),
            "'<f2'",
        ),
        (
            "str.npy",
            npy_bytes(
                (1, 0),
                "{'descr': '<U4', 'fortran_order': False, 'shape': (3,)}",
                &d3,
            ),
            "unsupported dtype '<U4'",
        ),
        (
            "struct.npy",
            npy_bytes(
                (1, 0),
                "{'descr': [('a', '<f8')], 'fortran_order': False, 'shape': (3,)}",
                &d3,
            ),
            "structured",
        ),
        (
            "2d.npy",
            npy_bytes(
                (1, 0),
                "{'descr': '<f8', 'fortran_order': False, 'shape': (3, 1)}",
                &d3,
            ),
            "2-D array",
        ),
        (
            "0d.npy",
            npy_bytes(
                (1, 0),
                "{'descr': '<f8', 'fortran_order': False, 'shape': ()}",
                &d3[..8],
            ),
            "0-D",
        ),
        (
            "fortran.npy",
            npy_bytes(
                (1, 0),
                "{'descr': '<f8', 'fortran_order': True, 'shape': (3,)}",
                &d3,
            ),
            "Fortran-order",
        ),
        (
            "empty.npy",
            npy_bytes(
                (1, 0),
                "{'descr': '<f8', 'fortran_order': False, 'shape': (0,)}",
                &[],
            ),
            "zero-length",
        ),
        (
            "truncated.npy",
            npy_bytes((1, 0), GOOD_DICT, &d3[..20]),
            "truncated",
        ),
        (
            "trailing.npy",
            npy_bytes((1, 0), GOOD_DICT, &f8_data(&[1.0, 2.0, 3.0, 4.0])),
            "8 trailing bytes",
        ),
        (
            "hdrlen.npy",
            {
                let mut b = npy_bytes((1, 0), GOOD_DICT, &d3);
                b[8] = 0xff;
                b[9] = 0x7f; // header length 32767, far past the end
                b
            },
            "corrupt header",
        ),
        (
            "v3_badutf8.npy",
            {
                let dict = "{'descr': '<f8', 'fortran_order': False, 'shape': (3,)}\u{1}";
                let mut b = npy_bytes((3, 0), dict, &d3);
                let pos = 12 + b[12..].iter().position(|&x| x == 1).unwrap();
                b[pos] = 0xff; // a lone 0xff byte is never valid UTF-8
                b
            },
            "not valid UTF-8",
        ),
    ];
    for (name, bytes, needle) in cases {
        let p = write(tmp.path(), name, &bytes);
        assert_err(NpyReader::open(&p), &[&p.display().to_string(), needle]);
    }
    let missing = tmp.path().join("nope.npy");
    assert_err(
        NpyReader::open(&missing),
        &[&missing.display().to_string(), "cannot open"],
    );
}

// -------------------------------------------------------- stretches ----

#[test]
fn valid_stretches_hand_worked_all_chunk_sizes() {
    let tmp = TempDir::new().unwrap();
    let nan = f64::NAN;
    let inf = f64::INFINITY;
    // index:     0    1    2    3    4    5    6    7     8    9
    let data = [1.0, nan, nan, 2.0, 3.0, inf, 4.0, -inf, nan, 5.0];
    // Hand-worked, rate 2 Hz, start 10 s: sample i covers [10 + i/2, 10 + (i+1)/2).
    // finite runs: [0,1) -> [10, 10.5); [3,5) -> [11.5, 12.5); [6,7) -> [13, 13.5);
    // [9,10) -> [14.5, 15).
    let want = SegmentList::from_segments(vec![
        Segment::new(10.0, 10.5),
        Segment::new(11.5, 12.5),
        Segment::new(13.0, 13.5),
        Segment::new(14.5, 15.0),
    ]);
    for as_f32 in [false, true] {
        let p = tmp.path().join(format!("gaps_{as_f32}.npy"));
        write_npy(&p, &data, as_f32).unwrap();
        let r = NpyReader::open(&p).unwrap();
        assert_eq!(r.valid_stretches(2.0, 10.0).unwrap(), want);
        // Chunk 2 splits the NaN run 1..3 at index 2 and the finite run 3..5 at
        // index 4; every chunk size must give the same answer.
        for chunk in 1..=12 {
            assert_eq!(
                r.valid_stretches_chunked(2.0, 10.0, chunk).unwrap(),
                want,
                "chunk {chunk}"
            );
        }
    }
}

#[test]
fn valid_stretches_leading_trailing_nan_and_errors() {
    let tmp = TempDir::new().unwrap();
    let nan = f64::NAN;
    let p = tmp.path().join("edges.npy");
    write_npy(&p, &[nan, nan, 1.0, 1.0, 1.0, nan], false).unwrap();
    let r = NpyReader::open(&p).unwrap();
    // Hand-worked: samples 2..5 at 4 Hz from 100 s -> [100.5, 101.25).
    assert_eq!(
        r.valid_stretches_chunked(4.0, 100.0, 4).unwrap(),
        SegmentList::single(100.5, 101.25)
    );
    let name = p.display().to_string();
    assert_msg(r.valid_stretches(0.0, 100.0), &[&name, "rate"]);
    assert_msg(r.valid_stretches(f64::NAN, 100.0), &[&name, "rate"]);
    assert_msg(r.valid_stretches(4.0, f64::INFINITY), &[&name, "start"]);

    let all_nan = tmp.path().join("allnan.npy");
    write_npy(&all_nan, &[nan, f64::INFINITY, nan], true).unwrap();
    let r = NpyReader::open(&all_nan).unwrap();
    assert_msg(
        r.valid_stretches(1.0, 0.0),
        &[&all_nan.display().to_string(), "no finite samples"],
    );
}

#[test]
fn valid_stretches_nan_run_across_default_chunk_edge() {
    // The default chunk is 2^20 samples: put a NaN run across that edge.
    let tmp = TempDir::new().unwrap();
    let edge = glitchbook::io::npy::STRETCH_CHUNK_SAMPLES;
    let n = edge + 16;
    let mut data = vec![0.5; n];
    for x in &mut data[edge - 3..edge + 2] {
        *x = f64::NAN;
    }
    let p = tmp.path().join("big.npy");
    write_npy(&p, &data, true).unwrap();
    let r = NpyReader::open(&p).unwrap();
    // rate 1024 Hz (a power of two, so times are exact in binary).
    let t = |i: usize| 1000.0 + i as f64 / 1024.0;
    let want = SegmentList::from_segments(vec![
        Segment::new(t(0), t(edge - 3)),
        Segment::new(t(edge + 2), t(n)),
    ]);
    assert_eq!(r.valid_stretches(1024.0, 1000.0).unwrap(), want);
    assert_eq!(
        r.valid_stretches_chunked(1024.0, 1000.0, 1000).unwrap(),
        want
    );
}

// ----------------------------------------------------------- bundle ----

const GOOD_TOML: &str = r#"description = "test bundle"

[[channel]]
name = "Z0:STRAIN"
file = "strain.npy"
rate = 64
start = 1000000000
role = "target"
fmin = 4.0
fmax = 30.0

[[channel]]
name = "Z0:AUX_MAG"
file = "sub/aux.npy"
rate = 32.0
start = 1000000000.5
role = "aux"
"#;

/// A bundle dir with the two good `.npy` files and the given bundle.toml.
fn bundle_dir(toml: &str) -> TempDir {
    let tmp = TempDir::new().unwrap();
    std::fs::create_dir(tmp.path().join("sub")).unwrap();
    write_npy(&tmp.path().join("strain.npy"), &[0.0; 128], true).unwrap();
    write_npy(&tmp.path().join("sub/aux.npy"), &[0.0; 64], false).unwrap();
    write(tmp.path(), "bundle.toml", toml.as_bytes());
    tmp
}

#[test]
fn bundle_good() {
    let tmp = bundle_dir(GOOD_TOML);
    let b = Bundle::open(tmp.path()).unwrap();
    assert_eq!(b.channels.len(), 2);
    let s = &b.channels[0];
    assert_eq!(s.name, "Z0:STRAIN");
    assert_eq!(s.role, Role::Target);
    assert_eq!((s.rate, s.start), (64.0, 1e9));
    assert_eq!((s.fmin, s.fmax), (Some(4.0), Some(30.0)));
    assert!(s.file.is_absolute());
    assert!(s.file.ends_with("strain.npy"));
    let a = &b.channels[1];
    assert_eq!((a.role, a.rate, a.start), (Role::Aux, 32.0, 1000000000.5));
    assert_eq!((a.fmin, a.fmax), (None, None));
    assert!(a.file.ends_with("sub/aux.npy"));
    assert_eq!(b.with_role(Role::Aux).count(), 1);
}

#[test]
fn bundle_bad_input_matrix() {
    let ch = |extra: &str| {
        format!(
            "[[channel]]\nname = \"A\"\nfile = \"strain.npy\"\nrate = 64\nstart = 0\nrole = \"target\"\n{extra}"
        )
    };
    let cases: Vec<(String, Vec<&str>)> = vec![
        ("[[channel]\nname = 1".into(), vec![":1:"]),
        (
            "[[channel]]\nname = \"A\"\nfile = \"strain.npy\"\nrate = \nstart = 0\nrole = \"target\"\n"
                .into(),
            vec![":4:"],
        ),
        (
            "[[channel]]\nname = \"A\"\nfile = \"strain.npy\"\nstart = 0\nrole = \"target\"\n".into(),
            vec!["missing field `rate`"],
        ),
        (ch("gain = 2.0\n"), vec![":7:", "unknown field `gain`"]),
        (
            format!("site = \"nowhere\"\n{}", ch("")),
            vec![":1:", "unknown field `site`"],
        ),
        (
            ch("").replace("\"target\"", "\"witness\""),
            vec![":6:", "channel #1 'A'", "field 'role'", "witness"],
        ),
        (ch("").replace("rate = 64", "rate = 0"), vec![":4:", "field 'rate'"]),
        (ch("").replace("rate = 64", "rate = -64.0"), vec![":4:", "field 'rate'"]),
        (ch("").replace("rate = 64", "rate = nan"), vec!["field 'rate'"]),
        (ch("").replace("rate = 64", "rate = inf"), vec!["field 'rate'"]),
        (ch("").replace("start = 0", "start = nan"), vec![":5:", "field 'start'"]),
        (ch("").replace("start = 0", "start = -inf"), vec!["field 'start'"]),
        (ch("fmin = 0.0\n"), vec![":7:", "field 'fmin'"]),
        (ch("fmax = -3.0\n"), vec!["field 'fmax'"]),
        (ch("fmax = 33.0\n"), vec!["field 'fmax'", "Nyquist"]),
        (ch("fmin = 10.0\nfmax = 10.0\n"), vec!["field 'fmin'", "below fmax"]),
        (
            format!("{}{}", ch(""), ch("").replace("strain.npy", "sub/aux.npy")),
            vec![":8:", "channel #2 'A'", "repeats the name of channel #1"],
        ),
        (ch("").replace("name = \"A\"", "name = \"  \""), vec!["channel #1", "field 'name'"]),
        ("description = \"nothing here\"\n".into(), vec!["no channels"]),
        (
            ch("").replace("\"target\"", "\"tar\\nget\""),
            vec!["field 'role' = \"tar\\nget\""],
        ),
        (
            ch("").replace("name = \"A\"", "name = \"A\\nB\""),
            vec!["field 'name'", "control character"],
        ),
        (String::new(), vec!["no channels"]),
        (
            ch("").replace("strain.npy", "missing.npy"),
            vec!["channel #1 'A'", "field 'file'", "missing.npy", "cannot open"],
        ),
        (
            ch("").replace("strain.npy", "bad.npy"),
            vec!["channel #1 'A'", "field 'file'", "bad.npy", "big-endian"],
        ),
    ];
    for (toml, needles) in cases {
        let tmp = bundle_dir(&toml);
        write(
            tmp.path(),
            "bad.npy",
            &npy_bytes(
                (1, 0),
                "{'descr': '>f8', 'fortran_order': False, 'shape': (3,)}",
                &[0; 24],
            ),
        );
        let name = tmp.path().join("bundle.toml").display().to_string();
        let mut all = vec![name.as_str()];
        all.extend(needles.iter());
        let msg = assert_err(Bundle::open(tmp.path()), &all);
        // Location, when given, directly follows the file name.
        assert!(msg.starts_with(&name), "{msg}");
    }
    let empty = TempDir::new().unwrap();
    assert_err(Bundle::open(empty.path()), &["bundle.toml", "missing"]);
}

// --------------------------------------------------------- segments ----

#[test]
fn segments_good_with_comments_and_crlf() {
    let tmp = TempDir::new().unwrap();
    let p = write(
        tmp.path(),
        "seg.txt",
        b"# analysis segments\r\n\r\n100 200.5   # first\r\n  300\t400\r\n1e3 1.5e3\r\n",
    );
    let (segs, warnings) = read_segments_file(&p).unwrap();
    assert!(warnings.is_empty(), "{warnings:?}");
    assert_eq!(
        segs,
        SegmentList::from_segments(vec![
            Segment::new(100.0, 200.5),
            Segment::new(300.0, 400.0),
            Segment::new(1000.0, 1500.0),
        ])
    );
}

#[test]
fn segments_warnings_name_lines() {
    let tmp = TempDir::new().unwrap();
    let p = write(
        tmp.path(),
        "seg.txt",
        b"100 200\n150 250\n50 60\n70 70\n300 400\n400 500\n",
    );
    let (segs, warnings) = read_segments_file(&p).unwrap();
    // Hand-worked union: [50,60) [100,250) [300,500) (400 500 touches, merged silently).
    assert_eq!(
        segs,
        SegmentList::from_segments(vec![
            Segment::new(50.0, 60.0),
            Segment::new(100.0, 250.0),
            Segment::new(300.0, 500.0),
        ])
    );
    let name = p.display().to_string();
    let joined = warnings.join("\n");
    assert!(
        joined.contains(&format!("{name}:2: segment overlaps the one on line 1")),
        "{joined}"
    );
    assert!(
        joined.contains(&format!(
            "{name}:3: segment starts before the one on line 2"
        )),
        "{joined}"
    );
    assert!(
        joined.contains(&format!("{name}:4: zero-length")),
        "{joined}"
    );
    assert_eq!(warnings.len(), 3, "{joined}");

    // An out-of-order line that overlaps an earlier one gets both warnings.
    let p = write(tmp.path(), "seg2.txt", b"300 400\n100 350\n");
    let (segs, warnings) = read_segments_file(&p).unwrap();
    assert_eq!(segs, SegmentList::single(100.0, 400.0));
    let name = p.display().to_string();
    assert_eq!(
        warnings,
        vec![
            format!("{name}:2: segment starts before the one on line 1; segments sorted"),
            format!("{name}:2: segment overlaps the one on line 1; merged"),
        ]
    );
}

#[test]
fn segments_bad_input_matrix() {
    let tmp = TempDir::new().unwrap();
    let cases: [(&str, &str); 9] = [
        ("100 200\n100 abc\n", ":2: end 'abc' is not a number"),
        ("# c\n100\n", ":2: expected 2 columns"),
        ("100 200 300\n", ":1: expected 2 columns"),
        ("100 200\n\n300 250\n", ":3: end 250 is before start 300"),
        ("nan 200\n", ":1: start 'nan' is not finite"),
        ("100 inf\n", ":1: end 'inf' is not finite"),
        ("100,200\n", ":1: expected 2 columns"),
        ("# nothing\n\n", "no segments"),
        ("5 5\n", "no segments"),
    ];
    for (i, (text, needle)) in cases.iter().enumerate() {
        let p = write(tmp.path(), &format!("s{i}.txt"), text.as_bytes());
        let name = p.display().to_string();
        assert_err(read_segments_file(&p), &[&name, needle]);
    }
    let missing = tmp.path().join("none.txt");
    assert_err(read_segments_file(&missing), &["none.txt", "cannot read"]);
}

// ------------------------------------------------------ trigger CSV ----

#[test]
fn trigger_csv_quoted_crlf_any_order_and_derivations() {
    let tmp = TempDir::new().unwrap();
    let p = write(
        tmp.path(),
        "trig.csv",
        b"snr,\"time\",Frequency,duration,bandwidth,q,note\r\n\
          \"8.0\",1000.5,100,0.2,50,,\"a, quoted note\"\r\n\
          # a comment line\r\n\
          6, 999.25 ,40,,,12,x\r\n",
    );
    let t = read_trigger_csv(&p).unwrap();
    assert_eq!(t.len(), 2);
    // Sorted by time: the 999.25 row first. No duration/bandwidth -> zero extent.
    let a = &t[0];
    assert_eq!((a.t_peak, a.t_start, a.t_end), (999.25, 999.25, 999.25));
    assert_eq!((a.f_peak, a.f_low, a.f_high, a.q), (40.0, 40.0, 40.0, 12.0));
    // energy = 1 + snr^2/2, the inverse of snr = sqrt(2 (Z - 1))
    // (Chatterji et al. 2004, Class. Quantum Grav. 21, S1809).
    assert_eq!(a.energy, 1.0 + 36.0 / 2.0);
    let b = &t[1];
    assert_eq!((b.t_start, b.t_end), (1000.4, 1000.6));
    assert_eq!((b.f_low, b.f_high), (75.0, 125.0));
    assert_eq!(b.q, 100.0 / 50.0); // frequency / bandwidth when q is empty
    assert_eq!(b.snr, 8.0);
    assert_eq!(b.energy, 33.0);
}

#[test]
fn trigger_csv_explicit_extents_and_unknown_q() {
    let tmp = TempDir::new().unwrap();
    let p = write(
        tmp.path(),
        "t.csv",
        b"time,frequency,snr,t_start,t_end,f_low,f_high\n10,64,5,9.9,10.3,32,128\n11,64,5,,,,\n",
    );
    let t = read_trigger_csv(&p).unwrap();
    assert_eq!(
        (t[0].t_start, t[0].t_end, t[0].f_low, t[0].f_high),
        (9.9, 10.3, 32.0, 128.0)
    );
    assert_eq!(t[0].q, 64.0 / 96.0); // bandwidth from f_high - f_low
    assert!(t[1].q.is_nan(), "no bandwidth: q unknown");
    assert_eq!((t[1].t_start, t[1].f_high), (11.0, 64.0));
}

#[test]
fn trigger_csv_bad_input_matrix() {
    let tmp = TempDir::new().unwrap();
    let cases: Vec<(&str, Vec<&str>)> = vec![
        ("", vec!["header row"]),
        (
            "time,snr\n1,5\n",
            vec!["missing required column 'frequency'"],
        ),
        ("1000,100,5\n", vec!["missing required column 'time'"]),
        (
            "time,frequency,snr\n1,100,abc\n",
            vec![":2: column 'snr': 'abc' is not a number"],
        ),
        (
            "time,frequency,snr\r\n1,100,5\r\n# c\r\n2,100,nan\r\n",
            vec![":4: column 'snr'", "not finite"],
        ),
        (
            "time,frequency,snr\n1,100,0\n",
            vec![":2: column 'snr'", "> 0"],
        ),
        ("time,frequency,snr\n1,100,-3\n", vec![":2: column 'snr'"]),
        (
            "time,frequency,snr\n1,0,5\n",
            vec![":2: column 'frequency'", "> 0"],
        ),
        (
            "time,frequency,snr\n1,100,\n",
            vec![":2: column 'snr': empty"],
        ),
        (
            "time,frequency,snr\ninf,100,5\n",
            vec![":2: column 'time'", "not finite"],
        ),
        (
            "time,frequency,snr\n1,100,5,7\n",
            vec![":2:", "expected 3 fields"],
        ),
        (
            "time,frequency,snr\n1,100\n",
            vec![":2:", "expected 3 fields"],
        ),
        (
            "time,frequency,snr,time\n1,100,5,1\n",
            vec![":1:", "appears twice"],
        ),
        (
            "time,frequency,snr,duration\n1,100,5,-1\n",
            vec![":2: column 'duration'"],
        ),
        (
            "time,frequency,snr,bandwidth\n1,100,5,300\n",
            vec![":2: column 'bandwidth'", "negative"],
        ),
        ("time,frequency,snr,q\n1,100,5,0\n", vec![":2: column 'q'"]),
        (
            "time,frequency,snr,note\n1,100,5,\"two\nlines\"\n2,100,abc,x\n",
            vec![":4: column 'snr'"],
        ),
        (
            // Found by cargo fuzz: a multi-line quoted cell echoed in the error.
            "time,frequency,snr\n\"8\nw\",100,5\n",
            vec![":2: column 'time': '8\\nw' is not a number"],
        ),
        (
            "time,frequency,snr\n1,100,1e200\n",
            vec![":2: column 'snr'", "too large"],
        ),
        (
            "time,frequency,snr,bandwidth\n1,100,5,1e-320\n",
            vec![":2: column 'bandwidth'", "too small"],
        ),
        (
            "time,frequency,snr,duration\n-1.7e308,100,5,1.7e308\n",
            vec![":2: column 't_start'", "not finite"],
        ),
        (
            "time,frequency,snr,t_start\n1,100,5,2\n",
            vec![":2: column 't_start'"],
        ),
        (
            "time,frequency,snr,f_high\n1,100,5,50\n",
            vec![":2: column 'f_high'"],
        ),
        (
            "time,frequency,snr\n1,100,5\n\"2,100,5\n",
            vec![":3:", "expected 3 fields"],
        ),
    ];
    for (i, (text, needles)) in cases.iter().enumerate() {
        let p = write(tmp.path(), &format!("c{i}.csv"), text.as_bytes());
        let name = p.display().to_string();
        let mut all = vec![name.as_str()];
        all.extend(needles.iter());
        assert_err(read_trigger_csv(&p), &all);
    }
}

#[test]
fn trigger_csv_header_only_is_empty() {
    let tmp = TempDir::new().unwrap();
    let p = write(tmp.path(), "h.csv", b"time,frequency,snr\n");
    assert!(read_trigger_csv(&p).unwrap().is_empty());
}

// ------------------------------------------------------- injections ----

#[test]
fn injections_good_and_bad() {
    let tmp = TempDir::new().unwrap();
    let p = write(
        tmp.path(),
        "inj.csv",
        b"kind,time,amp\r\n\"sine, gaussian\",1002.5,1e-21\r\nblip,1001.0,2e-21\r\n",
    );
    assert_eq!(read_injections(&p).unwrap(), vec![1001.0, 1002.5]);
    for (i, (text, needle)) in [
        ("t,amp\n1,2\n", "missing required column 'time'"),
        (
            "time\n1\nsoon\n",
            ":3: column 'time': 'soon' is not a number",
        ),
        ("time\n1\n\"\"\n", ":3: column 'time': empty"),
        ("time,x\n-inf,1\n", ":2: column 'time'"),
    ]
    .iter()
    .enumerate()
    {
        let p = write(tmp.path(), &format!("i{i}.csv"), text.as_bytes());
        assert_err(read_injections(&p), &[&p.display().to_string(), needle]);
    }
}
