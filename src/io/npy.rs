//! NumPy `.npy` reader (1-D, little-endian float32/float64, format v1/v2/v3)
//! that reads ranges of samples without loading the file whole.
use std::path::Path;

/// Element type of a `.npy` file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NpyDtype {
    /// `<f4`
    F32,
    /// `<f8`
    F64,
}

/// An open `.npy` file.
#[derive(Debug)]
pub struct NpyReader {
    /// Element type.
    pub dtype: NpyDtype,
    /// Number of samples.
    pub len: usize,
}

impl NpyReader {
    /// Open and validate the header.
    pub fn open(path: &Path) -> anyhow::Result<NpyReader> {
        todo!("{}", path.display())
    }
    /// Read samples `[start, start + out.len())` as f64 into `out`.
    pub fn read_f64(&self, start: usize, out: &mut [f64]) -> anyhow::Result<()> {
        todo!("{start} {}", out.len())
    }
}

/// Write a 1-D little-endian `.npy` file (format 1.0) of f64 (`<f8`) or,
/// with `as_f32`, f32 (`<f4`) samples.
pub fn write_npy(path: &Path, data: &[f64], as_f32: bool) -> anyhow::Result<()> {
    use anyhow::Context;
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
