//! Building a bundle from data files (`glitchbook bundle`): inspect frame,
//! HDF5 and `.npy` files, group what they hold by channel, and write
//! `bundle.toml`.
//!
//! - A frame file (`.gwf`) lists its channels in its table of contents;
//!   each channel's rate and start come from its first frame (one small
//!   read per frame for the first file that holds it; other files are
//!   placed by their frames' start times).
//! - An HDF5 file (`.h5`, `.hdf5`, `.hdf`) holds one series in the common
//!   open-data layout; its channel is named after the file (the part before
//!   `-GPS-DUR` of the usual `OBS-DESC-GPS-DUR` name, else the stem).
//! - A `.npy` file has no time: it must be named `NAME-GPS-DUR.npy`; the
//!   channel is `NAME`, starts at `GPS` and its rate is samples / `DUR`.
//!
//! A channel in several files gets them all, in time order; a channel whose
//! files disagree on the rate is refused naming the file.
use super::bundle::DataFormat;
use super::source::{glob_files, name_span, Hdf5Names};
use anyhow::{anyhow, bail, Context, Result};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// A channel found in the inputs.
#[derive(Debug, Clone, PartialEq)]
pub struct FoundChannel {
    /// Channel name.
    pub name: String,
    /// Storage format.
    pub format: DataFormat,
    /// Sample rate \[Hz\].
    pub rate_hz: f64,
    /// GPS time of the first sample of the first file \[s\].
    pub start_gps: f64,
    /// Files holding it (absolute), in time order.
    pub files: Vec<PathBuf>,
    /// Whether it was named with `--target`.
    pub target: bool,
}

/// Extensions looked at in a directory.
const DATA_EXTENSIONS: [&str; 5] = ["gwf", "h5", "hdf5", "hdf", "npy"];

fn extension(p: &Path) -> String {
    p.extension()
        .and_then(|e| e.to_str())
        .unwrap_or("")
        .to_ascii_lowercase()
}

/// The data files named by the inputs: files as given, every data file
/// (by extension) of a directory, the matches of a pattern with `*`/`?`.
///
/// # Errors
/// A missing input, an unreadable directory, a pattern matching nothing.
pub fn data_files(inputs: &[PathBuf]) -> Result<Vec<PathBuf>> {
    let mut out = Vec::new();
    for inp in inputs {
        let s = inp.to_string_lossy();
        if s.contains(['*', '?']) {
            let found = glob_files(inp)?;
            if found.is_empty() {
                bail!("{s}: matches no file");
            }
            out.extend(found);
        } else if inp.is_dir() {
            let mut found: Vec<PathBuf> = std::fs::read_dir(inp)
                .with_context(|| format!("{}: cannot list", inp.display()))?
                .filter_map(|e| e.ok().map(|e| e.path()))
                .filter(|p| p.is_file() && DATA_EXTENSIONS.contains(&extension(p).as_str()))
                .collect();
            if found.is_empty() {
                bail!(
                    "{}: holds no data file (.gwf, .h5/.hdf5/.hdf or .npy)",
                    inp.display()
                );
            }
            found.sort();
            out.extend(found);
        } else if inp.is_file() {
            out.push(inp.clone());
        } else {
            bail!("{}: no such file or directory", inp.display());
        }
    }
    let mut abs: Vec<PathBuf> = out
        .into_iter()
        .map(|p| std::path::absolute(&p).unwrap_or(p))
        .collect();
    abs.sort();
    abs.dedup();
    Ok(abs)
}

/// One file's contribution: (channel, format, rate, start of its first
/// sample in this file).
type Seen = (String, DataFormat, f64, f64);

fn inspect_gwf(path: &Path, offsets: &mut BTreeMap<String, f64>) -> Result<Vec<Seen>> {
    let f = super::gwf::GwfFile::open(path)?;
    let Some(first) = f.frames().first() else {
        bail!("{}: holds no frame", path.display());
    };
    let frame0 = first.start_gps();
    let mut out = Vec::new();
    for info in f.channels()? {
        // The channel's offset from its frame start, measured once.
        let off = match offsets.get(&info.name) {
            Some(&o) => o,
            None => {
                let ch = f.channel(&info.name)?;
                let o = crate::scan::SampleSource::start_gps(&ch) - frame0;
                offsets.insert(info.name.clone(), o);
                o
            }
        };
        out.push((info.name, DataFormat::Gwf, info.rate_hz, frame0 + off));
    }
    Ok(out)
}

