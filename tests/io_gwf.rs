//! Frame-file reader and writer against files written by gwframe 0.8.4 (the
//! reference C++ frame library; `tests/data/gwf/make_fixtures.py`, README
//! there): every element type and compression, several frames per file,
//! ADC slope/bias, gaps inside and between files, a complex channel;
//! corrupt files; the writer round trip; and a scan from frames equal to the
//! scan of the same samples from `.npy`.

use glitchbook::io::gwf::{
    ChannelData, ChannelKind, Compression, ElemType, GwfFile, GwfWriter, Samples,
};
use glitchbook::io::{write_npy, NpyReader};
use glitchbook::scan::{scan_source, InMemory, SampleSource, ScanParams};
use serde_json::Value;
use std::path::{Path, PathBuf};
use tempfile::TempDir;

fn dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/gwf")
}

fn manifest() -> Value {
    serde_json::from_str(&std::fs::read_to_string(dir().join("manifest.json")).unwrap()).unwrap()
}

/// An expected series (float64 `.npy` written by NumPy 2.4.6).
fn npy(rel: &str) -> Vec<f64> {
    let r = NpyReader::open(&dir().join(rel)).unwrap();
    let mut v = vec![0.0; r.len];
    r.read_f64(0, &mut v).unwrap();
    v
}

/// Bit-for-bit equality (NaN payloads and signed zeros included).
#[track_caller]
fn assert_bits_eq(got: &[f64], want: &[f64], what: &str) {
    assert_eq!(got.len(), want.len(), "{what}: length");
    for (i, (g, w)) in got.iter().zip(want).enumerate() {
        assert_eq!(
            g.to_bits(),
            w.to_bits(),
            "{what}: sample {i}: got {g}, want {w}"
        );
    }
}

#[track_caller]
fn assert_err<T: std::fmt::Debug>(r: anyhow::Result<T>, needles: &[&str]) -> String {
    let msg = format!("{:#}", r.expect_err("expected an error"));
    assert!(!msg.contains('\n'), "error is not one line: {msg:?}");
    for n in needles {
        assert!(msg.contains(n), "error {msg:?} does not contain {n:?}");
    }
    msg
}

fn kind_of(s: &str) -> ChannelKind {
    match s {
        "adc" => ChannelKind::Adc,
        "proc" => ChannelKind::Proc,
        _ => ChannelKind::Sim,
    }
}

