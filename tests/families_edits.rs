//! The scientists' edits of families (issue 12 item 4): merge, split and
//! move, each one transaction recorded with author and time; bad ids leave
//! the catalogue byte-for-byte as it was; later `cluster` runs keep the
//! edits (pins, `families::lineage::link_pinned`). Synthetic sine-Gaussian
//! populations with known truth (tests/families_store.rs).

use crate::families_store::{add, memberships, setup, World};
use glitchbook::catalogue::open;
use glitchbook::families::*;
use rusqlite::Connection;
use std::collections::HashMap;

/// Every row of the tables an edit writes, as text.
fn snapshot(conn: &Connection) -> String {
    let mut out = String::new();
    for (t, order) in [
        ("families", "id"),
        ("family_members", "trigger_id"),
        ("family_edits", "id"),
        ("family_pins", "trigger_id"),
        ("label_history", "id"),
        ("cluster_runs", "id"),
    ] {
        let mut st = conn
            .prepare(&format!("SELECT * FROM {t} ORDER BY {order}"))
            .unwrap();
        let n = st.column_count();
        let mut rows = st.query([]).unwrap();
        while let Some(r) = rows.next().unwrap() {
            for i in 0..n {
                let v: rusqlite::types::Value = r.get(i).unwrap();
                out.push_str(&format!("{v:?}|"));
            }
            out.push('\n');
        }
    }
    out
}

/// Family of most members of each true kind.
fn family_of_kind(conn: &Connection, w: &World) -> HashMap<usize, i64> {
    let m = memberships(conn);
    let mut c: HashMap<usize, HashMap<i64, usize>> = HashMap::new();
    for (t, k) in &w.truth {
        if let Some(f) = m[t].0 {
            *c.entry(*k).or_default().entry(f).or_default() += 1;
        }
    }
    c.into_iter()
        .map(|(k, h)| (k, *h.iter().max_by_key(|x| (*x.1, -*x.0)).unwrap().0))
        .collect()
}

fn status(conn: &Connection, f: i64) -> String {
    conn.query_row("SELECT status FROM families WHERE id = ?1", [f], |r| {
        r.get(0)
    })
    .unwrap()
}

#[test]
fn merge_split_move_survive_reclustering() {
    let dir = tempfile::tempdir().unwrap();
    let mut conn = open(&dir.path().join("c.db")).unwrap();
    setup(&conn);
    let mut w = World::new();
    add(&conn, &mut w, 150, 21);
    let p = ClusterParams {
        seed: 3,
        k_max: 7,
        n_init: 1,
        ..Default::default()
    };
    cluster_catalogue(&mut conn, &p, &w.src).unwrap();
    let fk = family_of_kind(&conn, &w);
    let (fa, fb, fc) = (fk[&0], fk[&1], fk[&2]);
    assert!(fa != fb && fb != fc && fa != fc, "{fk:?}");
    label(&mut conn, fb, "reed", None, "tester").unwrap();

    // Bad ids: a clear error, the catalogue unchanged.
    let before = snapshot(&conn);
    let member_of_a = *memberships(&conn)
        .iter()
        .find(|(_, v)| v.0 == Some(fa))
        .unwrap()
        .0;
    let errors = [
        merge_families(&mut conn, fa, 9999, "tester", None).unwrap_err(),
        merge_families(&mut conn, fa, fa, "tester", None).unwrap_err(),
        split_family(&mut conn, fb, &[member_of_a], None, "tester", None).unwrap_err(),
        split_family(&mut conn, fb, &[], None, "tester", None).unwrap_err(),
        move_triggers(&mut conn, &[member_of_a, 987_654], fb, "tester", None).unwrap_err(),
        move_triggers(&mut conn, &[member_of_a], 9999, "tester", None).unwrap_err(),
    ];
    let texts: Vec<String> = errors.iter().map(|e| e.to_string()).collect();
    assert!(texts[0].contains("no family with id 9999"), "{texts:?}");
    assert!(texts[1].contains("into itself"), "{texts:?}");
    assert!(
        texts[2].contains(&format!("is in family {fa}, not in family {fb}")),
        "{texts:?}"
    );
    assert!(texts[4].contains("no trigger with id 987654"), "{texts:?}");
    assert_eq!(
        snapshot(&conn),
        before,
        "a refused edit changed the catalogue"
    );

    // Merge kind 0's family into the labelled kind 1 family.
    let n_a = memberships(&conn)
        .values()
        .filter(|v| v.0 == Some(fa))
        .count();
    let e = merge_families(&mut conn, fa, fb, "tester", Some("same mechanism")).unwrap();
    assert_eq!(
        (e.kind, e.family_id, e.other_family_id),
        (EditKind::Merge, fa, Some(fb))
    );
    assert_eq!(e.trigger_ids.len(), n_a);
    assert_eq!(status(&conn, fa), "merged");
    assert!(!memberships(&conn).values().any(|v| v.0 == Some(fa)));
    let h = edit_history(&conn, Some(fb)).unwrap();
    assert_eq!(h.len(), 1);
    assert_eq!(
        (h[0].author.as_str(), h[0].note.as_deref()),
        ("tester", Some("same mechanism"))
    );
    // Editing the merged family is refused with the family it joined.
    let e = move_triggers(&mut conn, &[member_of_a], fa, "tester", None).unwrap_err();
    assert!(
        e.to_string().contains(&format!("merged into family {fb}")),
        "{e}"
    );

    // More data, a new fit: the merge holds (kinds 0 and 1 in family fb,
    // label kept), and `fa` stays merged.
    add(&conn, &mut w, 40, 22);
    cluster_catalogue(&mut conn, &p, &w.src).unwrap();
    let m = memberships(&conn);
    let share = |k: usize, f: i64| {
        let all: Vec<_> = w.truth.iter().filter(|x| *x.1 == k).collect();
        all.iter().filter(|(t, _)| m[t].0 == Some(f)).count() as f64 / all.len() as f64
    };
    assert!(
        share(0, fb) >= 0.95,
        "kind 0 in the merged family: {}",
        share(0, fb)
    );
    assert!(
        share(1, fb) >= 0.95,
        "kind 1 in the merged family: {}",
        share(1, fb)
    );
    assert_eq!(status(&conn, fa), "merged");
    let fams = list_families(&conn).unwrap();
    assert_eq!(
        fams.iter().find(|f| f.id == fb).unwrap().label.as_deref(),
        Some("reed")
    );

    // Split the kind-0 members back out of fb into a new labelled family.
    let kind0: Vec<i64> = w
        .truth
        .iter()
        .filter(|(t, k)| **k == 0 && m[t].0 == Some(fb))
        .map(|x| *x.0)
        .collect();
    let e = split_family(&mut conn, fb, &kind0, Some("thump"), "tester", None).unwrap();
    let fs = e.other_family_id.unwrap();
    assert_eq!(
        label_history(&conn, fs).unwrap()[0].new_label.as_deref(),
        Some("thump")
    );
    // Move a few kind-2 triggers into it (a scientist's call).
    let kind2: Vec<i64> = w
        .truth
        .iter()
        .filter(|(t, k)| **k == 2 && m[t].0 == Some(fc))
        .map(|x| *x.0)
        .take(5)
        .collect();
    move_triggers(&mut conn, &kind2, fs, "tester", None).unwrap();
    assert_eq!(edit_history(&conn, None).unwrap().len(), 3);

    // A new fit keeps the split and the moves.
    cluster_catalogue(&mut conn, &p, &w.src).unwrap();
    let m = memberships(&conn);
    assert!(
        kind0.iter().all(|t| m[t].0 == Some(fs)),
        "split members left {fs}"
    );
    assert!(
        kind2.iter().all(|t| m[t].0 == Some(fs)),
        "moved triggers left {fs}"
    );
    assert_eq!(status(&conn, fs), "active");
    assert_eq!(status(&conn, fb), "active");
    let kind1_in_b = w
        .truth
        .iter()
        .filter(|(t, k)| **k == 1 && m[t].0 == Some(fb))
        .count();
    assert!(kind1_in_b >= 180, "{kind1_in_b} kind-1 triggers in {fb}");
}

