//! The binary on good input: import, listing formats, idempotency, check.
use crate::cli_util::{count, Dir};
use serde_json::Value;

const CSV: &str = "time,frequency,snr,q\n\
1400000001.5,120,8.5,6\n\
1400000010.25,60,12,\n\
1400000020.125,300,5.5,20\n";

fn imported() -> Dir {
    let d = Dir::new();
    d.write("t.csv", CSV);
    d.write(
        "seg.txt",
        "# analysed\n1400000000 1400000030\n1400000040 1400000050\n",
    );
    d.ok(&[
        "import",
        "t.csv",
        "--channel",
        "Z1:TEST",
        "--segments",
        "seg.txt",
    ]);
    d
}

#[test]
fn json_fields_and_values_match_the_csv() {
    let d = imported();
    let out = d.ok(&["triggers", "--format", "json"]);
    let v: Value = serde_json::from_str(&out).unwrap();
    let rows = v.as_array().unwrap();
    assert_eq!(rows.len(), 3);
    let keys: Vec<&str> = rows[0]
        .as_object()
        .unwrap()
        .keys()
        .map(|k| k.as_str())
        .collect();
    let mut want = vec![
        "id",
        "channel",
        "t_peak",
        "t_start",
        "t_end",
        "f_peak",
        "f_low",
        "f_high",
        "snr",
        "snr_eq",
        "q",
        "energy",
        "family_id",
        "family_label",
        "family_probability",
        "unclassified",
    ];
    let mut got = keys.clone();
    got.sort();
    want.sort();
    assert_eq!(got, want, "stable JSON field names");
    // Values are the CSV's own (input file above); exactly representable GPS
    // times round-trip bit for bit through integer-ns storage.
    assert_eq!(rows[1]["t_peak"].as_f64(), Some(1400000010.25));
    assert_eq!(rows[2]["t_peak"].as_f64(), Some(1400000020.125));
    assert_eq!(rows[0]["f_peak"].as_f64(), Some(120.0));
    assert_eq!(rows[1]["q"], Value::Null, "empty q cell = unknown");
    // energy = 1 + snr^2 / 2 (Chatterji et al. 2004, SNR = sqrt(2(Z-1))).
    assert_eq!(rows[0]["energy"].as_f64(), Some(1.0 + 8.5 * 8.5 / 2.0));
    assert_eq!(rows[0]["channel"], "Z1:TEST");
    // Imported triggers have no clusters: the equivalent SNR is the SNR.
    assert_eq!(rows[0]["snr_eq"], rows[0]["snr"]);
}

#[test]
fn reimport_is_skipped_and_changes_nothing() {
    let d = imported();
    let before = d.checksum();
    let out = d.run(&[
        "import",
        "t.csv",
        "--channel",
        "Z1:TEST",
        "--segments",
        "seg.txt",
    ]);
    assert!(out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("already scanned with the same data and parameters: skipped"),
        "{err}"
    );
    assert_eq!(before, d.checksum());
    assert_eq!(count(&d.db(), "triggers"), 3);
    // Other segments = another run: recorded.
    d.write("seg2.txt", "1400000000 1400000031\n");
    d.ok(&[
        "import",
        "t.csv",
        "--channel",
        "Z1:TEST",
        "--segments",
        "seg2.txt",
    ]);
    assert_eq!(count(&d.db(), "scans"), 2);
}

#[test]
fn filters_and_formats() {
    let d = imported();
    let csv = d.ok(&[
        "triggers",
        "--since",
        "1400000001.5",
        "--until",
        "1400000020.125",
        "--format",
        "csv",
    ]);
    let lines: Vec<&str> = csv.lines().collect();
    assert_eq!(lines.len(), 3, "header + [since, until) rows: {csv}");
    assert!(lines[0].starts_with("id,channel,t_peak,"));
    let loud = d.ok(&["triggers", "--min-snr", "8.5", "--format", "csv"]);
    assert_eq!(loud.lines().count(), 3);
    let lim = d.ok(&["triggers", "--limit", "1", "--format", "csv"]);
    assert_eq!(lim.lines().count(), 2);
    let table = d.ok(&["triggers", "--channel", "Z1:TEST"]);
    assert_eq!(table.lines().count(), 4);
    assert!(table.lines().next().unwrap().starts_with("id  channel"));
    let chans: Value = serde_json::from_str(&d.ok(&["channels", "--format", "json"])).unwrap();
    // Analysed time = 30 s + 10 s from the segments file.
    assert_eq!(chans[0]["analysed_s"].as_f64(), Some(40.0));
    assert_eq!(chans[0]["n_triggers"].as_i64(), Some(3));
    assert_eq!(chans[0]["role"], "target");
}

#[test]
fn check_passes_then_fails_on_damage() {
    let d = imported();
    let out = d.ok(&["check"]);
    assert!(
        out.contains("integrity_check") && out.contains("rows.triggers"),
        "{out}"
    );
    {
        let conn = rusqlite::Connection::open(d.db()).unwrap();
        // The bundled SQLite enforces foreign keys by default: switch off to damage.
        conn.pragma_update(None, "foreign_keys", "OFF").unwrap();
        conn.execute("UPDATE triggers SET scan_id = 999 WHERE id = 1", [])
            .unwrap();
    }
    let out = d.run(&["check"]);
    assert_eq!(out.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&out.stdout).contains("FAILED"));
}