#[test]
fn codec_fixtures_read_sample_for_sample() {
    // Reference: the samples gwframe 0.8.4 wrote and read back (asserted
    // equal by the fixture script before saving them).
    let m = manifest();
    let mut seen: std::collections::BTreeSet<(String, usize)> = Default::default();
    for (file, entry) in m.as_object().unwrap() {
        if !file.starts_with("codecs_") {
            continue;
        }
        let f = GwfFile::open(&dir().join(file)).unwrap();
        let starts: Vec<i64> = entry["frames"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_i64().unwrap() * 1_000_000_000)
            .collect();
        let got: Vec<i64> = f.frames().iter().map(|fr| fr.gps_start_ns).collect();
        assert_eq!(got, starts, "{file}: frame starts");
        assert!(f.frames().iter().all(|fr| fr.duration_s == 1.0));
        for c in entry["channels"].as_array().unwrap() {
            let name = c["name"].as_str().unwrap();
            let rate = c["rate"].as_f64().unwrap();
            let what = format!("{file} {name}");
            let info = f.channel_info(name).unwrap();
            assert_eq!(info.kind, kind_of(c["kind"].as_str().unwrap()), "{what}");
            assert_eq!(info.elem.name(), c["dtype"].as_str().unwrap(), "{what}");
            assert_eq!(info.rate_hz, rate, "{what}");
            assert_eq!(info.frames, 3, "{what}");
            let code = c["compress"][0].as_u64().unwrap() as u16;
            let size = info.elem.size();
            assert_eq!(
                info.compression.code(size) | 0x100,
                code,
                "{what}: compression"
            );
            for code in c["compress"].as_array().unwrap() {
                let code = code.as_u64().unwrap() as u16 & 0xff;
                seen.insert((format!("{code}"), size));
            }
            let ch = f.channel(name).unwrap();
            assert_eq!(ch.start_gps(), 1_400_000_000.0, "{what}");
            assert_eq!(ch.rate_hz(), rate, "{what}");
            let want = npy(c["expected"].as_str().unwrap());
            assert_eq!(ch.len(), want.len(), "{what}");
            let mut all = vec![0.0; ch.len()];
            ch.read_samples(0, &mut all).unwrap();
            assert_bits_eq(&all, &want, &what);
            // Ranges that start and end inside frames and cross their edges,
            // read out of order (decoders restart or continue).
            let r = rate as usize;
            for (a, n) in [
                (r + 5, 3),
                (r - 3, 7),
                (2 * r - 1, r + 1),
                (1, 3 * r - 2),
                (0, 1),
                (3 * r - 1, 1),
            ] {
                let mut part = vec![0.0; n];
                ch.read_samples(a, &mut part).unwrap();
                assert_bits_eq(&part, &want[a..a + n], &format!("{what} [{a}, {})", a + n));
            }
            let mut part = vec![0.0; 4];
            ch.read_gps(1_400_000_001.0 + 2.0 / rate, &mut part)
                .unwrap();
            assert_bits_eq(&part, &want[r + 2..r + 6], &format!("{what} by GPS"));
        }
    }
    // Every compression the reader claims, for every word size it applies to.
    for want in [
        ("0", 1),
        ("0", 2),
        ("0", 4),
        ("0", 8),
        ("1", 1),
        ("1", 2),
        ("1", 4),
        ("1", 8),
        ("3", 1),
        ("3", 2),
        ("3", 4),
        ("5", 2),
        ("8", 4),
        ("10", 8),
    ] {
        assert!(
            seen.contains(&(want.0.to_string(), want.1)),
            "no fixture with compression {} on {}-byte data",
            want.0,
            want.1
        );
    }
}

#[test]
fn adc_slope_and_bias_are_applied() {
    // gwframe returns raw counts (asserted by the script); the frame
    // specification defines value = bias + slope × counts.
    let m = manifest();
    let e = &m["adc_calib.gwf"];
    let f = GwfFile::open(&dir().join("adc_calib.gwf")).unwrap();
    for c in e["channels"].as_array().unwrap() {
        let name = c["name"].as_str().unwrap();
        let info = f.channel_info(name).unwrap();
        assert_eq!(info.slope, c["slope"].as_f64().unwrap());
        assert_eq!(info.bias, c["bias"].as_f64().unwrap());
        let ch = f.channel(name).unwrap();
        let mut got = vec![0.0; ch.len()];
        ch.read_samples(0, &mut got).unwrap();
        assert_bits_eq(&got, &npy(c["calibrated"].as_str().unwrap()), name);
        let counts = npy(c["counts"].as_str().unwrap());
        let (s, b) = (info.slope, info.bias);
        assert!(got.iter().zip(&counts).all(|(g, n)| *g == b + s * n));
    }
    f.verify_file_checksum().unwrap();
}

#[test]
fn gaps_between_and_inside_files() {
    let m = manifest();
    let e = &m["gap"];
    let name = e["channel"].as_str().unwrap();
    let rate = e["rate"].as_f64().unwrap();
    let t0 = e["t0"].as_f64().unwrap();
    let full = npy(e["full"].as_str().unwrap());
    let mut starts = Vec::new();
    for file in e["files"].as_array().unwrap() {
        let f = GwfFile::open(&dir().join(file["file"].as_str().unwrap())).unwrap();
        let ch = f.channel(name).unwrap();
        let frames = file["frames"].as_array().unwrap();
        let first = frames[0][0].as_f64().unwrap();
        let last = frames.last().unwrap();
        let end = last[0].as_f64().unwrap() + last[1].as_f64().unwrap();
        assert_eq!(ch.start_gps(), first);
        assert_eq!(ch.len(), ((end - first) * rate) as usize);
        starts.push(ch.start_gps());
        let mut got = vec![0.0; ch.len()];
        ch.read_samples(0, &mut got).unwrap();
        let i0 = ((first - t0) * rate) as usize;
        let mut covered = vec![false; ch.len()];
        for fr in frames {
            let a = ((fr[0].as_f64().unwrap() - first) * rate) as usize;
            let n = (fr[1].as_f64().unwrap() * rate) as usize;
            covered[a..a + n].fill(true);
            assert_eq!(
                ch.spans().iter().filter(|s| s.0 == a && s.1 == n).count(),
                1
            );
        }
        for (i, g) in got.iter().enumerate() {
            if covered[i] {
                assert_eq!(g.to_bits(), full[i0 + i].to_bits(), "sample {i}");
            } else {
                assert!(g.is_nan(), "sample {i} of the hole must be NaN");
            }
        }
    }
    // The file at t0 + 8 s is missing: a caller sees it from the starts.
    assert_eq!(starts, vec![t0, t0 + 4.0, t0 + 12.0, t0 + 16.0]);
}

