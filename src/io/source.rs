//! A channel's samples from its files: one `.npy`, one HDF5 dataset, or a
//! set of frame (or HDF5) files placed on one sample grid, as one
//! [`SampleSource`].
//!
//! The grid starts at the channel's `start` in `bundle.toml`; each file is
//! placed by its own start time (which must fall on the grid, within 1% of a
//! sample) and must not overlap another. Samples between files read as NaN:
//! dropouts, like NaN in a file. Files are opened once to learn their
//! extent, then reopened on demand when a read needs them (at most
//! [`OPEN_FILES`] kept open), so a channel over thousands of files holds
//! few file handles and reads only the files and ranges asked for.
//!
//! [`FileStamp`] is what a scan records of each file (size, modification
//! time, xxh3-128 of the bytes) so later stages can tell a file changed
//! since the scan ([`FileStamp::verify`]).
use super::bundle::{ChannelSpec, DataFormat};
use crate::scan::{NpyChannel, SampleSource};
use anyhow::{anyhow, bail, Context, Result};
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex, OnceLock};

/// Dataset path of the common open-data HDF5 strain layout.
pub const DEFAULT_HDF5_DATASET: &str = "strain/Strain";

/// Files of a channel kept open at once (the most recently used).
pub const OPEN_FILES: usize = 8;

/// Where samples and timing are in an HDF5 file, by name (the defaults are
/// the common open-data layout).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Hdf5Names {
    /// Dataset path.
    pub dataset: String,
    /// Attribute with the GPS time of sample 0 \[s\].
    pub start_attr: String,
    /// Attribute with the sample spacing \[s\].
    pub spacing_attr: String,
}

impl Default for Hdf5Names {
    fn default() -> Self {
        Hdf5Names {
            dataset: DEFAULT_HDF5_DATASET.into(),
            start_attr: "Xstart".into(),
            spacing_attr: "Xspacing".into(),
        }
    }
}

type Shared = Arc<dyn SampleSource + Send + Sync>;

/// One file of a channel: where its samples go on the channel's grid.
#[derive(Debug, Clone)]
struct Piece {
    path: PathBuf,
    /// First sample on the channel's grid.
    offset: usize,
    len: usize,
}

/// A channel's samples over all its files, as one [`SampleSource`].
pub struct ChannelSource {
    name: String,
    format: DataFormat,
    rate_hz: f64,
    start_gps: f64,
    len: usize,
    pieces: Vec<Piece>,
    /// Recently used open files: (piece index, source).
    open: Mutex<Vec<(usize, Shared)>>,
}

/// Open one file of a channel.
fn open_file(
    spec_name: &str,
    format: &DataFormat,
    path: &Path,
    spec: &ChannelSpec,
) -> Result<Shared> {
    Ok(match format {
        DataFormat::Npy => Arc::new(NpyChannel::open(&ChannelSpec {
            file: path.to_path_buf(),
            files: vec![path.to_path_buf()],
            ..spec.clone()
        })?),
        DataFormat::Gwf => Arc::new(super::gwf::GwfFile::open(path)?.channel(spec_name)?),
        #[cfg(feature = "hdf5")]
        DataFormat::Hdf5 {
            dataset,
            start_attr,
            spacing_attr,
        } => Arc::new(super::hdf5::Hdf5Series::open(
            path,
            &super::hdf5::Hdf5Layout {
                dataset: dataset.clone(),
                start_attr: start_attr.clone(),
                spacing_attr: spacing_attr.clone(),
            },
        )?),
        #[cfg(not(feature = "hdf5"))]
        DataFormat::Hdf5 { .. } => bail!(
            "{}: HDF5 support is not built in (cargo feature `hdf5`)",
            path.display()
        ),
    })
}

