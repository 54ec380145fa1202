//! The figure a site sizes its machines by: one day of one detector, from
//! frame files to the report, on this machine.
//!
//! Generates (on the fly, not in CI) `GLITCHBOOK_SITE_HOURS` hours (default
//! 24) of one 16384 Hz float32 strain channel and `GLITCHBOOK_SITE_AUX` aux
//! channels (default 200; int16 ADC counts at 256, 512, 1024 and 2048 Hz in
//! turn) as hour-long frame files of 60-s frames (strain gzip level 1, aux
//! zero-suppressed), with sine-Gaussian glitches in the strain (about one a
//! minute, SNR 8–60 in white noise) of which two aux channels witness some.
//! Then, through the `glitchbook` binary, the daily loop of README's
//! "Following a run": `bundle` the first two hours and `scan` them,
//! `cluster`; `bundle` and `scan` the rest, `assign`; `witnesses`,
//! `vetoes`, `report`. Prints each stage's wall time and peak resident
//! memory (the child's, from `wait4`), and the totals.
//!
//! Disk: ~0.9 GB per hour at the defaults (checked against the free space
//! before writing; set `GLITCHBOOK_SITE_DIR` to put the files elsewhere).
//! Targets (issue 14): ≤ 45 min wall for 24 h on 2 cores, peak < 4 GiB.
//!
//! Run: `cargo bench --bench site_day` (or `GLITCHBOOK_SITE_HOURS=1 cargo
//! bench --profile test --bench site_day` for a short check).

mod common;

use glitchbook::io::gwf::{ChannelData, ChannelKind, Compression, GwfWriter, Samples};
use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

const T0: i64 = 1_420_000_000;
const FILE_S: i64 = 3600;
const FRAME_S: i64 = 60;
const STRAIN_HZ: f64 = 16384.0;
const AUX_RATES: [f64; 4] = [256.0, 512.0, 1024.0, 2048.0];
/// Strain noise: white, σ per sample (float32 units of 1e-21).
const STRAIN_SIGMA: f64 = 1.0;
/// Aux noise: σ in ADC counts.
const AUX_SIGMA: f64 = 100.0;

/// One glitch: peak time \[s from T0\], frequency \[Hz\], Q, strain SNR,
/// and the aux channel (index) that witnesses it, if any.
struct Glitch {
    t: f64,
    f: f64,
    q: f64,
    snr: f64,
    witness: Option<usize>,
}

fn glitches(hours: f64) -> Vec<Glitch> {
    let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(7);
    let n = (hours * 60.0) as usize;
    let mut out: Vec<Glitch> = (0..n)
        .map(|_| {
            let t = rng.gen_range(10.0..hours * 3600.0 - 10.0);
            let low = rng.gen_bool(0.5);
            // Two kinds: low (40–150 Hz, Q 4–8) witnessed by aux 0 (256 Hz)
            // 70% of the time; high (200–800 Hz, Q 10–30) by aux 1 (512 Hz
            // samples the burst at half the frequency, capped at 120 Hz) 60%.
            let (f, q, witness) = if low {
                let f = rng.gen_range(40.0..150.0);
                let q = rng.gen_range(4.0..8.0);
                (f, q, rng.gen_bool(0.7).then_some(0))
            } else {
                let f = rng.gen_range(200.0..800.0);
                let q = rng.gen_range(10.0..30.0);
                (f, q, rng.gen_bool(0.6).then_some(1))
            };
            // SNR ∝ ρ⁻³ on [8, 60] (most near threshold).
            let u: f64 = rng.gen();
            let snr = 8.0 / (1.0 - u * (1.0 - (8.0f64 / 60.0).powi(2))).sqrt();
            Glitch {
                t,
                f,
                q,
                snr,
                witness,
            }
        })
        .collect();
    out.sort_by(|a, b| a.t.total_cmp(&b.t));
    out
}

/// Add a sine-Gaussian of matched-filter SNR `snr` in white noise of σ per
/// sample at `fs` (ρ² = (fs/σ²) ∫h² dt, ∫h² = A² τ √(π/2) / 2 for
/// h = A exp(−(t/τ)²) sin(2πft), τ = Q/(√2 π f); textbook, from memory).
fn add_sine_gaussian(x: &mut [f64], fs: f64, t0: f64, g: (f64, f64, f64, f64), sigma: f64) {
    let (tc, f, q, snr) = g;
    let tau = q / (std::f64::consts::SQRT_2 * std::f64::consts::PI * f);
    let a = snr * sigma * (2.0 / (fs * tau * (std::f64::consts::PI / 2.0).sqrt())).sqrt();
    let i0 = (((tc - 4.0 * tau) - t0) * fs).floor().max(0.0) as usize;
    let i1 = ((((tc + 4.0 * tau) - t0) * fs).ceil().max(0.0) as usize).min(x.len());
    for (i, v) in x.iter_mut().enumerate().take(i1).skip(i0) {
        let t = t0 + i as f64 / fs - tc;
        *v += a * (-(t / tau).powi(2)).exp() * (2.0 * std::f64::consts::PI * f * t).sin();
    }
}

