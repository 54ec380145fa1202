//! The channel bundle: a directory with `bundle.toml` and one `.npy` per channel.
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
//! Every error is one line naming `bundle.toml` (with line and column where
//! TOML gives one), the channel (1-based index and name) and the field.
use super::npy::NpyReader;
use super::shown;
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

/// One `[[channel]]` entry of `bundle.toml`, validated.
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelSpec {
    /// Channel name (free-form, unique in the bundle).
    pub name: String,
    /// Absolute path of the `.npy` file.
    pub file: PathBuf,
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
    file: Spanned<String>,
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
        let file_rel = ch.file.get_ref();
        if file_rel.trim().is_empty() {
            return Err(here(ch.file.span(), "file", "is empty".into()));
        }
        if file_rel.chars().any(char::is_control) {
            return Err(here(
                ch.file.span(),
                "file",
                format!("= \"{}\" contains a control character", shown(file_rel)),
            ));
        }
        let joined = dir.join(file_rel);
        let file = std::path::absolute(&joined).unwrap_or(joined);
        if let Some(prev) = channels.iter().position(|c| c.file == file) {
            return Err(here(
                ch.file.span(),
                "file",
                format!("names the same file as channel #{}", prev + 1),
            ));
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
    /// Read and validate `DIR/bundle.toml`, then open every channel's `.npy`
    /// header so a bad file fails before any work starts.
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
            let reader = NpyReader::open(&ch.file).map_err(|e| {
                Error::parse(
                    &toml_path,
                    format!("channel #{} '{}': field 'file': {e}", i + 1, ch.name),
                )
                .in_field("file")
            })?;
            let end = ch.start + reader.len as f64 / ch.rate;
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
