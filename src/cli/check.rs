//! `glitchbook check`: integrity, references, schema version, row counts.
use super::Global;
use anyhow::Result;
use glitchbook::catalogue;
use glitchbook::output::{write_rows, Format};
use std::process::ExitCode;

/// Check the catalogue; exit status 1 when any check fails.
#[derive(Debug, clap::Args)]
pub struct CheckArgs {
    /// Output format.
    #[arg(long, value_enum, default_value_t = Format::Table)]
    pub format: Format,
}

/// Run the command.
pub fn run(g: &Global, args: CheckArgs) -> Result<ExitCode> {
    let conn = catalogue::open_read_only(&g.db)?;
    let report = catalogue::check(&conn)?;
    write_rows(&mut std::io::stdout().lock(), args.format, &report.items)?;
    if report.ok() {
        Ok(ExitCode::SUCCESS)
    } else {
        eprintln!("glitchbook: check failed: {}", g.db.display());
        Ok(ExitCode::from(1))
    }
}
