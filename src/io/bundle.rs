//! The channel bundle: a directory with `bundle.toml` describing channels
//! held in `.npy` files (one per channel), frame files (`.gwf`, a channel
//! spanning many files) or HDF5 strain files.
//!
//! ```toml
//! description = "free text for humans (optional, not used by the tool)"
//!
//! [[channel]]
//! name = "AV1:STRAIN"      # free-form, unique in the bundle
//! file = "strain.npy"      # relative to the bundle directory
//! rate = 4096              # samples per second, > 0
//! start = 1400000000.0     # GPS time of the first sample [s]
//! role = "target"          # "target" or "aux"
//! fmin = 20.0              # optional lowest analysed frequency [Hz]
//! fmax = 1000.0            # optional highest analysed frequency [Hz], <= rate/2
//! ```
//!
//! A channel held in frame files names them with `files` (a list; `*` and
//! `?` match within a file name) or `dir` (every `.gwf` in that directory)
//! instead of `file`, and `format = "gwf"`; `rate` and `start` (the first
//! sample of the first file) are checked against the files when the bundle
//! is opened. Each file carries its own start time; time between files is
//! a dropout, like NaN. An HDF5 file takes `format = "hdf5"` and optionally
//! `dataset`, `start_attr` and `spacing_attr` (default: the common
//! open-data layout, [`crate::io::source::DEFAULT_HDF5_DATASET`]). The
//! format defaults to the extension of the (first) file (`.gwf`, `.h5` /
//! `.hdf5` / `.hdf`, else `.npy`). `glitchbook bundle` writes this file from
//! a set of data files.
//!
//! Every error is one line naming `bundle.toml` (with line and column where
//! TOML gives one), the channel (1-based index and name) and the field.
use super::shown;
use crate::scan::SampleSource;
use crate::{Error, Result};
use serde::Deserialize;
use std::path::{Path, PathBuf};
use toml::Spanned;

/// What a channel is for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Role {
    /// The strain (target) channel.
    Target,
    /// An auxiliary sensor.
    Aux,
}

/// How a channel's files are stored.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(tag = "format", rename_all = "lowercase")]
pub enum DataFormat {
    /// One NumPy `.npy` file (1-D float32/float64).
    Npy,
    /// Frame files (`.gwf`); the channel is read by its name.
    Gwf,
    /// HDF5 files: the dataset and the attributes with the GPS time of the
    /// first sample and the sample spacing \[s\].
    Hdf5 {
        /// Dataset path.
        dataset: String,
        /// Attribute of the start time \[GPS s\].
        start_attr: String,
        /// Attribute of the sample spacing \[s\].
        spacing_attr: String,
    },
}

impl DataFormat {
    /// `npy`, `gwf` or `hdf5`.
    pub fn name(&self) -> &'static str {
        match self {
            DataFormat::Npy => "npy",
            DataFormat::Gwf => "gwf",
            DataFormat::Hdf5 { .. } => "hdf5",
        }
    }
}

/// One `[[channel]]` entry of `bundle.toml`, validated.
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelSpec {
    /// Channel name (free-form, unique in the bundle).
    pub name: String,
    /// Absolute path of the (first) file.
    pub file: PathBuf,
    /// Every file holding the channel (absolute; `[file]` for a single
    /// file), in name order; the reader places each by its own start time.
    pub files: Vec<PathBuf>,
    /// How the files are stored.
    pub format: DataFormat,
    /// Sample rate \[Hz\], finite and > 0.
    pub rate: f64,
    /// GPS time of the first sample \[s\], finite.
    pub start: f64,
    /// Target or aux.
    pub role: Role,
    /// Optional lowest analysed frequency \[Hz\].
    pub fmin: Option<f64>,
    /// Optional highest analysed frequency \[Hz\].
    pub fmax: Option<f64>,
}