#[test]
fn role_conflict_is_one_error_line() {
    let d = imported();
    let before = d.checksum();
    d.write("u.csv", "time,frequency,snr\n1400000005,50,7\n");
    let out = d.run(&["import", "u.csv", "--channel", "Z1:TEST", "--role", "aux"]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    let errs: Vec<&str> = err.lines().filter(|l| l.contains("error")).collect();
    assert_eq!(errs.len(), 1, "{err}");
    assert!(errs[0].starts_with("glitchbook: error: ") && errs[0].contains("as target"));
    assert_eq!(before, d.checksum());
    // Without --role the known role is reused (target here, aux below:
    // defaulting to target would be refused as a role conflict).
    d.ok(&["import", "u.csv", "--channel", "Z1:TEST"]);
    d.ok(&["import", "u.csv", "--channel", "Z1:AUX", "--role", "aux"]);
    d.write("v.csv", "time,frequency,snr\n1400000006,50,7\n");
    d.ok(&["import", "v.csv", "--channel", "Z1:AUX"]);
    assert_eq!(count(&d.db(), "scans"), 4);
}

#[test]
fn read_commands_refuse_missing_catalogue() {
    let d = Dir::new();
    let out = d.run(&["channels"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("no catalogue here"));
    assert!(!d.db().exists(), "a read must not create a catalogue");
}

#[test]
fn triggers_into_a_pipe_closed_early_is_quiet() {
    // `glitchbook triggers | head -1`: the listing (well over a pipe buffer)
    // meets a closed pipe; the command stops quietly with success, as
    // command-line tools do (common practice).
    let d = Dir::new();
    let mut csv = String::from("time,frequency,snr,q\n");
    for i in 0..20_000 {
        csv.push_str(&format!(
            "{}.25,{},{},6\n",
            1_400_000_000 + i,
            50 + i % 500,
            6 + i % 9
        ));
    }
    d.write("t.csv", &csv);
    d.ok(&["import", "t.csv", "--channel", "Z1:TEST"]);
    for format in ["table", "csv", "json"] {
        let mut child = d
            .cmd(&["triggers", "--format", format])
            .stdout(std::process::Stdio::piped())
            .stderr(std::process::Stdio::piped())
            .spawn()
            .unwrap();
        let mut first = [0u8; 16];
        std::io::Read::read_exact(child.stdout.as_mut().unwrap(), &mut first).unwrap();
        drop(child.stdout.take());
        let out = child.wait_with_output().unwrap();
        assert!(out.status.success(), "{format}: {:?}", out.status);
        assert!(
            out.stderr.is_empty(),
            "{format}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
}

/// The tool's own trigger CSV imports back (issue 16): `triggers --format
/// csv` → `import` into a fresh catalogue → `triggers --format csv` gives
/// the same bytes (unknown q, explicit extents and exactly representable
/// GPS times included).
#[test]
fn trigger_csv_export_imports_back_unchanged() {
    let d = Dir::new();
    d.write(
        "t.csv",
        "time,frequency,snr,q,t_start,t_end,f_low,f_high\n\
         1400000001.5,120,8.5,6,1400000001.45,1400000001.5625,100,140.5\n\
         1400000010.25,60,12,,,,,\n\
         1400000020.125,300,5.5,20,,,,\n",
    );
    let seg = "1400000000 1400000030\n";
    d.write("seg.txt", seg);
    d.ok(&[
        "import",
        "t.csv",
        "--channel",
        "Z1:TEST",
        "--segments",
        "seg.txt",
    ]);
    let first = d.ok(&["triggers", "--format", "csv"]);
    assert_eq!(first.lines().count(), 4, "{first}");
    assert!(first.starts_with("id,channel,t_peak,"), "{first}");
    let e = Dir::new();
    e.write("export.csv", &first);
    e.write("seg.txt", seg);
    e.ok(&[
        "import",
        "export.csv",
        "--channel",
        "Z1:TEST",
        "--segments",
        "seg.txt",
    ]);
    let second = e.ok(&["triggers", "--format", "csv"]);
    assert_eq!(first, second);
}

#[test]
fn trigger_csv_round_trips_through_import() {
    // Export → import → export gives the same rows, every digit, each
    // channel of the `channel` column back as its own channel with its role.
    let a = Dir::new();
    a.write(
        "s.csv",
        "time,frequency,snr,t_start,t_end,f_low,f_high,q\n\
         1400000001.123456789,57.123456789,8.987654321,1400000001.1,1400000001.2,40.5,70.25,6.123\n\
         1400000002.5,120,12.5,1400000002.4,1400000002.6,100,140,11\n",
    );
    a.write("x.csv", "time,frequency,snr\n1400000001.13,33.3,6.1\n");
    a.ok(&[
        "import",
        "x.csv",
        "--channel",
        "AV1:AUX_ONE",
        "--role",
        "aux",
    ]);
    a.ok(&["import", "s.csv", "--channel", "AV1:STRAIN"]);
    let first = a.ok(&["triggers", "--format", "csv"]);
    let b = Dir::new();
    b.write("all.csv", &first);
    // Several channels need the column, not --channel.
    let out = b.run(&["import", "all.csv", "--channel", "AV1:STRAIN"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("holds 2 channels"));
    assert!(b.checksum().is_none() || count(&b.db(), "triggers") == 0);
    b.ok(&["import", "all.csv", "--target", "AV1:STRAIN"]);
    assert_eq!(b.ok(&["triggers", "--format", "csv"]), first);
    let channels = b.ok(&["channels", "--format", "csv"]);
    assert!(
        channels.contains("AV1:AUX_ONE,aux") && channels.contains("AV1:STRAIN,target"),
        "{channels}"
    );
}
