//! NumPy `.npy` reader (1-D, little-endian float32/float64, format v1/v2/v3)
//! that reads ranges of samples without loading the file whole.
//!
//! The format (NumPy's `numpy/lib/format.py`, "NPY format" NEP 1): the magic
//! string `\x93NUMPY`, one byte major and one byte minor version, the header
//! length (u16 little-endian for 1.0, u32 for 2.0 and 3.0), then the header:
//! a Python dict literal with the keys `descr`, `fortran_order` and `shape`,
//! padded with spaces and ended by `\n`. Version 3.0 headers are UTF-8, older
//! ones Latin-1. The raw samples follow the header.
//!
//! Only 1-D, C-order, non-empty arrays of `<f4` or `<f8` are accepted; every
//! other file gets a one-line error naming the file and what is wrong.
use crate::segments::{Segment, SegmentList};
use anyhow::{anyhow, bail, Context};
use std::fs::File;
use std::os::unix::fs::FileExt;
use std::path::{Path, PathBuf};

/// Element type of a `.npy` file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NpyDtype {
    /// `<f4`
    F32,
    /// `<f8`
    F64,
}

impl NpyDtype {
    /// Bytes per sample.
    pub fn item_size(self) -> usize {
        match self {
            NpyDtype::F32 => 4,
            NpyDtype::F64 => 8,
        }
    }
}

/// A parsed and validated `.npy` header.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct NpyHeader {
    /// Format version `(major, minor)`.
    pub version: (u8, u8),
    /// Element type.
    pub dtype: NpyDtype,
    /// Number of samples.
    pub len: usize,
    /// Byte offset of the first sample.
    pub data_offset: u64,
}

impl NpyHeader {
    /// Total file size \[bytes\] this header implies (header + samples).
    pub fn expected_file_len(&self) -> Option<u64> {
        (self.len as u64)
            .checked_mul(self.dtype.item_size() as u64)?
            .checked_add(self.data_offset)
    }
}

/// Largest header accepted \[bytes\]: a 1-D float header is < 128 bytes, so
/// anything near this is a corrupt length field, not a real header.
const MAX_HEADER_LEN: usize = 1 << 20;

/// Samples per chunk in [`NpyReader::valid_stretches`] (about 8 MB of f64).
pub const STRETCH_CHUNK_SAMPLES: usize = 1 << 20;

/// Samples per positional read in [`NpyReader::read_f64`].
const READ_CHUNK_SAMPLES: usize = 1 << 16;

