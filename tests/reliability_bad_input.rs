//! Bad input at the CLI: one error line naming the file and the line or
//! field, a non-zero exit, and the catalogue's logical content unchanged.
use crate::cli_util::{trigger_csv, Dir};

/// A catalogue with some content, so "unchanged" is a real check.
fn seeded() -> Dir {
    let d = Dir::new();
    d.write("good.csv", &trigger_csv(50, 1_400_000_000.0));
    d.ok(&["import", "good.csv", "--channel", "Z1:GOOD"]);
    d
}

/// Run, require exit 2 and exactly one stderr line, which must start with
/// the error prefix and contain every `needles` string.
fn fails_cleanly(d: &Dir, args: &[&str], needles: &[&str]) {
    let before = d.checksum();
    let out = d.run(args);
    assert_eq!(out.status.code(), Some(2), "{args:?}");
    let err = String::from_utf8_lossy(&out.stderr);
    let lines: Vec<&str> = err.lines().collect();
    assert_eq!(lines.len(), 1, "one error line for {args:?}: {err}");
    assert!(lines[0].starts_with("glitchbook: error: "), "{err}");
    for n in needles {
        assert!(lines[0].contains(n), "{args:?}: {err} lacks {n:?}");
    }
    assert!(out.stdout.is_empty());
    assert_eq!(before, d.checksum(), "catalogue changed by {args:?}");
}

#[test]
fn missing_bundle_toml() {
    let d = seeded();
    std::fs::create_dir(d.path().join("empty_bundle")).unwrap();
    fails_cleanly(
        &d,
        &["scan", "empty_bundle"],
        &["empty_bundle", "bundle.toml"],
    );
}

#[test]
fn bad_csv_cell() {
    let d = seeded();
    d.write(
        "bad.csv",
        "time,frequency,snr\n1400000100,50,7\n1400000101,60,seven\n",
    );
    // Line 3 of the file, column snr.
    fails_cleanly(
        &d,
        &["import", "bad.csv", "--channel", "Z1:BAD"],
        &["bad.csv:3", "snr", "seven"],
    );
}

#[test]
fn reversed_segments_line() {
    let d = seeded();
    d.write("more.csv", &trigger_csv(5, 1_400_001_000.0));
    d.write(
        "seg.txt",
        "# two segments\n1400001000 1400001010\n1400001020 1400001015\n",
    );
    fails_cleanly(
        &d,
        &[
            "import",
            "more.csv",
            "--channel",
            "Z1:MORE",
            "--segments",
            "seg.txt",
        ],
        &["seg.txt:3"],
    );
}

#[test]
fn bad_flags_fail_before_any_io() {
    let d = seeded();
    fails_cleanly(
        &d,
        &["scan", "nonexistent", "--fmin", "300", "--fmax", "30"],
        &["--fmin"],
    );
    fails_cleanly(&d, &["scan", "nonexistent", "--qmin", "1"], &["--qmin"]);
    fails_cleanly(
        &d,
        &["triggers", "--since", "20", "--until", "10"],
        &["--since"],
    );
}

#[test]
fn failure_on_fresh_path_creates_no_catalogue() {
    let d = Dir::new();
    d.write("bad.csv", "time,frequency\n1,2\n");
    let out = d.run(&["import", "bad.csv", "--channel", "Z1:X"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("bad.csv"));
    assert!(!d.db().exists());
}
