//! Rates from a small catalogue built with SQL inserts (0001 schema from the
//! crate, the agreed 0002/0003 columns created here).
use glitchbook::catalogue::{open, to_ns};
use glitchbook::rates::format::{render, Format};
use glitchbook::rates::{rates, RateParams};
use rand::{Rng, SeedableRng};
use rusqlite::{params, Connection};
use std::path::{Path, PathBuf};

/// Start of the invented run \[GPS s\].
pub const T0: f64 = 1_500_000_000.0;
/// Run length \[s\] (one day).
pub const RUN_S: f64 = 86_400.0;
/// Dropout in the middle of the run \[s after T0\].
pub const GAP: (f64, f64) = (30_000.0, 33_600.0);
/// True start of the late family \[s after T0\].
pub const LATE_START: f64 = 50_000.0;

/// Insert `n` Poisson-process times of rate `per_hour` over `[a, b)` minus the gap.
fn poisson_times(rng: &mut impl Rng, per_hour: f64, a: f64, b: f64) -> Vec<f64> {
    let mut out = Vec::new();
    let mut t = a;
    loop {
        let u: f64 = rng.gen::<f64>().max(1e-300);
        t += -u.ln() * 3600.0 / per_hour;
        if t >= b {
            return out;
        }
        if !(t >= GAP.0 && t < GAP.1) {
            out.push(t);
        }
    }
}

/// Build a demo catalogue at `dir/c.db`: target channel with one scan over a
/// day (minus a one-hour dropout), families 1 (steady 20/h, label
/// `<script>alert(1)</script>`), 2 (appears at `LATE_START`, 60/h),
/// 3 (steady 5/h, no label), plus unassigned and novel triggers. With
/// `families` false the 0002/0003 tables are not created.
pub fn demo_catalogue(dir: &Path, families: bool) -> PathBuf {
    let path = dir.join("c.db");
    let mut conn = open(&path).unwrap();
    let tx = conn.transaction().unwrap();
    tx.execute("INSERT INTO channels(id, name, role, rate_hz) VALUES (1, 'ZQ1:TEST_STRAIN_OUT', 'target', 4096)", [])
        .unwrap();
    tx.execute("INSERT INTO channels(id, name, role, rate_hz) VALUES (2, 'ZQ1:ENV_FLUXGATE_Y<&>', 'aux', 512)", [])
        .unwrap();
    for (id, ch) in [(1, 1), (2, 2)] {
        tx.execute(
            "INSERT INTO scans(id, channel_id, kind, run_key, source_path, input_checksum, params_json, tool_version, created_utc, span_start_ns, span_end_ns, n_triggers)
             VALUES (?1, ?2, 'scan', ?3, 'demo', 'x', '{}', 'test', '2026-01-01T00:00:00Z', ?4, ?5, 0)",
            params![id, ch, format!("k{id}"), to_ns(T0).unwrap(), to_ns(T0 + RUN_S).unwrap()],
        )
        .unwrap();
        for (a, b) in [(0.0, GAP.0), (GAP.1, RUN_S)] {
            tx.execute(
                "INSERT INTO analysed_segments(scan_id, start_ns, end_ns) VALUES (?1, ?2, ?3)",
                params![id, to_ns(T0 + a).unwrap(), to_ns(T0 + b).unwrap()],
            )
            .unwrap();
        }
    }
    if families {
        // A stand-in clustering run that the family rows refer to.
        tx.execute(
            "INSERT INTO cluster_runs (id, created_utc, params_json, tool_version, feature_version,
               n_clustered, n_families, bic_json, model_json)
             VALUES (1, '2026-01-01T00:00:00Z', '{}', 'test', 1, 0, 3, '[]', '{}')",
            [],
        )
        .unwrap();
        for (id, label, note) in [
            (1, Some("<script>alert(1)</script>"), Some("steady & loud")),
            (2, Some("late-riser"), Some("appears mid-run")),
            (3, None, None),
        ] {
            tx.execute(
                "INSERT INTO families (id, label, note, status, created_run, last_run)
                 VALUES (?1, ?2, ?3, 'active', 1, 1)",
                params![id, label, note],
            )
            .unwrap();
        }
    }
    let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(11);
    // (family id or None, novel, rate per hour, start, f_peak Hz)
    let plan: [(Option<i64>, bool, f64, f64, f64); 5] = [
        (Some(1), false, 20.0, 0.0, 60.0),
        (Some(2), false, 60.0, LATE_START, 400.0),
        (Some(3), false, 5.0, 0.0, 1500.0),
        (None, true, 1.0, 0.0, 900.0),
        (None, false, 3.0, 0.0, 200.0),
    ];
    let mut tid = 0i64;
    for (fam, novel, per_hour, start, f) in plan {
        for t in poisson_times(&mut rng, per_hour, start, RUN_S) {
            tid += 1;
            let snr = 5.5 + rng.gen::<f64>() * 20.0;
            let fp = f * (1.0 + 0.2 * (rng.gen::<f64>() - 0.5));
            tx.execute(
                "INSERT INTO triggers(id, scan_id, channel_id, t_peak_ns, t_start_ns, t_end_ns, f_peak_hz, f_low_hz, f_high_hz, snr, q, energy)
                 VALUES (?1, 1, 1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, 8.0, ?9)",
                params![tid, to_ns(T0 + t).unwrap(), to_ns(T0 + t - 0.05).unwrap(), to_ns(T0 + t + 0.05).unwrap(), fp, fp * 0.8, fp * 1.2, snr, 1.0 + snr * snr / 2.0],
            )
            .unwrap();
            if families && (fam.is_some() || novel) {
                tx.execute(
                    "INSERT INTO family_members(trigger_id, family_id, probability, novel, run_id, source)
                     VALUES (?1, ?2, 0.9, ?3, 1, 'cluster')",
                    params![tid, fam, novel as i64],
                )
                .unwrap();
            }
        }
    }
    tx.commit().unwrap();
    path
}

