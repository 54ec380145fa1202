//! `glitchbook demo`: write the invented observatory scenario and run the
//! whole loop on it (`glitchbook::pipeline::run_demo`): scan, families,
//! witnesses, vetoes, rates, report. Prints what it did, the checks against
//! the scenario's ground truth, and where the files are.
use super::Global;
use anyhow::Result;
use glitchbook::pipeline::{run_demo, DemoLine, DemoRunOptions};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// Write the demo scenario and run the whole pipeline on it.
#[derive(Debug, clap::Args)]
pub struct DemoArgs {
    /// Directory for the scenario, catalogue, veto segments and report.
    #[arg(long, default_value = "glitchbook-demo", value_name = "DIR")]
    pub out: PathBuf,
    /// Seed of the scenario and of the clustering.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Length of the scenario [hours] (0.05 to 4).
    #[arg(long, default_value_t = 2.0)]
    pub hours: f64,
    /// How the channels are written: `npy` (one file per channel) or `gwf`
    /// (frame files of 256 s in DIR/frames/, all channels in each).
    #[arg(long, default_value = "npy", value_parser = ["npy", "gwf"])]
    pub format: String,
}

/// Run the command. The catalogue is `DIR/glitchbook.db` unless `--db` names
/// another file; a demo catalogue inside DIR is made afresh each time.
pub fn run(g: &Global, a: DemoArgs) -> Result<ExitCode> {
    let db = if g.db == Path::new("glitchbook.db") {
        a.out.join("glitchbook.db")
    } else {
        g.db.clone()
    };
    let opts = DemoRunOptions {
        out: a.out,
        db,
        seed: a.seed,
        hours: a.hours,
        frames: a.format == "gwf",
    };
    // Progress lines; a reader that went away (`| head`) does not stop the demo.
    run_demo(&opts, &mut |line| match line {
        DemoLine::Info(m) => {
            let _ = writeln!(std::io::stdout(), "{m}");
        }
        DemoLine::Warning(w) => super::warn(&w),
    })?;
    Ok(ExitCode::SUCCESS)
}
