//! HDF5 strain files: one 1-D dataset of samples with its start time and
//! sample spacing in scalar attributes, read in ranges (only the bytes, or
//! the compressed chunks, that hold the samples asked for).
//!
//! Default layout — the common open-data strain layout: dataset
//! `strain/Strain`, attributes `Xstart` (GPS time of the first sample
//! \[s\]) and `Xspacing` (sample spacing \[s\]) on the dataset. Any other
//! layout: [`Hdf5Layout`] names the dataset and the two attributes. NaN
//! samples are dropouts, as everywhere.
//!
//! Elements: float32/float64 and integers of any width, returned as f64.
//! Layouts read: contiguous, compact and chunked, with the deflate (gzip),
//! shuffle and Fletcher-32 filters (what h5py writes; fixtures in
//! `tests/data/hdf5/`).
//!
//! The decoder is the pure-Rust `hdf5-reader` crate (no system library),
//! behind the cargo feature `hdf5`, on by default; README explains the
//! choice. Reads go through positional file reads (no memory map), so
//! memory holds the requested range and at most a few decompressed chunks.
//!
//! Every error is one line naming the file, and the dataset or attribute.
use crate::scan::SampleSource;
use anyhow::{anyhow, bail, Result};
use hdf5_reader::{Datatype, Hdf5File, SliceInfo, SliceInfoElem};
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// Where the samples and their timing are in an HDF5 file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Hdf5Layout {
    /// Path of the 1-D dataset (e.g. `strain/Strain`).
    pub dataset: String,
    /// Attribute of the dataset holding the GPS time of sample 0 \[s\].
    pub start_attr: String,
    /// Attribute of the dataset holding the sample spacing \[s\].
    pub spacing_attr: String,
}

impl Default for Hdf5Layout {
    /// `strain/Strain` with `Xstart` and `Xspacing`.
    fn default() -> Self {
        Hdf5Layout {
            dataset: "strain/Strain".into(),
            start_attr: "Xstart".into(),
            spacing_attr: "Xspacing".into(),
        }
    }
}

/// Element type of the dataset.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Elem {
    F32,
    F64,
    I8,
    I16,
    I32,
    I64,
    U8,
    U16,
    U32,
    U64,
}

/// An HDF5 dataset of samples, open for range reads; a [`SampleSource`].
pub struct Hdf5Series {
    path: PathBuf,
    layout: Hdf5Layout,
    ds: hdf5_reader::Dataset,
    elem: Elem,
    len: usize,
    rate_hz: f64,
    start_gps: f64,
}

impl std::fmt::Debug for Hdf5Series {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Hdf5Series")
            .field("path", &self.path)
            .field("dataset", &self.layout.dataset)
            .field("len", &self.len)
            .field("rate_hz", &self.rate_hz)
            .field("start_gps", &self.start_gps)
            .finish()
    }
}

/// Samples read per slice request (bounds the temporary array).
const READ_CHUNK: usize = 1 << 18;

impl Hdf5Series {
    /// Open `path` and find the dataset and its timing attributes.
    ///
    /// # Errors
    /// Not an HDF5 file, a missing dataset or attribute, a dataset that is
    /// not 1-D numeric or is empty, an attribute that is not a finite
    /// number, a spacing ≤ 0; each one line naming file and object.
    pub fn open(path: &Path, layout: &Hdf5Layout) -> Result<Hdf5Series> {
        let shown = path.display();
        let meta = std::fs::metadata(path).map_err(|e| anyhow!("{shown}: cannot open: {e}"))?;
        if !meta.is_file() {
            bail!("{shown}: not a regular file");
        }
        let storage = hdf5_reader::storage::FileStorage::open(path)
            .map_err(|e| anyhow!("{shown}: cannot open: {}", one_line(&e)))?;
        let file = Hdf5File::from_storage(Arc::new(storage))
            .map_err(|e| anyhow!("{shown}: not a readable HDF5 file: {}", one_line(&e)))?;
        let dname = crate::io::shown(&layout.dataset);
        let ds = file
            .dataset(&layout.dataset)
            .map_err(|e| anyhow!("{shown}: dataset {dname}: {}", one_line(&e)))?;
        let shape = ds.shape().to_vec();
        let len = match shape.as_slice() {
            [n] => *n,
            _ => bail!("{shown}: dataset {dname}: shape {shape:?}, need a 1-D series of samples"),
        };
        if len == 0 {
            bail!("{shown}: dataset {dname}: no samples");
        }
        let len = usize::try_from(len)
            .map_err(|_| anyhow!("{shown}: dataset {dname}: {len} samples is too many"))?;
        let elem = match ds.dtype() {
            Datatype::FloatingPoint { size: 4, .. } => Elem::F32,
            Datatype::FloatingPoint { size: 8, .. } => Elem::F64,
            Datatype::FixedPoint { size, signed, .. } => match (size, signed) {
                (1, true) => Elem::I8,
                (2, true) => Elem::I16,
                (4, true) => Elem::I32,
                (8, true) => Elem::I64,
                (1, false) => Elem::U8,
                (2, false) => Elem::U16,
                (4, false) => Elem::U32,
                (8, false) => Elem::U64,
                _ => bail!("{shown}: dataset {dname}: {size}-byte integers are not supported"),
            },
            other => bail!(
                "{shown}: dataset {dname}: element type {} is not a real number",
                crate::io::shown(&format!("{other:?}"))
            ),
        };
        let number = |name: &str| -> Result<f64> {
            let aname = crate::io::shown(name);
            let a = ds.attribute(name).map_err(|e| {
                anyhow!(
                    "{shown}: dataset {dname}: attribute {aname}: {}",
                    one_line(&e)
                )
            })?;
            let v = a.read_as_f64().map_err(|e| {
                anyhow!(
                    "{shown}: dataset {dname}: attribute {aname}: not a number: {}",
                    one_line(&e)
                )
            })?;
            if !v.is_finite() {
                bail!("{shown}: dataset {dname}: attribute {aname}: {v} is not finite");
            }
            Ok(v)
        };
        let start_gps = number(&layout.start_attr)?;
        let spacing = number(&layout.spacing_attr)?;
        if spacing <= 0.0 || !(1.0 / spacing).is_finite() {
            bail!(
                "{shown}: dataset {dname}: attribute {}: sample spacing {spacing} s must be > 0",
                crate::io::shown(&layout.spacing_attr)
            );
        }
        let rate_hz = 1.0 / spacing;
        if !(start_gps + len as f64 * spacing).is_finite() {
            bail!("{shown}: dataset {dname}: the time span is not finite");
        }
        Ok(Hdf5Series {
            path: path.to_path_buf(),
            layout: layout.clone(),
            ds,
            elem,
            len,
            rate_hz,
            start_gps,
        })
    }