fn noise(seed: u64, n: usize, sigma: f64) -> Vec<f64> {
    let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(seed);
    (0..n)
        .map(|_| {
            let z: f64 = StandardNormal.sample(&mut rng);
            sigma * z
        })
        .collect()
}

fn aux_name(k: usize) -> String {
    format!("SD1:SENSOR_{k:03}")
}

/// Write the hour-long frame files; returns their paths and bytes.
fn write_files(dir: &Path, hours: usize, n_aux: usize, gl: &[Glitch]) -> (Vec<PathBuf>, u64) {
    let names: Vec<String> = (0..n_aux).map(aux_name).collect();
    let mut paths = Vec::new();
    let mut bytes = 0;
    for h in 0..hours {
        let start = T0 + h as i64 * FILE_S;
        let path = dir.join(format!("SD1-SITE-{start}-{FILE_S}.gwf"));
        let mut w = GwfWriter::create(&path, 1).unwrap();
        for k in 0..FILE_S / FRAME_S {
            let t0 = (h as i64 * FILE_S + k * FRAME_S) as f64;
            let seed = (h as u64) << 32 | (k as u64) << 12;
            let in_frame: Vec<&Glitch> = gl
                .iter()
                .filter(|g| g.t > t0 - 1.0 && g.t < t0 + FRAME_S as f64 + 1.0)
                .collect();
            let mut strain = noise(seed, (STRAIN_HZ * FRAME_S as f64) as usize, STRAIN_SIGMA);
            for g in &in_frame {
                add_sine_gaussian(
                    &mut strain,
                    STRAIN_HZ,
                    t0,
                    (g.t, g.f, g.q, g.snr),
                    STRAIN_SIGMA,
                );
            }
            let strain: Vec<f32> = strain.iter().map(|&v| v as f32).collect();
            let aux: Vec<Vec<i16>> = (0..n_aux)
                .into_par_iter()
                .map(|j| {
                    let fs = AUX_RATES[j % AUX_RATES.len()];
                    let mut x = noise(
                        seed + 1 + j as u64,
                        (fs * FRAME_S as f64) as usize,
                        AUX_SIGMA,
                    );
                    for g in in_frame.iter().filter(|g| g.witness == Some(j)) {
                        // The witness sees the burst at its own frequency
                        // (aux 0) or half of it (aux 1), 10 ms earlier, SNR 20.
                        let f = if j == 0 { g.f } else { (0.5 * g.f).min(120.0) };
                        add_sine_gaussian(&mut x, fs, t0, (g.t - 0.01, f, g.q, 20.0), AUX_SIGMA);
                    }
                    x.iter()
                        .map(|&v| v.round().clamp(-32768.0, 32767.0) as i16)
                        .collect()
                })
                .collect();
            let mut chans = vec![ChannelData::new(
                "SD1:STRAIN",
                ChannelKind::Proc,
                STRAIN_HZ,
                Samples::F32(&strain),
                Compression::Gzip,
            )];
            for (j, a) in aux.iter().enumerate() {
                let mut c = ChannelData::new(
                    &names[j],
                    ChannelKind::Adc,
                    AUX_RATES[j % AUX_RATES.len()],
                    Samples::I16(a),
                    Compression::ZeroSuppress,
                );
                c.slope = 1.0 / AUX_SIGMA as f32;
                chans.push(c);
            }
            w.write_frame((T0 + t0 as i64) * 1_000_000_000, FRAME_S as f64, 0, &chans)
                .unwrap();
        }
        bytes += w.finish().unwrap();
        paths.push(path);
    }
    (paths, bytes)
}

/// Run `glitchbook ARGS` and wait for it with `wait4`: (wall s, peak RSS
/// MiB of the child).
fn stage(name: &str, args: &[&str]) -> (f64, f64) {
    let t = Instant::now();
    let child = Command::new(env!("CARGO_BIN_EXE_glitchbook"))
        .arg("--quiet")
        .args(args)
        .stdout(std::process::Stdio::null())
        .spawn()
        .expect("glitchbook runs");
    let pid = child.id() as libc::pid_t;
    let mut status = 0;
    // SAFETY: wait4 fills the status and the rusage it is given; the child
    // is ours and not waited for elsewhere.
    let mut ru: libc::rusage = unsafe { std::mem::zeroed() };
    let r = unsafe { libc::wait4(pid, &mut status, 0, &mut ru) };
    assert_eq!(r, pid, "wait4 on {name}");
    assert!(
        libc::WIFEXITED(status) && libc::WEXITSTATUS(status) == 0,
        "{name} failed (status {status})"
    );
    std::mem::forget(child);
    let wall = t.elapsed().as_secs_f64();
    let rss = ru.ru_maxrss as f64 / 1024.0;
    println!("  {name:<34} {wall:>9.1} s {rss:>9.0} MiB");
    (wall, rss)
}

