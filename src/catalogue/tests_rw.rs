//! Tests of the catalogue writes and queries (behavioural: round trips,
//! idempotency, rollback, and SQLite's own query planner output).
use super::*;
use crate::io::Role;
use crate::segments::SegmentList;
use crate::trigger::{energy_from_snr, Trigger};

fn trig(t: f64, snr: f64) -> Trigger {
    Trigger {
        t_peak: t,
        t_start: t - 0.05,
        t_end: t + 0.05,
        f_peak: 100.0,
        f_low: 80.0,
        f_high: 130.0,
        snr,
        q: 8.0,
        energy: energy_from_snr(snr),
        snr_eq: snr,
    }
}

fn record<'a>(
    channel: &'a str,
    checksum: &'a str,
    analysed: &'a SegmentList,
    triggers: &'a [Trigger],
) -> ScanRecord<'a> {
    ScanRecord {
        channel,
        role: Role::Target,
        rate_hz: Some(4096.0),
        kind: ScanKind::Scan,
        source_path: "bundle",
        input_checksum: checksum,
        params_json: "{}",
        analysed,
        triggers,
    }
}

fn fresh() -> (tempfile::TempDir, Connection) {
    let dir = tempfile::tempdir().unwrap();
    let conn = open(&dir.path().join("c.db")).unwrap();
    (dir, conn)
}

#[test]
fn insert_query_round_trip_and_skip() {
    let (_d, mut conn) = fresh();
    let seg = SegmentList::single(1_400_000_000.0, 1_400_000_100.0);
    let mut ts: Vec<Trigger> = (0..10)
        .map(|i| trig(1_400_000_000.123_456_7 + i as f64 * 7.0, 5.0 + i as f64))
        .collect();
    ts[3].q = f64::NAN; // unknown q is stored as NULL
    let tx = conn.transaction().unwrap();
    let out = insert_scan(&tx, &record("AV1:STRAIN", "abc", &seg, &ts)).unwrap();
    assert_eq!(
        out,
        InsertOutcome::Inserted {
            scan_id: 1,
            n_triggers: 10
        }
    );
    tx.commit().unwrap();
    let before = logical_checksum(&conn).unwrap();

    let tx = conn.transaction().unwrap();
    let out = insert_scan(&tx, &record("AV1:STRAIN", "abc", &seg, &ts)).unwrap();
    assert_eq!(out, InsertOutcome::Skipped { scan_id: 1 });
    tx.commit().unwrap();
    assert_eq!(before, logical_checksum(&conn).unwrap());

    let rows = query_triggers(&conn, &TriggerQuery::default()).unwrap();
    assert_eq!(rows.len(), 10);
    for (r, t) in rows.iter().zip(&ts) {
        // Integer-ns storage: GPS times round-trip to < 1 ns (+ f64 spacing
        // at 1.4e9 s, 2.4e-7 s).
        assert!((r.t_peak - t.t_peak).abs() < 5e-7);
        assert_eq!(r.snr, t.snr);
        assert_eq!(r.channel, "AV1:STRAIN");
    }
    assert_eq!(rows[3].q, None);
    assert!(rows[3].to_trigger().q.is_nan());
    assert_eq!(rows[4].q, Some(8.0));
}

#[test]
fn different_params_are_a_new_scan() {
    let (_d, mut conn) = fresh();
    let seg = SegmentList::single(0.0, 10.0);
    let ts = [trig(1.0, 6.0)];
    let tx = conn.transaction().unwrap();
    insert_scan(&tx, &record("X", "abc", &seg, &ts)).unwrap();
    let mut r = record("X", "abc", &seg, &ts);
    r.params_json = "{\"snr_threshold\":6}";
    assert!(matches!(
        insert_scan(&tx, &r).unwrap(),
        InsertOutcome::Inserted { .. }
    ));
    let seg2 = SegmentList::single(0.0, 11.0);
    assert!(matches!(
        insert_scan(&tx, &record("X", "abc", &seg2, &ts)).unwrap(),
        InsertOutcome::Inserted { .. }
    ));
    tx.commit().unwrap();
    let n: i64 = conn
        .query_row("SELECT COUNT(*) FROM scans", [], |r| r.get(0))
        .unwrap();
    assert_eq!(n, 3);
}

