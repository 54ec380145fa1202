//! Coupling through the catalogue: read targets/aux/segments from the 0001
//! tables (with and without `family_members`), store results, write outputs.

use super::coupling_cases::{planted, SPAN_S, T0};
use glitchbook::catalogue::{open, to_ns, MIGRATIONS};
use glitchbook::coupling::db::WitnessParams;
use glitchbook::coupling::output::{write_veto_segments, write_vetoes, write_witnesses, Format};
use glitchbook::coupling::veto::{ProposalState, Safety, VetoParams};
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
    drop(st);
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
    add_channel(conn, "Z1:TARGET_STRAIN", "target", &seg, &tt);
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
    assert_eq!(rep.best[0].aux_channel, "Z1:WIT_PLANTED");
    assert!(rep.best[0].beyond_chance);
    assert!(
        rep.best[1..].iter().all(|r| !r.beyond_chance),
        "{:?}",
        &rep.best[1..]
    );
    let (stored, basis): (i64, String) = conn
        .query_row(
            "SELECT COUNT(*), min(false_alarm_basis) FROM witness_stats WHERE run_id = ?1",
            [rep.run_id],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    assert_eq!(stored, 6 * 48);
    assert!(
        ["slides", "slides_tail"].contains(&basis.as_str()),
        "{basis}"
    );
    let (hist, rel, median): (String, String, f64) = conn
        .query_row(
            "SELECT lag_hist_json, freq_relation, lag_median_s FROM witness_lags WHERE run_id = ?1",
            [rep.run_id],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
        )
        .unwrap();
    let h: serde_json::Value = serde_json::from_str(&hist).unwrap();
    assert_eq!(h["edges_s"].as_array().unwrap().len(), 22);
    assert!(h["lag"].as_str().unwrap().starts_with("t_aux - t_target"));
    assert_eq!(rel, "same");
    // The witness leads by 2 ms: t_aux − t_target = −0.002 s.
    assert!((median + 0.002).abs() < 1e-6, "{median}");

    let mut out = Vec::new();
    write_witnesses(&rep, Format::Json, false, &mut out).unwrap();
    let v: serde_json::Value = serde_json::from_slice(&out).unwrap();
    assert_eq!(v["witnesses"][0]["aux_channel"], "Z1:WIT_PLANTED");
    for key in [
        "efficiency",
        "deadtime",
        "aux_hit_fraction",
        "chance_p",
        "false_alarm",
        "false_alarm_any",
        "targets_hit_chance",
        "lift",
    ] {
        assert!(v["witnesses"][0][key].is_number(), "{key}");
    }
    assert_eq!(v["witnesses"][0]["beyond_chance"], true);
    assert!(v["lag_definition"]
        .as_str()
        .unwrap()
        .starts_with("t_aux - t_target"));
    let mut csv = Vec::new();
    write_witnesses(&rep, Format::Csv, true, &mut csv).unwrap();
    let csv = String::from_utf8(csv).unwrap();
    assert_eq!(csv.lines().count(), 6 * 48 + 1);
    assert!(csv.starts_with("family_id,aux_channel_id,aux_channel,aux_min_snr,window_s,"));

    let injections: Vec<f64> = (0..50).map(|i| T0 + 10.0 + i as f64 * 333.0).collect();
    let params = VetoParams::default();
    let vr = run_vetoes(&mut conn, &params, Some(&injections)).unwrap();
    let run_id = vr.run_id.unwrap();
    assert_eq!(vr.rounds[0].aux_channel, "Z1:WIT_PLANTED");
    assert_eq!(vr.rounds[0].safety, Safety::Safe);
    assert_eq!(vr.proposals.len(), 1);
    assert_eq!(vr.proposals[0].state, ProposalState::Proposed);
    let (n, safe): (i64, i64) = conn
        .query_row(
            "SELECT COUNT(*), SUM(safety = 'safe') FROM veto_rounds WHERE run_id = ?1",
            [run_id],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    assert_eq!(n as usize, vr.rounds.len());
    assert!(safe >= 1);
    let state: String = conn
        .query_row(
            "SELECT state FROM veto_proposals WHERE run_id = ?1",
            [run_id],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(state, "proposed");
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
    assert!(v["rounds"][0]["safety_binomial_p"].is_number());
    assert_eq!(v["rounds"][0]["safety"], "safe");
    assert_eq!(v["proposals"][0]["state"], "proposed");

    let out_dir = dir.path().join("vetoes");
    let files = write_veto_segments(&vr, &out_dir).unwrap();
    let txt = out_dir.join("veto_Z1_WIT_PLANTED.txt");
    assert!(files.contains(&txt));
    let body = std::fs::read_to_string(&txt).unwrap();
    assert!(body.contains("state: proposed"));
    let segs: Vec<(f64, f64)> = body
        .lines()
        .filter(|l| !l.starts_with('#'))
        .map(|l| {
            let mut it = l.split_whitespace().map(|x| x.parse::<f64>().unwrap());
            (it.next().unwrap(), it.next().unwrap())
        })
        .collect();
    let total: f64 = segs.iter().map(|(a, b)| b - a).sum();
    assert!((total - vr.proposals[0].covered_s).abs() < 1e-3);
    let meta: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(txt.with_extension("json")).unwrap())
            .unwrap();
    assert_eq!(meta["caution"], VETO_CAUTION);
    assert_eq!(meta["proposal"]["aux_channel"], "Z1:WIT_PLANTED");
    assert!(meta["proposal"]["safety_binomial_p"].is_number());
    assert_eq!(meta["state"], "proposed");

    // Without injections nothing is safe: rounds, proposals, files and the
    // catalogue say unchecked.
    let vr = run_vetoes(&mut conn, &params, None).unwrap();
    assert!(vr.rounds.iter().all(|r| r.safety == Safety::Unchecked));
    assert!(vr
        .proposals
        .iter()
        .all(|p| p.state == ProposalState::Unchecked));
    let mut table = Vec::new();
    write_vetoes(&vr, Format::Table, &mut table).unwrap();
    let table = String::from_utf8(table).unwrap();
    assert!(
        table.contains("UNCHECKED") && !table.contains(" safe "),
        "{table}"
    );
    let out_dir = dir.path().join("unchecked");
    write_veto_segments(&vr, &out_dir).unwrap();
    let body = std::fs::read_to_string(out_dir.join("veto_Z1_WIT_PLANTED.txt")).unwrap();
    assert!(body.contains("UNCHECKED"), "{body}");
    let (safety, state): (String, String) = conn
        .query_row(
            "SELECT r.safety, p.state FROM veto_rounds r JOIN veto_proposals p USING (run_id) \
             WHERE r.run_id = ?1",
            [vr.run_id.unwrap()],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    assert_eq!(
        (safety.as_str(), state.as_str()),
        ("unchecked", "unchecked")
    );
}

// A catalogue written before migration 0006_coupling_words (schema 4) with coupling rows
// in the old columns upgrades: values keep their meaning under the new
// names, the significance becomes a probability, lags change sign to
// t_aux − t_target (histogram reversed), and a round of a run without
// injections becomes unchecked.
#[test]
fn schema_4_coupling_rows_upgrade() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("old.db");
    {
        let mut c = Connection::open(&path).unwrap();
        let tx = c.transaction().unwrap();
        for (_, sql) in &MIGRATIONS[..4] {
            tx.execute_batch(sql).unwrap();
        }
        tx.pragma_update(None, "user_version", 4).unwrap();
        tx.commit().unwrap();
        add_channel(
            &c,
            "Z1:OLD_TGT",
            "target",
            &[(0.0, 100.0)],
            &[(50.0, 10.0, 100.0)],
        );
        let aux = add_channel(
            &c,
            "Z1:OLD_AUX",
            "aux",
            &[(0.0, 100.0)],
            &[(50.0, 20.0, 50.0)],
        );
        c.execute_batch(
            "INSERT INTO witness_runs (id, kind, created_utc, params_json, tool_version)
             VALUES (1, 'witnesses', 'x', '{}', 'old'), (2, 'vetoes', 'x', '{}', 'old');",
        )
        .unwrap();
        c.execute(
            "INSERT INTO witness_stats (run_id, family_id, aux_channel_id, snr_threshold, window_s,
               n_target, n_coinc, n_aux, n_aux_used, vetoed_s, analysed_s, deadtime, efficiency,
               use_percentage, expected, significance, efficiency_over_deadtime)
             VALUES (1, NULL, ?1, 8.0, 0.1, 480, 300, 900, 320, 90.0, 82800.0, 0.00109, 0.625,
               35.6, 0.52, 250.3, 573.4)",
            [aux],
        )
        .unwrap();
        c.execute(
            "INSERT INTO witness_lags (run_id, family_id, aux_channel_id, snr_threshold, window_s,
               lag_hist_json, n_pairs, peak_lag_s, median_lag_s, freq_relation, freq_ratio_median)
             VALUES (1, NULL, ?1, 8.0, 0.1, ?2, 300, 0.0125, 0.015, 'same', 1.01)",
            params![
                aux,
                r#"{"edges_s":[-0.1,-0.05,0.0,0.05,0.1],"counts":[3,40,250,7]}"#
            ],
        )
        .unwrap();
        c.execute(
            "INSERT INTO veto_rounds (run_id, mode, family_id, round, aux_channel_id, snr_threshold,
               window_s, n_target, n_coinc, efficiency, deadtime, use_percentage, expected,
               significance, vetoed_s, cum_efficiency, cum_deadtime, n_inj, n_inj_vetoed,
               inj_expected, safety_p, safety_p_binomial, safe, proposed)
             VALUES (2, 'all', NULL, 1, ?1, 8.0, 0.1, 480, 300, 0.625, 0.00109, 35.6, 0.52, 7.25,
               90.0, 0.625, 0.00109, NULL, NULL, NULL, NULL, NULL, 1, 1)",
            [aux],
        )
        .unwrap();
    }
    let conn = open(&path).unwrap();
    let (frac, p, basis, fa, eff, log_p): (f64, f64, String, Option<f64>, f64, f64) = conn
        .query_row(
            "SELECT aux_hit_fraction, chance_p, chance_basis, false_alarm, efficiency, \
             chance_p_log10 FROM witness_stats",
            [],
            |r| {
                Ok((
                    r.get(0)?,
                    r.get(1)?,
                    r.get(2)?,
                    r.get(3)?,
                    r.get(4)?,
                    r.get(5)?,
                ))
            },
        )
        .unwrap();
    assert_eq!(log_p, -250.3);
    assert!((frac - 0.356).abs() < 1e-12);
    // 10^−250.3, computed in SQL without math functions.
    assert!((p / 10f64.powf(-250.3) - 1.0).abs() < 1e-12, "{p}");
    assert_eq!((basis.as_str(), fa, eff), ("targets_poisson", None, 0.625));
    let (hist, peak, median): (String, f64, f64) = conn
        .query_row(
            "SELECT lag_hist_json, lag_peak_s, lag_median_s FROM witness_lags",
            [],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
        )
        .unwrap();
    assert_eq!((peak, median), (-0.0125, -0.015));
    let h: serde_json::Value = serde_json::from_str(&hist).unwrap();
    let edges: Vec<f64> = serde_json::from_value(h["edges_s"].clone()).unwrap();
    let counts: Vec<f64> = serde_json::from_value(h["counts"].clone()).unwrap();
    assert_eq!(edges, vec![-0.1, -0.05, 0.0, 0.05, 0.1]);
    assert_eq!(counts, vec![7.0, 250.0, 40.0, 3.0]);
    assert!(h["lag"].as_str().unwrap().starts_with("t_aux - t_target"));
    let (safety, p, lift): (String, f64, f64) = conn
        .query_row("SELECT safety, chance_p, lift FROM veto_rounds", [], |r| {
            Ok((r.get(0)?, r.get(1)?, r.get(2)?))
        })
        .unwrap();
    assert_eq!(safety, "unchecked");
    assert!((p / 10f64.powf(-7.25) - 1.0).abs() < 1e-12, "{p}");
    assert!((lift - 0.625 / 0.00109).abs() < 1e-9);
    // The report reads the upgraded rows.
    let data = glitchbook::report::gather(&conn, &glitchbook::report::ReportParams::default());
    let data = data.unwrap();
    assert_eq!(data.witnesses.len(), 1);
    assert_eq!(data.vetoes[0].safety, "unchecked");
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
    assert_eq!(fam1_best.aux_channel, "Z1:WIT_PLANTED");
    assert!((fam1_best.efficiency - 0.70).abs() < 0.05);
    let fam2_best = rep.best.iter().find(|r| r.family_id == Some(2)).unwrap();
    assert!(!fam2_best.beyond_chance, "{fam2_best:?}");
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
        "Z1:TGT",
        "target",
        &[(0.0, 100.0)],
        &[(50.0, 10.0, 100.0)],
    );
    add_channel(
        &conn,
        "Z1:LATE_AUX",
        "aux",
        &[(200.0, 300.0)],
        &[(250.0, 20.0, 10.0)],
    );
    let rep = run_witnesses(&mut conn, &WitnessParams::default()).unwrap();
    assert!(rep.rows.is_empty());
    assert_eq!(rep.warnings.len(), 1);
    assert!(
        rep.warnings[0].contains("Z1:LATE_AUX"),
        "{:?}",
        rep.warnings
    );
}
