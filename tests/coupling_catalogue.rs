//! Coupling through the catalogue: read targets/aux/segments from the 0001
//! tables (with and without `family_members`), store results, write outputs.

use super::coupling_cases::{planted, SPAN_S, T0};
use glitchbook::catalogue::{open, to_ns};
use glitchbook::coupling::db::WitnessParams;
use glitchbook::coupling::output::{write_veto_segments, write_vetoes, write_witnesses, Format};
use glitchbook::coupling::veto::VetoParams;
use glitchbook::coupling::{run_vetoes, run_witnesses, VETO_CAUTION};
use rusqlite::{params, Connection};

/// Insert one channel with one scan covering `segs` and its triggers
/// `(t, snr, f)`. Returns the channel id.
fn add_channel(
    conn: &Connection,
    name: &str,
    role: &str,
    segs: &[(f64, f64)],
    trig: &[(f64, f64, f64)],
) -> i64 {
    conn.execute(
        "INSERT INTO channels (name, role, rate_hz) VALUES (?1, ?2, NULL)",
        params![name, role],
    )
    .unwrap();
    let ch = conn.last_insert_rowid();
    conn.execute(
        "INSERT INTO scans (channel_id, kind, run_key, source_path, input_checksum, params_json, \
         tool_version, created_utc, span_start_ns, span_end_ns, n_triggers) \
         VALUES (?1, 'import', ?2, 'test', 'x', '{}', 'test', '2026-01-01T00:00:00Z', ?3, ?4, ?5)",
        params![
            ch,
            name,
            to_ns(segs[0].0).unwrap(),
            to_ns(segs[segs.len() - 1].1).unwrap(),
            trig.len() as i64
        ],
    )
    .unwrap();
    let scan = conn.last_insert_rowid();
    for &(a, b) in segs {
        conn.execute(
            "INSERT INTO analysed_segments (scan_id, start_ns, end_ns) VALUES (?1, ?2, ?3)",
            params![scan, to_ns(a).unwrap(), to_ns(b).unwrap()],
        )
        .unwrap();
    }
    let mut st = conn
        .prepare(
            "INSERT INTO triggers (scan_id, channel_id, t_peak_ns, t_start_ns, t_end_ns, \
             f_peak_hz, f_low_hz, f_high_hz, snr, q, energy) \
             VALUES (?1, ?2, ?3, ?3, ?3, ?4, ?4, ?4, ?5, NULL, 1.0)",
        )
        .unwrap();
    for &(t, snr, f) in trig {
        st.execute(params![scan, ch, to_ns(t).unwrap(), f, snr])
            .unwrap();
    }
    ch
}

fn fill(conn: &Connection) -> Vec<f64> {
    let (targets, aux) = planted(3);
    let seg = [(T0, T0 + SPAN_S)];
    let tt: Vec<(f64, f64, f64)> = targets
        .triggers
        .iter()
        .map(|t| (t.t_peak, t.snr, t.f_peak))
        .collect();
    add_channel(conn, "X1:TARGET_STRAIN", "target", &seg, &tt);
    for ch in &aux {
        let at: Vec<(f64, f64, f64)> = ch
            .triggers
            .iter()
            .map(|t| (t.t_peak, t.snr, t.f_peak))
            .collect();
        add_channel(conn, &ch.name, "aux", &seg, &at);
    }
    targets
        .triggers
        .iter()
        .map(|t| t.family.unwrap() as f64)
        .collect()
}

