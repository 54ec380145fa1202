//! Timing of `rates` and `report` on a large invented catalogue: 30 days,
//! 20 families, 2 million target triggers (targets: rates ≤ 2 s, report
//! ≤ 60 s). Prints figures; run with `cargo bench --bench rates` (or
//! `cargo test --bench rates` for the test profile).
use glitchbook::catalogue::{open, to_ns};
use glitchbook::rates::{rates, RateParams};
use glitchbook::report::{gather, write_report, ReportParams};
use rand::{Rng, SeedableRng};
use rusqlite::params;
use std::time::Instant;

const T0: f64 = 1_600_000_000.0;
const DAYS: f64 = 30.0;
const N_FAM: i64 = 20;
const N_TRIG: usize = 2_000_000;

/// CPU seconds used by this process so far (user + system, from
/// /proc/self/stat; 0 where unavailable). Wall time on a shared machine
/// overstates the cost, so both are printed.
fn cpu_s() -> f64 {
    let stat = std::fs::read_to_string("/proc/self/stat").unwrap_or_default();
    let after = stat.rsplit(')').next().unwrap_or("");
    let f: Vec<f64> = after
        .split_whitespace()
        .map(|x| x.parse().unwrap_or(0.0))
        .collect();
    if f.len() > 12 {
        (f[11] + f[12]) / 100.0
    } else {
        0.0
    }
}

fn load_average() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .unwrap_or_default()
        .split_whitespace()
        .next()
        .unwrap_or("?")
        .to_string()
}

