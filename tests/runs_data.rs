//! Following a run (issue 14 items 4, 5 and 7): two bundles (days) of one
//! channel in one catalogue, overlapping scans, re-scans with other
//! parameters, data changed since the scan, several target channels in
//! `report`, and frame-file bundles against the same samples as `.npy`.
//!
//! The data are invented: unit white Gaussian noise (seeded) plus
//! sine-Gaussians (Chatterji et al. 2004's tile shape) at known times, on
//! invented channels (`AV7:...`).
use crate::cli_util::{count, Dir};
use glitchbook::families::features::EnergyMapSource;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use std::path::Path;

const RATE: f64 = 1024.0;
const T0: f64 = 1_400_000_000.0;
const DAY_S: f64 = 96.0;

/// (time offset from the start [s], f0 [Hz], Q, amplitude) of the glitches
/// of one "day": two shapes, four of each.
fn glitches(day: usize) -> Vec<(f64, f64, f64, f64)> {
    let mut v = Vec::new();
    for k in 0..8 {
        let t = 12.0 + 9.0 * k as f64 + day as f64 * 0.37;
        if k % 2 == 0 {
            v.push((t, 60.0, 6.0, 3.0));
        } else {
            v.push((t, 250.0, 20.0, 2.5));
        }
    }
    v
}

/// `n` samples of noise (seed) starting at GPS `t0`, plus sine-Gaussians
/// at absolute GPS times.
fn series(seed: u64, t0: f64, n: usize, glitches: &[(f64, f64, f64, f64)]) -> Vec<f64> {
    let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(seed);
    let normal = Normal::new(0.0, 1.0).unwrap();
    let mut x: Vec<f64> = (0..n).map(|_| normal.sample(&mut rng)).collect();
    for &(tg, f0, q, amp) in glitches {
        let tau = q / (2.0_f64.sqrt() * std::f64::consts::PI * f0);
        for (i, v) in x.iter_mut().enumerate() {
            let t = t0 + i as f64 / RATE - tg;
            if t.abs() < 5.0 * tau {
                *v +=
                    amp * (-(t / tau).powi(2)).exp() * (2.0 * std::f64::consts::PI * f0 * t).sin();
            }
        }
    }
    x
}

/// Absolute glitch times of day `day` starting at `t0`.
fn day_glitches(day: usize, t0: f64) -> Vec<(f64, f64, f64, f64)> {
    glitches(day)
        .into_iter()
        .map(|(t, f, q, a)| (t0 + t, f, q, a))
        .collect()
}

/// Write a one-channel `.npy` bundle `dir` holding `x` from `t0`.
fn npy_bundle(d: &Dir, dir: &str, name: &str, x: &[f64], t0: f64) {
    std::fs::create_dir_all(d.path().join(dir)).unwrap();
    glitchbook::io::write_npy(&d.path().join(dir).join("data.npy"), x, false).unwrap();
    d.write(
        &format!("{dir}/bundle.toml"),
        &format!(
            "[[channel]]\nname = \"{name}\"\nfile = \"data.npy\"\nrate = {RATE}\n\
             start = {t0}\nrole = \"target\"\n"
        ),
    );
}

fn triggers_json(d: &Dir, extra: &[&str]) -> Vec<serde_json::Value> {
    let mut args = vec!["triggers", "--format", "json"];
    args.extend_from_slice(extra);
    let v: serde_json::Value = serde_json::from_str(&d.ok(&args)).unwrap();
    v.as_array().unwrap().clone()
}

const SCAN: [&str; 4] = ["--fmin", "20", "--fmax", "400"];

/// The first day's glitches written as bundle `day1` (one target channel)
/// and scanned; returns its number of samples.
fn scanned_first_day(d: &Dir) -> usize {
    let n = (DAY_S * RATE) as usize;
    npy_bundle(
        d,
        "day1",
        "AV7:STRAIN",
        &series(1, T0, n, &day_glitches(0, T0)),
        T0,
    );
    scan(d, "day1", &[]);
    n
}

fn scan(d: &Dir, bundle: &str, extra: &[&str]) -> String {
    let mut args = vec!["scan", bundle];
    args.extend_from_slice(&SCAN);
    args.extend_from_slice(extra);
    d.ok(&args)
}