impl ChannelSource {
    /// Open a channel's files: each is opened once to learn its start, rate
    /// and length (headers and frame indexes only), checked against the
    /// channel's `rate` and grid, and closed again.
    ///
    /// # Errors
    /// An unreadable file, a file without the channel, a rate other than
    /// the channel's, a file that starts before the channel's `start` or
    /// off its sample grid, or two files that overlap; each message names
    /// the file.
    pub fn open(spec: &ChannelSpec) -> Result<ChannelSource> {
        let fs = spec.rate;
        let mut pieces = Vec::with_capacity(spec.files.len());
        let mut first_open: Option<(usize, Shared)> = None;
        for path in &spec.files {
            let src = open_file(&spec.name, &spec.format, path, spec)?;
            let offset = if spec.format == DataFormat::Npy {
                0
            } else {
                let r = src.rate_hz();
                if (r - fs).abs() > 1e-9 * fs {
                    bail!(
                        "{}: channel {} has rate {r} Hz, not the {fs} Hz of the bundle",
                        path.display(),
                        spec.name
                    );
                }
                let x = (src.start_gps() - spec.start) * fs;
                let k = x.round();
                if k < 0.0 || (x - k).abs() > 0.01 {
                    bail!(
                        "{}: starts at GPS {}, {} the channel's grid (start {}, {fs} Hz)",
                        path.display(),
                        src.start_gps(),
                        if k < 0.0 { "before" } else { "off" },
                        spec.start
                    );
                }
                k as usize
            };
            if first_open.is_none() {
                first_open = Some((pieces.len(), src.clone()));
            }
            pieces.push(Piece {
                path: path.clone(),
                offset,
                len: src.len(),
            });
        }
        pieces.sort_by_key(|p| p.offset);
        for w in pieces.windows(2) {
            if w[0].offset + w[0].len > w[1].offset {
                bail!(
                    "{} and {} hold overlapping samples of channel {}",
                    w[0].path.display(),
                    w[1].path.display(),
                    spec.name
                );
            }
        }
        let len = pieces.last().map_or(0, |p| p.offset + p.len);
        // Keep the first file open if it is still first after sorting.
        let open = match first_open {
            Some((_, s)) if pieces.len() == 1 => vec![(0, s)],
            _ => Vec::new(),
        };
        Ok(ChannelSource {
            name: spec.name.clone(),
            format: spec.format.clone(),
            rate_hz: fs,
            start_gps: spec.start,
            len,
            pieces,
            open: Mutex::new(open),
        })
    }

    /// The files, in time order.
    pub fn files(&self) -> Vec<&Path> {
        self.pieces.iter().map(|p| p.path.as_path()).collect()
    }

    /// Sample spans `[first, end)` of the channel's grid that files cover.
    pub fn file_spans(&self) -> Vec<(usize, usize)> {
        self.pieces
            .iter()
            .map(|p| (p.offset, p.offset + p.len))
            .collect()
    }

    fn piece(&self, i: usize) -> Result<Shared> {
        let mut open = self.open.lock().expect("open-file lock");
        if let Some(pos) = open.iter().position(|(k, _)| *k == i) {
            let hit = open.remove(pos);
            let src = hit.1.clone();
            open.push(hit);
            return Ok(src);
        }
        drop(open);
        let path = &self.pieces[i].path;
        let spec = ChannelSpec {
            name: self.name.clone(),
            file: path.clone(),
            files: vec![path.clone()],
            format: self.format.clone(),
            rate: self.rate_hz,
            start: self.start_gps,
            role: crate::io::Role::Aux,
            fmin: None,
            fmax: None,
        };
        let src = open_file(&self.name, &self.format, path, &spec)?;
        if src.len() != self.pieces[i].len {
            bail!(
                "{}: now holds {} samples of channel {}, {} when first opened",
                path.display(),
                src.len(),
                self.name,
                self.pieces[i].len
            );
        }
        let mut open = self.open.lock().expect("open-file lock");
        if open.len() >= OPEN_FILES {
            open.remove(0);
        }
        open.push((i, src.clone()));
        Ok(src)
    }
}

impl SampleSource for ChannelSource {
    fn rate_hz(&self) -> f64 {
        self.rate_hz
    }
    fn start_gps(&self) -> f64 {
        self.start_gps
    }
    fn len(&self) -> usize {
        self.len
    }
    fn read(&self, start: usize, out: &mut [f64]) -> Result<()> {
        let end = start + out.len();
        if end > self.len {
            bail!(
                "{}: read of samples {start}..{end} past the end ({})",
                self.describe(),
                self.len
            );
        }
        if self.pieces.len() == 1 && self.pieces[0].offset == 0 && self.pieces[0].len == self.len {
            return self.piece(0)?.read(start, out);
        }
        out.fill(f64::NAN);
        // First piece that may overlap: pieces are sorted and disjoint.
        let first = self.pieces.partition_point(|p| p.offset + p.len <= start);
        for (i, p) in self.pieces.iter().enumerate().skip(first) {
            if p.offset >= end {
                break;
            }
            let a = start.max(p.offset);
            let b = end.min(p.offset + p.len);
            if a < b {
                self.piece(i)?
                    .read(a - p.offset, &mut out[a - start..b - start])?;
            }
        }
        Ok(())
    }
    fn describe(&self) -> String {
        match self.pieces.as_slice() {
            [one] => one.path.display().to_string(),
            many => format!(
                "channel {} in {} files ({} .. {})",
                crate::io::shown(&self.name),
                many.len(),
                many.first()
                    .map_or(String::new(), |p| p.path.display().to_string()),
                many.last()
                    .map_or(String::new(), |p| p.path.display().to_string()),
            ),
        }
    }
}

