//! Text inputs: segment files, external trigger CSV, injection CSV.
//!
//! Every error is one line of the form `file:line: what is wrong` (line
//! numbers are 1-based lines of the file), or `file: what is wrong` when no
//! line is at fault. The `parse_*` functions take the file's contents and a
//! name to use in messages; the `read_*` functions read a file and call them.
use super::shown;
use crate::segments::{Segment, SegmentList};
use crate::trigger::{energy_from_snr, Trigger};
use crate::{Error, Result};
use std::collections::HashMap;
use std::path::Path;

/// `name:line: [column 'field': ]message`.
fn parse_at(name: &str, line: u64, field: Option<&str>, message: impl Into<String>) -> Error {
    match field {
        Some(f) => Error::parse(name, format!("column '{f}': {}", message.into()))
            .at(line, None)
            .in_field(f),
        None => Error::parse(name, message).at(line, None),
    }
}

/// At most this many line-level warnings are listed one by one; the rest
/// are summarised in one more warning.
const MAX_LISTED_WARNINGS: usize = 20;

/// The largest text input read \[bytes\]: 2 GiB, about 20 million CSV rows.
pub const MAX_TEXT_BYTES: u64 = 2 << 30;

/// The longest line of a text input \[bytes\]: 1 MiB. A longer line means
/// the file is not text of this kind (`/dev/zero`, a binary file), so
/// reading stops there instead of filling memory.
pub const MAX_LINE_BYTES: usize = 1 << 20;

/// Read a text input whole, refusing (before reading further) a file
/// larger than [`MAX_TEXT_BYTES`] or a line longer than [`MAX_LINE_BYTES`].
///
/// # Errors
/// An unreadable file, or one over either limit (`file:line: ...`).
pub fn read_text_input(path: &Path) -> Result<Vec<u8>> {
    use std::io::Read;
    let file = std::fs::File::open(path).map_err(|e| Error::io(path, "cannot read", e))?;
    let mut reader = file.take(MAX_TEXT_BYTES + 1);
    let mut out = Vec::new();
    let mut chunk = vec![0u8; 1 << 20];
    let (mut line_len, mut line_no) = (0usize, 1u64);
    loop {
        let n = match reader.read(&mut chunk) {
            Ok(0) => break,
            Ok(n) => n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
            Err(e) => return Err(Error::io(path, "cannot read", e)),
        };
        for piece in chunk[..n].split_inclusive(|&b| b == b'\n') {
            line_len += piece.len();
            if line_len > MAX_LINE_BYTES + 1 {
                return Err(Error::parse(
                    path,
                    format!(
                        "line longer than {MAX_LINE_BYTES} bytes: not a text file of this kind \
                         (stopped reading)"
                    ),
                )
                .at(line_no, None));
            }
            if piece.last() == Some(&b'\n') {
                line_len = 0;
                line_no += 1;
            }
        }
        out.extend_from_slice(&chunk[..n]);
        if out.len() as u64 > MAX_TEXT_BYTES {
            return Err(Error::parse(
                path,
                format!("larger than {MAX_TEXT_BYTES} bytes, the most a text input may hold"),
            ));
        }
    }
    Ok(out)
}

/// Read a segments file (`start end` per line \[GPS s\], `#` comments).
///
/// Returns the coalesced segment list and warnings (zero-length segments,
/// unsorted or overlapping lines that were merged), each naming its lines.
///
/// # Errors
/// An unreadable file, or see [`parse_segments`].
pub fn read_segments_file(path: &Path) -> Result<(SegmentList, Vec<String>)> {
    let bytes = read_text_input(path)?;
    let name = path.display().to_string();
    let text = std::str::from_utf8(&bytes)
        .map_err(|e| Error::parse(&name, format!("not valid UTF-8 text: {e}")))?;
    parse_segments(text, &name)
}

