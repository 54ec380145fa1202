//! `glitchbook bundle`: inspect frame, HDF5 and `.npy` files and write
//! `DIR/bundle.toml` describing every channel found, ready for `scan DIR`.
use super::Global;
use anyhow::{bail, Context, Result};
use glitchbook::io::inspect;
use std::path::PathBuf;
use std::process::ExitCode;

/// Describe the channels of data files as a bundle: `DIR/bundle.toml` with
/// each channel's name, rate, start, files and role.
#[derive(Debug, clap::Args)]
pub struct BundleArgs {
    /// Data files (`.gwf`, `.h5`/`.hdf5`/`.hdf`, `NAME-GPS-DUR.npy`),
    /// directories (every data file in them) or quoted patterns with `*`.
    #[arg(required = true, value_name = "FILE_OR_DIR")]
    pub inputs: Vec<PathBuf>,
    /// The bundle directory to write `bundle.toml` into (created if needed;
    /// an existing bundle.toml is not replaced).
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// A channel to record as a target (repeatable); the others are aux.
    #[arg(long = "target", value_name = "NAME")]
    pub targets: Vec<String>,
}

/// Run the command.
pub fn run(g: &Global, a: BundleArgs) -> Result<ExitCode> {
    let toml_path = a.out.join("bundle.toml");
    if toml_path.exists() {
        bail!(
            "{}: exists; choose another --out (one bundle per stretch of data) or remove it",
            toml_path.display()
        );
    }
    let files = inspect::data_files(&a.inputs)?;
    let found = inspect::inspect(&files, &a.targets)?;
    std::fs::create_dir_all(&a.out).with_context(|| format!("creating {}", a.out.display()))?;
    let dir = std::fs::canonicalize(&a.out).unwrap_or(a.out.clone());
    let text = inspect::bundle_toml(&found, &dir)?;
    let tmp = dir.join("bundle.toml.tmp");
    std::fs::write(&tmp, text).with_context(|| format!("writing {}", tmp.display()))?;
    // Check it opens as a bundle before putting it in place.
    let check = glitchbook::io::parse_bundle_toml(
        &std::fs::read_to_string(&tmp).context("rereading bundle.toml")?,
        &dir,
    );
    if let Err(e) = check {
        let _ = std::fs::remove_file(&tmp);
        return Err(e.into());
    }
    std::fs::rename(&tmp, &toml_path)
        .with_context(|| format!("moving {} into place", toml_path.display()))?;
    if let Err(e) = glitchbook::io::Bundle::open(&dir) {
        let _ = std::fs::remove_file(&toml_path);
        return Err(e.into());
    }
    let n_target = found.iter().filter(|c| c.target).count();
    g.info(&format!(
        "{}: {} channels ({n_target} target, {} aux) from {} files",
        toml_path.display(),
        found.len(),
        found.len() - n_target,
        files.len()
    ));
    if n_target == 0 {
        super::warn("no --target given: every channel is aux (scan finds no target triggers)");
    }
    Ok(ExitCode::SUCCESS)
}
