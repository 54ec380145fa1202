//! Where the generated samples go: the generator streams each channel's
//! samples, in time order, into a [`SampleSink`] made by a
//! [`ScenarioWriter`]. [`NpyBundleWriter`] writes the channel bundle the tool
//! reads today (`bundle.toml` + one `.npy` per channel), optionally split
//! into consecutive "days", each a bundle of the same channels in its own
//! directory. Another format (e.g. frame files) is another `ScenarioWriter`.

use crate::io::Role;
use anyhow::{bail, Context, Result};
use std::fmt::Write as _;
use std::io::Write as _;
use std::path::{Path, PathBuf};

/// One consecutive piece of the span written as its own bundle.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DaySpan {
    /// GPS time of the piece's first sample \[GPS s\].
    pub start_gps: f64,
    /// Length \[s\] (whole seconds).
    pub duration_s: f64,
}

/// A channel as the writer needs it.
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelLayout {
    /// Channel name.
    pub name: String,
    /// Sample rate \[Hz\] (whole Hz, so every day holds whole samples).
    pub rate_hz: f64,
    /// Target or aux.
    pub role: Role,
    /// Store as `<f4` (else `<f8`).
    pub as_f32: bool,
    /// GPS time of the first sample of the whole span \[GPS s\].
    pub start_gps: f64,
    /// Samples over the whole span.
    pub n_samples: usize,
}

/// Receives one channel's samples in time order, in chunks of any size.
pub trait SampleSink: Send {
    /// Append samples (NaN marks dropouts).
    ///
    /// # Errors
    /// An I/O failure, or more samples than announced.
    fn write(&mut self, samples: &[f64]) -> Result<()>;
    /// All samples written: flush and close.
    ///
    /// # Errors
    /// An I/O failure, or fewer samples than announced.
    fn finish(self: Box<Self>) -> Result<()>;
}

/// Makes one sink per channel and, at the end, the files that describe them.
pub trait ScenarioWriter: Sync {
    /// A sink for `ch` (called once per channel, possibly from several
    /// threads at once).
    ///
    /// # Errors
    /// A file that cannot be created.
    fn open(&self, ch: &ChannelLayout) -> Result<Box<dyn SampleSink>>;
    /// Every channel is written: write the description files; returns the
    /// bundle directories (one per day).
    ///
    /// # Errors
    /// A file that cannot be written.
    fn finish(&self, channels: &[ChannelLayout]) -> Result<Vec<PathBuf>>;
}

/// `.npy` file name of a channel: `QM4:STRAIN` → `QM4-STRAIN.npy`.
pub fn npy_file_name(channel: &str) -> String {
    format!("{}.npy", channel.replace([':', '/'], "-"))
}

/// Writes channel bundles of `.npy` files: in `dir` for one day, else in
/// `dir/day-01`, `dir/day-02`, ...
#[derive(Debug, Clone)]
pub struct NpyBundleWriter {
    /// Output directory.
    pub dir: PathBuf,
    /// The days (consecutive, covering the span).
    pub days: Vec<DaySpan>,
    /// Text for the `description` field of each `bundle.toml`.
    pub description: String,
}

impl NpyBundleWriter {
    /// Directory of day `i` (0-based).
    pub fn day_dir(&self, i: usize) -> PathBuf {
        if self.days.len() == 1 {
            self.dir.clone()
        } else {
            self.dir.join(format!("day-{:02}", i + 1))
        }
    }
}

/// Start a format-1.0 `.npy` file of `n` samples: magic, header, padding.
fn npy_create(path: &Path, n: usize, as_f32: bool) -> Result<std::io::BufWriter<std::fs::File>> {
    let descr = if as_f32 { "<f4" } else { "<f8" };
    let mut header = format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': ({n},), }}");
    // Magic (6) + version (2) + header length (2) + header + '\n' is a
    // multiple of 64 (as crate::io::write_npy does).
    let unpadded = 10 + header.len() + 1;
    header.push_str(&" ".repeat((64 - unpadded % 64) % 64));
    header.push('\n');
    let file =
        std::fs::File::create(path).with_context(|| format!("creating {}", path.display()))?;
    let mut w = std::io::BufWriter::with_capacity(1 << 20, file);
    w.write_all(b"\x93NUMPY\x01\x00")?;
    w.write_all(&(header.len() as u16).to_le_bytes())?;
    w.write_all(header.as_bytes())?;
    Ok(w)
}

struct NpySink {
    /// (path, samples) of each day's file.
    files: Vec<(PathBuf, usize)>,
    as_f32: bool,
    day: usize,
    in_day: usize,
    out: Option<std::io::BufWriter<std::fs::File>>,
    bytes: Vec<u8>,
}

impl NpySink {
    fn open_day(&mut self) -> Result<()> {
        let (path, n) = &self.files[self.day];
        self.out = Some(npy_create(path, *n, self.as_f32)?);
        self.in_day = 0;
        Ok(())
    }

