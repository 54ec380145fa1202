//! Output formats shared by every listing command: an aligned text table,
//! JSON and CSV, all written from `serde::Serialize` rows (flat structs).
//!
//! - `json`: one array of objects; field names are the struct's (snake_case)
//!   in declaration order; `None` is `null`.
//! - `csv`: a header line then one line per row (RFC 4180 quoting by the
//!   `csv` crate); `None` is an empty cell.
//! - `table`: a header and columns padded to equal width (numeric columns
//!   right-aligned); `None` is empty. Fractional numbers are rounded for
//!   reading (see [`round_for_table`]); JSON and CSV keep every digit.
//!
//! User text (labels, notes, channel names) is written verbatim. In the
//! table, control characters and bidirectional-override characters are
//! escaped (`\n`, `\t`, `\u{1b}`…) so a label cannot corrupt the terminal or
//! the column layout. JSON escapes control characters itself; CSV keeps the
//! exact bytes (quoted where needed) so it round-trips through a CSV reader.

use anyhow::{Context, Result};
use serde::Serialize;
use std::io::Write;

/// An output format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, clap::ValueEnum)]
pub enum Format {
    /// Aligned columns with a header, for people.
    #[default]
    Table,
    /// An array of JSON objects.
    Json,
    /// Comma-separated values with a header line.
    Csv,
}

/// Write `rows` to `out` in `format`. `T::default()` is serialised once to
/// get the column names, so an empty list still gets a header (CSV, table)
/// or `[]` (JSON).
///
/// # Errors
/// Rows that are not flat structs, or a failed write.
pub fn write_rows<T: Serialize + Default>(
    out: &mut dyn Write,
    format: Format,
    rows: &[T],
) -> Result<()> {
    match format {
        Format::Json => {
            serde_json::to_writer_pretty(&mut *out, rows).context("writing JSON")?;
            writeln!(out)?;
        }
        Format::Csv => {
            let mut w = csv::Writer::from_writer(&mut *out);
            if rows.is_empty() {
                w.write_record(header::<T>()?)?;
            }
            for r in rows {
                w.serialize(r).context("writing CSV")?;
            }
            w.flush()?;
        }
        Format::Table => write_table(out, rows)?,
    }
    out.flush()?;
    Ok(())
}

/// Column names of `T` (from serialising `T::default()`).
fn header<T: Serialize + Default>() -> Result<Vec<String>> {
    let (head, _) = to_cells(&[T::default()])?;
    Ok(head)
}

/// Serialise rows through the CSV writer and read them back as cells, so the
/// table shows exactly the values (and number formatting) of the CSV.
fn to_cells<T: Serialize>(rows: &[T]) -> Result<(Vec<String>, Vec<Vec<String>>)> {
    let mut buf = Vec::new();
    {
        let mut w = csv::Writer::from_writer(&mut buf);
        for r in rows {
            w.serialize(r).context("formatting row")?;
        }
        w.flush()?;
    }
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .from_reader(buf.as_slice());
    let head: Vec<String> = rdr.headers()?.iter().map(str::to_string).collect();
    let mut body = Vec::with_capacity(rows.len());
    for rec in rdr.records() {
        body.push(rec?.iter().map(str::to_string).collect());
    }
    Ok((head, body))
}

/// Escape characters that could move the cursor, change colours, break a
/// line or reorder text on a terminal; everything else is kept verbatim.
pub fn escape_control(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '\n' => out.push_str("\\n"),
            '\r' => out.push_str("\\r"),
            '\t' => out.push_str("\\t"),
            c if c.is_control() || is_bidi_control(c) => {
                out.push_str(&format!("\\u{{{:x}}}", c as u32))
            }
            c => out.push(c),
        }
    }
    out
}

/// Unicode bidirectional formatting characters (they reorder displayed text).
fn is_bidi_control(c: char) -> bool {
    matches!(c, '\u{200e}' | '\u{200f}' | '\u{202a}'..='\u{202e}' | '\u{2066}'..='\u{2069}')
}

/// A fractional number as the table shows it: four decimals from 1 up (a
/// GPS time to 0.1 ms), four significant digits below 1, trailing zeros
/// dropped; four significant digits in exponent form below 1e-4 and from
/// 1e16. Integers and text are kept as they are.
pub fn round_for_table(cell: &str) -> String {
    let Ok(v) = cell.parse::<f64>() else {
        return cell.to_string();
    };
    if !cell.contains('.') || !v.is_finite() {
        return cell.to_string();
    }
    let a = v.abs();
    if a >= 1e16 {
        format!("{v:.3e}")
    } else if a == 0.0 || a >= 1.0 {
        fixed(v, 4)
    } else if a >= 1e-4 {
        fixed(v, (3.0 - a.log10().floor()) as usize)
    } else {
        format!("{v:.3e}")
    }
}

/// `v` with `decimals` decimals and the trailing zeros of the fraction
/// dropped (`fixed(250.0, 3)` = "250", `fixed(-0.0001, 3)` = "0").
pub fn fixed(v: f64, decimals: usize) -> String {
    let s = format!("{v:.decimals$}");
    let t = if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.')
    } else {
        &s
    };
    if t == "-0" {
        "0".to_string()
    } else {
        t.to_string()
    }
}

fn is_numeric(cell: &str) -> bool {
    cell.is_empty() || cell.parse::<f64>().is_ok()
}