#[test]
fn complex_channels_are_refused_by_name() {
    let m = manifest();
    let e = &m["complex.gwf"];
    let path = dir().join("complex.gwf");
    let f = GwfFile::open(&path).unwrap();
    let cname = e["complex"].as_str().unwrap();
    assert_err(f.channel(cname), &["complex.gwf", cname, "complex64"]);
    assert_err(f.channel_info(cname), &["complex.gwf", cname, "complex64"]);
    let ch = f.channel(e["real"].as_str().unwrap()).unwrap();
    let mut x = vec![0.0; 64];
    ch.read_samples(0, &mut x).unwrap();
    assert!(x.iter().enumerate().all(|(i, v)| *v == i as f64));
    assert_err(
        f.channel("TB9:NOPE"),
        &["complex.gwf", "TB9:NOPE", "no channel"],
    );
}

#[test]
fn dictionary_matches_the_layouts_read() {
    // The reference library's FrSH/FrSE (its own description of each
    // structure) must list exactly the fields, in order, that the reader
    // parses (writer::layout).
    let f = GwfFile::open(&dir().join("codecs_raw.gwf")).unwrap();
    let dict = f.dictionary().unwrap();
    let mut checked = 0;
    for class in dict {
        let Some(layout) = glitchbook::io::gwf::writer::layout(&class.name) else {
            continue;
        };
        let fields: Vec<(&str, &str)> = class
            .fields
            .iter()
            .map(|(n, t, _)| (n.as_str(), t.as_str()))
            .collect();
        assert_eq!(fields, layout.to_vec(), "{}", class.name);
        checked += 1;
    }
    // FrameH, FrRawData, FrAdcData, FrVect, FrProcData, FrSimData, FrEndOfFrame.
    assert_eq!(checked, 7);
}

/// Offset of the data bytes of the first FrVect named `name`.
fn vect_data_offset(bytes: &[u8], name: &str) -> usize {
    let needle = [name.as_bytes(), &[0u8]].concat();
    let mut at = 0;
    // The FrVect is the second structure holding the name (after its owner).
    for _ in 0..2 {
        at += bytes[at..]
            .windows(needle.len())
            .position(|w| w == needle)
            .unwrap()
            + needle.len();
    }
    at + 2 + 2 + 8 + 8 // compress, type, nData, nBytes
}

