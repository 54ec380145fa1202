//! Hostile text (quotes, SQL, HTML, control characters) is stored and
//! printed verbatim in CSV and JSON, and escaped only where it could corrupt
//! a terminal (the table), never executed.
use crate::cli_util::{count, Dir};
use serde_json::Value;

const NASTY: &str = "Z1:\"q\" '; DROP TABLE triggers; -- <b>bold</b>, x";

fn imported(name: &str) -> Dir {
    let d = Dir::new();
    // CSV content with quoted cells and an extra (ignored) hostile column.
    d.write(
        "t.csv",
        "time,frequency,snr,\"note\"\n\
         1400000001,100,7,\"it's \"\"fine\"\"; DROP TABLE channels; --\"\n\
         1400000002,200,9,<script>x</script>\n",
    );
    d.ok(&["import", "t.csv", "--channel", name]);
    d
}

#[test]
fn sql_and_html_round_trip_verbatim() {
    let d = imported(NASTY);
    assert_eq!(count(&d.db(), "triggers"), 2, "table still there");
    assert_eq!(count(&d.db(), "channels"), 1);

    let json: Value = serde_json::from_str(&d.ok(&["triggers", "--format", "json"])).unwrap();
    assert_eq!(json[0]["channel"], NASTY);
    assert_eq!(json[1]["channel"], NASTY);

    let csv_out = d.ok(&["triggers", "--format", "csv"]);
    let mut rdr = csv::Reader::from_reader(csv_out.as_bytes());
    let col = rdr
        .headers()
        .unwrap()
        .iter()
        .position(|h| h == "channel")
        .unwrap();
    let names: Vec<String> = rdr.records().map(|r| r.unwrap()[col].to_string()).collect();
    assert_eq!(names, vec![NASTY, NASTY]);

    let table = d.ok(&["triggers"]);
    assert_eq!(table.lines().count(), 3);
    assert!(table.lines().skip(1).all(|l| l.contains(NASTY)), "{table}");

    let chans: Value = serde_json::from_str(&d.ok(&["channels", "--format", "json"])).unwrap();
    assert_eq!(chans[0]["name"], NASTY);
    // Selecting by the hostile name works through bound parameters.
    assert_eq!(
        d.ok(&["triggers", "--channel", NASTY, "--format", "csv"])
            .lines()
            .count(),
        3
    );
    assert!(d.ok(&["check"]).contains("ok"));
}

#[test]
fn control_characters_escaped_in_table_only() {
    let name = "Z1:\x1b[2J\x1b[31mred\nnext\tcol\u{202e}rev";
    let d = imported(name);
    let table = d.ok(&["triggers"]);
    assert!(
        !table.contains('\x1b') && !table.contains('\u{202e}'),
        "{table:?}"
    );
    assert_eq!(table.lines().count(), 3, "no extra line from the newline");
    assert!(table.contains("Z1:\\u{1b}[2J\\u{1b}[31mred\\nnext\\tcol\\u{202e}rev"));
    let json: Value = serde_json::from_str(&d.ok(&["triggers", "--format", "json"])).unwrap();
    assert_eq!(json[0]["channel"], name);
    let csv_out = d.ok(&["triggers", "--format", "csv"]);
    let mut rdr = csv::Reader::from_reader(csv_out.as_bytes());
    assert_eq!(&rdr.records().next().unwrap().unwrap()[1], name);
}