/// Parse the contents of a segments file; `name` is used in messages.
///
/// Format: one segment per line, `start end` in GPS seconds (decimals
/// allowed) separated by spaces or tabs; `#` starts a comment (whole line or
/// after the numbers); blank lines are skipped.
///
/// # Errors
/// `name:line: ...` for a line without exactly two columns, a non-numeric or
/// non-finite value, or end < start; `name: ...` when the file holds no
/// segment of positive length.
pub fn parse_segments(text: &str, name: &str) -> Result<(SegmentList, Vec<String>)> {
    let mut segs = Vec::new();
    let mut warnings = Vec::new();
    let mut n_warned = 0usize;
    let mut warn = |w: String| {
        n_warned += 1;
        if n_warned <= MAX_LISTED_WARNINGS {
            warnings.push(w);
        }
    };
    // Previous positive-length line: (start, line).
    let mut prev: Option<(f64, usize)> = None;
    let mut lines: Vec<usize> = Vec::new();
    for (idx, raw) in text.lines().enumerate() {
        let line_no = idx + 1;
        let content = raw.split('#').next().unwrap_or("").trim();
        if content.is_empty() {
            continue;
        }
        let cols: Vec<&str> = content.split_whitespace().collect();
        if cols.len() != 2 {
            return Err(parse_at(
                name,
                line_no as u64,
                None,
                format!("expected 2 columns 'start end', found {}", cols.len()),
            ));
        }
        let num = |s: &str, what: &str| -> Result<f64> {
            let v: f64 = s.parse().map_err(|_| {
                parse_at(
                    name,
                    line_no as u64,
                    None,
                    format!("{what} '{}' is not a number", shown(s)),
                )
            })?;
            if !v.is_finite() {
                return Err(parse_at(
                    name,
                    line_no as u64,
                    None,
                    format!("{what} '{}' is not finite", shown(s)),
                ));
            }
            if !crate::catalogue::gps_ok(v) {
                return Err(parse_at(
                    name,
                    line_no as u64,
                    None,
                    format!("{what}: {}", crate::catalogue::gps_range_message(v)),
                ));
            }
            Ok(v)
        };
        let start = num(cols[0], "start")?;
        let end = num(cols[1], "end")?;
        if end < start {
            return Err(parse_at(
                name,
                line_no as u64,
                None,
                format!("end {end} is before start {start}"),
            ));
        }
        if end == start {
            warn(format!(
                "{name}:{line_no}: zero-length segment [{start}, {end}) ignored"
            ));
            continue;
        }
        if let Some((p_start, p_line)) = prev {
            if start < p_start {
                warn(format!(
                    "{name}:{line_no}: segment starts before the one on line {p_line}; segments sorted"
                ));
            }
        }
        prev = Some((start, line_no));
        segs.push(Segment::new(start, end));
        lines.push(line_no);
    }
    // Overlaps, found in time order: each segment against the one reaching
    // furthest among those starting no later (touching is not an overlap).
    let mut order: Vec<usize> = (0..segs.len()).collect();
    order.sort_by(|&a, &b| segs[a].start.total_cmp(&segs[b].start).then(a.cmp(&b)));
    let mut furthest: Option<usize> = None;
    for &k in &order {
        if let Some(f) = furthest {
            if segs[k].start < segs[f].end {
                let (first, second) = (lines[f].min(lines[k]), lines[f].max(lines[k]));
                warn(format!(
                    "{name}:{second}: segment overlaps the one on line {first}; merged"
                ));
            }
        }
        if furthest.is_none_or(|f| segs[k].end > segs[f].end) {
            furthest = Some(k);
        }
    }
    if n_warned > MAX_LISTED_WARNINGS {
        warnings.push(format!(
            "{name}: {} more warnings not listed",
            n_warned - MAX_LISTED_WARNINGS
        ));
    }
    if segs.is_empty() {
        return Err(Error::parse(name, "no segments of positive length found"));
    }
    Ok((SegmentList::from_segments(segs), warnings))
}

/// A CSV file with a header row, its columns located by name.
struct Table<'a> {
    name: String,
    bytes: &'a [u8],
    reader: csv::Reader<&'a [u8]>,
    columns: HashMap<String, usize>,
    /// (byte offset, newlines before it) of the last [`Table::line_at`] call.
    newlines_upto: (usize, u64),
}