/// Two days of one channel as two bundles (both kept in place): `cluster`,
/// `thumbnail` (a trigger of each day) and `report` work, and each
/// trigger's map comes from its own day's file: the map at every glitch
/// of either day shows the glitch (peak Z far above noise), which a map
/// from the other day's file could not.
#[test]
fn two_days_of_one_channel() {
    let d = Dir::new();
    let n = (DAY_S * RATE) as usize;
    let t1 = T0 + DAY_S;
    npy_bundle(
        &d,
        "day1",
        "AV7:STRAIN",
        &series(1, T0, n, &day_glitches(0, T0)),
        T0,
    );
    npy_bundle(
        &d,
        "day2",
        "AV7:STRAIN",
        &series(2, t1, n, &day_glitches(1, t1)),
        t1,
    );
    scan(&d, "day1", &[]);
    // The scientists moved the threshold for the second day.
    scan(&d, "day2", &["--snr-threshold", "6"]);
    assert_eq!(count(&d.db(), "scans"), 2);
    d.ok(&["cluster", "--min-snr", "8"]);
    let trig = triggers_json(&d, &["--min-snr", "8"]);
    let day1 = trig
        .iter()
        .find(|t| t["t_peak"].as_f64().unwrap() < t1)
        .expect("a day-1 trigger");
    let day2 = trig
        .iter()
        .find(|t| t["t_peak"].as_f64().unwrap() > t1)
        .expect("a day-2 trigger");
    for t in [day1, day2] {
        let id = t["id"].to_string();
        let png = format!("t{id}.png");
        d.ok(&["thumbnail", &id, "--out", &png]);
        assert!(std::fs::metadata(d.path().join(&png)).unwrap().len() > 100);
    }
    d.ok(&["assign"]);
    d.ok(&["report", "--out", "rep"]);
    let page = std::fs::read_to_string(d.path().join("rep/index.html")).unwrap();
    // The families came from 5 seeded starts and the page says how far
    // they agreed.
    assert!(
        page.contains("The clustering ran from 5 seeds and kept seed "),
        "{page}"
    );
    // Every glitch of both days is found in its own day's data by the maps.
    let conn = glitchbook::catalogue::open(&d.db()).unwrap();
    let maps = glitchbook::maps::BundleMaps::from_catalogue(&conn).unwrap();
    // Each day's images take the threshold (colour scale) of that day's
    // scan: 1 + SNR²/2 for SNR 5.5 (the default) and 6.
    for (t, snr) in [(T0 + 10.0, 5.5f64), (t1 + 10.0, 6.0)] {
        let band = maps.scan_band("AV7:STRAIN", t).expect("scanned");
        assert!(
            (band.z_threshold - (1.0 + snr * snr / 2.0)).abs() < 1e-9,
            "{t}: {band:?}"
        );
    }
    for (day, t0) in [(0, T0), (1, t1)] {
        for (tg, f0, q, _) in day_glitches(day, t0) {
            let rows = maps.energy_rows("AV7:STRAIN", tg, 0.5, q, &[f0]).unwrap();
            let r = rows[0].as_ref().expect("row in band");
            let zmax = r.z.iter().copied().fold(0.0f64, |a, b| a.max(b as f64));
            // Noise alone: Z is exponential with mean 1 (Z > 15 has
            // probability 3e-7 per tile); the glitches have SNR > 8.
            assert!(zmax > 15.0, "day {day} glitch at {tg}: max Z {zmax}");
        }
    }
}

