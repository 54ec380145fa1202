//! `glitchbook rates`: trigger rates per hour of live time, with Poisson
//! limits (Gehrels 1986) and change points (Bayesian blocks, Scargle et al.
//! 2013), for all target triggers and each family.
use super::common::{print_listing, RateFlags};
use super::Global;
use anyhow::Result;
use glitchbook::catalogue;
use glitchbook::output::Format;
use glitchbook::rates::format::render;
use glitchbook::rates::{auto_bin_s, live_span, rates, RateParams};
use std::process::ExitCode;

/// Rates over live time (analysed time minus dropouts) in fixed bins, with
/// one-sided Poisson limits and Bayesian-blocks change points.
#[derive(Debug, clap::Args)]
#[command(allow_negative_numbers = true)]
pub struct RatesArgs {
    /// Only this family [default: all triggers, then every family].
    #[arg(long, value_name = "ID")]
    pub family: Option<i64>,
    /// Count this channel's triggers [default: the target channel].
    #[arg(long, value_name = "NAME")]
    pub channel: Option<String>,
    /// Span, bins, SNR cut and statistics.
    #[command(flatten)]
    pub span: RateFlags,
    /// Flag bins whose live time is below this fraction of their length.
    #[arg(long, value_name = "F", default_value_t = 0.5)]
    pub min_live_fraction: f64,
    /// Output format (csv: one row per subject and bin).
    #[arg(long, value_enum, default_value_t = Format::Table)]
    pub format: Format,
}

impl RatesArgs {
    /// Check the flags (no I/O).
    pub fn validate(&self) -> Result<RateParams> {
        let p = RateParams {
            family: self.family,
            channel: self.channel.clone(),
            min_live_fraction: self.min_live_fraction,
            ..self.span.rate_params()?
        };
        p.check()?;
        Ok(p)
    }
}

/// Run the command.
pub fn run(g: &Global, args: RatesArgs) -> Result<ExitCode> {
    let mut p = args.validate()?;
    let conn = catalogue::open_read_only(&g.db)?;
    if args.span.bin.is_none() {
        let (t0, t1) = live_span(&conn, p.channel.as_deref(), p.since_gps, p.until_gps)?;
        p.bin_s = auto_bin_s(t1 - t0);
    }
    let report = rates(&conn, &p)?;
    let text = render(&report, args.format)?;
    print_listing(args.format, text.as_bytes())?;
    Ok(ExitCode::SUCCESS)
}

#[cfg(test)]
mod tests {
    use super::*;
    fn parse(args: &[&str]) -> Result<RateParams> {
        crate::cli::parse_flags::<RatesArgs>(args).validate()
    }

    #[test]
    fn defaults_match_the_library() {
        assert_eq!(parse(&[]).unwrap(), RateParams::default());
        let p = parse(&["--bin", "600", "--since", "10", "--until", "20"]).unwrap();
        assert_eq!(
            (p.bin_s, p.since_gps, p.until_gps),
            (600.0, Some(10.0), Some(20.0))
        );
    }

    #[test]
    fn bad_flags_name_the_flag() {
        for (args, flag) in [
            (&["--bin", "0"][..], "--bin"),
            (&["--bin", "-5"][..], "--bin"),
            (&["--cl", "1"][..], "--cl"),
            (&["--p0", "0"][..], "--p0"),
            (&["--min-snr", "nan"][..], "--min-snr"),
            (&["--since", "inf"][..], "--since"),
            (&["--min-live-fraction", "2"][..], "--min-live-fraction"),
        ] {
            let e = crate::cli::error_message(&parse(args).unwrap_err());
            assert!(e.starts_with(flag), "{args:?}: {e}");
        }
        let e = crate::cli::error_message(&parse(&["--since", "20", "--until", "10"]).unwrap_err());
        assert!(e.contains("--until") && e.contains("--since"), "{e}");
    }
}