/// A channel's data as recorded with a scan (`scans.data_json`).
#[derive(serde::Serialize, serde::Deserialize)]
struct DataRecord {
    #[serde(flatten)]
    format: DataFormat,
    rate_hz: f64,
    start_gps: f64,
    files: Vec<PathBuf>,
}

/// The JSON recorded with a scan: format (and HDF5 names), rate, start and
/// files of the channel.
pub fn spec_json(spec: &ChannelSpec) -> String {
    serde_json::to_string(&DataRecord {
        format: spec.format.clone(),
        rate_hz: spec.rate,
        start_gps: spec.start,
        files: spec.files.clone(),
    })
    .expect("plain data serialises")
}

/// The channel spec a scan recorded with [`spec_json`] (role and band
/// limits are not recorded: aux and none).
///
/// # Errors
/// JSON that is not a data record.
pub fn spec_from_json(name: &str, json: &str) -> Result<ChannelSpec> {
    let r: DataRecord = serde_json::from_str(json)
        .with_context(|| format!("the data description recorded for channel {name}"))?;
    let file = r
        .files
        .first()
        .cloned()
        .ok_or_else(|| anyhow!("the data description of channel {name} names no file"))?;
    Ok(ChannelSpec {
        name: name.to_string(),
        file,
        files: r.files,
        format: r.format,
        rate: r.rate_hz,
        start: r.start_gps,
        role: crate::io::Role::Aux,
        fmin: None,
        fmax: None,
    })
}

/// Files matching `pattern`, whose last component may hold `*` (any run of
/// characters) and `?` (one character); the directory part is literal.
/// Sorted by name.
///
/// # Errors
/// An unreadable directory, or wildcards in the directory part.
pub fn glob_files(pattern: &Path) -> Result<Vec<PathBuf>> {
    let dir = pattern.parent().unwrap_or(Path::new("."));
    let name = pattern
        .file_name()
        .and_then(|n| n.to_str())
        .ok_or_else(|| anyhow!("{}: no file-name pattern", pattern.display()))?;
    if dir.to_string_lossy().contains(['*', '?']) {
        bail!(
            "{}: wildcards are allowed in the file name only",
            pattern.display()
        );
    }
    let mut out = Vec::new();
    let rd = std::fs::read_dir(dir).with_context(|| format!("{}: cannot list", dir.display()))?;
    for e in rd {
        let e = e.with_context(|| format!("{}: cannot list", dir.display()))?;
        let n = e.file_name();
        if let Some(n) = n.to_str() {
            if wildcard_match(name.as_bytes(), n.as_bytes()) && e.path().is_file() {
                out.push(e.path());
            }
        }
    }
    out.sort();
    Ok(out)
}

/// Whether `name` matches `pat` (`*` any run, `?` one byte).
fn wildcard_match(pat: &[u8], name: &[u8]) -> bool {
    let (mut p, mut n) = (0, 0);
    let mut star: Option<(usize, usize)> = None;
    while n < name.len() {
        if p < pat.len() && (pat[p] == b'?' || pat[p] == name[n]) {
            p += 1;
            n += 1;
        } else if p < pat.len() && pat[p] == b'*' {
            star = Some((p, n));
            p += 1;
        } else if let Some((sp, sn)) = star {
            p = sp + 1;
            n = sn + 1;
            star = Some((sp, sn + 1));
        } else {
            return false;
        }
    }
    pat[p..].iter().all(|&c| c == b'*')
}

/// GPS start and duration \[s\] from a file name of the usual
/// `OBS-DESC-GPS-DUR.ext` form, if it has one.
pub fn name_span(path: &Path) -> Option<(f64, f64)> {
    let stem = path.file_stem()?.to_str()?;
    let mut parts = stem.rsplitn(3, '-');
    let dur: f64 = parts.next()?.parse().ok()?;
    let gps: f64 = parts.next()?.parse().ok()?;
    parts.next()?;
    (dur > 0.0 && gps.is_finite()).then_some((gps, dur))
}