/// Overlapping scans of one channel never list a trigger twice; the
/// analysed time is the union; a re-scan with other parameters replaces
/// the earlier triggers of the time it analysed (kept as superseded), and
/// `check` still passes.
#[test]
fn overlapping_and_repeated_scans() {
    let d = Dir::new();
    // One 160 s stretch; bundle A holds 0–96 s, bundle B 64–160 s.
    let all_n = (160.0 * RATE) as usize;
    let mut g = day_glitches(0, T0);
    g.extend(day_glitches(1, T0 + 64.0));
    let x = series(3, T0, all_n, &g);
    let a_n = (96.0 * RATE) as usize;
    let b0 = (64.0 * RATE) as usize;
    npy_bundle(&d, "a", "AV7:STRAIN", &x[..a_n], T0);
    npy_bundle(&d, "b", "AV7:STRAIN", &x[b0..], T0 + 64.0);
    scan(&d, "a", &[]);
    let only_a = triggers_json(&d, &[]).len();
    scan(&d, "b", &[]);
    let both = triggers_json(&d, &[]);
    let mut peaks: Vec<i64> = both
        .iter()
        .map(|t| (t["t_peak"].as_f64().unwrap() * 1e3).round() as i64)
        .collect();
    peaks.sort();
    let n_before = peaks.len();
    peaks.dedup();
    assert_eq!(peaks.len(), n_before, "a trigger listed twice");
    // No two triggers of one glitch: peaks within 20 ms are one event.
    for w in both.windows(2) {
        let (a, b) = (&w[0], &w[1]);
        let dt = (a["t_peak"].as_f64().unwrap() - b["t_peak"].as_f64().unwrap()).abs();
        let df = (a["f_peak"].as_f64().unwrap() / b["f_peak"].as_f64().unwrap())
            .ln()
            .abs();
        assert!(dt > 0.02 || df > 0.5, "{a} and {b}");
    }
    assert!(both.len() > only_a);
    let conn = glitchbook::catalogue::open(&d.db()).unwrap();
    let listed: i64 = conn
        .query_row("SELECT count(*) FROM triggers", [], |r| r.get(0))
        .unwrap();
    let moved: i64 = conn
        .query_row("SELECT count(*) FROM superseded_triggers", [], |r| r.get(0))
        .unwrap();
    let found: i64 = conn
        .query_row("SELECT sum(n_triggers) FROM scans", [], |r| r.get(0))
        .unwrap();
    assert!(moved > 0, "the overlap held triggers of scan A");
    assert_eq!(listed + moved, found);
    // `channels` counts the listed triggers.
    let ch: serde_json::Value =
        serde_json::from_str(&d.ok(&["channels", "--format", "json"])).unwrap();
    assert_eq!(ch[0]["n_triggers"].as_i64(), Some(listed), "{ch}");
    // Analysed time is the union of both scans', and every listed trigger
    // is in it.
    let analysed = glitchbook::catalogue::analysed_segments(&conn, "AV7:STRAIN").unwrap();
    for t in &both {
        assert!(analysed.contains(t["t_peak"].as_f64().unwrap()));
    }
    drop(conn);
    d.ok(&["check"]);

    // Re-scan A with another fmin: A's time now lists the new scan's
    // triggers only; the old ones are kept as superseded.
    scan(&d, "a", &["--snr-threshold", "6"]);
    let conn = glitchbook::catalogue::open(&d.db()).unwrap();
    let new_scan: i64 = conn
        .query_row("SELECT max(id) FROM scans", [], |r| r.get(0))
        .unwrap();
    let a_segs = glitchbook::catalogue::scan_segments(&conn, new_scan).unwrap();
    let after = triggers_json(&d, &[]);
    let mut in_a = 0;
    for t in &after {
        let tp = t["t_peak"].as_f64().unwrap();
        if a_segs.contains(tp) {
            in_a += 1;
            let sid: i64 = conn
                .query_row(
                    "SELECT scan_id FROM triggers WHERE id = ?1",
                    [t["id"].as_i64().unwrap()],
                    |r| r.get(0),
                )
                .unwrap();
            assert_eq!(sid, new_scan, "trigger at {tp} from an older scan");
        }
    }
    assert!(in_a > 0);
    // The first scan of A is wholly covered: marked superseded.
    let first: Option<i64> = conn
        .query_row("SELECT superseded_by FROM scans WHERE id = 1", [], |r| {
            r.get(0)
        })
        .unwrap();
    assert_eq!(first, Some(new_scan));
    drop(conn);
    d.ok(&["check"]);
}

