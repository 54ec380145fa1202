//! `glitchbook import`: record triggers from an external CSV file.
use super::{warn, Global};
use anyhow::{bail, Result};
use glitchbook::catalogue::{self, ImportRecord, InsertOutcome};
use glitchbook::io::{self, Role};
use glitchbook::segments::SegmentList;
use std::path::PathBuf;
use std::process::ExitCode;

/// Channel role as a flag value.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum RoleArg {
    /// The strain (target) channel.
    Target,
    /// An auxiliary sensor.
    Aux,
}

impl From<RoleArg> for Role {
    fn from(r: RoleArg) -> Role {
        match r {
            RoleArg::Target => Role::Target,
            RoleArg::Aux => Role::Aux,
        }
    }
}

/// Record triggers from a CSV file (`time,frequency,snr` and optional
/// `duration,bandwidth,t_start,t_end,f_low,f_high,q` columns).
#[derive(Debug, clap::Args)]
pub struct ImportArgs {
    /// The CSV file.
    pub csv: PathBuf,
    /// Channel the triggers belong to (any text).
    #[arg(long, value_name = "NAME")]
    pub channel: String,
    /// Channel role [default: the channel's role if already in the
    /// catalogue, else target].
    #[arg(long, value_enum)]
    pub role: Option<RoleArg>,
    /// Analysed segments (`start end` lines, GPS s) [default: the span of
    /// the triggers, with a warning that live time is then approximate].
    #[arg(long, value_name = "FILE")]
    pub segments: Option<PathBuf>,
}

impl ImportArgs {
    /// Check the flags (no I/O).
    pub fn validate(&self) -> Result<()> {
        if self.channel.trim().is_empty() {
            bail!("--channel must not be empty");
        }
        Ok(())
    }
}

/// Read the CSV and the segments; returns the record (role filled in later).
fn gather(args: &ImportArgs) -> Result<ImportRecord> {
    // Bounded: a file over 2 GiB or with a line over 1 MiB is refused early.
    let bytes = io::text::read_text_input(&args.csv)?;
    let checksum = format!("{:032x}", xxhash_rust::xxh3::xxh3_128(&bytes));
    let triggers = io::text::parse_trigger_csv(&bytes, &args.csv.display().to_string())?;
    let (analysed, source) = match &args.segments {
        Some(p) => {
            let (segs, warnings) = io::read_segments_file(p)?;
            for w in &warnings {
                warn(w);
            }
            let outside = triggers.iter().filter(|t| !segs.contains(t.t_peak)).count();
            if outside > 0 {
                warn(&format!(
                    "{}: {outside} of {} triggers peak outside the segments of {}",
                    args.csv.display(),
                    triggers.len(),
                    p.display()
                ));
            }
            (segs, "file")
        }
        None => {
            if triggers.is_empty() {
                bail!(
                    "{}: no triggers and no --segments: nothing to record",
                    args.csv.display()
                );
            }
            let lo = triggers
                .iter()
                .map(|t| t.t_start.min(t.t_peak))
                .fold(f64::INFINITY, f64::min);
            let hi = triggers
                .iter()
                .map(|t| t.t_end.max(t.t_peak))
                .fold(f64::NEG_INFINITY, f64::max);
            warn(&format!(
                "{}: no --segments given: analysed time taken as the span of the triggers \
                 [{lo}, {hi}); live time and rates are then approximate",
                args.csv.display()
            ));
            (SegmentList::single(lo, hi), "trigger_span")
        }
    };
    Ok(ImportRecord {
        channel: args.channel.clone(),
        role: Role::Target,
        source_path: args.csv.display().to_string(),
        input_checksum: checksum,
        analysed,
        segments_source: source.to_string(),
        triggers,
    })
}

/// Run the command.
pub fn run(g: &Global, args: ImportArgs) -> Result<ExitCode> {
    args.validate()?;
    let mut rec = gather(&args)?;
    let mut conn = catalogue::open(&g.db)?;
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    rec.role = match args.role {
        Some(r) => r.into(),
        None => match catalogue::channel_by_name(&tx, &rec.channel)? {
            Some(c) if c.role == "aux" => Role::Aux,
            _ => Role::Target,
        },
    };
    let outcome = catalogue::import_triggers(&tx, &rec)?;
    tx.commit()?;
    match outcome {
        InsertOutcome::Inserted { n_triggers, .. } => g.info(&format!(
            "{}: imported {n_triggers} triggers into channel {:?} ({:.1} s analysed)",
            args.csv.display(),
            rec.channel,
            rec.analysed.total()
        )),
        InsertOutcome::Skipped { .. } => g.info(&format!(
            "{}: {}",
            args.csv.display(),
            InsertOutcome::SKIPPED_MESSAGE
        )),
    }
    Ok(ExitCode::SUCCESS)
}