fn free_bytes(dir: &Path) -> u64 {
    let c = std::ffi::CString::new(dir.as_os_str().as_encoded_bytes()).unwrap();
    // SAFETY: statvfs fills the struct it is given.
    let mut s: libc::statvfs = unsafe { std::mem::zeroed() };
    if unsafe { libc::statvfs(c.as_ptr(), &mut s) } != 0 {
        return u64::MAX;
    }
    s.f_bavail * s.f_frsize
}

fn main() {
    let hours = common::env_f64("GLITCHBOOK_SITE_HOURS")
        .unwrap_or(24.0)
        .round()
        .max(1.0) as usize;
    let n_aux = common::env_f64("GLITCHBOOK_SITE_AUX").unwrap_or(200.0) as usize;
    assert!(n_aux >= 2, "GLITCHBOOK_SITE_AUX must be at least 2");
    let root = std::env::var_os("GLITCHBOOK_SITE_DIR")
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from(env!("CARGO_TARGET_TMPDIR")));
    std::fs::create_dir_all(&root).unwrap();
    let mut tmp = tempfile::tempdir_in(&root).unwrap();
    // GLITCHBOOK_SITE_KEEP=1 keeps the files, catalogue and report.
    tmp.disable_cleanup(std::env::var_os("GLITCHBOOK_SITE_KEEP").is_some());
    let frames = tmp.path().join("frames");
    std::fs::create_dir_all(&frames).unwrap();
    let aux_hz: f64 = (0..n_aux).map(|j| AUX_RATES[j % AUX_RATES.len()]).sum();
    let samples = hours as f64 * 3600.0 * (STRAIN_HZ + aux_hz);
    // Strain float32 barely compresses; zero-suppressed int16 counts of
    // σ = 100 take about 10 of 16 bits.
    let need = hours as f64 * 3600.0 * (4.0 * STRAIN_HZ + 1.3 * aux_hz);
    let free = free_bytes(tmp.path());
    println!(
        "site_day: {hours} h, SD1:STRAIN at {STRAIN_HZ} Hz + {n_aux} aux at 256–2048 Hz = {:.2} G samples; \
         ~{:.1} GB of frame files in {}; {} cores",
        samples / 1e9,
        need / 1e9,
        tmp.path().display(),
        rayon::current_num_threads()
    );
    if (free as f64) < 1.2 * need {
        println!(
            "not enough free disk ({:.1} GB free, need ~{:.1} GB): set GLITCHBOOK_SITE_DIR or fewer GLITCHBOOK_SITE_HOURS",
            free as f64 / 1e9,
            need / 1e9
        );
        return;
    }
    let gl = glitches(hours as f64);
    let t = Instant::now();
    let (paths, bytes) = write_files(&frames, hours, n_aux, &gl);
    println!(
        "  {:<34} {:>9.1} s   ({} files, {:.2} GB, {} glitches; not part of the loop)",
        "writing the frame files",
        t.elapsed().as_secs_f64(),
        paths.len(),
        bytes as f64 / 1e9,
        gl.len()
    );

    let db = tmp.path().join("site.db").display().to_string();
    let out_dir = |name: &str| tmp.path().join(name).display().to_string();
    let mut rows: Vec<(f64, f64)> = Vec::new();
    // One stage: `glitchbook --db DB ARGS` (bundle, which writes no
    // catalogue, ignores --db).
    let mut run = |name: &str, args: Vec<String>| {
        let mut a = vec!["--db", db.as_str()];
        a.extend(args.iter().map(String::as_str));
        rows.push(stage(name, &a));
    };
    println!("  {:<34} {:>11} {:>13}", "stage", "wall", "peak RSS");
    // The daily loop: the first two hours are scanned and clustered, the
    // rest arrives as a second bundle whose triggers are assigned.
    let first = paths.len().min(2);
    let parts = [
        ("first", &paths[..first], "day-a", "cluster"),
        ("next", &paths[first..], "day-b", "assign"),
    ];
    for (word, part, dir, then) in parts {
        if part.is_empty() {
            continue;
        }
        let h = part.len();
        let mut a = vec!["bundle".to_string()];
        a.extend(part.iter().map(|x| x.display().to_string()));
        a.extend([
            "--out".into(),
            out_dir(dir),
            "--target".into(),
            "SD1:STRAIN".into(),
        ]);
        run(&format!("bundle ({word} {h} h)"), a);
        run(
            &format!("scan ({word} {h} h)"),
            vec!["scan".into(), out_dir(dir)],
        );
        run(then, vec![then.into()]);
    }
    run("witnesses", vec!["witnesses".into()]);
    run(
        "vetoes",
        vec!["vetoes".into(), "--out".into(), out_dir("vetoes")],
    );
    run(
        "report",
        vec!["report".into(), "--out".into(), out_dir("report")],
    );
    let total: f64 = rows.iter().map(|r| r.0).sum();
    let peak = rows.iter().map(|r| r.1).fold(0.0, f64::max);
    println!(
        "  {:<34} {:>9.1} s {:>9.0} MiB   ({:.1} min; target for 24 h: ≤ 45 min, < 4096 MiB)",
        "the loop, in all",
        total,
        peak,
        total / 60.0
    );
    println!(
        "  samples through the loop per second of wall: {:.1} M/s",
        samples / total / 1e6
    );
}