/// Samples replaced after the scan: `cluster` and `thumbnail` refuse with
/// an error naming the file, and the catalogue is left as it was.
#[test]
fn changed_data_is_refused_naming_the_file() {
    let d = Dir::new();
    let n = scanned_first_day(&d);
    let id = triggers_json(&d, &["--min-snr", "8"])[0]["id"].to_string();
    // Same size, other samples.
    let path = d.path().join("day1/data.npy");
    glitchbook::io::write_npy(&path, &series(9, T0, n, &[]), false).unwrap();
    let before = d.checksum();
    for args in [
        vec!["cluster", "--min-snr", "8"],
        vec!["thumbnail", id.as_str(), "--out", "x.png"],
    ] {
        let out = d.run(&args);
        assert!(!out.status.success(), "{args:?} used changed data");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(
            err.contains("data.npy") && err.contains("changed since scan"),
            "{args:?}: {err}"
        );
    }
    assert_eq!(before, d.checksum());
}

/// Two target channels (one scanned, one imported with the default role):
/// `cluster` and `assign` leave the imported one's triggers out with a
/// warning (no raw data, no fingerprint) instead of failing; `report`
/// writes one report per target and an index linking them;
/// `--channel` writes one alone; an unknown name is refused.
#[test]
fn report_with_two_target_channels() {
    let d = Dir::new();
    scanned_first_day(&d);
    d.write("other.csv", &crate::cli_util::trigger_csv(40, T0 + 5.0));
    d.ok(&["import", "other.csv", "--channel", "AV7:OTHER"]);
    // The imported target has no raw data: `cluster` and `assign` work on
    // the scanned one and say which triggers were left out and why.
    for args in [&["cluster", "--min-snr", "8"][..], &["assign"][..]] {
        let out = d.run(args);
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(out.status.success(), "{args:?}: {err}");
        assert!(
            err.contains("AV7:OTHER: 40 target triggers") && err.contains("without raw data"),
            "{args:?}: {err}"
        );
    }
    let index = d.ok(&["report", "--out", "rep"]);
    assert!(index.trim().ends_with("rep/index.html"), "{index}");
    let top = std::fs::read_to_string(d.path().join("rep/index.html")).unwrap();
    for (name, sub) in [("AV7:STRAIN", "AV7_STRAIN"), ("AV7:OTHER", "AV7_OTHER")] {
        assert!(top.contains(&format!("href=\"{sub}/index.html\"")), "{top}");
        assert!(top.contains(name));
        let page = std::fs::read_to_string(d.path().join(format!("rep/{sub}/index.html"))).unwrap();
        assert!(page.contains(name), "{sub} page does not name {name}");
    }
    d.ok(&["report", "--out", "one", "--channel", "AV7:OTHER"]);
    assert!(d.path().join("one/index.html").exists());
    let out = d.run(&["report", "--out", "bad", "--channel", "AV7:NOPE"]);
    assert!(!out.status.success());
    assert!(String::from_utf8_lossy(&out.stderr).contains("AV7:NOPE"));
}

/// Frame files of `file_s` seconds from `t0`, named `AV7-TEST-GPS-DUR.gwf`
/// in `dir`, holding `strain` (float64, RATE) and an aux channel (float32,
/// 256 Hz); files whose index is in `skip` are not written.
fn write_frames(dir: &Path, t0: f64, file_s: f64, strain: &[f64], skip: &[usize]) {
    use glitchbook::io::gwf::writer::{ChannelData, GwfWriter, Samples};
    use glitchbook::io::gwf::{ChannelKind, Compression};
    std::fs::create_dir_all(dir).unwrap();
    let per = (file_s * RATE) as usize;
    let aux_rate = 256.0;
    let aux_per = (file_s * aux_rate) as usize;
    for (k, chunk) in strain.chunks(per).enumerate() {
        if skip.contains(&k) {
            continue;
        }
        let t = t0 + k as f64 * file_s;
        let aux: Vec<f32> = (0..aux_per).map(|i| ((i * 7 + k) % 13) as f32).collect();
        let path = dir.join(format!("AV7-TEST-{}-{}.gwf", t as i64, file_s as i64));
        let mut w = GwfWriter::create(&path, 6).unwrap();
        w.write_frame(
            (t * 1e9).round() as i64,
            file_s,
            0,
            &[
                ChannelData::new(
                    "AV7:STRAIN",
                    ChannelKind::Proc,
                    RATE,
                    Samples::F64(chunk),
                    Compression::Gzip,
                ),
                ChannelData::new(
                    "AV7:AUX",
                    ChannelKind::Adc,
                    aux_rate,
                    Samples::F32(&aux),
                    Compression::Raw,
                ),
            ],
        )
        .unwrap();
        w.finish().unwrap();
    }
}