impl<'a> Table<'a> {
    fn new(bytes: &'a [u8], name: &str) -> Result<Table<'a>> {
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(true)
            .trim(csv::Trim::All)
            .comment(Some(b'#'))
            .from_reader(bytes);
        let headers = reader
            .headers()
            .map_err(|e| Error::parse(name, csv_error_text(&e)))?
            .clone();
        if headers.is_empty() || headers.iter().all(str::is_empty) {
            return Err(Error::parse(
                name,
                "empty file: a header row naming the columns is required",
            ));
        }
        let mut columns = HashMap::new();
        for (i, h) in headers.iter().enumerate() {
            let key = h.to_ascii_lowercase();
            if columns.insert(key, i).is_some() {
                return Err(Error::parse(
                    name,
                    format!("column '{}' appears twice in the header", shown(h)),
                )
                .at(1, None)
                .in_field(h));
            }
        }
        Ok(Table {
            name: name.to_owned(),
            bytes,
            reader,
            columns,
            newlines_upto: (0, 0),
        })
    }

    fn require(&self, col: &str) -> Result<usize> {
        self.require_any(col, &[])
    }

    /// The column `col`, else the first of `aliases` present.
    fn require_any(&self, col: &str, aliases: &[&str]) -> Result<usize> {
        std::iter::once(&col)
            .chain(aliases)
            .find_map(|c| self.columns.get(*c).copied())
            .ok_or_else(|| {
                let also = if aliases.is_empty() {
                    String::new()
                } else {
                    format!(" (or '{}')", aliases.join("', '"))
                };
                Error::parse(
                    &self.name,
                    format!(
                        "missing required column '{col}'{also} (the first line must be a header \
                         naming the columns)"
                    ),
                )
            })
    }

    /// 1-based line of the record starting at byte `offset`. The CSV reader's
    /// own line count skips comment lines, so count newlines here, then step
    /// over the blank and `#` lines the reader skips before a record.
    ///
    /// Records come in increasing offsets, so the newline count resumes from
    /// the previous call (`newlines_upto`): linear in the file, not quadratic.
    fn line_at(&mut self, offset: u64) -> u64 {
        let mut off = (offset as usize).min(self.bytes.len());
        let (from, count) = if self.newlines_upto.0 <= off {
            self.newlines_upto
        } else {
            (0, 0)
        };
        let count = count
            + self.bytes[from..off]
                .iter()
                .filter(|&&b| b == b'\n')
                .count() as u64;
        self.newlines_upto = (off, count);
        let mut line = 1 + count;
        while let Some(rest) = self.bytes.get(off..).filter(|r| !r.is_empty()) {
            let skipped = matches!(rest[0], b'#' | b'\n') || rest.starts_with(b"\r\n");
            if !skipped {
                break;
            }
            match rest.iter().position(|&b| b == b'\n') {
                Some(nl) => {
                    off += nl + 1;
                    line += 1;
                }
                None => break,
            }
        }
        line
    }

    /// Visit each record with its 1-based line number.
    fn for_each(&mut self, mut f: impl FnMut(&csv::StringRecord, u64) -> Result<()>) -> Result<()> {
        let mut rec = csv::StringRecord::new();
        loop {
            match self.reader.read_record(&mut rec) {
                Ok(false) => return Ok(()),
                Ok(true) => {
                    let line = rec.position().map_or(0, |p| self.line_at(p.byte()));
                    f(&rec, line)?;
                }
                Err(e) => {
                    let line = e.position().map_or(0, |p| self.line_at(p.byte()));
                    return Err(parse_at(&self.name, line, None, csv_error_text(&e)));
                }
            }
        }
    }
}

fn csv_error_text(e: &csv::Error) -> String {
    match e.kind() {
        csv::ErrorKind::UnequalLengths {
            expected_len, len, ..
        } => format!("expected {expected_len} fields as in the header, found {len}"),
        csv::ErrorKind::Utf8 { .. } => "not valid UTF-8 text".to_owned(),
        _ => e.to_string().replace('\n', " "),
    }
}

/// A numeric cell: `Ok(None)` when the column is absent or the cell empty.
fn cell(
    rec: &csv::StringRecord,
    col: Option<usize>,
    col_name: &str,
    name: &str,
    line: u64,
) -> Result<Option<f64>> {
    let Some(s) = col.and_then(|c| rec.get(c)) else {
        return Ok(None);
    };
    if s.is_empty() {
        return Ok(None);
    }
    let v: f64 = s.parse().map_err(|_| {
        parse_at(
            name,
            line,
            Some(col_name),
            format!("'{}' is not a number", shown(s)),
        )
    })?;
    if !v.is_finite() {
        return Err(parse_at(
            name,
            line,
            Some(col_name),
            format!("'{}' is not finite", shown(s)),
        ));
    }
    Ok(Some(v))
}

/// Read an external trigger CSV (`time,frequency,snr` + optional columns).
///
/// # Errors
/// An unreadable file, or see [`parse_trigger_csv`].
pub fn read_trigger_csv(path: &Path) -> Result<Vec<Trigger>> {
    parse_trigger_csv(&read_text_input(path)?, &path.display().to_string())
}

/// Parse an external trigger CSV; `name` is used in messages.
///
/// A header row is required. Required columns (any order, names matched
/// case-insensitively): `time` \[GPS s\], `frequency` \[Hz\], `snr`
/// (`t_peak` and `f_peak` are accepted for the first two, so the CSV of
/// `glitchbook triggers` imports back). Optional:
/// `duration` \[s\], `bandwidth` \[Hz\], `t_start`, `t_end` \[GPS s\], `f_low`,
/// `f_high` \[Hz\], `q`, `energy` (normalised; else `1 + snr²/2`). Other
/// columns are ignored; an empty optional cell
/// counts as absent. Quoted cells, CRLF line ends and `#` comment lines are
/// accepted.
///
/// Derived fields: `t_peak = time`; `t_start`/`t_end` from their columns,
/// else `time ∓ duration/2`, else `time`; `f_low`/`f_high` likewise from
/// `bandwidth`, else `frequency`; `q` from its column, else
/// `frequency / bandwidth` when a bandwidth (the column, else
/// `f_high - f_low` from explicit columns) is > 0, else NaN (unknown);
/// `energy` from its column, else `1 + snr²/2`. Triggers are returned
/// sorted by `t_peak`.
///
/// # Errors
/// `name: ...` for a missing header or required column; `name:line: column
/// 'c': ...` for a non-numeric or non-finite cell, `snr` or `frequency` ≤ 0,
/// a negative `duration` or `bandwidth`, `q` ≤ 0, or extents that do not
/// contain the peak (`t_start ≤ time ≤ t_end`, `0 ≤ f_low ≤ frequency ≤ f_high`).
pub fn parse_trigger_csv(bytes: &[u8], name: &str) -> Result<Vec<Trigger>> {
    let mut rows = parse_trigger_rows(bytes, name)?;
    rows.sort_by(|a, b| a.1.t_peak.total_cmp(&b.1.t_peak));
    Ok(rows.into_iter().map(|(_, t)| t).collect())
}

/// Triggers of a CSV grouped by its `channel` column (as `glitchbook
/// triggers --format csv` writes it), each group sorted by `t_peak`; None
/// when the file has no `channel` column. Rows as [`parse_trigger_csv`].
///
/// # Errors
/// As [`parse_trigger_csv`]; an empty `channel` cell names its line.
pub fn parse_trigger_csv_by_channel(
    bytes: &[u8],
    name: &str,
) -> Result<Option<std::collections::BTreeMap<String, Vec<Trigger>>>> {
    let rows = parse_trigger_rows(bytes, name)?;
    if rows.first().is_some_and(|r| r.0.is_none()) {
        return Ok(None);
    }
    let mut out: std::collections::BTreeMap<String, Vec<Trigger>> = Default::default();
    for (ch, t) in rows {
        out.entry(ch.unwrap_or_default()).or_default().push(t);
    }
    for v in out.values_mut() {
        v.sort_by(|a, b| a.t_peak.total_cmp(&b.t_peak));
    }
    Ok(Some(out))
}

/// The rows of a trigger CSV in file order, each with its `channel` cell
/// when the file has that column.
fn parse_trigger_rows(bytes: &[u8], name: &str) -> Result<Vec<(Option<String>, Trigger)>> {
    let mut table = Table::new(bytes, name)?;
    let c_channel = table.columns.get("channel").copied();
    // `t_peak` and `f_peak` are how `glitchbook triggers --format csv` names them.
    let c_time = table.require_any("time", &["t_peak"])?;
    let c_freq = table.require_any("frequency", &["f_peak"])?;
    let c_snr = table.require("snr")?;
    let opt = |c: &str| table.columns.get(c).copied();
    let c_energy = table.columns.get("energy").copied();
    let (c_dur, c_bw, c_ts, c_te, c_fl, c_fh, c_q) = (
        opt("duration"),
        opt("bandwidth"),
        opt("t_start"),
        opt("t_end"),
        opt("f_low"),
        opt("f_high"),
        opt("q"),
    );
    let mut out = Vec::new();
    table.for_each(|rec, line| {
        let get = |c: Option<usize>, n: &str| cell(rec, c, n, name, line);
        let need = |c: usize, n: &str| -> Result<f64> {
            get(Some(c), n)?.ok_or_else(|| parse_at(name, line, Some(n), "empty cell"))
        };
        let time = need(c_time, "time")?;
        let freq = need(c_freq, "frequency")?;
        let snr = need(c_snr, "snr")?;
        if freq <= 0.0 {
            return Err(parse_at(
                name,
                line,
                Some("frequency"),
                format!("{freq} must be > 0"),
            ));
        }
        if snr <= 0.0 {
            return Err(parse_at(
                name,
                line,
                Some("snr"),
                format!("{snr} must be > 0"),
            ));
        }
        let dur = get(c_dur, "duration")?;
        let bw = get(c_bw, "bandwidth")?;
        if let Some(d) = dur.filter(|&d| d < 0.0) {
            return Err(parse_at(
                name,
                line,
                Some("duration"),
                format!("{d} must be ≥ 0"),
            ));
        }
        if let Some(b) = bw.filter(|&b| b < 0.0) {
            return Err(parse_at(
                name,
                line,
                Some("bandwidth"),
                format!("{b} must be ≥ 0"),
            ));
        }
        let ts_col = get(c_ts, "t_start")?;
        let te_col = get(c_te, "t_end")?;
        let fl_col = get(c_fl, "f_low")?;
        let fh_col = get(c_fh, "f_high")?;
        let t_start = ts_col.unwrap_or(time - dur.unwrap_or(0.0) / 2.0);
        let t_end = te_col.unwrap_or(time + dur.unwrap_or(0.0) / 2.0);
        let f_low = fl_col.unwrap_or(freq - bw.unwrap_or(0.0) / 2.0);
        let f_high = fh_col.unwrap_or(freq + bw.unwrap_or(0.0) / 2.0);
        for (value, col) in [
            (t_start, "t_start"),
            (t_end, "t_end"),
            (f_low, "f_low"),
            (f_high, "f_high"),
        ] {
            if !value.is_finite() {
                return Err(parse_at(
                    name,
                    line,
                    Some(col),
                    format!("derived value {value} is not finite"),
                ));
            }
        }
        // Times are stored as integer ns: beyond ±9e9 s they would wrap.
        for (value, col) in [(time, "time"), (t_start, "t_start"), (t_end, "t_end")] {
            if !crate::catalogue::gps_ok(value) {
                return Err(parse_at(
                    name,
                    line,
                    Some(col),
                    crate::catalogue::gps_range_message(value),
                ));
            }
        }
        if t_start > time {
            return Err(parse_at(
                name,
                line,
                Some("t_start"),
                format!("{t_start} is after the peak time {time}"),
            ));
        }
        if t_end < time {
            return Err(parse_at(
                name,
                line,
                Some("t_end"),
                format!("{t_end} is before the peak time {time}"),
            ));
        }
        if f_low < 0.0 {
            let col = if fl_col.is_some() {
                "f_low"
            } else {
                "bandwidth"
            };
            return Err(parse_at(
                name,
                line,
                Some(col),
                format!("lower frequency edge {f_low} Hz is negative"),
            ));
        }
        if f_low > freq {
            return Err(parse_at(
                name,
                line,
                Some("f_low"),
                format!("{f_low} is above the frequency {freq}"),
            ));
        }
        if f_high < freq {
            return Err(parse_at(
                name,
                line,
                Some("f_high"),
                format!("{f_high} is below the frequency {freq}"),
            ));
        }
        let bandwidth = bw.or(match (fl_col, fh_col) {
            (Some(lo), Some(hi)) => Some(hi - lo),
            _ => None,
        });
        let q = match get(c_q, "q")? {
            Some(q) if q <= 0.0 => {
                return Err(parse_at(name, line, Some("q"), format!("{q} must be > 0")))
            }
            Some(q) => q,
            None => match bandwidth {
                Some(b) if b > 0.0 && (freq / b).is_finite() => freq / b,
                Some(b) if b > 0.0 => {
                    return Err(parse_at(
                        name,
                        line,
                        Some("bandwidth"),
                        format!("{b} Hz is too small to derive q"),
                    ))
                }
                _ => f64::NAN,
            },
        };
        let energy = match get(c_energy, "energy")? {
            Some(z) if z <= 0.0 => {
                return Err(parse_at(
                    name,
                    line,
                    Some("energy"),
                    format!("{z} must be > 0"),
                ))
            }
            Some(z) => z,
            None => energy_from_snr(snr),
        };
        if !energy.is_finite() {
            return Err(parse_at(
                name,
                line,
                Some("snr"),
                format!("{snr} is too large (energy 1 + snr²/2 overflows)"),
            ));
        }
        let channel = match c_channel {
            None => None,
            Some(c) => match rec.get(c).map(str::trim) {
                Some(ch) if !ch.is_empty() => Some(ch.to_string()),
                _ => return Err(parse_at(name, line, Some("channel"), "empty cell")),
            },
        };
        out.push((
            channel,
            Trigger {
                t_peak: time,
                t_start,
                t_end,
                f_peak: freq,
                f_low,
                f_high,
                snr,
                snr_eq: snr,
                q,
                energy,
            },
        ));
        Ok(())
    })?;
    Ok(out)
}

/// Read an injections CSV (a `time` column) \[GPS s\].
///
/// # Errors
/// An unreadable file, or see [`parse_injections`].
pub fn read_injections(path: &Path) -> Result<Vec<f64>> {
    parse_injections(&read_text_input(path)?, &path.display().to_string())
}

/// Parse an injections CSV: a header row with a `time` column \[GPS s\]
/// (other columns ignored). Times are returned sorted.
///
/// # Errors
/// `name: ...` for a missing header or `time` column; `name:line: column
/// 'time': ...` for an empty, non-numeric or non-finite cell.
pub fn parse_injections(bytes: &[u8], name: &str) -> Result<Vec<f64>> {
    let mut table = Table::new(bytes, name)?;
    let c_time = table.require("time")?;
    let mut out = Vec::new();
    table.for_each(|rec, line| {
        let t = cell(rec, Some(c_time), "time", name, line)?
            .ok_or_else(|| parse_at(name, line, Some("time"), "empty cell"))?;
        if !crate::catalogue::gps_ok(t) {
            return Err(parse_at(
                name,
                line,
                Some("time"),
                crate::catalogue::gps_range_message(t),
            ));
        }
        out.push(t);
        Ok(())
    })?;
    out.sort_by(f64::total_cmp);
    Ok(out)
}
