//! `cluster` and `assign` on a large catalogue (prints figures; harness =
//! false). Issue 12 item 6: `cluster` on 1,000,000 target triggers ≤ 10
//! min and < 4 GiB; `assign` ≥ 20,000 triggers/s.
//!
//! A catalogue on disk gets N target triggers (env
//! `GLITCHBOOK_BENCH_TRIGGERS`, default 200,000) of five synthetic
//! mechanisms (sine-Gaussians: a broadband pulse wandering over 80–250 Hz,
//! a low 20–60 Hz burst of Q 20–60, a 410 Hz tone, an upward sweep, a
//! Q≈10 sine-Gaussian), SNR 7–30, with their fingerprints stored (1,000
//! computed here from an analytic map source and reused with jittered
//! scalars: this bench times the clustering, the real-path fingerprint
//! rate is `cargo bench --bench families`). Then
//! `cluster` (default parameters) is timed, and `assign` of N/4 more
//! triggers (fingerprints stored, so `assign` reads them). Peak RSS is read
//! from /proc/self/status (VmHWM) after each step.
//!
//! Run: `cargo bench --bench families_scale` (about 2–4 min at 200,000);
//! `GLITCHBOOK_BENCH_STARTS=N` sets the seeded starts (default: the
//! product default, `ClusterParams::starts`).

use glitchbook::catalogue::{open, to_ns};
use glitchbook::families::features::{f32_to_blob, fingerprint, FEATURE_VERSION};
use glitchbook::families::{assign_new, cluster_catalogue, ClusterParams};
use glitchbook::families::{SineGaussian, SineGaussianSource};
use glitchbook::trigger::Trigger;
use rand::{Rng, SeedableRng};
use rayon::prelude::*;
use rusqlite::{params, Connection};
use std::time::Instant;

fn peak_rss_mib() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("VmHWM:"))
                .and_then(|l| l.split_whitespace().nth(1)?.parse::<f64>().ok())
        })
        .map_or(f64::NAN, |kib| kib / 1024.0)
}

/// One synthetic trigger of mechanism `kind` at GPS `t`.
fn draw(rng: &mut impl Rng, kind: usize, t: f64) -> SineGaussian {
    let (f0, q, drift) = match kind {
        0 => (rng.gen_range(80f64.ln()..250f64.ln()).exp(), 3.5, 0.0),
        1 => (rng.gen_range(20.0..60.0), rng.gen_range(20.0..60.0), 0.0),
        2 => (410.0 * rng.gen_range(0.98..1.02), 40.0, 0.0),
        3 => (rng.gen_range(60.0..90.0), 8.0, rng.gen_range(150.0..300.0)),
        _ => (rng.gen_range(150.0..900.0), 10.0, 0.0),
    };
    SineGaussian {
        t0_gps: t,
        f0_hz: f0,
        q,
        snr: rng.gen_range(7.0f64.ln()..30f64.ln()).exp(),
        drift_hz_per_s: drift,
    }
}

/// Number of fingerprints computed from the analytic source; the N
/// triggers reuse them (scalars jittered by a hash, so no two are equal):
/// the analytic source spends ~10 ms per trigger on the 16-s analysis span.
const N_PROTOTYPES: usize = 1000;

/// Fingerprints of [`N_PROTOTYPES`] triggers, 200 per mechanism.
fn prototypes(seed: u64) -> Vec<(SineGaussian, Vec<f32>, Vec<f32>)> {
    let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(seed);
    let events: Vec<SineGaussian> = (0..N_PROTOTYPES)
        .map(|i| draw(&mut rng, i % 5, 1.0e9 + 100.0 * i as f64))
        .collect();
    events
        .par_iter()
        .map(|e| {
            let src = SineGaussianSource {
                events: vec![("BENCH:STRAIN".into(), *e)],
                noise: true,
            };
            let fp = fingerprint(&trigger_of(e), "BENCH:STRAIN", &src).expect("fingerprint");
            (*e, fp.maps, fp.scalars)
        })
        .collect()
}

fn trigger_of(e: &SineGaussian) -> Trigger {
    let dur = e.q / (std::f64::consts::PI * e.f0_hz);
    Trigger {
        t_peak: e.t0_gps,
        t_start: e.t0_gps - dur,
        t_end: e.t0_gps + dur,
        f_peak: e.f0_hz,
        f_low: e.f0_hz * (1.0 - 1.0 / e.q),
        f_high: e.f0_hz * (1.0 + 1.0 / e.q),
        snr: e.snr,
        snr_eq: e.snr,
        q: e.q,
        energy: 1.0 + 0.5 * e.snr * e.snr,
    }
}