#[test]
fn corrupt_files_give_one_line_errors() {
    let tmp = TempDir::new().unwrap();
    let good = std::fs::read(dir().join("codecs_gzip.gwf")).unwrap();
    let put = |name: &str, b: &[u8]| {
        let p = tmp.path().join(name);
        std::fs::write(&p, b).unwrap();
        p
    };
    // A flipped data byte: open works (nothing read), the vector's checksum
    // fails on the first read of that channel, others still read.
    let mut b = good.clone();
    let at = vect_data_offset(&b, "TB9:PROC_INT32");
    b[at + 3] ^= 0x40;
    let p = put("flip.gwf", &b);
    let f = GwfFile::open(&p).unwrap();
    let ch = f.channel("TB9:PROC_INT32").unwrap();
    let mut x = vec![0.0; 10];
    assert_err(
        ch.read_samples(0, &mut x),
        &["flip.gwf", "FrVect", "checksum mismatch", "TB9:PROC_INT32"],
    );
    f.channel("TB9:PROC_INT16")
        .unwrap()
        .read_samples(0, &mut x)
        .unwrap();
    assert_err(
        f.verify_file_checksum(),
        &["flip.gwf", "file checksum mismatch"],
    );

    // Truncated: the end-of-file structure is gone.
    let p = put("trunc.gwf", &good[..good.len() - 100]);
    assert_err(GwfFile::open(&p), &["trunc.gwf", "FrEndOfFile"]);
    let p = put("tiny.gwf", &good[..30]);
    assert_err(GwfFile::open(&p), &["tiny.gwf", "not a frame file"]);
    let p = put("empty.gwf", b"");
    assert_err(GwfFile::open(&p), &["empty.gwf", "not a frame file"]);
    // Another format version.
    let mut b = good.clone();
    b[5] = 6;
    let p = put("v6.gwf", &b);
    assert_err(GwfFile::open(&p), &["v6.gwf", "version 6"]);
    // A flipped byte in the table of contents.
    let mut b = good.clone();
    let n = b.len();
    let seek = u64::from_le_bytes(b[n - 46 + 26..n - 46 + 34].try_into().unwrap()) as usize;
    b[n - seek + 40] ^= 1;
    let p = put("toc.gwf", &b);
    assert_err(GwfFile::open(&p), &["toc.gwf", "FrTOC"]);
    // A flipped byte in a channel structure (its name is right after the
    // common header: flip the comment length's high byte instead).
    let mut b = good.clone();
    let needle = b"TB9:ADC_INT16\0";
    let at = b.windows(needle.len()).position(|w| w == needle).unwrap() + needle.len();
    b[at + 7] ^= 0x01; // inside channelGroup
    let p = put("adc.gwf", &b);
    let f = GwfFile::open(&p).unwrap();
    assert_err(
        f.channel("TB9:ADC_INT16"),
        &["adc.gwf", "FrAdcData", "TB9:ADC_INT16", "checksum mismatch"],
    );
    // Not a regular file.
    assert_err(GwfFile::open(tmp.path()), &["not a regular file"]);
    assert_err(
        GwfFile::open(&tmp.path().join("missing.gwf")),
        &["missing.gwf", "cannot open"],
    );
}