/// Parse and validate a `.npy` header from the first bytes of a file.
///
/// `bytes` must hold at least the whole header (it may hold more, e.g. the
/// whole file). Errors are one line and do not name a file (callers add it).
///
/// # Errors
/// Bad magic, unsupported version, a header that is not a valid dict literal
/// with exactly `descr`/`fortran_order`/`shape`, a dtype other than `<f4`/`<f8`,
/// Fortran order, a shape other than 1-D, or zero length.
pub fn parse_header(bytes: &[u8]) -> anyhow::Result<NpyHeader> {
    const MAGIC: &[u8] = b"\x93NUMPY";
    if bytes.len() < MAGIC.len() || &bytes[..MAGIC.len()] != MAGIC {
        bail!("not a .npy file (bad magic string, expected \\x93NUMPY)");
    }
    if bytes.len() < 8 {
        bail!("corrupt header: file ends inside the version bytes");
    }
    let version = (bytes[6], bytes[7]);
    let (len_bytes, text_start) = match version {
        (1, 0) => (2, 10),
        (2, 0) | (3, 0) => (4, 12),
        (a, b) => bail!("unsupported .npy format version {a}.{b} (supported: 1.0, 2.0, 3.0)"),
    };
    if bytes.len() < text_start {
        bail!("corrupt header: file ends inside the header length field");
    }
    let header_len = if len_bytes == 2 {
        u16::from_le_bytes([bytes[8], bytes[9]]) as usize
    } else {
        u32::from_le_bytes([bytes[8], bytes[9], bytes[10], bytes[11]]) as usize
    };
    if header_len > MAX_HEADER_LEN {
        bail!("corrupt header: header length {header_len} bytes is implausibly large");
    }
    let text_end = text_start + header_len;
    if bytes.len() < text_end {
        bail!(
            "corrupt header: header claims {header_len} bytes but the file ends after {}",
            bytes.len() - text_start
        );
    }
    let raw = &bytes[text_start..text_end];
    let text: String = if version.0 == 3 {
        std::str::from_utf8(raw)
            .map_err(|_| anyhow!("corrupt header: version 3.0 header is not valid UTF-8"))?
            .to_owned()
    } else {
        // Latin-1: every byte is one code point.
        raw.iter().map(|&b| b as char).collect()
    };
    let dict = parse_dict(&text).map_err(|e| anyhow!("corrupt header: {e}"))?;

    let mut descr = None;
    let mut fortran = None;
    let mut shape = None;
    for (key, value) in dict {
        let slot_taken = match key.as_str() {
            "descr" => descr.replace(value).is_some(),
            "fortran_order" => fortran.replace(value).is_some(),
            "shape" => shape.replace(value).is_some(),
            other => bail!("corrupt header: unexpected key '{other}' in header dict"),
        };
        if slot_taken {
            bail!("corrupt header: key '{key}' appears twice");
        }
    }
    let descr = descr.ok_or_else(|| anyhow!("corrupt header: missing key 'descr'"))?;
    let fortran = fortran.ok_or_else(|| anyhow!("corrupt header: missing key 'fortran_order'"))?;
    let shape = shape.ok_or_else(|| anyhow!("corrupt header: missing key 'shape'"))?;

    let dtype = match descr {
        Value::Str(s) => dtype_from_descr(&s)?,
        _ => bail!("unsupported dtype: structured or non-string 'descr' (need '<f4' or '<f8')"),
    };
    match fortran {
        Value::Bool(false) => {}
        Value::Bool(true) => {
            bail!("Fortran-order arrays are not supported (need fortran_order: False)")
        }
        _ => bail!("corrupt header: 'fortran_order' must be True or False"),
    }
    let dims = match shape {
        Value::Tuple(items) => items
            .into_iter()
            .map(|v| match v {
                Value::Int(n) => Ok(n),
                _ => Err(anyhow!(
                    "corrupt header: 'shape' must be a tuple of integers"
                )),
            })
            .collect::<anyhow::Result<Vec<u64>>>()?,
        _ => bail!("corrupt header: 'shape' must be a tuple"),
    };
    let len = match dims.as_slice() {
        [n] => *n,
        [] => bail!("0-D (scalar) array: need a 1-D array of samples"),
        _ => bail!(
            "{}-D array with shape {dims:?}: need a 1-D array of samples",
            dims.len()
        ),
    };
    if len == 0 {
        bail!("zero-length array: no samples");
    }
    let len = usize::try_from(len)
        .map_err(|_| anyhow!("corrupt header: length {len} does not fit in memory addresses"))?;
    let header = NpyHeader {
        version,
        dtype,
        len,
        data_offset: text_end as u64,
    };
    if header.expected_file_len().is_none() {
        bail!("corrupt header: length {len} overflows the file size");
    }
    Ok(header)
}

/// Map a `descr` string to a supported dtype, or explain why not.
fn dtype_from_descr(descr: &str) -> anyhow::Result<NpyDtype> {
    match descr {
        "<f4" => return Ok(NpyDtype::F32),
        "<f8" => return Ok(NpyDtype::F64),
        _ => {}
    }
    let mut chars = descr.chars();
    let (order, kind) = match (chars.next(), chars.next()) {
        (Some(o @ ('<' | '>' | '|' | '=')), Some(k)) => (o, k),
        (Some(k), _) => ('=', k),
        _ => bail!("unsupported dtype '' (need '<f4' or '<f8')"),
    };
    let what = match kind {
        'i' | 'u' => "integer dtype",
        'c' => "complex dtype",
        'b' | '?' => "boolean dtype",
        'f' if order == '>' => "big-endian dtype",
        'f' => "unsupported float width or byte order",
        _ => "unsupported dtype",
    };
    bail!("{what} '{descr}' (need little-endian float '<f4' or '<f8')")
}

/// A value of the tiny Python-literal subset used in `.npy` headers.
#[derive(Debug, Clone, PartialEq)]
enum Value {
    Str(String),
    Bool(bool),
    Int(u64),
    Tuple(Vec<Value>),
    /// A list (structured dtypes use lists of tuples).
    List(Vec<Value>),
}

