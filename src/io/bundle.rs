//! The channel bundle: a directory with `bundle.toml` and one `.npy` per channel.
use std::path::{Path, PathBuf};

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

impl Bundle {
    /// Read and validate `DIR/bundle.toml` (the `.npy` headers are checked too).
    pub fn open(dir: &Path) -> anyhow::Result<Bundle> {
        todo!("{}", dir.display())
    }
}