/// Frames written by the Rust writer: every element type, compression and
/// kind, ADC calibration, three frames with a one-frame hole.
fn write_all_kinds(path: &Path) -> Vec<(String, Vec<f64>)> {
    let rate = 64.0;
    let n = 64;
    let mut w = GwfWriter::create(path, 6).unwrap();
    let series = |k: usize, s: usize| -> Vec<i64> {
        (0..n)
            .map(|i| ((i * 7 + s * 13 + k * 29) % 23) as i64 - 11 + if i == 9 { 100 } else { 0 })
            .collect()
    };
    let mut expect: Vec<(String, Vec<f64>)> = Vec::new();
    let frame_starts = [0usize, 1, 3];
    for (fi, &k) in frame_starts.iter().enumerate() {
        let ints: Vec<Vec<i64>> = (0..12).map(|s| series(k, s)).collect();
        let i8s: Vec<i8> = ints[0].iter().map(|&v| v as i8).collect();
        let i16s: Vec<i16> = ints[1].iter().map(|&v| (v * 1000) as i16).collect();
        let i32s: Vec<i32> = ints[2].iter().map(|&v| (v * 100_000) as i32).collect();
        let i64s: Vec<i64> = ints[3].iter().map(|&v| v * (1i64 << 56)).collect();
        let u8s: Vec<u8> = ints[4].iter().map(|&v| (v + 128) as u8).collect();
        let u16s: Vec<u16> = ints[5].iter().map(|&v| (v * 2000 + 32768) as u16).collect();
        let u32s: Vec<u32> = ints[6].iter().map(|&v| (v * 9) as u32).collect();
        let u64s: Vec<u64> = ints[7]
            .iter()
            .map(|&v| (v as u64).wrapping_mul(1 << 60))
            .collect();
        let f32s: Vec<f32> = ints[8].iter().map(|&v| v as f32 * 0.37 - 1e-3).collect();
        let f64s: Vec<f64> = ints[9]
            .iter()
            .enumerate()
            .map(|(i, &v)| if i == 3 { f64::NAN } else { v as f64 * 1e-21 })
            .collect();
        let ch: Vec<ChannelData> = vec![
            ChannelData::new(
                "Z1:C_I8",
                ChannelKind::Proc,
                rate,
                Samples::I8(&i8s),
                Compression::DiffGzip,
            ),
            ChannelData {
                slope: 0.5,
                bias: -3.0,
                adc_units: "V",
                ..ChannelData::new(
                    "Z1:A_I16",
                    ChannelKind::Adc,
                    rate,
                    Samples::I16(&i16s),
                    Compression::ZeroSuppress,
                )
            },
            ChannelData::new(
                "Z1:A_I32",
                ChannelKind::Adc,
                rate,
                Samples::I32(&i32s),
                Compression::DiffGzip,
            ),
            ChannelData::new(
                "Z1:P_I64",
                ChannelKind::Proc,
                rate,
                Samples::I64(&i64s),
                Compression::ZeroSuppress,
            ),
            ChannelData::new(
                "Z1:P_U8",
                ChannelKind::Proc,
                rate,
                Samples::U8(&u8s),
                Compression::Gzip,
            ),
            ChannelData::new(
                "Z1:S_U16",
                ChannelKind::Sim,
                rate,
                Samples::U16(&u16s),
                Compression::ZeroSuppress,
            ),
            ChannelData::new(
                "Z1:P_U32",
                ChannelKind::Proc,
                rate,
                Samples::U32(&u32s),
                Compression::Raw,
            ),
            ChannelData::new(
                "Z1:P_U64",
                ChannelKind::Proc,
                rate,
                Samples::U64(&u64s),
                Compression::DiffGzip,
            ),
            ChannelData::new(
                "Z1:P_F32",
                ChannelKind::Proc,
                rate,
                Samples::F32(&f32s),
                Compression::ZeroSuppress,
            ),
            ChannelData {
                unit: "strain",
                ..ChannelData::new(
                    "Z1:S_F64",
                    ChannelKind::Sim,
                    rate,
                    Samples::F64(&f64s),
                    Compression::Gzip,
                )
            },
            ChannelData::new(
                "Z1:P_F64Z",
                ChannelKind::Proc,
                rate,
                Samples::F64(&f64s),
                Compression::ZeroSuppress,
            ),
        ];
        w.write_frame(
            1_400_000_000_000_000_000 + k as i64 * 1_000_000_000,
            1.0,
            0,
            &ch,
        )
        .unwrap();
        let vals: Vec<(String, Vec<f64>)> = vec![
            ("Z1:C_I8".into(), i8s.iter().map(|&v| v as f64).collect()),
            (
                "Z1:A_I16".into(),
                i16s.iter().map(|&v| -3.0 + 0.5 * v as f64).collect(),
            ),
            ("Z1:A_I32".into(), i32s.iter().map(|&v| v as f64).collect()),
            ("Z1:P_I64".into(), i64s.iter().map(|&v| v as f64).collect()),
            ("Z1:P_U8".into(), u8s.iter().map(|&v| v as f64).collect()),
            ("Z1:S_U16".into(), u16s.iter().map(|&v| v as f64).collect()),
            ("Z1:P_U32".into(), u32s.iter().map(|&v| v as f64).collect()),
            ("Z1:P_U64".into(), u64s.iter().map(|&v| v as f64).collect()),
            ("Z1:P_F32".into(), f32s.iter().map(|&v| v as f64).collect()),
            ("Z1:S_F64".into(), f64s.clone()),
            ("Z1:P_F64Z".into(), f64s.clone()),
        ];
        if fi == 0 {
            expect = vals.iter().map(|(n, _)| (n.clone(), Vec::new())).collect();
        }
        if fi == 2 {
            // Frame at +3 s: one missing second (NaN) before it.
            for e in &mut expect {
                e.1.extend(std::iter::repeat_n(f64::NAN, n));
            }
        }
        for (e, (_, v)) in expect.iter_mut().zip(vals) {
            e.1.extend(v);
        }
    }
    w.finish().unwrap();
    expect
}