#[cfg(feature = "hdf5")]
fn inspect_hdf5(path: &Path) -> Result<Vec<Seen>> {
    use crate::scan::SampleSource;
    let d = Hdf5Names::default();
    let s = super::hdf5::Hdf5Series::open(path, &super::hdf5::Hdf5Layout::default())?;
    let name = channel_from_name(path);
    Ok(vec![(
        name,
        DataFormat::Hdf5 {
            dataset: d.dataset,
            start_attr: d.start_attr,
            spacing_attr: d.spacing_attr,
        },
        s.rate_hz(),
        s.start_gps(),
    )])
}

#[cfg(not(feature = "hdf5"))]
fn inspect_hdf5(path: &Path) -> Result<Vec<Seen>> {
    let _ = Hdf5Names::default();
    bail!(
        "{}: HDF5 support is not built in (cargo feature `hdf5`)",
        path.display()
    )
}

/// The channel a file is named after: the part before `-GPS-DUR`, else
/// the stem.
fn channel_from_name(path: &Path) -> String {
    let stem = path
        .file_stem()
        .and_then(|s| s.to_str())
        .unwrap_or("channel")
        .to_string();
    if name_span(path).is_some() {
        let mut parts: Vec<&str> = stem.rsplitn(3, '-').collect();
        if let Some(head) = parts.pop() {
            return head.to_string();
        }
    }
    stem
}

fn inspect_npy(path: &Path) -> Result<Vec<Seen>> {
    let Some((gps, dur)) = name_span(path) else {
        bail!(
            "{}: a .npy file does not say its rate and start: name it NAME-GPS-DUR.npy \
             (GPS start and duration in s) or write bundle.toml by hand",
            path.display()
        );
    };
    let r = super::NpyReader::open(path)?;
    Ok(vec![(
        channel_from_name(path),
        DataFormat::Npy,
        r.len as f64 / dur,
        gps,
    )])
}

/// Inspect the data files and group them by channel (channels in name
/// order, each channel's files in time order). Channels named in
/// `targets` are marked as targets.
///
/// # Errors
/// An unreadable file; a channel whose files disagree on format or rate;
/// a `.npy` channel in several files; a target name found in no file.
pub fn inspect(files: &[PathBuf], targets: &[String]) -> Result<Vec<FoundChannel>> {
    /// Per channel: format, rate and (start, file) of each file.
    type Group = (DataFormat, f64, Vec<(f64, PathBuf)>);
    let mut by_name: BTreeMap<String, Group> = BTreeMap::new();
    let mut offsets = BTreeMap::new();
    for path in files {
        let seen = match extension(path).as_str() {
            "gwf" => inspect_gwf(path, &mut offsets)?,
            "h5" | "hdf5" | "hdf" => inspect_hdf5(path)?,
            "npy" => inspect_npy(path)?,
            other => bail!(
                "{}: unknown data file type .{other} (.gwf, .h5/.hdf5/.hdf or .npy)",
                path.display()
            ),
        };
        for (name, format, rate, start) in seen {
            let e = by_name
                .entry(name.clone())
                .or_insert_with(|| (format.clone(), rate, Vec::new()));
            if e.0 != format {
                bail!(
                    "{}: channel {name} is {} here but {} in an earlier file",
                    path.display(),
                    format.name(),
                    e.0.name()
                );
            }
            if (e.1 - rate).abs() > 1e-9 * rate {
                bail!(
                    "{}: channel {name} has rate {rate} Hz here but {} Hz in {}",
                    path.display(),
                    e.1,
                    e.2[0].1.display()
                );
            }
            e.2.push((start, path.clone()));
        }
    }
    for t in targets {
        if !by_name.contains_key(t) {
            let known: Vec<&str> = by_name.keys().map(String::as_str).take(20).collect();
            bail!(
                "--target {t}: no such channel in the inputs (channels: {}{})",
                known.join(", "),
                if by_name.len() > 20 { ", ..." } else { "" }
            );
        }
    }
    let mut out = Vec::with_capacity(by_name.len());
    for (name, (format, rate_hz, mut files)) in by_name {
        files.sort_by(|a, b| a.0.total_cmp(&b.0));
        if format == DataFormat::Npy && files.len() > 1 {
            bail!(
                "{} and {}: channel {name} is in several .npy files; a .npy channel is one \
                 file (join them, or use frame files)",
                files[0].1.display(),
                files[1].1.display()
            );
        }
        out.push(FoundChannel {
            target: targets.contains(&name),
            start_gps: files[0].0,
            files: files.into_iter().map(|f| f.1).collect(),
            name,
            format,
            rate_hz,
        });
    }
    if out.is_empty() {
        return Err(anyhow!("the inputs hold no channel"));
    }
    Ok(out)
}