/// The commands through the binary: a bad id fails with a one-line error
/// and leaves the catalogue as it was; `move-triggers`, `history`,
/// `classify` and the classifier figures in `families --format json`.
#[test]
fn edit_and_classify_commands() {
    let d = crate::cli_util::Dir::new();
    let mut conn = open(&d.db()).unwrap();
    setup(&conn);
    let mut w = World::new();
    add(&conn, &mut w, 100, 31);
    let p = ClusterParams {
        seed: 3,
        k_max: 7,
        n_init: 1,
        ..Default::default()
    };
    cluster_catalogue(&mut conn, &p, &w.src).unwrap();
    let fk = family_of_kind(&conn, &w);
    label(&mut conn, fk[&0], "low-pulse", None, "tester").unwrap();
    label(&mut conn, fk[&1], "reed", None, "tester").unwrap();
    let before = snapshot(&conn);
    let out = d.run(&["merge-families", &fk[&0].to_string(), "--into", "9999"]);
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("no family with id 9999"), "{err}");
    assert_eq!(err.trim().lines().count(), 1, "{err}");
    assert_eq!(snapshot(&conn), before);

    let t = *memberships(&conn)
        .iter()
        .find(|(_, v)| v.0 == Some(fk[&2]))
        .unwrap()
        .0;
    d.ok(&[
        "move-triggers",
        &t.to_string(),
        "--to",
        &fk[&1].to_string(),
        "--author",
        "ana",
    ]);
    let h: serde_json::Value =
        serde_json::from_str(&d.ok(&["history", &fk[&1].to_string()])).unwrap();
    assert_eq!(h["edits"][0]["kind"], "move");
    assert_eq!(h["edits"][0]["author"], "ana");
    assert_eq!(h["edits"][0]["trigger_ids"][0], t);
    assert_eq!(h["labels"][0]["new_label"], "reed");

    let c: serde_json::Value =
        serde_json::from_str(&d.ok(&["classify", "--format", "json"])).unwrap();
    assert!(
        c["cross_validation"]["accuracy"].as_f64().unwrap() >= 0.9,
        "{c}"
    );
    let fams: serde_json::Value =
        serde_json::from_str(&d.ok(&["families", "--format", "json"])).unwrap();
    let reed = fams
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["label"] == "reed")
        .unwrap();
    assert!(
        reed["classifier"]["recall"].as_f64().unwrap() >= 0.9,
        "{reed}"
    );
    assert!(reed["classifier"]["predicted_as"]["reed"].as_u64().unwrap() > 50);
    let unlabelled = fams
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["id"] == fk[&3])
        .unwrap();
    assert!(unlabelled.get("classifier").is_none());
}