fn conn(p: &Path) -> Connection {
    open(p).unwrap()
}

#[test]
fn late_family_change_point_within_ten_minutes() {
    let dir = tempfile::tempdir().unwrap();
    let c = conn(&demo_catalogue(dir.path(), true));
    let r = rates(&c, &RateParams::default()).unwrap();
    assert!(r.has_families);
    assert_eq!(r.series.len(), 4, "all + 3 families");
    assert!((r.live_s - (RUN_S - (GAP.1 - GAP.0))).abs() < 1e-6);
    let late = r.series.iter().find(|s| s.family_id == Some(2)).unwrap();
    let cps = &late.change_times_gps;
    assert!(
        cps.iter().any(|c| (c - (T0 + LATE_START)).abs() <= 600.0),
        "change points {cps:?} vs true start {}",
        T0 + LATE_START
    );
    assert!(
        late.latest_differs,
        "late family's latest block differs from its median"
    );
    // A steady family has one block and is not flagged; the dropout is not a change.
    let steady = r.series.iter().find(|s| s.family_id == Some(1)).unwrap();
    assert_eq!(steady.blocks.len(), 1, "{:?}", steady.change_times_gps);
    assert!(!steady.latest_differs);
    // Its block rate is near the true 20/h and inside its limits.
    let b = steady.blocks[0];
    assert!(b.lower_per_hour < 20.0 && 20.0 < b.upper_per_hour, "{b:?}");
}

