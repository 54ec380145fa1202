//! Schema upgrades: a version-1 catalogue (tests/data/catalogue/v1.db, made
//! by tests/data/catalogue/make_v1.sh) opens and migrates; a catalogue from a
//! newer glitchbook is refused and left byte-identical.
use crate::cli_util::Dir;
use glitchbook::catalogue::schema_version;
use serde_json::Value;
use std::path::PathBuf;

fn fixture(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/catalogue")
        .join(name)
}

fn copy_v1(d: &Dir) {
    std::fs::copy(fixture("v1.db"), d.db()).unwrap();
}

fn user_version(d: &Dir) -> i64 {
    rusqlite::Connection::open(d.db())
        .unwrap()
        .query_row("PRAGMA user_version", [], |r| r.get(0))
        .unwrap()
}

#[test]
fn v1_catalogue_opens_and_migrates() {
    let d = Dir::new();
    copy_v1(&d);
    assert_eq!(user_version(&d), 1);
    let out = d.ok(&["check"]);
    assert!(!out.contains("FAILED"), "{out}");
    assert_eq!(user_version(&d), schema_version());

    // Content survives: the fixture's input CSV is the reference.
    let json: Value = serde_json::from_str(&d.ok(&[
        "triggers",
        "--channel",
        "Z1:FIXTURE-STRAIN",
        "--format",
        "json",
    ]))
    .unwrap();
    let mut rdr = csv::Reader::from_path(fixture("v1_triggers.csv")).unwrap();
    let rows: Vec<csv::StringRecord> = rdr.records().map(|r| r.unwrap()).collect();
    assert_eq!(json.as_array().unwrap().len(), rows.len());
    for (j, r) in json.as_array().unwrap().iter().zip(&rows) {
        assert_eq!(j["t_peak"].as_f64().unwrap(), r[0].parse::<f64>().unwrap());
        assert_eq!(j["f_peak"].as_f64().unwrap(), r[1].parse::<f64>().unwrap());
        assert_eq!(j["snr"].as_f64().unwrap(), r[2].parse::<f64>().unwrap());
    }
    let chans: Value = serde_json::from_str(&d.ok(&["channels", "--format", "json"])).unwrap();
    assert_eq!(chans[0]["name"], "Z1:FIXTURE-AUX");
    assert_eq!(chans[0]["role"], "aux");
    assert_eq!(chans[1]["analysed_s"].as_f64(), Some(30.0));

    // And it takes new writes.
    d.write("new.csv", "time,frequency,snr\n1400000100,50,7\n");
    d.ok(&["import", "new.csv", "--channel", "Z1:FIXTURE-STRAIN"]);
    assert!(!d.ok(&["check"]).contains("FAILED"));
}

#[test]
fn newer_catalogue_refused_byte_identical() {
    let d = Dir::new();
    copy_v1(&d);
    {
        let conn = rusqlite::Connection::open(d.db()).unwrap();
        conn.pragma_update(None, "user_version", schema_version() + 1)
            .unwrap();
    }
    let bytes = std::fs::read(d.db()).unwrap();
    d.write("new.csv", "time,frequency,snr\n1400000100,50,7\n");
    for args in [
        vec!["triggers"],
        vec!["channels"],
        vec!["check"],
        vec!["import", "new.csv", "--channel", "Z1:X"],
    ] {
        let out = d.run(&args);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = String::from_utf8_lossy(&out.stderr);
        let err_lines: Vec<&str> = err.lines().filter(|l| l.contains("error")).collect();
        assert_eq!(err_lines.len(), 1, "{err}");
        assert!(
            err_lines[0].contains("newer") && err_lines[0].contains("c.db"),
            "{err}"
        );
        assert_eq!(
            bytes,
            std::fs::read(d.db()).unwrap(),
            "{args:?} modified the file"
        );
    }
}