#[test]
fn writer_round_trip_every_type_and_compression() {
    let tmp = TempDir::new().unwrap();
    let path = tmp.path().join("Z-RT-1400000000-4.gwf");
    let expect = write_all_kinds(&path);
    let f = GwfFile::open(&path).unwrap();
    f.verify_file_checksum().unwrap();
    assert_eq!(f.frames().len(), 3);
    assert_eq!(f.channel_names().count(), expect.len());
    for (name, want) in &expect {
        let ch = f.channel(name).unwrap();
        assert_eq!(ch.start_gps(), 1_400_000_000.0);
        let mut got = vec![0.0; ch.len()];
        ch.read_samples(0, &mut got).unwrap();
        assert_bits_eq(&got, want, name);
    }
    let info = f.channel_info("Z1:A_I16").unwrap();
    assert_eq!(
        (info.slope, info.bias, info.unit.as_str()),
        (0.5, -3.0, "V")
    );
    assert_eq!(info.elem, ElemType::I16);
    assert_eq!(f.channel_info("Z1:S_F64").unwrap().unit, "strain");
    // The dictionary the writer wrote is the layouts the reader parses.
    for class in f.dictionary().unwrap() {
        let layout = glitchbook::io::gwf::writer::layout(&class.name).unwrap();
        let names: Vec<&str> = class.fields.iter().map(|(n, _, _)| n.as_str()).collect();
        let want: Vec<&str> = layout.iter().map(|(n, _)| *n).collect();
        assert_eq!(names, want, "{}", class.name);
    }
}

#[test]
fn writer_output_is_the_committed_file_gwframe_read() {
    // tests/data/gwf/rust_written.gwf was written by this writer and read by
    // gwframe 0.8.4 (check_rust_written.py, result in the README); the
    // writer must still produce exactly those bytes.
    let tmp = TempDir::new().unwrap();
    let path = tmp.path().join("rust_written.gwf");
    let expect = write_all_kinds(&path);
    let committed = dir().join("rust_written.gwf");
    if std::env::var_os("GLITCHBOOK_REGEN_GWF").is_some() {
        std::fs::copy(&path, &committed).unwrap();
        let mut rows = String::from("name,sample,value\n");
        for (name, v) in &expect {
            for (i, x) in v.iter().enumerate() {
                rows.push_str(&format!("{name},{i},{x:?}\n"));
            }
        }
        std::fs::write(dir().join("rust_written_expected.csv"), rows).unwrap();
    }
    let want = std::fs::read(&committed).unwrap();
    assert!(
        std::fs::read(&path).unwrap() == want,
        "the writer's bytes changed: regenerate (README)"
    );
}

