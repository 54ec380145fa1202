//! `glitchbook import`: record triggers from an external CSV file.
use super::{warn, Global};
use anyhow::{bail, Result};
use glitchbook::catalogue::{self, ImportRecord, InsertOutcome};
use glitchbook::io::{self, Role};
use glitchbook::segments::SegmentList;
use glitchbook::trigger::Trigger;
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
/// `duration,bandwidth,t_start,t_end,f_low,f_high,q` columns; the CSV of
/// `glitchbook triggers` imports back, each channel of its `channel` column
/// as its own channel).
#[derive(Debug, clap::Args)]
pub struct ImportArgs {
    /// The CSV file.
    pub csv: PathBuf,
    /// Channel the triggers belong to (any text) [default: the file's
    /// `channel` column, one channel per value].
    #[arg(long, value_name = "NAME")]
    pub channel: Option<String>,
    /// Channel role [default: the channel's role if already in the
    /// catalogue, else target for a single channel; with a `channel`
    /// column, new channels are aux unless named by --target].
    #[arg(long, value_enum)]
    pub role: Option<RoleArg>,
    /// With a `channel` column: a new channel to record as target
    /// (repeatable).
    #[arg(long, value_name = "NAME")]
    pub target: Vec<String>,
    /// Analysed segments (`start end` lines, GPS s) [default: the span of
    /// the triggers, with a warning that live time is then approximate].
    #[arg(long, value_name = "FILE")]
    pub segments: Option<PathBuf>,
}

impl ImportArgs {
    /// Check the flags (no I/O).
    pub fn validate(&self) -> Result<()> {
        if self.channel.as_deref().is_some_and(|c| c.trim().is_empty()) {
            bail!("--channel must not be empty");
        }
        if self.channel.is_some() && !self.target.is_empty() {
            bail!("--target names channels of a `channel` column; with --channel use --role");
        }
        Ok(())
    }
}

/// Read the CSV and the segments; one record per channel (roles filled in
/// later).
fn gather(args: &ImportArgs) -> Result<Vec<ImportRecord>> {
    // Bounded: a file over 2 GiB or with a line over 1 MiB is refused early.
    let bytes = io::text::read_text_input(&args.csv)?;
    let checksum = format!("{:032x}", xxhash_rust::xxh3::xxh3_128(&bytes));
    let name = args.csv.display().to_string();
    let groups: Vec<(String, Vec<Trigger>)> = match &args.channel {
        Some(ch) => {
            let by = io::text::parse_trigger_csv_by_channel(&bytes, &name)?;
            if let Some(by) = by.filter(|b| b.len() > 1) {
                bail!(
                    "{name}: the `channel` column holds {} channels ({}); drop --channel to \
                     import each as its own channel",
                    by.len(),
                    by.keys().take(3).cloned().collect::<Vec<_>>().join(", ")
                );
            }
            vec![(ch.clone(), io::text::parse_trigger_csv(&bytes, &name)?)]
        }
        None => match io::text::parse_trigger_csv_by_channel(&bytes, &name)? {
            Some(by) => by.into_iter().collect(),
            None => bail!("{name}: no `channel` column: name the channel with --channel"),
        },
    };
    for t in &args.target {
        if !groups.iter().any(|(c, _)| c == t) {
            bail!("--target {t:?}: no such channel in {name}");
        }
    }
    let segments = match &args.segments {
        Some(p) => {
            let (segs, warnings) = io::read_segments_file(p)?;
            for w in &warnings {
                warn(w);
            }
            Some((segs, p))
        }
        None => None,
    };
    let mut out = Vec::new();
    for (channel, triggers) in groups {
        let (analysed, source) = match &segments {
            Some((segs, p)) => {
                let outside = triggers.iter().filter(|t| !segs.contains(t.t_peak)).count();
                if outside > 0 {
                    warn(&format!(
                        "{name}: {outside} of {} triggers of {channel} peak outside the segments of {}",
                        triggers.len(),
                        p.display()
                    ));
                }
                (segs.clone(), "file")
            }
            None => {
                if triggers.is_empty() {
                    bail!("{name}: no triggers and no --segments: nothing to record");
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
                    "{name}: no --segments given: analysed time of {channel} taken as the span \
                     of its triggers [{lo}, {hi}); live time and rates are then approximate"
                ));
                (SegmentList::single(lo, hi), "trigger_span")
            }
        };
        out.push(ImportRecord {
            channel,
            role: Role::Target,
            source_path: name.clone(),
            input_checksum: checksum.clone(),
            analysed,
            segments_source: source.to_string(),
            triggers,
        });
    }
    Ok(out)
}

/// Run the command.
pub fn run(g: &Global, args: ImportArgs) -> Result<ExitCode> {
    args.validate()?;
    let mut recs = gather(&args)?;
    let single = args.channel.is_some();
    let mut conn = catalogue::open(&g.db)?;
    // One transaction for every channel of the file.
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    let mut outcomes = Vec::new();
    for rec in &mut recs {
        rec.role = match (args.role, catalogue::channel_by_name(&tx, &rec.channel)?) {
            (Some(r), _) => r.into(),
            (None, Some(c)) if c.role == "aux" => Role::Aux,
            (None, Some(_)) => Role::Target,
            (None, None) if single || args.target.contains(&rec.channel) => Role::Target,
            (None, None) => Role::Aux,
        };
        outcomes.push(catalogue::import_triggers(&tx, rec)?);
    }
    tx.commit()?;
    for (rec, outcome) in recs.iter().zip(outcomes) {
        match outcome {
            InsertOutcome::Inserted { n_triggers, .. } => g.info(&format!(
                "{}: imported {n_triggers} triggers into channel {:?} ({}, {:.1} s analysed)",
                args.csv.display(),
                rec.channel,
                if rec.role == Role::Aux {
                    "aux"
                } else {
                    "target"
                },
                rec.analysed.total()
            )),
            InsertOutcome::Skipped { .. } => g.info(&format!(
                "{} ({}): {}",
                args.csv.display(),
                rec.channel,
                InsertOutcome::SKIPPED_MESSAGE
            )),
        }
    }
    Ok(ExitCode::SUCCESS)
}