#[test]
fn channel_conflicts_refused_and_rate_filled() {
    let (_d, mut conn) = fresh();
    let seg = SegmentList::single(0.0, 10.0);
    let tx = conn.transaction().unwrap();
    let mut r = record("A", "1", &seg, &[]);
    r.rate_hz = None;
    insert_scan(&tx, &r).unwrap();
    let r2 = record("A", "2", &seg, &[]);
    insert_scan(&tx, &r2).unwrap(); // fills in the unknown rate
    let mut r3 = record("A", "3", &seg, &[]);
    r3.rate_hz = Some(2048.0);
    let e = insert_scan(&tx, &r3).unwrap_err().to_string();
    assert!(e.contains("rate 4096") && e.contains("2048"), "{e}");
    let mut r4 = record("A", "4", &seg, &[]);
    r4.role = Role::Aux;
    let e = insert_scan(&tx, &r4).unwrap_err().to_string();
    assert!(e.contains("as target") && e.contains("as aux"), "{e}");
    tx.commit().unwrap();
    let ch = channel_by_name(&conn, "A").unwrap().unwrap();
    assert_eq!(ch.rate_hz, Some(4096.0));
    assert_eq!(ch.n_scans, 2);
}

#[test]
fn error_midway_writes_nothing() {
    let (_d, mut conn) = fresh();
    let before = logical_checksum(&conn).unwrap();
    let seg = SegmentList::single(0.0, 10.0);
    let good = [trig(1.0, 6.0)];
    let mut bad = [trig(2.0, 6.0), trig(3.0, 7.0)];
    bad[1].snr = f64::INFINITY;
    {
        let tx = conn.transaction().unwrap();
        insert_scan(&tx, &record("A", "1", &seg, &good)).unwrap();
        let e = insert_scan(&tx, &record("B", "2", &seg, &bad)).unwrap_err();
        assert!(e.to_string().contains("trigger 2"), "{e}");
        // dropped without commit → rolled back
    }
    assert_eq!(before, logical_checksum(&conn).unwrap());
    assert!(channels(&conn).unwrap().is_empty());
}

#[test]
fn trigger_filters_and_analysed_union() {
    let (_d, mut conn) = fresh();
    let a1 = SegmentList::single(0.0, 100.0);
    let a2 = SegmentList::from_segments(vec![
        crate::segments::Segment::new(50.0, 150.0),
        crate::segments::Segment::new(200.0, 210.0),
    ]);
    let ts1: Vec<Trigger> = (0..10)
        .map(|i| trig(i as f64 * 10.0 + 1.0, 5.0 + i as f64))
        .collect();
    let ts2 = [trig(55.5, 20.0)];
    let tx = conn.transaction().unwrap();
    insert_scan(&tx, &record("A", "1", &a1, &ts1)).unwrap();
    insert_scan(&tx, &record("A", "2", &a2, &ts2)).unwrap();
    let mut other = record("B", "3", &a1, &ts1);
    other.role = Role::Aux;
    insert_scan(&tx, &other).unwrap();
    tx.commit().unwrap();

    let q = |f: TriggerQuery| query_triggers(&conn, &f).unwrap();
    // Scan 2 of A (analysed 50–150 s) supersedes scan 1's triggers at 51,
    // 61, 71, 81 and 91 s (the latest scan of a time is listed): 5 + 1 of A,
    // 10 of B.
    assert_eq!(q(TriggerQuery::default()).len(), 16);
    let a = q(TriggerQuery {
        channel: Some("A".into()),
        since: Some(21.0),
        until: Some(61.0), // half-open: the trigger at 61 is excluded
        ..Default::default()
    });
    let times: Vec<f64> = a.iter().map(|r| r.t_peak).collect();
    assert_eq!(times, vec![21.0, 31.0, 41.0, 55.5]);
    let moved: i64 = conn
        .query_row("SELECT COUNT(*) FROM superseded_triggers", [], |r| r.get(0))
        .unwrap();
    assert_eq!(moved, 5);
    let loud = q(TriggerQuery {
        channel: Some("B".into()),
        min_snr: Some(12.0),
        ..Default::default()
    });
    assert_eq!(loud.len(), 3);
    let lim = q(TriggerQuery {
        limit: Some(4),
        ..Default::default()
    });
    assert_eq!(lim.len(), 4);
    let e = query_triggers(
        &conn,
        &TriggerQuery {
            channel: Some("nope".into()),
            ..Default::default()
        },
    )
    .unwrap_err();
    assert!(e.to_string().contains("no channel named \"nope\""));

    let seg = analysed_segments(&conn, "A").unwrap();
    assert_eq!(seg.segments().len(), 2);
    assert_eq!(seg.total(), 160.0);
    let chs = channels(&conn).unwrap();
    assert_eq!(chs.len(), 2);
    // 11 found, 5 superseded: 6 listed.
    assert_eq!((chs[0].n_triggers, chs[0].analysed_s), (6, 160.0));
}

