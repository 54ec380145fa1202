//! `glitchbook witnesses`: which aux channels fire together with target
//! triggers (all, or per family), over a grid of aux SNR thresholds and
//! windows, with chance and false-alarm probabilities from time slides.
use super::common::{finite, print_listing};
use super::{warn, Global};
use anyhow::{bail, Result};
use glitchbook::catalogue;
use glitchbook::coupling::{
    run_witnesses, write_witnesses, Grid, Thresholds, WitnessParams, DEFAULT_MIN_KEPT,
    DEFAULT_SLIDES, DEFAULT_THRESHOLD_STEPS, DEFAULT_WITNESS_FALSE_ALARM,
};
use glitchbook::output::Format;
use std::process::ExitCode;

/// Grid flags shared by `witnesses` and `vetoes`.
#[derive(Debug, Clone, clap::Args)]
pub struct GridArgs {
    /// The same aux SNR thresholds for every channel, comma-separated
    /// [default: from each channel's own SNRs, see --threshold-steps].
    #[arg(long, value_name = "LIST", value_delimiter = ',')]
    pub thresholds: Vec<f64>,
    /// Thresholds per aux channel, from its own SNR distribution: each keeps
    /// geometrically fewer of its triggers, from all down to the loudest
    /// --min-kept.
    #[arg(long, value_name = "N", default_value_t = DEFAULT_THRESHOLD_STEPS)]
    pub threshold_steps: usize,
    /// Aux triggers kept at a channel's highest threshold.
    #[arg(long, value_name = "N", default_value_t = DEFAULT_MIN_KEPT)]
    pub min_kept: usize,
    /// Paddings added to each side of an aux trigger's extent [s],
    /// comma-separated [default: 0.01,0.05,0.1,0.25,0.5,1].
    #[arg(long, value_name = "LIST", value_delimiter = ',')]
    pub windows: Vec<f64>,
    /// Time slides per aux channel for the background (0: Bonferroni over
    /// the grid instead).
    #[arg(long, value_name = "N", default_value_t = DEFAULT_SLIDES)]
    pub slides: usize,
    /// Only target triggers with SNR at least X [default: all].
    #[arg(long, value_name = "X")]
    pub target_min_snr: Option<f64>,
}

impl GridArgs {
    /// Check the grid flags (no I/O); empty lists mean the defaults.
    pub fn grid(&self) -> Result<Grid> {
        let mut grid = Grid::default();
        if self.threshold_steps == 0 || self.threshold_steps > 254 {
            bail!(
                "--threshold-steps must lie in 1..=254, got {}",
                self.threshold_steps
            );
        }
        if self.min_kept == 0 {
            bail!("--min-kept must be at least 1");
        }
        grid.thresholds = Thresholds::Quantiles {
            steps: self.threshold_steps,
            min_kept: self.min_kept,
        };
        if !self.thresholds.is_empty() {
            if let Some(x) = self.thresholds.iter().find(|x| !x.is_finite() || **x < 0.0) {
                bail!("--thresholds: {x} is not a finite SNR ≥ 0");
            }
            grid.thresholds = Thresholds::Fixed(sorted_unique(&self.thresholds));
        }
        if !self.windows.is_empty() {
            if let Some(x) = self.windows.iter().find(|x| !x.is_finite() || **x <= 0.0) {
                bail!("--windows: {x} is not a finite window > 0 s");
            }
            grid.windows_s = sorted_unique(&self.windows);
        }
        grid.check()?;
        Ok(grid)
    }

    /// The `--target-min-snr` value, checked.
    pub fn target_min_snr(&self) -> Result<Option<f64>> {
        finite("target-min-snr", self.target_min_snr)
    }
}

fn sorted_unique(v: &[f64]) -> Vec<f64> {
    let mut v = v.to_vec();
    v.sort_by(f64::total_cmp);
    v.dedup();
    v
}

