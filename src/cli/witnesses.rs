//! `glitchbook witnesses`: which aux channels fire together with target
//! triggers (all, or per family), over a grid of aux SNR thresholds and
//! coincidence windows.
use super::common::{finite, print_listing};
use super::{warn, Global};
use anyhow::{bail, Result};
use glitchbook::catalogue;
use glitchbook::coupling::{run_witnesses, write_witnesses, Grid, WitnessParams};
use glitchbook::output::Format;
use std::process::ExitCode;

/// Grid flags shared by `witnesses` and `vetoes`.
#[derive(Debug, Clone, clap::Args)]
pub struct GridArgs {
    /// Aux SNR thresholds of the grid, comma-separated [default: 8,10,12,15,20,30,50,100].
    #[arg(long, value_name = "LIST", value_delimiter = ',')]
    pub thresholds: Vec<f64>,
    /// Coincidence window half-widths of the grid [s], comma-separated
    /// [default: 0.01,0.05,0.1,0.25,0.5,1].
    #[arg(long, value_name = "LIST", value_delimiter = ',')]
    pub windows: Vec<f64>,
    /// Only target triggers with SNR at least X [default: all].
    #[arg(long, value_name = "X")]
    pub target_min_snr: Option<f64>,
}

impl GridArgs {
    /// Check the grid flags (no I/O); empty lists mean the defaults.
    pub fn grid(&self) -> Result<Grid> {
        let mut grid = Grid::default();
        if !self.thresholds.is_empty() {
            if let Some(x) = self.thresholds.iter().find(|x| !x.is_finite() || **x < 0.0) {
                bail!("--thresholds: {x} is not a finite SNR ≥ 0");
            }
            grid.snr_thresholds = sorted_unique(&self.thresholds);
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

/// Witness channels of the target triggers: coincidences, deadtime,
/// efficiency, use percentage and Poisson significance for each aux channel
/// (best threshold and window per channel), with the lag and frequency
/// relation of each set's best witness. Results are stored in the catalogue.
#[derive(Debug, clap::Args)]
#[command(allow_negative_numbers = true)]
pub struct WitnessesArgs {
    /// Only this family [default: all target triggers, then every family].
    #[arg(long, value_name = "ID")]
    pub family: Option<i64>,
    #[command(flatten)]
    pub grid: GridArgs,
    /// Bins of the lag histogram over [-window, window].
    #[arg(long, value_name = "N", default_value_t = 21)]
    pub lag_bins: usize,
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
        Ok(WitnessParams {
            family: self.family,
            grid,
            target_min_snr: self.grid.target_min_snr()?,
            lag_bins: self.lag_bins,
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
        assert_eq!(p.grid.snr_thresholds, vec![8.0, 20.0]);
        assert_eq!(p.grid.windows_s, vec![0.01, 0.5]);
        let p = parse(&[]).unwrap();
        assert_eq!(p.grid, Grid::default());
        assert_eq!(p.lag_bins, 21);
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
    }
}