/// Add `n` triggers (copies of the prototypes at new times, scalars
/// jittered by up to ±2%) with stored fingerprints, from GPS `t0`.
fn add(conn: &mut Connection, protos: &[(SineGaussian, Vec<f32>, Vec<f32>)], n: usize, t0: f64) {
    let tx = conn.transaction().unwrap();
    {
        let mut ins = tx
            .prepare(
                "INSERT INTO triggers (scan_id, channel_id, t_peak_ns, t_start_ns, t_end_ns, f_peak_hz, \
                 f_low_hz, f_high_hz, snr, q, energy) VALUES (1, 1, ?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
            )
            .unwrap();
        let mut feat = tx
            .prepare(
                "INSERT INTO features (trigger_id, version, maps, scalars) VALUES (?1, ?2, ?3, ?4)",
            )
            .unwrap();
        for i in 0..n {
            let (e, m, s) = &protos[i % protos.len()];
            let mut e = *e;
            e.t0_gps = t0 + 2.5 * i as f64;
            let t = trigger_of(&e);
            let s: Vec<f32> = s
                .iter()
                .enumerate()
                .map(|(j, v)| {
                    let h =
                        xxhash_rust::xxh3::xxh3_64_with_seed(&(i as u64).to_le_bytes(), j as u64);
                    let u = (h >> 11) as f32 / (1u64 << 53) as f32;
                    v * (1.0 + 0.04 * (u - 0.5))
                })
                .collect();
            ins.execute(params![
                to_ns(t.t_peak).unwrap(),
                to_ns(t.t_start).unwrap(),
                to_ns(t.t_end).unwrap(),
                t.f_peak,
                t.f_low,
                t.f_high,
                t.snr,
                t.q,
                t.energy
            ])
            .unwrap();
            feat.execute(params![
                tx.last_insert_rowid(),
                FEATURE_VERSION,
                f32_to_blob(m),
                f32_to_blob(&s)
            ])
            .unwrap();
        }
    }
    tx.commit().unwrap();
}

fn main() {
    let n: usize = std::env::var("GLITCHBOOK_BENCH_TRIGGERS")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(200_000);
    println!(
        "families_scale bench: {n} target triggers ({} rayon threads)",
        rayon::current_num_threads()
    );
    let dir = tempfile::tempdir().unwrap();
    let mut conn = open(&dir.path().join("c.db")).unwrap();
    conn.execute(
        "INSERT INTO channels (id, name, role, rate_hz) VALUES (1, 'BENCH:STRAIN', 'target', 4096)",
        [],
    )
    .unwrap();
    conn.execute(
        "INSERT INTO scans (id, channel_id, kind, run_key, source_path, input_checksum, params_json, \
         tool_version, created_utc, span_start_ns, span_end_ns, n_triggers) \
         VALUES (1, 1, 'scan', 'k', 'p', 'c', '{}', 'v', 't', 0, 1, 0)",
        [],
    )
    .unwrap();
    let t = Instant::now();
    let protos = prototypes(1);
    add(&mut conn, &protos, n, 1.0e9);
    println!(
        "  setup: {n} triggers with fingerprints stored in {:.1} s (not part of the figures)",
        t.elapsed().as_secs_f64()
    );
    // Never read: a map source for fingerprints that are all stored.
    let src = SineGaussianSource {
        events: vec![],
        noise: true,
    };
    let rss0 = peak_rss_mib();
    let t = Instant::now();
    let d = ClusterParams::default();
    let p = ClusterParams {
        starts: std::env::var("GLITCHBOOK_BENCH_STARTS")
            .ok()
            .and_then(|s| s.parse().ok())
            .unwrap_or(d.starts),
        ..d
    };
    let rep = cluster_catalogue(&mut conn, &p, &src).unwrap();
    let dt = t.elapsed().as_secs_f64();
    println!(
        "cluster ({} seeded starts): {} triggers into {} families in {dt:.1} s = {:.0} triggers/s; peak RSS {:.0} MiB \
         (before {:.0} MiB); extrapolated to 1,000,000 (linear): {:.0} s (target ≤ 600 s, < 4 GiB)",
        p.starts,
        rep.n_clustered,
        rep.families.len(),
        rep.n_clustered as f64 / dt,
        peak_rss_mib(),
        rss0,
        dt * 1.0e6 / rep.n_clustered as f64
    );
    let n_new = n / 4;
    add(&mut conn, &protos, n_new, 1.0e9 + 2.5 * n as f64 + 100.0);
    let t = Instant::now();
    let a = assign_new(&mut conn, &src).unwrap();
    let dt = t.elapsed().as_secs_f64();
    let done = a.n_assigned + a.n_novel + a.n_quiet;
    println!(
        "assign: {done} new triggers ({} placed, {} novel, {} quiet) in {dt:.2} s = {:.0} triggers/s \
         (fingerprints stored; target ≥ 20,000/s); peak RSS {:.0} MiB",
        a.n_assigned,
        a.n_novel,
        a.n_quiet,
        done as f64 / dt,
        peak_rss_mib()
    );
}
