//! `glitchbook channels`: list channels.
use super::Global;
use anyhow::Result;
use glitchbook::catalogue;
use glitchbook::output::{write_rows, Format};
use std::process::ExitCode;

/// List channels with scan/trigger counts and analysed time.
#[derive(Debug, clap::Args)]
pub struct ChannelsArgs {
    /// Output format.
    #[arg(long, value_enum, default_value_t = Format::Table)]
    pub format: Format,
}

/// Run the command.
pub fn run(g: &Global, args: ChannelsArgs) -> Result<ExitCode> {
    let conn = catalogue::open_read_only(&g.db)?;
    let rows = catalogue::channels(&conn)?;
    write_rows(&mut std::io::stdout().lock(), args.format, &rows)?;
    Ok(ExitCode::SUCCESS)
}