fn write_table<T: Serialize + Default>(out: &mut dyn Write, rows: &[T]) -> Result<()> {
    let (head, body) = if rows.is_empty() {
        (header::<T>()?, Vec::new())
    } else {
        to_cells(rows)?
    };
    let head: Vec<String> = head.iter().map(|s| escape_control(s)).collect();
    let body: Vec<Vec<String>> = body
        .iter()
        .map(|r| {
            r.iter()
                .map(|s| escape_control(&round_for_table(s)))
                .collect()
        })
        .collect();
    let ncol = head.len();
    let width = |s: &str| s.chars().count();
    let mut widths: Vec<usize> = head.iter().map(|s| width(s)).collect();
    let mut numeric = vec![!body.is_empty(); ncol];
    for r in &body {
        for (j, c) in r.iter().enumerate().take(ncol) {
            widths[j] = widths[j].max(width(c));
            numeric[j] &= is_numeric(c);
        }
    }
    let mut line = |cells: &[String]| -> std::io::Result<()> {
        let mut s = String::new();
        for (j, c) in cells.iter().enumerate().take(ncol) {
            let pad = " ".repeat(widths[j] - width(c));
            if j > 0 {
                s.push_str("  ");
            }
            if numeric[j] {
                s.push_str(&pad);
                s.push_str(c);
            } else {
                s.push_str(c);
                if j + 1 < ncol {
                    s.push_str(&pad);
                }
            }
        }
        writeln!(out, "{}", s.trim_end())
    };
    line(&head)?;
    for r in &body {
        line(r)?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Serialize, Default)]
    struct Row {
        id: i64,
        name: String,
        snr: Option<f64>,
    }

    fn render(format: Format, rows: &[Row]) -> String {
        let mut buf = Vec::new();
        write_rows(&mut buf, format, rows).unwrap();
        String::from_utf8(buf).unwrap()
    }

    fn rows() -> Vec<Row> {
        vec![
            Row {
                id: 1,
                name: "a \"quoted\", name".into(),
                snr: Some(7.25),
            },
            Row {
                id: 12,
                name: "esc\x1b[31mred\nline".into(),
                snr: None,
            },
        ]
    }

    #[test]
    fn table_rounds_fractions_for_reading() {
        let cells = [
            "1400000213.21875",
            "44.243429193549844",
            "0.0014700000000000002",
            "0.5",
            "0.000000000001234",
            "12",
            "-0.00001",
            "2.5e22",
            "1e-7",
            "AV1:STRAIN",
            "",
        ];
        let got: Vec<String> = cells.iter().map(|c| round_for_table(c)).collect();
        assert_eq!(
            got,
            [
                "1400000213.2188",
                "44.2434",
                "0.00147",
                "0.5",
                "1.234e-12",
                "12",
                "-1.000e-5",
                "2.500e22",
                "1e-7",
                "AV1:STRAIN",
                ""
            ]
        );
    }

    #[test]
    fn csv_quotes_like_rfc4180() {
        // RFC 4180 §2.6-2.7: fields with quotes/commas/line breaks are quoted
        // and inner quotes doubled. Python 3.x
        // `csv.writer(buf, lineterminator="\n").writerow(...)` (QUOTE_MINIMAL)
        // writes exactly these two lines.
        let s = render(Format::Csv, &rows());
        assert!(
            s.starts_with("id,name,snr\n1,\"a \"\"quoted\"\", name\",7.25\n"),
            "{s}"
        );
        // Verbatim bytes (quoted) for the control characters.
        assert!(s.contains("\"esc\x1b[31mred\nline\""), "{s}");
    }

    #[test]
    fn json_is_array_of_objects_in_field_order() {
        let s = render(Format::Json, &rows());
        let v: serde_json::Value = serde_json::from_str(&s).unwrap();
        assert_eq!(v[0]["name"], "a \"quoted\", name");
        assert_eq!(v[1]["snr"], serde_json::Value::Null);
        assert_eq!(v[1]["name"], "esc\x1b[31mred\nline");
        assert!(s.find("\"id\"").unwrap() < s.find("\"name\"").unwrap());
        assert_eq!(render(Format::Json, &[]).trim(), "[]");
    }

    #[test]
    fn table_aligns_and_escapes() {
        let s = render(Format::Table, &rows());
        let lines: Vec<&str> = s.lines().collect();
        assert_eq!(lines.len(), 3, "{s}");
        assert!(!s.contains('\x1b'));
        assert!(lines[2].contains("esc\\u{1b}[31mred\\nline"), "{s}");
        // Numeric id column right-aligned under its header.
        assert!(lines[0].starts_with("id  name"), "{s}");
        assert!(lines[1].starts_with(" 1  a \"quoted\", name"), "{s}");
        assert!(lines[2].starts_with("12  esc"), "{s}");
    }

    #[test]
    fn empty_lists_keep_header() {
        assert_eq!(render(Format::Csv, &[]), "id,name,snr\n");
        assert_eq!(render(Format::Table, &[]), "id  name  snr\n");
    }

    #[test]
    fn bidi_override_escaped() {
        assert_eq!(escape_control("a\u{202e}b"), "a\\u{202e}b");
        assert_eq!(escape_control("<b>'; DROP"), "<b>'; DROP");
    }
}