/// Recursive-descent parser over the header text.
struct Lexer<'a> {
    chars: std::iter::Peekable<std::str::CharIndices<'a>>,
    depth: usize,
}

impl Lexer<'_> {
    fn skip_ws(&mut self) {
        while matches!(self.chars.peek(), Some((_, c)) if c.is_whitespace()) {
            self.chars.next();
        }
    }

    fn peek(&mut self) -> Option<char> {
        self.skip_ws();
        self.chars.peek().map(|&(_, c)| c)
    }

    fn expect(&mut self, want: char) -> Result<(), String> {
        match self.peek() {
            Some(c) if c == want => {
                self.chars.next();
                Ok(())
            }
            Some(c) => Err(format!("expected '{want}', found '{c}'")),
            None => Err(format!("expected '{want}', found end of header")),
        }
    }

    fn string(&mut self) -> Result<String, String> {
        let quote = match self.chars.next() {
            Some((_, q @ ('\'' | '"'))) => q,
            _ => return Err("expected a quoted string".into()),
        };
        let mut s = String::new();
        loop {
            match self.chars.next() {
                Some((_, c)) if c == quote => return Ok(s),
                Some((_, '\\')) => match self.chars.next() {
                    Some((_, c)) => s.push(c),
                    None => return Err("unterminated string".into()),
                },
                Some((_, '\n')) | None => return Err("unterminated string".into()),
                Some((_, c)) => s.push(c),
            }
        }
    }

    fn value(&mut self) -> Result<Value, String> {
        self.depth += 1;
        if self.depth > 32 {
            return Err("nesting too deep".into());
        }
        let v = match self.peek() {
            Some('\'' | '"') => Value::Str(self.string()?),
            Some('(') => {
                self.chars.next();
                Value::Tuple(self.sequence(')')?)
            }
            Some('[') => {
                self.chars.next();
                Value::List(self.sequence(']')?)
            }
            Some(c) if c.is_ascii_alphanumeric() || c == '_' || c == '-' => {
                let mut word = String::new();
                while let Some(&(_, c)) = self.chars.peek() {
                    if c.is_ascii_alphanumeric() || c == '_' || c == '-' {
                        word.push(c);
                        self.chars.next();
                    } else {
                        break;
                    }
                }
                match word.as_str() {
                    "True" => Value::Bool(true),
                    "False" => Value::Bool(false),
                    w if w.bytes().all(|b| b.is_ascii_digit()) => Value::Int(
                        w.parse()
                            .map_err(|_| format!("integer '{w}' is too large"))?,
                    ),
                    w => return Err(format!("unexpected token '{w}'")),
                }
            }
            Some(c) => return Err(format!("unexpected character '{c}'")),
            None => return Err("unexpected end of header".into()),
        };
        self.depth -= 1;
        Ok(v)
    }

    /// Items up to `close`, comma-separated, trailing comma allowed.
    fn sequence(&mut self, close: char) -> Result<Vec<Value>, String> {
        let mut items = Vec::new();
        loop {
            if self.peek() == Some(close) {
                self.chars.next();
                return Ok(items);
            }
            items.push(self.value()?);
            match self.peek() {
                Some(',') => {
                    self.chars.next();
                }
                Some(c) if c == close => {}
                Some(c) => return Err(format!("expected ',' or '{close}', found '{c}'")),
                None => return Err(format!("expected '{close}', found end of header")),
            }
        }
    }
}

/// Parse `{'key': value, ...}` followed only by whitespace.
fn parse_dict(text: &str) -> Result<Vec<(String, Value)>, String> {
    let mut lx = Lexer {
        chars: text.char_indices().peekable(),
        depth: 0,
    };
    lx.expect('{')?;
    let mut entries = Vec::new();
    loop {
        match lx.peek() {
            Some('}') => {
                lx.chars.next();
                break;
            }
            Some('\'' | '"') => {}
            Some(c) => return Err(format!("expected a quoted key or '}}', found '{c}'")),
            None => return Err("header dict is not closed".into()),
        }
        let key = lx.string()?;
        lx.expect(':')?;
        let value = lx.value()?;
        entries.push((key, value));
        match lx.peek() {
            Some(',') => {
                lx.chars.next();
            }
            Some('}') => {}
            Some(c) => return Err(format!("expected ',' or '}}', found '{c}'")),
            None => return Err("header dict is not closed".into()),
        }
    }
    if let Some(c) = lx.peek() {
        return Err(format!("unexpected '{c}' after the header dict"));
    }
    Ok(entries)
}