#[derive(serde::Serialize)]
struct OutBundle {
    description: String,
    channel: Vec<OutChannel>,
}

#[derive(serde::Serialize)]
struct OutChannel {
    name: String,
    format: String,
    #[serde(skip_serializing_if = "Option::is_none")]
    file: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    dir: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    files: Option<Vec<String>>,
    rate: f64,
    start: f64,
    role: String,
    #[serde(skip_serializing_if = "Option::is_none")]
    dataset: Option<String>,
}

/// A path as written in `bundle.toml`: relative to the bundle directory
/// when inside it, else absolute.
fn shown_path(p: &Path, dir: &Path) -> String {
    match p.strip_prefix(dir) {
        Ok(rel) => rel.display().to_string(),
        Err(_) => p.display().to_string(),
    }
}

/// The text of `bundle.toml` for `channels` in directory `dir` (absolute).
/// A channel whose files are exactly the `.gwf` files of one directory is
/// written with `dir`, one file with `file`, else `files`.
///
/// # Errors
/// A directory that cannot be listed.
pub fn bundle_toml(channels: &[FoundChannel], dir: &Path) -> Result<String> {
    let mut out = Vec::with_capacity(channels.len());
    let mut dir_lists: BTreeMap<PathBuf, Vec<PathBuf>> = BTreeMap::new();
    for c in channels {
        let (mut file, mut dir_s, mut files) = (None, None, None);
        if c.files.len() == 1 {
            file = Some(shown_path(&c.files[0], dir));
        } else {
            let parent = c.files[0].parent().map(Path::to_path_buf);
            let same_parent = parent
                .as_ref()
                .is_some_and(|p| c.files.iter().all(|f| f.parent() == Some(p.as_path())));
            let whole_dir = match (&parent, same_parent && c.format == DataFormat::Gwf) {
                (Some(p), true) => {
                    if !dir_lists.contains_key(p) {
                        dir_lists.insert(p.clone(), glob_files(&p.join("*.gwf"))?);
                    }
                    let mut mine = c.files.clone();
                    mine.sort();
                    dir_lists[p] == mine
                }
                _ => false,
            };
            if whole_dir {
                let p = parent.expect("checked");
                let s = shown_path(&p, dir);
                dir_s = Some(if s.is_empty() { ".".into() } else { s });
            } else {
                files = Some(c.files.iter().map(|f| shown_path(f, dir)).collect());
            }
        }
        let dataset = match &c.format {
            DataFormat::Hdf5 { dataset, .. } => Some(dataset.clone()),
            _ => None,
        };
        out.push(OutChannel {
            name: c.name.clone(),
            format: c.format.name().into(),
            file,
            dir: dir_s,
            files,
            rate: c.rate_hz,
            start: c.start_gps,
            role: if c.target { "target" } else { "aux" }.into(),
            dataset,
        });
    }
    let b = OutBundle {
        description: format!(
            "written by glitchbook bundle {}: {} channels",
            env!("CARGO_PKG_VERSION"),
            out.len()
        ),
        channel: out,
    };
    toml::to_string(&b).context("writing bundle.toml")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn channel_names_from_file_names() {
        assert_eq!(
            channel_from_name(Path::new("/d/AV1-STRAIN-1400000000-4096.hdf5")),
            "AV1-STRAIN"
        );
        assert_eq!(channel_from_name(Path::new("/d/strain.h5")), "strain");
    }
}