#[test]
fn channel_time_query_uses_index() {
    // SQLite's planner (EXPLAIN QUERY PLAN, sqlite.org/eqp.html) reports
    // "SEARCH ... USING INDEX <name> (channel_id=? AND t_peak_ns>? AND t_peak_ns<?)".
    let (_d, mut conn) = fresh();
    let seg = SegmentList::single(0.0, 10.0);
    let tx = conn.transaction().unwrap();
    insert_scan(&tx, &record("A", "1", &seg, &[trig(1.0, 6.0)])).unwrap();
    tx.commit().unwrap();
    let (sql, vals) = query::trigger_sql(
        &conn,
        &TriggerQuery {
            channel: Some("A".into()),
            since: Some(0.0),
            until: Some(5.0),
            min_snr: Some(6.0),
            limit: Some(10),
            family: None,
        },
    )
    .unwrap();
    let plan: Vec<String> = conn
        .prepare(&format!("EXPLAIN QUERY PLAN {sql}"))
        .unwrap()
        .query_map(rusqlite::params_from_iter(vals), |r| r.get::<_, String>(3))
        .unwrap()
        .collect::<rusqlite::Result<_>>()
        .unwrap();
    let plan = plan.join(" | ");
    assert!(
        plan.contains(
            "USING INDEX triggers_channel_time (channel_id=? AND t_peak_ns>? AND t_peak_ns<?)"
        ),
        "{plan}"
    );
    assert!(!plan.contains("TEMP B-TREE"), "sorted by the index: {plan}");
}

#[test]
fn checks_pass_then_detect_dangling_reference() {
    let (_d, mut conn) = fresh();
    let seg = SegmentList::single(0.0, 10.0);
    let tx = conn.transaction().unwrap();
    insert_scan(&tx, &record("A", "1", &seg, &[trig(1.0, 6.0)])).unwrap();
    tx.commit().unwrap();
    let rep = check(&conn).unwrap();
    assert!(rep.ok(), "{rep:?}");
    assert!(rep
        .items
        .iter()
        .any(|i| i.check == "rows.triggers" && i.detail == "1"));
    conn.pragma_update(None, "foreign_keys", "OFF").unwrap();
    conn.execute("DELETE FROM channels", []).unwrap();
    let rep = check(&conn).unwrap();
    assert!(!rep.ok());
    let fk = rep
        .items
        .iter()
        .find(|i| i.check == "foreign_key_check")
        .unwrap();
    assert_eq!(fk.status, "FAILED");
}

#[test]
fn logical_checksum_ignores_physical_layout() {
    let (d, mut conn) = fresh();
    let seg = SegmentList::single(0.0, 10.0);
    let tx = conn.transaction().unwrap();
    insert_scan(&tx, &record("A", "1", &seg, &[trig(1.0, 6.0)])).unwrap();
    tx.commit().unwrap();
    let c1 = logical_checksum(&conn).unwrap();
    conn.execute_batch("VACUUM").unwrap();
    drop(conn);
    let conn = open(&d.path().join("c.db")).unwrap();
    assert_eq!(c1, logical_checksum(&conn).unwrap());
    conn.execute("UPDATE triggers SET snr = snr + 1e-9", [])
        .unwrap();
    assert_ne!(c1, logical_checksum(&conn).unwrap());
}

#[test]
fn run_key_separates_fields() {
    let s = SegmentList::new();
    // Length prefixes: moving a byte between fields changes the key.
    assert_ne!(
        run_key("ab", "c", &s, "{}", ScanKind::Scan).unwrap(),
        run_key("a", "bc", &s, "{}", ScanKind::Scan).unwrap()
    );
    assert_ne!(
        run_key("a", "b", &s, "{}", ScanKind::Scan).unwrap(),
        run_key("a", "b", &s, "{}", ScanKind::Import).unwrap()
    );
    assert_eq!(
        run_key("a", "b", &s, "{}", ScanKind::Scan).unwrap().len(),
        32
    );
}