#[test]
fn scan_from_frames_equals_scan_from_npy() {
    // 160 s of noise with a loud sine-Gaussian, 1024 Hz float32, as 8-s
    // gzip frames with one frame missing (a dropout) and as `.npy` with NaN
    // there: the same samples, so the same triggers and analysed time.
    let tmp = TempDir::new().unwrap();
    let rate = 1024.0;
    let n = 160 * 1024;
    let mut x: Vec<f32> = {
        let mut s = 12345u64;
        (0..n)
            .map(|_| {
                // Sum of uniforms: near-Gaussian noise, deterministic.
                let mut acc = 0.0;
                for _ in 0..4 {
                    s ^= s << 13;
                    s ^= s >> 7;
                    s ^= s << 17;
                    acc += (s >> 11) as f64 / (1u64 << 53) as f64 - 0.5;
                }
                acc as f32
            })
            .collect()
    };
    for (i, v) in x.iter_mut().enumerate() {
        let t = i as f64 / rate - 100.3;
        *v += (6.0 * (-(t / 0.02).powi(2)).exp() * (2.0 * std::f64::consts::PI * 150.0 * t).cos())
            as f32;
    }
    let path = tmp.path().join("Z-SCAN-1400000000-160.gwf");
    let mut w = GwfWriter::create(&path, 1).unwrap();
    let fl = 8 * 1024;
    let missing = 7; // [56, 64) s
    for k in 0..n / fl {
        if k == missing {
            continue;
        }
        let c = [ChannelData::new(
            "Z1:STRAIN",
            ChannelKind::Proc,
            rate,
            Samples::F32(&x[k * fl..(k + 1) * fl]),
            Compression::Gzip,
        )];
        w.write_frame(
            1_400_000_000_000_000_000 + (8 * k) as i64 * 1_000_000_000,
            8.0,
            0,
            &c,
        )
        .unwrap();
    }
    w.finish().unwrap();
    let mut y: Vec<f64> = x.iter().map(|&v| v as f64).collect();
    y[missing * fl..(missing + 1) * fl].fill(f64::NAN);
    let npy_path = tmp.path().join("strain.npy");
    write_npy(&npy_path, &y, true).unwrap();

    let f = GwfFile::open(&path).unwrap();
    let ch = f.channel("Z1:STRAIN").unwrap();
    assert_eq!(ch.len(), n);
    let mem = InMemory {
        data: y,
        rate_hz: rate,
        start_gps: 1_400_000_000.0,
    };
    let params = ScanParams {
        fmin: Some(32.0),
        ..ScanParams::default()
    };
    let (p1, a1, t1, c1) = scan_source(&ch, &params, (None, None), None, &|_| {}).unwrap();
    let (p2, a2, t2, c2) = scan_source(&mem, &params, (None, None), None, &|_| {}).unwrap();
    assert_eq!(p1, p2);
    assert_eq!(a1, a2);
    assert_eq!(c1, c2, "the same samples have the same checksum");
    assert_eq!(t1, t2);
    assert!(
        t1.iter()
            .any(|t| (t.t_peak - 1_400_000_100.3).abs() < 0.05 && t.snr > 20.0),
        "{t1:?}"
    );
    // The frame-file channel and the .npy-with-NaN agree sample for sample.
    let r = NpyReader::open(&npy_path).unwrap();
    let (mut a, mut b) = (vec![0.0; 5000], vec![0.0; 5000]);
    for start in [0, 57_000, n - 5000] {
        ch.read_samples(start, &mut a).unwrap();
        r.read_f64(start, &mut b).unwrap();
        assert_bits_eq(&a, &b, "frames vs npy");
    }
}

#[test]
fn mutated_files_never_panic() {
    // A small deterministic mutation fuzzer (the cargo-fuzz target
    // `gwf_file` does this at scale): byte flips, overwrites and truncations
    // of two fixtures; every outcome is a value or a one-line error.
    let tmp = TempDir::new().unwrap();
    let mut s = 0x9e37_79b9_7f4a_7c15u64;
    let mut rnd = move || {
        s ^= s << 13;
        s ^= s >> 7;
        s ^= s << 17;
        s
    };
    for seed_file in ["codecs_zsgz.gwf", "adc_calib.gwf"] {
        let good = std::fs::read(dir().join(seed_file)).unwrap();
        for case in 0..300 {
            let mut b = good.clone();
            match case % 3 {
                0 => {
                    for _ in 0..1 + rnd() % 4 {
                        let i = (rnd() % b.len() as u64) as usize;
                        b[i] ^= 1 << (rnd() % 8);
                    }
                }
                1 => {
                    let i = (rnd() % b.len() as u64) as usize;
                    let v = rnd().to_le_bytes();
                    let n = v.len().min(b.len() - i);
                    b[i..i + n].copy_from_slice(&v[..n]);
                }
                _ => b.truncate((rnd() % b.len() as u64) as usize),
            }
            let p = tmp.path().join("m.gwf");
            std::fs::write(&p, &b).unwrap();
            let one_line = |e: anyhow::Error| {
                let m = format!("{e:#}");
                assert!(!m.contains('\n'), "{seed_file} case {case}: {m}");
            };
            let f = match GwfFile::open(&p) {
                Ok(f) => f,
                Err(e) => {
                    one_line(e);
                    continue;
                }
            };
            let names: Vec<String> = f.channel_names().map(|(n, _)| n.to_string()).collect();
            for name in names {
                match f.channel(&name) {
                    Ok(ch) => {
                        let mut x = vec![0.0; ch.len().min(2048)];
                        if let Err(e) = ch.read_samples(0, &mut x) {
                            one_line(e);
                        }
                    }
                    Err(e) => one_line(e),
                }
            }
        }
    }
}