/// An open `.npy` file.
#[derive(Debug)]
pub struct NpyReader {
    /// Element type.
    pub dtype: NpyDtype,
    /// Number of samples.
    pub len: usize,
    path: PathBuf,
    file: File,
    data_offset: u64,
}

impl NpyReader {
    /// Open and validate the header (and that the file size matches it).
    ///
    /// # Errors
    /// A one-line message naming the file: missing or unreadable file, bad
    /// magic or corrupt header, unsupported version, dtype, order or shape,
    /// zero length, or a file shorter (truncated) or longer (trailing bytes)
    /// than the header implies.
    pub fn open(path: &Path) -> crate::Result<NpyReader> {
        use crate::Error;
        let named = |e: anyhow::Error| Error::parse(path, e.to_string());
        let file = File::open(path).map_err(|e| Error::io(path, "cannot open", e))?;
        let file_len = file
            .metadata()
            .map_err(|e| Error::io(path, "cannot stat", e))?
            .len();
        // Read the fixed prefix, then exactly the header the prefix announces.
        let mut prefix = vec![0u8; file_len.min(12) as usize];
        file.read_exact_at(&mut prefix, 0)
            .map_err(|e| Error::io(path, "cannot read header", e))?;
        let wanted = match (prefix.len(), prefix.get(6)) {
            (10.., Some(1)) => 10 + u16::from_le_bytes([prefix[8], prefix[9]]) as usize,
            (12.., Some(2 | 3)) => {
                12 + u32::from_le_bytes([prefix[8], prefix[9], prefix[10], prefix[11]]) as usize
            }
            _ => prefix.len(),
        };
        let wanted = wanted.min(12 + MAX_HEADER_LEN + 1).min(file_len as usize);
        let mut head = vec![0u8; wanted];
        file.read_exact_at(&mut head, 0)
            .map_err(|e| Error::io(path, "cannot read header", e))?;
        let header = parse_header(&head).map_err(named)?;
        check_file_len(&header, file_len).map_err(named)?;
        Ok(NpyReader {
            dtype: header.dtype,
            len: header.len,
            path: path.to_path_buf(),
            file,
            data_offset: header.data_offset,
        })
    }

    /// The file this reader reads.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Read samples `[start, start + out.len())` as f64 into `out` (f32
    /// samples are widened exactly). Only that byte range is read.
    ///
    /// # Errors
    /// A range beyond the end of the array, or an I/O error; both name the file.
    pub fn read_f64(&self, start: usize, out: &mut [f64]) -> anyhow::Result<()> {
        let end = start.checked_add(out.len()).filter(|&e| e <= self.len);
        if end.is_none() {
            bail!(
                "{}: requested samples [{start}, {}) but the file holds {}",
                self.path.display(),
                start as u128 + out.len() as u128,
                self.len
            );
        }
        let item = self.dtype.item_size();
        let mut buf = vec![0u8; out.len().min(READ_CHUNK_SAMPLES) * item];
        for (k, chunk) in out.chunks_mut(READ_CHUNK_SAMPLES).enumerate() {
            let first = start + k * READ_CHUNK_SAMPLES;
            let bytes = &mut buf[..chunk.len() * item];
            let offset = self.data_offset + (first as u64) * item as u64;
            self.file.read_exact_at(bytes, offset).with_context(|| {
                format!(
                    "{}: reading samples from index {first}",
                    self.path.display()
                )
            })?;
            match self.dtype {
                NpyDtype::F64 => {
                    for (x, b) in chunk.iter_mut().zip(bytes.chunks_exact(8)) {
                        *x = f64::from_le_bytes(b.try_into().expect("8-byte chunk"));
                    }
                }
                NpyDtype::F32 => {
                    for (x, b) in chunk.iter_mut().zip(bytes.chunks_exact(4)) {
                        *x = f32::from_le_bytes(b.try_into().expect("4-byte chunk")) as f64;
                    }
                }
            }
        }
        Ok(())
    }

