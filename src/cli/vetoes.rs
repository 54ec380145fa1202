//! `glitchbook vetoes`: veto rounds (hierarchical method) with a safety check
//! against injections and one proposal per aux channel; proposals for the
//! instrument team, never applied here.
use super::common::print_listing;
use super::witnesses::GridArgs;
use super::{warn, Global};
use anyhow::{bail, Context, Result};
use glitchbook::catalogue;
use glitchbook::coupling::veto::DEFAULT_ROUND_FALSE_ALARM;
use glitchbook::coupling::{
    run_vetoes, write_veto_segments, write_vetoes, VetoParams, VETO_CAUTION,
};
use glitchbook::io::text::read_injections;
use glitchbook::output::Format;
use std::path::PathBuf;
use std::process::ExitCode;

/// Propose vetoes: each round picks the (aux channel, threshold, window)
/// least likely by chance, removes what it vetoes and repeats while the
/// pick's false-alarm probability over every channel and cell stays below
/// --false-alarm. With --injections, a veto that holds more injections than
/// chance allows (exact binomial) is unsafe and not proposed; without, every
/// veto is UNCHECKED. The rounds of one channel are merged into one proposal
/// with its combined deadtime. Every output carries the caution that
/// proposals are for the instrument team to validate.
#[derive(Debug, clap::Args)]
#[command(allow_negative_numbers = true)]
pub struct VetoesArgs {
    /// Injections CSV (a `time` column, GPS s) for the safety check.
    #[arg(long, value_name = "CSV")]
    pub injections: Option<PathBuf>,
    /// Write one segment file (`start end`, GPS s) and one JSON metadata
    /// file per aux channel's proposal (proposed or unchecked), plus
    /// `vetoes.json` (the whole report), here.
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Stop the rounds when the pick's false-alarm probability over every
    /// channel and cell is above P.
    #[arg(long, value_name = "P", default_value_t = DEFAULT_ROUND_FALSE_ALARM)]
    pub false_alarm: f64,
    /// A veto is unsafe when P(injections vetoed ≥ n | binomial chance) is
    /// below P (common practice: 1e-5).
    #[arg(long, value_name = "P", default_value_t = 1e-5)]
    pub safety_p: f64,
    /// Only the rounds over all target triggers (no per-family rounds).
    #[arg(long)]
    pub no_families: bool,
    /// At most N rounds per mode/family.
    #[arg(long, value_name = "N", default_value_t = 100)]
    pub max_rounds: usize,
    #[command(flatten)]
    pub grid: GridArgs,
    /// Output format.
    #[arg(long, value_enum, default_value_t = Format::Table)]
    pub format: Format,
}

impl VetoesArgs {
    /// Check the flags (no I/O).
    pub fn validate(&self) -> Result<VetoParams> {
        if !(self.false_alarm > 0.0 && self.false_alarm < 1.0) {
            bail!(
                "--false-alarm must lie strictly between 0 and 1, got {}",
                self.false_alarm
            );
        }
        if !(self.safety_p > 0.0 && self.safety_p < 1.0) {
            bail!(
                "--safety-p must lie strictly between 0 and 1, got {}",
                self.safety_p
            );
        }
        if self.max_rounds == 0 {
            bail!("--max-rounds must be at least 1");
        }
        let p = VetoParams {
            grid: self.grid.grid()?,
            slides: self.grid.slides,
            false_alarm: self.false_alarm,
            safety_p: self.safety_p,
            per_family: !self.no_families,
            max_rounds: self.max_rounds,
            target_min_snr: self.grid.target_min_snr()?,
            ..VetoParams::default()
        };
        p.check()?;
        Ok(p)
    }
}

/// Run the command.
pub fn run(g: &Global, args: VetoesArgs) -> Result<ExitCode> {
    let params = args.validate()?;
    if let Some(dir) = &args.out {
        if dir.exists() && !dir.is_dir() {
            bail!("--out {}: exists and is not a directory", dir.display());
        }
    }
    let injections = match &args.injections {
        Some(p) => {
            let inj = read_injections(p)?;
            if inj.is_empty() {
                warn(&format!(
                    "{}: no injections: the safety check has nothing to test",
                    p.display()
                ));
            }
            Some(inj)
        }
        None => None,
    };
    let mut conn = catalogue::open_existing(&g.db)?;
    let report = run_vetoes(&mut conn, &params, injections.as_deref())?;
    for w in &report.warnings {
        warn(w);
    }
    if report.injections_given.is_none() {
        warn("safety NOT CHECKED (no --injections): every veto is unchecked; do not propose any without it");
    }
    let mut buf = Vec::new();
    write_vetoes(&report, args.format, &mut buf)?;
    print_listing(args.format, &buf)?;
    if args.format == Format::Csv {
        // An empty CSV has no row to carry the caution column.
        eprintln!("glitchbook: caution: {VETO_CAUTION}");
    }
    if let Some(dir) = &args.out {
        let files = write_veto_segments(&report, dir)?;
        let summary = dir.join("vetoes.json");
        std::fs::write(&summary, serde_json::to_string_pretty(&report)? + "\n")
            .with_context(|| format!("writing {}", summary.display()))?;
        g.info(&format!(
            "wrote {} segment files and {} metadata files (one per channel's proposal), and {}",
            files.len() / 2,
            files.len() / 2,
            summary.display()
        ));
    }
    let count = |s: &str| {
        report
            .proposals
            .iter()
            .filter(|p| p.state.as_str() == s)
            .count()
    };
    g.info(&format!(
        "veto run {} stored: {} rounds; proposals: {} proposed, {} unchecked, {} unsafe",
        report.run_id.unwrap_or(0),
        report.rounds.len(),
        count("proposed"),
        count("unchecked"),
        count("unsafe")
    ));
    Ok(ExitCode::SUCCESS)
}

#[cfg(test)]
mod tests {
    use super::*;
    fn parse(args: &[&str]) -> Result<VetoParams> {
        crate::cli::parse_flags::<VetoesArgs>(args).validate()
    }

    #[test]
    fn defaults_match_the_library() {
        // The CLI defaults are the library's (VetoParams::default docs).
        assert_eq!(parse(&[]).unwrap(), VetoParams::default());
        let p = parse(&["--no-families", "--safety-p", "1e-3"]).unwrap();
        assert!(!p.per_family);
        assert_eq!(p.safety_p, 1e-3);
    }

    #[test]
    fn bad_flags_name_the_flag() {
        for (args, flag) in [
            (&["--safety-p", "2"][..], "--safety-p"),
            (&["--safety-p", "0"][..], "--safety-p"),
            (&["--false-alarm", "0"][..], "--false-alarm"),
            (&["--max-rounds", "0"][..], "--max-rounds"),
            (&["--windows", "0"][..], "--windows"),
        ] {
            let e = parse(args).unwrap_err().to_string();
            assert!(e.starts_with(flag), "{args:?}: {e}");
        }
    }
}