    fn close_day(&mut self) -> Result<()> {
        if let Some(mut w) = self.out.take() {
            let path = &self.files[self.day].0;
            w.flush()
                .with_context(|| format!("writing {}", path.display()))?;
        }
        Ok(())
    }
}

impl SampleSink for NpySink {
    fn write(&mut self, mut samples: &[f64]) -> Result<()> {
        while !samples.is_empty() {
            if self.day >= self.files.len() {
                bail!("more samples than the channel's layout announced");
            }
            if self.out.is_none() {
                self.open_day()?;
            }
            let (path, n) = (&self.files[self.day].0, self.files[self.day].1);
            let take = (n - self.in_day).min(samples.len());
            self.bytes.clear();
            if self.as_f32 {
                for &x in &samples[..take] {
                    self.bytes.extend_from_slice(&(x as f32).to_le_bytes());
                }
            } else {
                for &x in &samples[..take] {
                    self.bytes.extend_from_slice(&x.to_le_bytes());
                }
            }
            self.out
                .as_mut()
                .expect("opened above")
                .write_all(&self.bytes)
                .with_context(|| format!("writing {}", path.display()))?;
            self.in_day += take;
            samples = &samples[take..];
            if self.in_day == n {
                self.close_day()?;
                self.day += 1;
            }
        }
        Ok(())
    }

    fn finish(mut self: Box<Self>) -> Result<()> {
        self.close_day()?;
        if self.day < self.files.len() {
            bail!(
                "{}: fewer samples written than announced",
                self.files[self.day].0.display()
            );
        }
        Ok(())
    }
}

impl ScenarioWriter for NpyBundleWriter {
    fn open(&self, ch: &ChannelLayout) -> Result<Box<dyn SampleSink>> {
        let mut files = Vec::new();
        let mut total = 0;
        for (i, d) in self.days.iter().enumerate() {
            let dir = self.day_dir(i);
            std::fs::create_dir_all(&dir).with_context(|| format!("creating {}", dir.display()))?;
            let n = (d.duration_s * ch.rate_hz).round() as usize;
            files.push((dir.join(npy_file_name(&ch.name)), n));
            total += n;
        }
        if total != ch.n_samples {
            bail!(
                "channel {}: days hold {total} samples, the span {}",
                ch.name,
                ch.n_samples
            );
        }
        Ok(Box::new(NpySink {
            files,
            as_f32: ch.as_f32,
            day: 0,
            in_day: 0,
            out: None,
            bytes: Vec::new(),
        }))
    }

    fn finish(&self, channels: &[ChannelLayout]) -> Result<Vec<PathBuf>> {
        let mut dirs = Vec::new();
        for (i, d) in self.days.iter().enumerate() {
            let dir = self.day_dir(i);
            let mut toml = format!("description = {:?}\n", self.description);
            for ch in channels {
                let role = match ch.role {
                    Role::Target => "target",
                    Role::Aux => "aux",
                };
                let _ = write!(
                    toml,
                    "\n[[channel]]\nname = \"{}\"\nfile = \"{}\"\nrate = {:.1}\nstart = {:.1}\nrole = \"{role}\"\n",
                    ch.name,
                    npy_file_name(&ch.name),
                    ch.rate_hz,
                    d.start_gps,
                );
            }
            let path = dir.join("bundle.toml");
            std::fs::write(&path, toml).with_context(|| format!("writing {}", path.display()))?;
            dirs.push(dir);
        }
        Ok(dirs)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn days_split_one_stream_into_bundles_the_reader_accepts() {
        let tmp = tempfile::tempdir().unwrap();
        let w = NpyBundleWriter {
            dir: tmp.path().to_path_buf(),
            days: vec![
                DaySpan {
                    start_gps: 100.0,
                    duration_s: 3.0,
                },
                DaySpan {
                    start_gps: 103.0,
                    duration_s: 2.0,
                },
            ],
            description: "test".into(),
        };
        let ch = ChannelLayout {
            name: "QM4:X".into(),
            rate_hz: 4.0,
            role: Role::Aux,
            as_f32: false,
            start_gps: 100.0,
            n_samples: 20,
        };
        let mut sink = w.open(&ch).unwrap();
        let x: Vec<f64> = (0..20).map(|i| i as f64).collect();
        sink.write(&x[..5]).unwrap();
        sink.write(&x[5..17]).unwrap();
        sink.write(&x[17..]).unwrap();
        sink.finish().unwrap();
        let dirs = w.finish(std::slice::from_ref(&ch)).unwrap();
        assert_eq!(dirs.len(), 2);
        let b = crate::io::Bundle::open(&dirs[1]).unwrap();
        assert_eq!(b.channels[0].start, 103.0);
        let r = crate::io::NpyReader::open(&b.channels[0].file).unwrap();
        assert_eq!(r.len, 8);
        let mut got = vec![0.0; 8];
        r.read_f64(0, &mut got).unwrap();
        assert_eq!(got, x[12..]);
    }
}