    /// Time covered by finite samples: sample `i` covers
    /// `[start_gps + i / rate_hz, start_gps + (i + 1) / rate_hz)`; NaN and ±Inf
    /// samples are dropouts. Streams the file in chunks of
    /// [`STRETCH_CHUNK_SAMPLES`], so memory stays bounded.
    ///
    /// # Errors
    /// A rate that is not finite and > 0, a non-finite start, an I/O error,
    /// or a channel with no finite sample at all; all name the file.
    pub fn valid_stretches(&self, rate_hz: f64, start_gps: f64) -> anyhow::Result<SegmentList> {
        self.valid_stretches_chunked(rate_hz, start_gps, STRETCH_CHUNK_SAMPLES)
    }

    /// [`NpyReader::valid_stretches`] with an explicit chunk length (samples,
    /// ≥ 1); the result does not depend on it. Useful to test chunk edges.
    ///
    /// # Errors
    /// As [`NpyReader::valid_stretches`], and a zero chunk length.
    pub fn valid_stretches_chunked(
        &self,
        rate_hz: f64,
        start_gps: f64,
        chunk_samples: usize,
    ) -> anyhow::Result<SegmentList> {
        if !(rate_hz.is_finite() && rate_hz > 0.0) {
            bail!(
                "{}: sample rate {rate_hz} Hz must be finite and > 0",
                self.path.display()
            );
        }
        if !start_gps.is_finite() {
            bail!(
                "{}: start time {start_gps} must be finite",
                self.path.display()
            );
        }
        if chunk_samples == 0 {
            bail!(
                "{}: chunk length must be at least 1 sample",
                self.path.display()
            );
        }
        let t_of = |i: usize| start_gps + i as f64 / rate_hz;
        if !t_of(self.len).is_finite() {
            bail!(
                "{}: end time of {} samples at {rate_hz} Hz from {start_gps} s is not finite",
                self.path.display(),
                self.len
            );
        }
        let runs = finite_runs(
            self.len,
            chunk_samples,
            |first, buf| self.read_f64(first, buf),
            |_| {},
        )?;
        let segs: Vec<Segment> = runs
            .iter()
            .map(|&(a, b)| Segment::new(t_of(a), t_of(b)))
            .collect();
        if segs.is_empty() {
            bail!(
                "{}: no finite samples (all {} samples are NaN or Inf)",
                self.path.display(),
                self.len
            );
        }
        Ok(SegmentList::from_segments(segs))
    }
}

/// Stream `len` samples in chunks of `chunk` samples (≥ 1) through `read`
/// (`read(first, buf)` fills `buf` from sample `first`) and return the runs
/// of finite samples as index ranges `[start, end)`; NaN and ±Inf end a run.
/// Each chunk is also handed to `each` (to hash it, say), in order.
///
/// # Errors
/// Whatever `read` returns.
pub fn finite_runs(
    len: usize,
    chunk: usize,
    mut read: impl FnMut(usize, &mut [f64]) -> anyhow::Result<()>,
    mut each: impl FnMut(&[f64]),
) -> anyhow::Result<Vec<(usize, usize)>> {
    let mut runs = FiniteRuns::default();
    let mut buf = vec![0.0f64; chunk.max(1).min(len)];
    let mut first = 0;
    while first < len {
        let n = buf.len().min(len - first);
        read(first, &mut buf[..n])?;
        each(&buf[..n]);
        runs.feed(first, &buf[..n]);
        first += n;
    }
    Ok(runs.finish(len))
}

/// The runs of finite samples of a series fed chunk by chunk, in order
/// (see [`finite_runs`]).
#[derive(Debug, Default)]
pub struct FiniteRuns {
    runs: Vec<(usize, usize)>,
    run_start: Option<usize>,
}

impl FiniteRuns {
    /// The samples from index `first` (the next after the last chunk fed).
    pub fn feed(&mut self, first: usize, chunk: &[f64]) {
        // Most data are finite: a sub-chunk that continues an open run and
        // is all finite changes nothing, and that test vectorises.
        for (c, sub) in chunk.chunks(64).enumerate() {
            if self.run_start.is_some() && sub.iter().fold(true, |a, x| a & x.is_finite()) {
                continue;
            }
            let base = first + 64 * c;
            for (k, x) in sub.iter().enumerate() {
                match (x.is_finite(), self.run_start) {
                    (true, None) => self.run_start = Some(base + k),
                    (false, Some(s)) => {
                        self.runs.push((s, base + k));
                        self.run_start = None;
                    }
                    _ => {}
                }
            }
        }
    }

