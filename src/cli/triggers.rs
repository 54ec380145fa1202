//! `glitchbook triggers`: list stored triggers.
use super::Global;
use anyhow::Result;
use glitchbook::catalogue::{self, TriggerQuery};
use glitchbook::output::{write_rows, Format};
use std::process::ExitCode;

/// List triggers, earliest first.
#[derive(Debug, clap::Args)]
#[command(allow_negative_numbers = true)]
pub struct TriggersArgs {
    /// Only this channel.
    #[arg(long, value_name = "NAME")]
    pub channel: Option<String>,
    /// Only triggers with SNR at least X.
    #[arg(long, value_name = "X")]
    pub min_snr: Option<f64>,
    /// Only triggers peaking at or after T [GPS s].
    #[arg(long, value_name = "T")]
    pub since: Option<f64>,
    /// Only triggers peaking before T [GPS s].
    #[arg(long, value_name = "T")]
    pub until: Option<f64>,
    /// Only members of this family (0 = novel triggers).
    #[arg(long, value_name = "ID")]
    pub family: Option<i64>,
    /// At most N rows.
    #[arg(long, value_name = "N")]
    pub limit: Option<usize>,
    /// Output format.
    #[arg(long, value_enum, default_value_t = Format::Table)]
    pub format: Format,
}

impl TriggersArgs {
    /// The query these flags set, checked by the library (no I/O).
    pub fn validate(&self) -> Result<TriggerQuery> {
        let q = TriggerQuery {
            channel: self.channel.clone(),
            min_snr: self.min_snr,
            since: self.since,
            until: self.until,
            limit: self.limit,
            family: self.family,
        };
        q.check()?;
        Ok(q)
    }
}

/// Run the command.
pub fn run(g: &Global, args: TriggersArgs) -> Result<ExitCode> {
    let q = args.validate()?;
    let conn = catalogue::open_read_only(&g.db)?;
    let rows = catalogue::query_triggers(&conn, &q)?;
    write_rows(&mut std::io::stdout().lock(), args.format, &rows)?;
    Ok(ExitCode::SUCCESS)
}