/// Witness channels of the target triggers: for each aux channel its best
/// threshold and window, with efficiency, deadtime, the fraction of its
/// triggers that hit a target trigger, the chance probability of the count
/// and false-alarm probabilities that allow for the grid (time slides) and
/// for the number of channels; rows consistent with chance are marked. The
/// lag (t_aux - t_target) and frequency relation of each set's best witness
/// follow. Results are stored in the catalogue.
#[derive(Debug, clap::Args)]
#[command(allow_negative_numbers = true)]
pub struct WitnessesArgs {
    /// Only this family [default: all target triggers, then every family].
    #[arg(long, value_name = "ID")]
    pub family: Option<i64>,
    #[command(flatten)]
    pub grid: GridArgs,
    /// Bins of the lag histogram.
    #[arg(long, value_name = "N", default_value_t = 21)]
    pub lag_bins: usize,
    /// Rows whose false-alarm probability over all channels compared is
    /// below P are marked beyond chance.
    #[arg(long, value_name = "P", default_value_t = DEFAULT_WITNESS_FALSE_ALARM)]
    pub false_alarm: f64,
    /// List every (threshold, window) row of the grid, not only the best per channel.
    #[arg(long)]
    pub all_rows: bool,
    /// Output format.
    #[arg(long, value_enum, default_value_t = Format::Table)]
    pub format: Format,
}

impl WitnessesArgs {
    /// Check the flags (no I/O).
    pub fn validate(&self) -> Result<WitnessParams> {
        let grid = self.grid.grid()?;
        if self.lag_bins == 0 {
            bail!("--lag-bins must be at least 1");
        }
        if !(self.false_alarm > 0.0 && self.false_alarm < 1.0) {
            bail!(
                "--false-alarm must lie strictly between 0 and 1, got {}",
                self.false_alarm
            );
        }
        Ok(WitnessParams {
            family: self.family,
            grid,
            target_min_snr: self.grid.target_min_snr()?,
            lag_bins: self.lag_bins,
            slides: self.grid.slides,
            false_alarm: self.false_alarm,
        })
    }
}

/// Run the command.
pub fn run(g: &Global, args: WitnessesArgs) -> Result<ExitCode> {
    let params = args.validate()?;
    let mut conn = catalogue::open_existing(&g.db)?;
    let report = run_witnesses(&mut conn, &params)?;
    for w in &report.warnings {
        warn(w);
    }
    let mut buf = Vec::new();
    write_witnesses(&report, args.format, args.all_rows, &mut buf)?;
    print_listing(args.format, &buf)?;
    g.info(&format!(
        "witness run {} stored ({} grid rows)",
        report.run_id,
        report.rows.len()
    ));
    Ok(ExitCode::SUCCESS)
}

#[cfg(test)]
mod tests {
    use super::*;
    fn parse(args: &[&str]) -> Result<WitnessParams> {
        crate::cli::parse_flags::<WitnessesArgs>(args).validate()
    }

    #[test]
    fn grid_flags_parse_sort_and_default() {
        let p = parse(&["--thresholds", "20,8,8", "--windows", "0.5,0.01"]).unwrap();
        assert_eq!(p.grid.thresholds, Thresholds::Fixed(vec![8.0, 20.0]));
        assert_eq!(p.grid.windows_s, vec![0.01, 0.5]);
        let p = parse(&[]).unwrap();
        assert_eq!(p, WitnessParams::default());
        let p = parse(&["--threshold-steps", "4", "--slides", "0"]).unwrap();
        assert_eq!(
            p.grid.thresholds,
            Thresholds::Quantiles {
                steps: 4,
                min_kept: DEFAULT_MIN_KEPT
            }
        );
        assert_eq!(p.slides, 0);
    }

    #[test]
    fn bad_flags_name_the_flag() {
        let e = parse(&["--windows", "0.1,-1"]).unwrap_err().to_string();
        assert!(e.starts_with("--windows"), "{e}");
        let e = parse(&["--thresholds", "nan"]).unwrap_err().to_string();
        assert!(e.starts_with("--thresholds"), "{e}");
        let e = parse(&["--lag-bins", "0"]).unwrap_err().to_string();
        assert!(e.starts_with("--lag-bins"), "{e}");
        let e = parse(&["--target-min-snr", "inf"]).unwrap_err().to_string();
        assert!(e.starts_with("--target-min-snr"), "{e}");
        let e = parse(&["--false-alarm", "1"]).unwrap_err().to_string();
        assert!(e.starts_with("--false-alarm"), "{e}");
        let e = parse(&["--threshold-steps", "0"]).unwrap_err().to_string();
        assert!(e.starts_with("--threshold-steps"), "{e}");
    }
}