/// `bundle` on a directory of frame files, then `scan`, gives exactly the
/// triggers of the same samples as one `.npy` (the missing third file as
/// NaN there): same times, frequencies and SNRs. Thumbnails read the
/// frames. A `--target` found in no file is refused.
#[test]
fn frame_bundle_scans_like_npy_with_a_missing_file() {
    let d = Dir::new();
    let file_s = 32.0;
    let n = (5.0 * file_s * RATE) as usize;
    let mut g = day_glitches(0, T0);
    g.extend(day_glitches(1, T0 + 96.0).into_iter().take(6));
    let x = series(4, T0, n, &g);
    write_frames(&d.path().join("frames"), T0, file_s, &x, &[2]);
    let out = d.run(&["bundle", "frames", "--out", "fb", "--target", "AV7:NOPE"]);
    assert!(!out.status.success());
    assert!(String::from_utf8_lossy(&out.stderr).contains("AV7:NOPE"));
    d.ok(&["bundle", "frames", "--out", "fb", "--target", "AV7:STRAIN"]);
    let toml = std::fs::read_to_string(d.path().join("fb/bundle.toml")).unwrap();
    assert!(
        toml.contains("AV7:AUX") && toml.contains("\"target\""),
        "{toml}"
    );
    let b = glitchbook::io::Bundle::open(&d.path().join("fb")).unwrap();
    let strain = b.channels.iter().find(|c| c.name == "AV7:STRAIN").unwrap();
    assert_eq!(strain.files.len(), 4);
    assert_eq!((strain.rate, strain.start), (RATE, T0));
    let aux = b.channels.iter().find(|c| c.name == "AV7:AUX").unwrap();
    assert_eq!(aux.rate, 256.0);

    // The same samples as .npy, NaN where the file is missing.
    let mut y = x.clone();
    let per = (file_s * RATE) as usize;
    y[2 * per..3 * per].iter_mut().for_each(|v| *v = f64::NAN);
    let e = Dir::new();
    npy_bundle(&e, "nb", "AV7:STRAIN", &y, T0);
    scan(&d, "fb", &["--channel", "AV7:STRAIN"]);
    scan(&e, "nb", &[]);
    let key = |v: &Vec<serde_json::Value>| -> Vec<(f64, f64, f64)> {
        v.iter()
            .map(|t| {
                (
                    t["t_peak"].as_f64().unwrap(),
                    t["f_peak"].as_f64().unwrap(),
                    t["snr"].as_f64().unwrap(),
                )
            })
            .collect()
    };
    let from_frames = key(&triggers_json(&d, &[]));
    let from_npy = key(&triggers_json(&e, &[]));
    assert!(from_npy.len() >= 8, "{from_npy:?}");
    assert_eq!(from_frames, from_npy);
    // No trigger in the missing file's time, and analysed time agrees.
    let gap = (T0 + 2.0 * file_s, T0 + 3.0 * file_s);
    assert!(from_frames.iter().all(|t| t.0 < gap.0 || t.0 >= gap.1));
    let a = glitchbook::catalogue::analysed_segments(
        &glitchbook::catalogue::open(&d.db()).unwrap(),
        "AV7:STRAIN",
    )
    .unwrap();
    let b = glitchbook::catalogue::analysed_segments(
        &glitchbook::catalogue::open(&e.db()).unwrap(),
        "AV7:STRAIN",
    )
    .unwrap();
    assert_eq!(a.segments(), b.segments());
    // A trigger's map is read from the frame files.
    let id = triggers_json(&d, &["--min-snr", "8"])[0]["id"].to_string();
    d.ok(&["thumbnail", &id, "--out", "f.png"]);
    // A frame file changed after the scan is named.
    let victim = d
        .path()
        .join(format!("frames/AV7-TEST-{}-32.gwf", (T0 + 32.0) as i64));
    let mut bytes = std::fs::read(&victim).unwrap();
    let k = bytes.len() / 2;
    bytes[k] ^= 0x55;
    std::fs::write(&victim, bytes).unwrap();
    let out = d.run(&["thumbnail", &id, "--out", "g.png"]);
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("AV7-TEST-1400000032-32.gwf") && err.contains("changed since"),
        "{err}"
    );
}