fn main() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("big.db");
    let t_build = Instant::now();
    let mut conn = open(&db).unwrap();
    conn.pragma_update(None, "synchronous", "OFF").unwrap();
    let run_s = DAYS * 86_400.0;
    {
        let tx = conn.transaction().unwrap();
        tx.execute_batch(
            "CREATE TABLE IF NOT EXISTS families(id INTEGER PRIMARY KEY, label TEXT, note TEXT,
               status TEXT NOT NULL CHECK(status IN ('active','merged','retired')));
             CREATE TABLE IF NOT EXISTS family_members(trigger_id INTEGER PRIMARY KEY REFERENCES triggers(id) ON DELETE CASCADE,
               family_id INTEGER REFERENCES families(id), probability REAL, novel INTEGER NOT NULL DEFAULT 0);
             INSERT INTO channels(id, name, role, rate_hz) VALUES (1, 'ZQ1:BENCH_STRAIN', 'target', 4096);",
        )
        .unwrap();
        tx.execute(
            "INSERT INTO scans VALUES (1, 1, 'scan', 'k', 'bench', 'x', '{}', 'bench', '2026-01-01T00:00:00Z', ?1, ?2, 0)",
            params![to_ns(T0).unwrap(), to_ns(T0 + run_s).unwrap()],
        )
        .unwrap();
        // One 40-minute dropout per day.
        for d in 0..DAYS as i64 {
            let a = T0 + d as f64 * 86_400.0;
            for (s, e) in [(a, a + 40_000.0), (a + 42_400.0, a + 86_400.0)] {
                tx.execute(
                    "INSERT INTO analysed_segments VALUES (1, ?1, ?2)",
                    params![to_ns(s).unwrap(), to_ns(e).unwrap()],
                )
                .unwrap();
            }
        }
        for f in 1..=N_FAM {
            tx.execute(
                "INSERT INTO families VALUES (?1, ?2, NULL, 'active')",
                params![f, format!("fam{f}")],
            )
            .unwrap();
        }
        let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(5);
        let mut ins_t = tx
            .prepare(
                "INSERT INTO triggers(id, scan_id, channel_id, t_peak_ns, t_start_ns, t_end_ns, f_peak_hz, f_low_hz, f_high_hz, snr, q, energy)
                 VALUES (?1, 1, 1, ?2, ?2, ?2, ?3, ?3, ?3, ?4, 8.0, ?5)",
            )
            .unwrap();
        let mut ins_m = tx
            .prepare("INSERT INTO family_members VALUES (?1, ?2, 0.9, 0)")
            .unwrap();
        let mut times: Vec<(f64, i64)> = Vec::with_capacity(N_TRIG);
        while times.len() < N_TRIG {
            let f = rng.gen_range(1..=N_FAM);
            let t = rng.gen::<f64>() * run_s;
            // family 5 appears on day 20; family 7 stops on day 10
            if (f == 5 && t < 20.0 * 86_400.0) || (f == 7 && t > 10.0 * 86_400.0) {
                continue;
            }
            if (t % 86_400.0) >= 40_000.0 && (t % 86_400.0) < 42_400.0 {
                continue;
            }
            times.push((t, f));
        }
        times.sort_by(|a, b| a.0.total_cmp(&b.0));
        for (i, (t, f)) in times.iter().enumerate() {
            let id = i as i64 + 1;
            let snr = 5.5 + rng.gen::<f64>() * 30.0;
            ins_t
                .execute(params![
                    id,
                    to_ns(T0 + t).unwrap(),
                    30.0 * *f as f64,
                    snr,
                    1.0 + snr * snr / 2.0
                ])
                .unwrap();
            ins_m.execute(params![id, f]).unwrap();
        }
        drop(ins_t);
        drop(ins_m);
        tx.commit().unwrap();
    }
    println!(
        "built catalogue: {N_TRIG} triggers, {N_FAM} families, {DAYS} days in {:.1} s",
        t_build.elapsed().as_secs_f64()
    );

    let t = Instant::now();
    let ev = glitchbook::rates::load_events(&conn, 1, T0, T0 + run_s, 0.0, true).unwrap();
    println!(
        "  (of which: loading {} events with families: {:.2} s)",
        ev.len(),
        t.elapsed().as_secs_f64()
    );
    let live = glitchbook::rates::live::live_time(&conn, 1).unwrap();
    let t = Instant::now();
    let all: Vec<f64> = ev.iter().map(|e| e.0).collect();
    let b = glitchbook::rates::fit_blocks(&all, &live, T0, T0 + run_s, 0.05, 2000);
    println!(
        "  (blocks of all {} events, 2000 cells: {:.3} s, {} blocks)",
        all.len(),
        t.elapsed().as_secs_f64(),
        b.len()
    );
    let t = Instant::now();
    let mut cache = glitchbook::rates::poisson::LimitCache::new(0.9);
    let bins = glitchbook::rates::bin_rates(
        &all,
        &live,
        T0,
        T0 + run_s,
        &RateParams::default(),
        &mut cache,
    );
    println!(
        "  (bins of all events: {:.3} s, {} bins)",
        t.elapsed().as_secs_f64(),
        bins.len()
    );
    let (t, c) = (Instant::now(), cpu_s());
    let r = rates(&conn, &RateParams::default()).unwrap();
    let rates_s = t.elapsed().as_secs_f64();
    let rates_cpu = cpu_s() - c;
    let n_cp: usize = r.series.iter().map(|s| s.change_times_gps.len()).sum();
    println!(
        "rates (1 h bins, {} series, {} bins each, {} change points): {:.2} s wall, {:.2} s CPU, load average {} (target <= 2 s)",
        r.series.len(),
        r.series[0].bins.len(),
        n_cp,
        rates_s,
        rates_cpu,
        load_average()
    );
    for fam in [5, 7] {
        let s = r.series.iter().find(|s| s.family_id == Some(fam)).unwrap();
        let cps: Vec<String> = s
            .change_times_gps
            .iter()
            .map(|c| format!("day {:.2}", (c - T0) / 86_400.0))
            .collect();
        println!("  family {fam}: change points {}", cps.join(", "));
    }

    let (t, c) = (Instant::now(), cpu_s());
    let p = ReportParams {
        catalogue: db.display().to_string(),
        ..ReportParams::default()
    };
    let data = gather(&conn, &p).unwrap();
    let gather_s = t.elapsed().as_secs_f64();
    let out = dir.path().join("site");
    write_report(&data, &out, &[]).unwrap();
    let report_s = t.elapsed().as_secs_f64();
    let size: u64 = std::fs::read_dir(out.join("img"))
        .unwrap()
        .map(|e| e.unwrap().metadata().unwrap().len())
        .sum();
    println!(
        "report (gather {:.2} s + render): {:.2} s wall, {:.2} s CPU (target <= 60 s); images {:.1} MB",
        gather_s,
        report_s,
        cpu_s() - c,
        size as f64 / 1e6
    );
}