/// A parsed and validated bundle.
#[derive(Debug, Clone)]
pub struct Bundle {
    /// The bundle directory.
    pub dir: PathBuf,
    /// Channels in file order.
    pub channels: Vec<ChannelSpec>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawBundle {
    #[allow(dead_code)]
    description: Option<String>,
    #[serde(default)]
    channel: Vec<RawChannel>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawChannel {
    name: Spanned<String>,
    file: Option<Spanned<String>>,
    files: Option<Spanned<Vec<String>>>,
    dir: Option<Spanned<String>>,
    format: Option<Spanned<String>>,
    dataset: Option<String>,
    start_attr: Option<String>,
    spacing_attr: Option<String>,
    rate: Spanned<f64>,
    start: Spanned<f64>,
    role: Spanned<String>,
    fmin: Option<Spanned<f64>>,
    fmax: Option<Spanned<f64>>,
}

/// 1-based (line, column) of a byte offset in `text`.
fn line_col(text: &str, offset: usize) -> (usize, usize) {
    let offset = offset.min(text.len());
    let before = &text.as_bytes()[..offset];
    let line = before.iter().filter(|&&b| b == b'\n').count() + 1;
    let line_start = before
        .iter()
        .rposition(|&b| b == b'\n')
        .map_or(0, |p| p + 1);
    let col = String::from_utf8_lossy(&before[line_start..])
        .chars()
        .count()
        + 1;
    (line, col)
}

/// A field's error before it is placed: (span, field, message).
type FieldError = (std::ops::Range<usize>, &'static str, String);

/// The files a channel names with `file`, `files` (globs allowed in the
/// file name) or `dir` (every `.gwf` in it), absolute, in name order, and
/// the span of the field that named them.
fn channel_files(
    ch: &RawChannel,
    dir: &Path,
    name_span: std::ops::Range<usize>,
) -> std::result::Result<(Vec<PathBuf>, std::ops::Range<usize>), FieldError> {
    let given = [ch.file.is_some(), ch.files.is_some(), ch.dir.is_some()];
    if given.iter().filter(|&&g| g).count() != 1 {
        return Err((
            name_span,
            "file",
            "needs exactly one of 'file', 'files' or 'dir'".into(),
        ));
    }
    let abs = |rel: &str| {
        let joined = dir.join(rel);
        std::path::absolute(&joined).unwrap_or(joined)
    };
    let check_text = |field: &'static str, v: &str, span: std::ops::Range<usize>| {
        if v.trim().is_empty() {
            return Err((span, field, "is empty".to_string()));
        }
        if v.chars().any(char::is_control) {
            return Err((
                span,
                field,
                format!("= \"{}\" contains a control character", shown(v)),
            ));
        }
        Ok(())
    };
    if let Some(f) = &ch.file {
        check_text("file", f.get_ref(), f.span())?;
        return Ok((vec![abs(f.get_ref())], f.span()));
    }
    if let Some(list) = &ch.files {
        let mut out = Vec::new();
        for pat in list.get_ref() {
            check_text("files", pat, list.span())?;
            if pat.contains(['*', '?']) {
                let found = super::source::glob_files(&abs(pat))
                    .map_err(|e| (list.span(), "files", e.to_string()))?;
                if found.is_empty() {
                    return Err((
                        list.span(),
                        "files",
                        format!("pattern \"{}\" matches no file", shown(pat)),
                    ));
                }
                out.extend(found);
            } else {
                out.push(abs(pat));
            }
        }
        if out.is_empty() {
            return Err((list.span(), "files", "is an empty list".into()));
        }
        out.sort();
        out.dedup();
        return Ok((out, list.span()));
    }
    let d = ch.dir.as_ref().expect("one of three");
    check_text("dir", d.get_ref(), d.span())?;
    let found = super::source::glob_files(&abs(d.get_ref()).join("*.gwf"))
        .map_err(|e| (d.span(), "dir", e.to_string()))?;
    if found.is_empty() {
        return Err((
            d.span(),
            "dir",
            format!("\"{}\" holds no .gwf file", shown(d.get_ref())),
        ));
    }
    Ok((found, d.span()))
}

/// Parse and validate the text of a `bundle.toml` whose directory is `dir`.
///
/// Checks everything that does not need the `.npy` files (names, roles,
/// rates, start times, frequency limits, unique names, at least one channel).
/// [`Bundle::open`] calls this and then opens each `.npy` header.
///
/// # Errors
/// One line naming `dir/bundle.toml`, the line and column, the channel and
/// the field: TOML syntax, missing or unknown field, unknown role, rate not
/// finite and > 0, start not finite, fmin/fmax not finite and > 0, fmin ≥
/// fmax, fmax above Nyquist (rate/2), an empty or repeated channel name or
/// file, or no channels.
pub fn parse_bundle_toml(text: &str, dir: &Path) -> Result<Bundle> {
    let toml_path = dir.join("bundle.toml");
    let raw: RawBundle = toml::from_str(text).map_err(|e| {
        let msg = e.message().trim().replace('\n', " ");
        match e.span() {
            Some(span) => {
                let (line, col) = line_col(text, span.start);
                Error::parse(&toml_path, msg).at(line as u64, Some(col as u64))
            }
            None => Error::parse(&toml_path, msg),
        }
    })?;
    if raw.channel.is_empty() {
        return Err(Error::parse(
            &toml_path,
            "no channels: add at least one [[channel]] table",
        ));
    }
    let mut channels: Vec<ChannelSpec> = Vec::with_capacity(raw.channel.len());
    for (i, ch) in raw.channel.into_iter().enumerate() {
        let idx = i + 1;
        // `path:line:col: channel #i[ 'name']: field 'f' ...`
        let at = |span: std::ops::Range<usize>, who: &str, field: &str, what: String| {
            let (line, col) = line_col(text, span.start);
            Error::parse(
                &toml_path,
                format!("channel #{idx}{who}: field '{field}' {what}"),
            )
            .at(line as u64, Some(col as u64))
            .in_field(field)
        };
        let name = ch.name.get_ref().trim().to_owned();
        if name.is_empty() {
            return Err(at(ch.name.span(), "", "name", "is empty".into()));
        }
        if name.chars().any(char::is_control) {
            return Err(at(
                ch.name.span(),
                "",
                "name",
                format!("= \"{}\" contains a control character", shown(&name)),
            ));
        }
        let who = format!(" '{name}'");
        let here = |span, field: &str, what: String| at(span, &who, field, what);
        if let Some(prev) = channels.iter().position(|c| c.name == name) {
            return Err(here(
                ch.name.span(),
                "name",
                format!("repeats the name of channel #{}", prev + 1),
            ));
        }
        let (files, where_span) = channel_files(&ch, dir, ch.name.span())
            .map_err(|(span, field, what)| here(span, field, what))?;
        let file = files[0].clone();
        let ext = file
            .extension()
            .and_then(|e| e.to_str())
            .unwrap_or("")
            .to_ascii_lowercase();
        let format_name = match &ch.format {
            Some(f) => f.get_ref().clone(),
            None => match ext.as_str() {
                "gwf" => "gwf".into(),
                "h5" | "hdf5" | "hdf" => "hdf5".into(),
                _ => "npy".into(),
            },
        };
        let format = match format_name.as_str() {
            "npy" => DataFormat::Npy,
            "gwf" => DataFormat::Gwf,
            "hdf5" => {
                let d = super::source::Hdf5Names::default();
                DataFormat::Hdf5 {
                    dataset: ch.dataset.clone().unwrap_or(d.dataset),
                    start_attr: ch.start_attr.clone().unwrap_or(d.start_attr),
                    spacing_attr: ch.spacing_attr.clone().unwrap_or(d.spacing_attr),
                }
            }
            other => {
                let span = ch.format.as_ref().map_or(where_span.clone(), |f| f.span());
                return Err(here(
                    span,
                    "format",
                    format!(
                        "= \"{}\" must be \"npy\", \"gwf\" or \"hdf5\"",
                        shown(other)
                    ),
                ));
            }
        };
        if format == DataFormat::Npy {
            if files.len() > 1 {
                return Err(here(
                    where_span,
                    "files",
                    "names several .npy files: a .npy channel is one file".into(),
                ));
            }
            if let Some(prev) = channels.iter().position(|c| c.file == file) {
                return Err(here(
                    where_span,
                    "file",
                    format!("names the same file as channel #{}", prev + 1),
                ));
            }
        }
        let rate = *ch.rate.get_ref();
        if !(rate.is_finite() && rate > 0.0) {
            return Err(here(
                ch.rate.span(),
                "rate",
                format!("= {rate} must be finite and > 0 [Hz]"),
            ));
        }
        let start = *ch.start.get_ref();
        if !start.is_finite() {
            return Err(here(
                ch.start.span(),
                "start",
                format!("= {start} must be a finite GPS time [s]"),
            ));
        }
        if !crate::catalogue::gps_ok(start) {
            return Err(here(
                ch.start.span(),
                "start",
                format!("= {}", crate::catalogue::gps_range_message(start)),
            ));
        }
        let role = match ch.role.get_ref().as_str() {
            "target" => Role::Target,
            "aux" => Role::Aux,
            other => {
                return Err(here(
                    ch.role.span(),
                    "role",
                    format!("= \"{}\" must be \"target\" or \"aux\"", shown(other)),
                ))
            }
        };
        let nyquist = rate / 2.0;
        let check_f = |f: &Option<Spanned<f64>>, field: &str| -> Result<Option<f64>> {
            let Some(f) = f else { return Ok(None) };
            let v = *f.get_ref();
            if !(v.is_finite() && v > 0.0) {
                return Err(here(
                    f.span(),
                    field,
                    format!("= {v} must be finite and > 0 [Hz]"),
                ));
            }
            if v > nyquist {
                return Err(here(
                    f.span(),
                    field,
                    format!("= {v} Hz is above the Nyquist frequency {nyquist} Hz (rate/2)"),
                ));
            }
            Ok(Some(v))
        };
        let fmin = check_f(&ch.fmin, "fmin")?;
        let fmax = check_f(&ch.fmax, "fmax")?;
        if let (Some(lo), Some(hi), Some(span)) = (fmin, fmax, ch.fmin.as_ref().map(|s| s.span())) {
            if lo >= hi {
                return Err(here(
                    span,
                    "fmin",
                    format!("= {lo} Hz must be below fmax = {hi} Hz"),
                ));
            }
        }
        channels.push(ChannelSpec {
            name,
            file,
            files,
            format,
            rate,
            start,
            role,
            fmin,
            fmax,
        });
    }
    Ok(Bundle {
        dir: dir.to_path_buf(),
        channels,
    })
}

impl Bundle {
    /// Read and validate `DIR/bundle.toml`, then open every channel's files
    /// (headers and frame indexes, no samples) so a bad file fails before
    /// any work starts.
    ///
    /// # Errors
    /// A missing or unreadable `bundle.toml`, anything
    /// [`parse_bundle_toml`] rejects, or a missing or invalid `.npy` file
    /// (named with its channel).
    pub fn open(dir: &Path) -> Result<Bundle> {
        let toml_path = dir.join("bundle.toml");
        let text = match std::fs::read(&toml_path) {
            Ok(bytes) => String::from_utf8(bytes)
                .map_err(|_| Error::parse(&toml_path, "not valid UTF-8 text"))?,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
                return Err(Error::not_found(
                    "bundle",
                    toml_path.display(),
                    format!(
                        "{}: missing: a bundle directory must hold bundle.toml",
                        toml_path.display()
                    ),
                ))
            }
            Err(e) => return Err(Error::io(&toml_path, "cannot read", e)),
        };
        let bundle = parse_bundle_toml(&text, dir)?;
        for (i, ch) in bundle.channels.iter().enumerate() {
            let src = super::source::ChannelSource::open(ch).map_err(|e| {
                Error::parse(
                    &toml_path,
                    format!("channel #{} '{}': field 'file': {e:#}", i + 1, ch.name),
                )
                .in_field("file")
            })?;
            let end = ch.start + src.len() as f64 / ch.rate;
            if !crate::catalogue::gps_ok(end) {
                return Err(Error::parse(
                    &toml_path,
                    format!(
                        "channel #{} '{}': field 'start': the data end at {}",
                        i + 1,
                        ch.name,
                        crate::catalogue::gps_range_message(end)
                    ),
                )
                .in_field("start"));
            }
        }
        Ok(bundle)
    }

    /// The channels with a given role, in file order.
    pub fn with_role(&self, role: Role) -> impl Iterator<Item = &ChannelSpec> {
        self.channels.iter().filter(move |c| c.role == role)
    }
}