    /// The file.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The layout it was opened with.
    pub fn layout(&self) -> &Hdf5Layout {
        &self.layout
    }

    /// Read samples `[start, start + out.len())` as f64.
    ///
    /// # Errors
    /// A range beyond the dataset, or a decoding error; both name the file.
    pub fn read_samples(&self, start: usize, out: &mut [f64]) -> Result<()> {
        if start.checked_add(out.len()).is_none_or(|e| e > self.len) {
            bail!(
                "{}: dataset {}: samples [{start}, {}) requested, it has {}",
                self.path.display(),
                crate::io::shown(&self.layout.dataset),
                start as u128 + out.len() as u128,
                self.len
            );
        }
        for (k, o) in out.chunks_mut(READ_CHUNK).enumerate() {
            let a = (start + k * READ_CHUNK) as u64;
            let sel = SliceInfo {
                selections: vec![SliceInfoElem::Slice {
                    start: a,
                    end: a + o.len() as u64,
                    step: 1,
                }],
            };
            let err = |e: &dyn std::fmt::Display| {
                anyhow!(
                    "{}: dataset {}: reading samples from {a}: {}",
                    self.path.display(),
                    crate::io::shown(&self.layout.dataset),
                    one_line(&e)
                )
            };
            macro_rules! read_as {
                ($t:ty) => {{
                    let v = self.ds.read_slice::<$t>(&sel).map_err(|e| err(&e))?;
                    if v.len() != o.len() {
                        bail!(
                            "{}: dataset {}: {} samples returned for {} asked",
                            self.path.display(),
                            crate::io::shown(&self.layout.dataset),
                            v.len(),
                            o.len()
                        );
                    }
                    for (x, y) in o.iter_mut().zip(v.iter()) {
                        *x = *y as f64;
                    }
                }};
            }
            match self.elem {
                Elem::F32 => read_as!(f32),
                Elem::F64 => read_as!(f64),
                Elem::I8 => read_as!(i8),
                Elem::I16 => read_as!(i16),
                Elem::I32 => read_as!(i32),
                Elem::I64 => read_as!(i64),
                Elem::U8 => read_as!(u8),
                Elem::U16 => read_as!(u16),
                Elem::U32 => read_as!(u32),
                Elem::U64 => read_as!(u64),
            }
        }
        Ok(())
    }
}

impl SampleSource for Hdf5Series {
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
        self.read_samples(start, out)
    }
    fn describe(&self) -> String {
        format!(
            "{} (dataset {})",
            self.path.display(),
            crate::io::shown(&self.layout.dataset)
        )
    }
}

/// A library error as one line (control characters replaced, at most 200
/// characters).
fn one_line(e: &dyn std::fmt::Display) -> String {
    let s: String = e
        .to_string()
        .chars()
        .map(|c| if c.is_control() { ' ' } else { c })
        .collect();
    match s.char_indices().nth(200) {
        Some((i, _)) => format!("{}…", &s[..i]),
        None => s,
    }
}