#[test]
fn witnesses_and_vetoes_round_trip_without_families() {
    let dir = tempfile::tempdir().unwrap();
    let mut conn = open(&dir.path().join("c.db")).unwrap();
    fill(&conn);
    let rep = run_witnesses(&mut conn, &WitnessParams::default()).unwrap();
    // No family_members table: only the "all" set; 6 channels × 8 × 6.
    assert_eq!(rep.rows.len(), 6 * 48);
    assert_eq!(rep.best[0].channel, "X1:WIT-PLANTED");
    let stored: i64 = conn
        .query_row(
            "SELECT COUNT(*) FROM witness_stats WHERE run_id = ?1",
            [rep.run_id],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(stored, 6 * 48);
    let (hist, rel): (String, String) = conn
        .query_row(
            "SELECT lag_hist_json, freq_relation FROM witness_lags WHERE run_id = ?1",
            [rep.run_id],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    let h: serde_json::Value = serde_json::from_str(&hist).unwrap();
    assert_eq!(h["edges_s"].as_array().unwrap().len(), 22);
    assert_eq!(rel, "same");

    let mut out = Vec::new();
    write_witnesses(&rep, Format::Json, false, &mut out).unwrap();
    let v: serde_json::Value = serde_json::from_slice(&out).unwrap();
    assert_eq!(v["witnesses"][0]["channel"], "X1:WIT-PLANTED");
    for key in [
        "efficiency",
        "deadtime",
        "use_percentage",
        "significance",
        "expected",
    ] {
        assert!(v["witnesses"][0][key].is_number(), "{key}");
    }
    let mut csv = Vec::new();
    write_witnesses(&rep, Format::Csv, true, &mut csv).unwrap();
    assert_eq!(String::from_utf8(csv).unwrap().lines().count(), 6 * 48 + 1);

    let injections: Vec<f64> = (0..50).map(|i| T0 + 10.0 + i as f64 * 333.0).collect();
    let params = VetoParams::default();
    let vr = run_vetoes(&mut conn, &params, Some(&injections)).unwrap();
    let run_id = vr.run_id.unwrap();
    assert_eq!(vr.rounds[0].channel, "X1:WIT-PLANTED");
    assert!(vr.rounds[0].proposed);
    let (n, proposed): (i64, i64) = conn
        .query_row(
            "SELECT COUNT(*), SUM(proposed) FROM veto_rounds WHERE run_id = ?1",
            [run_id],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    assert_eq!(n as usize, vr.rounds.len());
    assert!(proposed >= 1);
    let kind: String = conn
        .query_row(
            "SELECT kind FROM witness_runs WHERE id = ?1",
            [run_id],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(kind, "vetoes");

    // Every veto output carries the caution and the safety figures.
    let mut table = Vec::new();
    write_vetoes(&vr, Format::Table, &mut table).unwrap();
    let table = String::from_utf8(table).unwrap();
    assert!(table.contains(VETO_CAUTION) && table.contains("Safety: 50 injections"));
    let mut json = Vec::new();
    write_vetoes(&vr, Format::Json, &mut json).unwrap();
    let v: serde_json::Value = serde_json::from_slice(&json).unwrap();
    assert_eq!(v["caution"], VETO_CAUTION);
    assert!(v["rounds"][0]["safety_p"].is_number());

    let out_dir = dir.path().join("vetoes");
    let files = write_veto_segments(&vr, &out_dir).unwrap();
    let txt = out_dir.join("veto_1_X1_WIT-PLANTED.txt");
    assert!(files.contains(&txt));
    let body = std::fs::read_to_string(&txt).unwrap();
    let segs: Vec<(f64, f64)> = body
        .lines()
        .filter(|l| !l.starts_with('#'))
        .map(|l| {
            let mut it = l.split_whitespace().map(|x| x.parse::<f64>().unwrap());
            (it.next().unwrap(), it.next().unwrap())
        })
        .collect();
    let total: f64 = segs.iter().map(|(a, b)| b - a).sum();
    assert!((total - vr.rounds[0].vetoed_s).abs() < 1e-3);
    let meta: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(txt.with_extension("json")).unwrap())
            .unwrap();
    assert_eq!(meta["caution"], VETO_CAUTION);
    assert_eq!(meta["round"]["channel"], "X1:WIT-PLANTED");
    assert!(meta["round"]["safety_p"].is_number());
}

// With a family_members table (created here with the columns SCHEMA.md
// guarantees), witnesses run for all triggers and for each family.
#[test]
fn witnesses_per_family_when_families_exist() {
    let dir = tempfile::tempdir().unwrap();
    let mut conn = open(&dir.path().join("c.db")).unwrap();
    let fams = fill(&conn);
    conn.execute_batch(
        "INSERT INTO cluster_runs (id, created_utc, params_json, tool_version, feature_version,
           n_clustered, n_families, bic_json, model_json)
         VALUES (1, '2026-01-01T00:00:00Z', '{}', 'test', 1, 0, 2, '[]', '{}');
         INSERT INTO families (id, status, created_run, last_run) VALUES (1, 'active', 1, 1), (2, 'active', 1, 1);",
    )
    .unwrap();
    // Target triggers were inserted first, in the planted order: ids 1..=2000.
    for (i, f) in fams.iter().enumerate() {
        conn.execute(
            "INSERT INTO family_members (trigger_id, family_id, probability, run_id, source)
             VALUES (?1, ?2, 1.0, 1, 'cluster')",
            params![i as i64 + 1, *f as i64],
        )
        .unwrap();
    }
    let rep = run_witnesses(&mut conn, &WitnessParams::default()).unwrap();
    assert_eq!(rep.rows.len(), 3 * 6 * 48);
    let fam1_best = rep.best.iter().find(|r| r.family_id == Some(1)).unwrap();
    assert_eq!(fam1_best.channel, "X1:WIT-PLANTED");
    assert!((fam1_best.efficiency - 0.70).abs() < 0.05);
    let fam2_best = rep.best.iter().find(|r| r.family_id == Some(2)).unwrap();
    assert!(fam2_best.significance < 5.0);
    let one = WitnessParams {
        family: Some(2),
        ..WitnessParams::default()
    };
    assert_eq!(run_witnesses(&mut conn, &one).unwrap().rows.len(), 6 * 48);
    let bad = WitnessParams {
        family: Some(42),
        ..WitnessParams::default()
    };
    let err = run_witnesses(&mut conn, &bad).unwrap_err();
    assert!(
        matches!(
            glitchbook::Error::find(&err),
            Some(glitchbook::Error::NotFound { what: "family", id, .. }) if id == "42"
        ),
        "{err}"
    );
}

#[test]
fn empty_catalogue_is_a_clear_error() {
    let dir = tempfile::tempdir().unwrap();
    let mut conn = open(&dir.path().join("c.db")).unwrap();
    let err = run_witnesses(&mut conn, &WitnessParams::default())
        .unwrap_err()
        .to_string();
    assert!(err.contains("no target channel"), "{err}");
}

#[test]
fn aux_without_common_time_is_warned_and_skipped() {
    let dir = tempfile::tempdir().unwrap();
    let mut conn = open(&dir.path().join("c.db")).unwrap();
    add_channel(
        &conn,
        "X1:TGT",
        "target",
        &[(0.0, 100.0)],
        &[(50.0, 10.0, 100.0)],
    );
    add_channel(
        &conn,
        "X1:LATE-AUX",
        "aux",
        &[(200.0, 300.0)],
        &[(250.0, 20.0, 10.0)],
    );
    let rep = run_witnesses(&mut conn, &WitnessParams::default()).unwrap();
    assert!(rep.rows.is_empty());
    assert_eq!(rep.warnings.len(), 1);
    assert!(
        rep.warnings[0].contains("X1:LATE-AUX"),
        "{:?}",
        rep.warnings
    );
}