/// `bundle` on an HDF5 strain file written by h5py 3.16.0 (fixture
/// `tests/data/hdf5/contiguous_f64.h5`: 64 s at 256 Hz from GPS
/// 1400000000, `Xstart`/`Xspacing` on `strain/Strain`): the channel is named
/// after the file, rate and start come from the attributes, and the bundle
/// reads the samples h5py wrote (`expected/contiguous_f64.npy`).
#[cfg(feature = "hdf5")]
#[test]
fn bundle_of_an_hdf5_file() {
    use glitchbook::scan::SampleSource;
    let d = Dir::new();
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/hdf5");
    std::fs::create_dir_all(d.path().join("h")).unwrap();
    std::fs::copy(
        src.join("contiguous_f64.h5"),
        d.path().join("h/AV7-H5STRAIN-1400000000-64.h5"),
    )
    .unwrap();
    d.ok(&["bundle", "h", "--out", "hb", "--target", "AV7-H5STRAIN"]);
    let b = glitchbook::io::Bundle::open(&d.path().join("hb")).unwrap();
    let c = &b.channels[0];
    assert_eq!(c.name, "AV7-H5STRAIN");
    assert_eq!((c.rate, c.start), (256.0, 1_400_000_000.0));
    assert_eq!(c.format.name(), "hdf5");
    let s = glitchbook::io::ChannelSource::open(c).unwrap();
    let want = glitchbook::io::NpyReader::open(&src.join("expected/contiguous_f64.npy")).unwrap();
    let mut a = vec![0.0; want.len];
    let mut w = vec![0.0; want.len];
    s.read(0, &mut a).unwrap();
    want.read_f64(0, &mut w).unwrap();
    assert_eq!(a, w);
}

/// `demo --format gwf` writes the scenario as frame files (no `.npy` kept)
/// and runs the whole loop on them.
#[test]
fn demo_as_frame_files() {
    let d = Dir::new();
    let out = d.ok(&["demo", "--out", "g", "--hours", "0.1", "--format", "gwf"]);
    assert!(
        out.contains("as frame files") && out.contains("6. report"),
        "{out}"
    );
    let frames = std::fs::read_dir(d.path().join("g/frames"))
        .unwrap()
        .count();
    assert_eq!(frames, 2); // 360 s in files of 256 s
    let npy = std::fs::read_dir(d.path().join("g"))
        .unwrap()
        .filter(|e| {
            e.as_ref()
                .unwrap()
                .path()
                .extension()
                .is_some_and(|x| x == "npy")
        })
        .count();
    assert_eq!(npy, 0);
    let toml = std::fs::read_to_string(d.path().join("g/bundle.toml")).unwrap();
    assert!(
        toml.contains("dir = \"frames\"") && !toml.contains(".npy"),
        "{toml}"
    );
}

/// A time in a dropout (NaN samples) inside a scan's span: the scan's maps
/// claim it (`has_data_at`, so a refined peak just past a segment's edge
/// keeps its map) but it is not analysed time (`analysed_at`), which is
/// what an aux channel's witness image needs: `report` once failed with
/// "GPS ... is not in valid data" when a family's first member fell in the
/// witness's dropout.
#[test]
fn a_dropout_is_in_the_span_but_not_analysed() {
    let d = Dir::new();
    let n = (DAY_S * RATE) as usize;
    let mut x = series(3, T0, n, &day_glitches(0, T0));
    let (a, b) = ((40.0 * RATE) as usize, (50.0 * RATE) as usize);
    x[a..b].iter_mut().for_each(|v| *v = f64::NAN);
    npy_bundle(&d, "gap", "AV7:STRAIN", &x, T0);
    scan(&d, "gap", &[]);
    let conn = glitchbook::catalogue::open(&d.db()).unwrap();
    let maps = glitchbook::maps::BundleMaps::from_catalogue(&conn).unwrap();
    let in_gap = T0 + 45.0;
    assert!(maps.has_data_at("AV7:STRAIN", in_gap));
    assert!(!maps.analysed_at("AV7:STRAIN", in_gap));
    assert!(maps.analysed_at("AV7:STRAIN", T0 + 20.0));
    assert!(!maps.analysed_at("AV7:OTHER", T0 + 20.0));
}