/// What a scan records of a file it read: size, modification time and a
/// checksum of its bytes.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FileStamp {
    /// Absolute path.
    pub path: PathBuf,
    /// Size \[bytes\].
    pub bytes: u64,
    /// Modification time \[ns since the Unix epoch\].
    pub mtime_ns: i64,
    /// Hex xxh3-128 of the file's bytes.
    pub checksum: String,
}

/// Checksums already computed in this process, by (path, size, mtime): the
/// frame files of a day hold every channel, and each channel's scan records
/// them.
type StampCache = Mutex<HashMap<(PathBuf, u64, i64), String>>;

fn stamp_cache() -> &'static StampCache {
    static CACHE: OnceLock<StampCache> = OnceLock::new();
    CACHE.get_or_init(|| Mutex::new(HashMap::new()))
}

fn size_mtime(path: &Path) -> Result<(u64, i64)> {
    let m = std::fs::metadata(path).with_context(|| format!("{}: cannot stat", path.display()))?;
    let mtime_ns = m
        .modified()
        .ok()
        .and_then(|t| t.duration_since(std::time::UNIX_EPOCH).ok())
        .map_or(0, |d| d.as_nanos() as i64);
    Ok((m.len(), mtime_ns))
}

/// Hex xxh3-128 of a file's bytes, read in 1 MiB pieces.
fn hash_file(path: &Path) -> Result<String> {
    use std::io::Read;
    let mut f =
        std::fs::File::open(path).with_context(|| format!("{}: cannot open", path.display()))?;
    let mut h = xxhash_rust::xxh3::Xxh3::new();
    let mut buf = vec![0u8; 1 << 20];
    loop {
        let n = f
            .read(&mut buf)
            .with_context(|| format!("{}: cannot read", path.display()))?;
        if n == 0 {
            break;
        }
        h.update(&buf[..n]);
    }
    Ok(format!("{:032x}", h.digest128()))
}

impl FileStamp {
    /// Stamp a file (its checksum reads it whole, once per process).
    ///
    /// # Errors
    /// An unreadable file.
    pub fn of(path: &Path) -> Result<FileStamp> {
        let (bytes, mtime_ns) = size_mtime(path)?;
        let key = (path.to_path_buf(), bytes, mtime_ns);
        if let Some(hit) = stamp_cache().lock().expect("stamp lock").get(&key) {
            return Ok(FileStamp {
                path: path.to_path_buf(),
                bytes,
                mtime_ns,
                checksum: hit.clone(),
            });
        }
        let checksum = hash_file(path)?;
        stamp_cache()
            .lock()
            .expect("stamp lock")
            .insert(key, checksum.clone());
        Ok(FileStamp {
            path: path.to_path_buf(),
            bytes,
            mtime_ns,
            checksum,
        })
    }

    /// Check the file is as stamped: same size, and same modification time
    /// or (when only that changed) the same bytes.
    ///
    /// # Errors
    /// A missing file, or one whose size or bytes differ, named in the
    /// message with `what` (e.g. "scan 3 of channel X").
    pub fn verify(&self, what: &str) -> Result<()> {
        let p = self.path.display();
        let (bytes, mtime_ns) = size_mtime(&self.path)
            .map_err(|_| anyhow!("{p}: missing: it holds data of {what}; restore it or re-scan"))?;
        let changed = || {
            anyhow!(
                "{p}: changed since {what} (recorded {} bytes, xxh3 {}); \
                 its triggers would not match the data: restore the file or re-scan",
                self.bytes,
                self.checksum
            )
        };
        if bytes != self.bytes {
            return Err(changed());
        }
        if mtime_ns == self.mtime_ns {
            return Ok(());
        }
        if FileStamp::of(&self.path)?.checksum != self.checksum {
            return Err(changed());
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wildcards() {
        assert!(wildcard_match(b"*.gwf", b"X-A-1400000000-64.gwf"));
        assert!(wildcard_match(b"X-?-*-64.gwf", b"X-A-1400000000-64.gwf"));
        assert!(!wildcard_match(b"*.gwf", b"X.npy"));
        assert!(!wildcard_match(b"a?", b"a"));
        assert!(wildcard_match(b"a**", b"a"));
    }

    #[test]
    fn name_spans() {
        let p = Path::new("/d/X-AV1_RAW-1400000064-64.gwf");
        assert_eq!(name_span(p), Some((1400000064.0, 64.0)));
        assert_eq!(name_span(Path::new("strain.gwf")), None);
        assert_eq!(name_span(Path::new("a-b.gwf")), None);
    }
}
