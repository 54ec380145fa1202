//! `glitchbook triggers`: list stored triggers.
use super::Global;
use anyhow::Result;
use glitchbook::catalogue::{self, TriggerQuery};
use glitchbook::output::{write_rows, Format};
use serde::Serialize;
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

/// One listed trigger: the stored trigger and its family (or why it has
/// none), so a listing loads into a data frame ready to group.
#[derive(Debug, Clone, Default, Serialize)]
struct Listed {
    id: i64,
    channel: String,
    t_peak: f64,
    t_start: f64,
    t_end: f64,
    f_peak: f64,
    f_low: f64,
    f_high: f64,
    snr: f64,
    /// Equivalent SNR of the clustered tiles (see `clusters`).
    snr_eq: f64,
    q: Option<f64>,
    energy: f64,
    family_id: Option<i64>,
    family_label: Option<String>,
    family_probability: Option<f64>,
    unclassified: Option<String>,
}

/// Run the command.
pub fn run(g: &Global, args: TriggersArgs) -> Result<ExitCode> {
    let q = args.validate()?;
    let conn = catalogue::open_read_only(&g.db)?;
    let rows = catalogue::query_triggers(&conn, &q)?;
    let ids: Vec<i64> = rows.iter().map(|r| r.id).collect();
    let mut fams = catalogue::trigger_families(&conn, &ids)?;
    let listed: Vec<Listed> = rows
        .into_iter()
        .map(|r| {
            let f = fams.remove(&r.id).unwrap_or_default();
            Listed {
                id: r.id,
                channel: r.channel,
                t_peak: r.t_peak,
                t_start: r.t_start,
                t_end: r.t_end,
                f_peak: r.f_peak,
                f_low: r.f_low,
                f_high: r.f_high,
                snr: r.snr,
                snr_eq: r.snr_eq,
                q: r.q,
                energy: r.energy,
                family_id: f.family_id,
                family_label: f.family_label,
                family_probability: f.family_probability,
                unclassified: f.unclassified,
            }
        })
        .collect();
    write_rows(&mut std::io::stdout().lock(), args.format, &listed)?;
    Ok(ExitCode::SUCCESS)
}