#[test]
fn bins_count_live_time_and_flag_low_live() {
    let dir = tempfile::tempdir().unwrap();
    let c = conn(&demo_catalogue(dir.path(), true));
    let p = RateParams {
        family: Some(1),
        ..RateParams::default()
    };
    let r = rates(&c, &p).unwrap();
    assert_eq!(r.series.len(), 1);
    let s = &r.series[0];
    assert_eq!(s.bins.len(), 24);
    let total: u64 = s.bins.iter().map(|b| b.count).sum();
    assert_eq!(total, s.n_events);
    // Bin 8 = [28800, 32400): live 1200 s of 3600 -> flagged, kept.
    let b8 = s.bins[8];
    assert!((b8.live_s - 1200.0).abs() < 1e-6 && b8.low_live);
    // Bin 9 = [32400, 36000): live 2400 s of 3600 -> not flagged at 0.5.
    assert!(!s.bins[9].low_live);
    // Rate and limits scale by 3600 / live (exact Poisson limits, CL 0.9).
    let lim = glitchbook::rates::poisson::poisson_limits(b8.count, 0.9);
    assert!((b8.upper_per_hour.unwrap() - lim.upper * 3.0).abs() < 1e-9);
    assert!((b8.rate_per_hour.unwrap() - b8.count as f64 * 3.0).abs() < 1e-9);
    // --since/--until and --min-snr narrow the count.
    let p2 = RateParams {
        since_gps: Some(T0),
        until_gps: Some(T0 + 7200.0),
        min_snr: 15.5,
        ..p.clone()
    };
    let r2 = rates(&c, &p2).unwrap();
    let n2: u64 = r2.series[0].bins.iter().map(|b| b.count).sum();
    let direct: i64 = c
        .query_row(
            "SELECT count(*) FROM triggers t JOIN family_members m ON m.trigger_id = t.id
             WHERE m.family_id = 1 AND t.snr >= 15.5 AND t.t_peak_ns >= ?1 AND t.t_peak_ns < ?2",
            params![to_ns(T0).unwrap(), to_ns(T0 + 7200.0).unwrap()],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(n2 as i64, direct);
    assert_eq!(r2.series[0].bins.len(), 2);
}

#[test]
fn works_without_family_tables() {
    let dir = tempfile::tempdir().unwrap();
    let c = conn(&demo_catalogue(dir.path(), false));
    let r = rates(&c, &RateParams::default()).unwrap();
    assert!(!r.has_families);
    assert_eq!(r.series.len(), 1);
    assert_eq!(r.series[0].family_id, None);
    let n: i64 = c
        .query_row("SELECT count(*) FROM triggers", [], |r| r.get(0))
        .unwrap();
    assert_eq!(r.series[0].n_events as i64, n);
    let err = rates(
        &c,
        &RateParams {
            family: Some(1),
            ..RateParams::default()
        },
    )
    .unwrap_err();
    assert!(
        matches!(
            glitchbook::Error::find(&err),
            Some(glitchbook::Error::NotFound { what: "family", id, .. }) if id == "1"
        ),
        "{err}"
    );
    let table = render(&r, Format::Table).unwrap();
    assert!(table.contains("no family tables"));
}

#[test]
fn bad_options_give_one_line_errors() {
    let dir = tempfile::tempdir().unwrap();
    let c = conn(&demo_catalogue(dir.path(), true));
    for (p, needle) in [
        (
            RateParams {
                bin_s: 0.0,
                ..RateParams::default()
            },
            "bin_s",
        ),
        (
            RateParams {
                cl: 1.0,
                ..RateParams::default()
            },
            "cl",
        ),
        (
            RateParams {
                p0: 0.0,
                ..RateParams::default()
            },
            "p0",
        ),
        (
            RateParams {
                family: Some(99),
                ..RateParams::default()
            },
            "family",
        ),
        (
            RateParams {
                channel: Some("nope".into()),
                ..RateParams::default()
            },
            "channel",
        ),
        (
            RateParams {
                since_gps: Some(T0 + 10.0),
                until_gps: Some(T0),
                ..RateParams::default()
            },
            "until_gps",
        ),
    ] {
        // The kind and the field (or the kind of thing not found), and one line.
        let e = rates(&c, &p).unwrap_err();
        let named = match glitchbook::Error::find(&e) {
            Some(glitchbook::Error::InvalidParameter { field, .. }) => field.clone(),
            Some(glitchbook::Error::NotFound { what, .. }) => what.to_string(),
            other => panic!("{e:#}: not a parameter or not-found error: {other:?}"),
        };
        assert_eq!(named, needle, "{e:#}");
        assert!(!format!("{e:#}").contains('\n'), "{e:#}");
    }
}

#[test]
fn csv_and_json_round_trip() {
    let dir = tempfile::tempdir().unwrap();
    let c = conn(&demo_catalogue(dir.path(), true));
    let r = rates(
        &c,
        &RateParams {
            bin_s: 7200.0,
            ..RateParams::default()
        },
    )
    .unwrap();
    let csv_text = render(&r, Format::Csv).unwrap();
    let mut rd = csv::Reader::from_reader(csv_text.as_bytes());
    let rows: Vec<csv::StringRecord> = rd.records().map(|x| x.unwrap()).collect();
    assert_eq!(rows.len(), 4 * 12);
    // CSV keeps every digit: each number reads back as the same f64.
    let bins = r.series.iter().flat_map(|s| &s.bins);
    for (row, b) in rows.iter().zip(bins) {
        let num = |i: usize| row[i].parse::<f64>().unwrap();
        let opt = |i: usize| (!row[i].is_empty()).then(|| num(i));
        assert_eq!((num(2), num(3), num(5)), (b.start_gps, b.end_gps, b.live_s));
        assert_eq!(
            (opt(6), opt(7), opt(8)),
            (b.rate_per_hour, b.lower_per_hour, b.upper_per_hour)
        );
    }
    let json: serde_json::Value = serde_json::from_str(&render(&r, Format::Json).unwrap()).unwrap();
    assert_eq!(json["series"].as_array().unwrap().len(), 4);
    assert_eq!(json["series"][2]["family_id"], 2);
    assert!(!json["series"][2]["change_times_gps"]
        .as_array()
        .unwrap()
        .is_empty());
}

/// Live time is the union over scans: a re-scan that overlaps the first one
/// adds only its new time, and any interval can be asked for.
#[test]
fn live_time_is_union_over_scans() {
    use glitchbook::rates::live::{live_seconds, live_time};
    let dir = tempfile::tempdir().unwrap();
    let c = conn(&demo_catalogue(dir.path(), false));
    let before = live_time(&c, 1).unwrap().total();
    c.execute(
        "INSERT INTO scans(id, channel_id, kind, run_key, source_path, input_checksum, params_json, tool_version, created_utc, span_start_ns, span_end_ns, n_triggers)
         VALUES (9, 1, 'import', 'k9', 'x.csv', 'y', '{}', 'test', '2026-01-01T00:00:00Z', 0, 1, 0)",
        [],
    )
    .unwrap();
    // [20000, 31000): overlaps live [.., 30000) and fills 1000 s of the gap.
    c.execute(
        "INSERT INTO analysed_segments VALUES (9, ?1, ?2)",
        params![to_ns(T0 + 20_000.0).unwrap(), to_ns(T0 + 31_000.0).unwrap()],
    )
    .unwrap();
    let after = live_time(&c, 1).unwrap().total();
    assert!(
        (after - before - 1000.0).abs() < 1e-6,
        "{before} -> {after}"
    );
    let gap_part = live_seconds(&c, 1, T0 + GAP.0, T0 + GAP.1).unwrap();
    assert!((gap_part - 1000.0).abs() < 1e-6);
    assert_eq!(live_seconds(&c, 2, T0 + GAP.0, T0 + GAP.1).unwrap(), 0.0);
}
