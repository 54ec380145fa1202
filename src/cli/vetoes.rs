//! `glitchbook vetoes`: hierarchical veto rounds with a safety check against
//! injections; proposals for the instrument team, never applied here.
use super::common::print_listing;
use super::witnesses::GridArgs;
use super::{warn, Global};
use anyhow::{bail, Context, Result};
use glitchbook::catalogue;
use glitchbook::coupling::{
    run_vetoes, write_veto_segments, write_vetoes, VetoParams, VetoReport, VETO_CAUTION,
};
use glitchbook::io::text::read_injections;
use glitchbook::output::{write_rows, Format};
use serde::Serialize;
use std::path::PathBuf;
use std::process::ExitCode;

/// Propose vetoes: each round keeps the most significant (aux channel,
/// threshold, window), removes what it vetoes and repeats until the
/// significance falls below --min-significance. With --injections, a round
/// that vetoes more injections than chance allows is marked unsafe and not
/// proposed. Every output carries the caution that proposals are for the
/// instrument team to validate.
#[derive(Debug, clap::Args)]
#[command(allow_negative_numbers = true)]
pub struct VetoesArgs {
    /// Injections CSV (a `time` column, GPS s) for the safety check.
    #[arg(long, value_name = "CSV")]
    pub injections: Option<PathBuf>,
    /// Write one segment file (`start end`, GPS s) and one JSON metadata
    /// file per proposed veto, plus `vetoes.json` (the whole report), here.
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Stop the rounds when the best significance (−log10 Poisson
    /// probability) is below X.
    #[arg(long, value_name = "X", default_value_t = 5.0)]
    pub min_significance: f64,
    /// A veto is unsafe when P(injections vetoed ≥ n | chance) is below P
    /// (common practice: 1e-5).
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
        if !self.min_significance.is_finite() || self.min_significance < 0.0 {
            bail!(
                "--min-significance must be a finite number ≥ 0, got {}",
                self.min_significance
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
            min_significance: self.min_significance,
            safety_p: self.safety_p,
            per_family: !self.no_families,
            max_rounds: self.max_rounds,
            target_min_snr: self.grid.target_min_snr()?,
        };
        p.check()?;
        Ok(p)
    }
}

/// One CSV row: a round with its safety figures and the caution (so the
/// caution travels with every row of the file).
#[derive(Debug, Default, Serialize)]
struct CsvRound {
    mode: String,
    family_id: Option<i64>,
    round: u32,
    aux_channel_id: i64,
    channel: String,
    snr_threshold: f64,
    window_s: f64,
    n_target: u64,
    n_coinc: u64,
    efficiency: f64,
    deadtime: f64,
    use_percentage: f64,
    expected: f64,
    significance: f64,
    vetoed_s: f64,
    cum_efficiency: f64,
    cum_deadtime: f64,
    safety_checked: bool,
    n_inj: Option<u64>,
    n_inj_vetoed: Option<u64>,
    inj_expected: Option<f64>,
    safety_p: Option<f64>,
    safety_p_binomial: Option<f64>,
    safe: bool,
    proposed: bool,
    caution: String,
}

fn csv_rows(report: &VetoReport) -> Vec<CsvRound> {
    report
        .rounds
        .iter()
        .map(|r| CsvRound {
            mode: r.mode.clone(),
            family_id: r.family_id,
            round: r.round,
            aux_channel_id: r.aux_channel_id,
            channel: r.channel.clone(),
            snr_threshold: r.snr_threshold,
            window_s: r.window_s,
            n_target: r.n_target,
            n_coinc: r.n_coinc,
            efficiency: r.efficiency,
            deadtime: r.deadtime,
            use_percentage: r.use_percentage,
            expected: r.expected,
            significance: r.significance,
            vetoed_s: r.vetoed_s,
            cum_efficiency: r.cum_efficiency,
            cum_deadtime: r.cum_deadtime,
            safety_checked: report.n_injections.is_some(),
            n_inj: r.n_inj,
            n_inj_vetoed: r.n_inj_vetoed,
            inj_expected: r.inj_expected,
            safety_p: r.safety_p,
            safety_p_binomial: r.safety_p_binomial,
            safe: r.safe,
            proposed: r.proposed,
            caution: report.caution.clone(),
        })
        .collect()
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
    if report.n_injections.is_none() {
        warn("safety NOT CHECKED (no --injections): do not propose these vetoes without it");
    }
    let mut buf = Vec::new();
    match args.format {
        Format::Csv => write_rows(&mut buf, Format::Csv, &csv_rows(&report))?,
        f => write_vetoes(&report, f, &mut buf)?,
    }
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
            "wrote {} segment files and {} metadata files for the proposed vetoes, and {}",
            files.len() / 2,
            files.len() / 2,
            summary.display()
        ));
    }
    let proposed = report.rounds.iter().filter(|r| r.proposed).count();
    g.info(&format!(
        "veto run {} stored: {} rounds, {proposed} proposed",
        report.run_id.unwrap_or(0),
        report.rounds.len()
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
            (&["--min-significance", "-1"][..], "--min-significance"),
            (&["--max-rounds", "0"][..], "--max-rounds"),
            (&["--windows", "0"][..], "--windows"),
        ] {
            let e = parse(args).unwrap_err().to_string();
            assert!(e.starts_with(flag), "{args:?}: {e}");
        }
    }
}