    /// The runs ended so far (a non-finite sample followed them), as index
    /// ranges `[start, end)`.
    pub fn closed(&self) -> &[(usize, usize)] {
        &self.runs
    }

    /// Start of the run still open (the last sample fed was finite).
    pub fn open_start(&self) -> Option<usize> {
        self.run_start
    }

    /// The runs as index ranges `[start, end)`, for a series of `len`
    /// samples (all fed).
    pub fn finish(mut self, len: usize) -> Vec<(usize, usize)> {
        if let Some(s) = self.run_start {
            self.runs.push((s, len));
        }
        self.runs
    }
}

/// The file size must equal header + samples exactly.
fn check_file_len(header: &NpyHeader, file_len: u64) -> anyhow::Result<()> {
    let expected = header
        .expected_file_len()
        .ok_or_else(|| anyhow!("corrupt header: length overflows the file size"))?;
    if file_len < expected {
        bail!(
            "truncated: header declares {} samples ({expected} bytes in all) but the file has {file_len} bytes",
            header.len
        );
    }
    if file_len > expected {
        bail!(
            "{} trailing bytes after the {} samples the header declares",
            file_len - expected,
            header.len
        );
    }
    Ok(())
}

/// Write a 1-D little-endian `.npy` file (format 1.0) of f64 (`<f8`) or,
/// with `as_f32`, f32 (`<f4`) samples.
pub fn write_npy(path: &Path, data: &[f64], as_f32: bool) -> anyhow::Result<()> {
    use std::io::Write;
    let descr = if as_f32 { "<f4" } else { "<f8" };
    let mut header = format!(
        "{{'descr': '{descr}', 'fortran_order': False, 'shape': ({},), }}",
        data.len()
    );
    // Magic (6) + version (2) + header length (2) + header + '\n' is a multiple of 64.
    let unpadded = 10 + header.len() + 1;
    header.push_str(&" ".repeat((64 - unpadded % 64) % 64));
    header.push('\n');
    let file =
        std::fs::File::create(path).with_context(|| format!("creating {}", path.display()))?;
    let mut w = std::io::BufWriter::new(file);
    w.write_all(b"\x93NUMPY\x01\x00")?;
    w.write_all(&(header.len() as u16).to_le_bytes())?;
    w.write_all(header.as_bytes())?;
    if as_f32 {
        for &x in data {
            w.write_all(&(x as f32).to_le_bytes())?;
        }
    } else {
        for &x in data {
            w.write_all(&x.to_le_bytes())?;
        }
    }
    w.flush()
        .with_context(|| format!("writing {}", path.display()))?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::finite_runs;

    /// Finite runs found one sample at a time, the plain way.
    fn runs_by_hand(x: &[f64]) -> Vec<(usize, usize)> {
        let mut out = Vec::new();
        let mut start = None;
        for (i, v) in x.iter().enumerate() {
            match (v.is_finite(), start) {
                (true, None) => start = Some(i),
                (false, Some(s)) => {
                    out.push((s, i));
                    start = None;
                }
                _ => {}
            }
        }
        if let Some(s) = start {
            out.push((s, x.len()));
        }
        out
    }

    #[test]
    fn runs_match_a_sample_by_sample_scan_for_any_chunking() {
        // Dropouts of assorted lengths at positions that straddle the
        // 64-sample sub-chunks and the read chunks.
        let mut x = vec![1.0; 1000];
        for &(a, b) in &[
            (0, 2),
            (63, 65),
            (127, 128),
            (200, 330),
            (511, 512),
            (640, 641),
            (998, 1000),
        ] {
            for v in &mut x[a..b] {
                *v = f64::NAN;
            }
        }
        x[700] = f64::INFINITY;
        let want = runs_by_hand(&x);
        for chunk in [1, 7, 63, 64, 65, 100, 1000, 4096] {
            let got = finite_runs(
                x.len(),
                chunk,
                |first, buf| {
                    buf.copy_from_slice(&x[first..first + buf.len()]);
                    Ok(())
                },
                |_| {},
            )
            .unwrap();
            assert_eq!(got, want, "chunk {chunk}");
        }
    }
}
