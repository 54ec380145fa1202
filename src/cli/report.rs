//! `glitchbook report`: a static HTML report (no network, no JavaScript) of
//! the catalogue: channels, families, rates, witnesses and veto proposals.
use super::common::RateFlags;
use super::Global;
use anyhow::{bail, Context, Result};
use glitchbook::catalogue;
use glitchbook::families::Thumbnail;
use glitchbook::report::{gather, write_report, ReportData, ReportParams};
use rusqlite::Connection;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// Write `DIR/index.html` and its images from the catalogue; prints the
/// absolute path of index.html. Witnesses and vetoes shown are those of the latest
/// `witnesses` and `vetoes` runs. With several target channels and no
/// `--channel`, one report per target channel goes in `DIR/<channel>/` and
/// `DIR/index.html` links them.
#[derive(Debug, clap::Args)]
#[command(allow_negative_numbers = true)]
pub struct ReportArgs {
    /// Output directory (created if needed; existing files are overwritten).
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// Span, bins, SNR cut and statistics (as in `rates`).
    #[command(flatten)]
    pub span: RateFlags,
    /// Report on this target channel [default: the only one; with several,
    /// one report each, linked from DIR/index.html].
    #[arg(long, value_name = "NAME")]
    pub channel: Option<String>,
    /// Loudest example triggers listed per family.
    #[arg(long, value_name = "N", default_value_t = 5)]
    pub examples: usize,
}

impl ReportArgs {
    /// Check the flags (no I/O). `catalogue` names the catalogue on the pages.
    pub fn validate(&self, catalogue: &str) -> Result<ReportParams> {
        if self.out.as_os_str().is_empty() {
            bail!("--out must not be empty");
        }
        // The span and rate options mean what they mean for `rates`.
        let r = self.span.rate_params()?;
        Ok(ReportParams {
            catalogue: catalogue.to_string(),
            channel: self.channel.clone(),
            since_gps: r.since_gps,
            until_gps: r.until_gps,
            min_snr: r.min_snr,
            bin_s: self.span.bin,
            cl: r.cl,
            p0: r.p0,
            max_examples: self.examples,
            ..ReportParams::default()
        })
    }
}
/// Spectrogram images of a few representative members of each family
/// (`families::report_thumbnails`); without the data, none (warned).
fn thumbnails(conn: &Connection, out_dir: &Path, d: &ReportData) -> Result<Vec<Thumbnail>> {
    let (images, missing) = glitchbook::families::report_thumbnails(
        conn,
        out_dir,
        &d.family_ids(),
        &d.witnessed_families(),
    )?;
    if let Some(why) = missing {
        super::warn(&why);
    }
    Ok(images)
}

/// Run the command.
pub fn run(g: &Global, args: ReportArgs) -> Result<ExitCode> {
    let params = args.validate(&g.db.display().to_string())?;
    if args.out.exists() && !args.out.is_dir() {
        bail!(
            "--out {}: exists and is not a directory",
            args.out.display()
        );
    }
    let conn = catalogue::open_read_only(&g.db)?;
    let targets: Vec<String> = conn
        .prepare("SELECT name FROM channels WHERE role = 'target' ORDER BY name")?
        .query_map([], |r| r.get(0))?
        .collect::<rusqlite::Result<_>>()?;
    let staging = glitchbook::report::Staging::new(&args.out)
        .with_context(|| format!("--out {}", args.out.display()))?;
    if params.channel.is_none() && targets.len() > 1 {
        // One report per target channel, and an index linking them.
        let mut links = Vec::new();
        for name in &targets {
            let sub = dir_name(name);
            let dir = staging.path().join(&sub);
            std::fs::create_dir_all(&dir).with_context(|| format!("creating {}", dir.display()))?;
            let p = ReportParams {
                channel: Some(name.clone()),
                ..params.clone()
            };
            let data = gather(&conn, &p).with_context(|| format!("report of {name}"))?;
            let thumbs = thumbnails(&conn, &dir, &data)?;
            write_report(&data, &dir, &thumbs)?;
            links.push((name.clone(), sub));
        }
        write_index(staging.path(), &links)?;
    } else {
        let data = gather(&conn, &params)?;
        let thumbs = thumbnails(&conn, staging.path(), &data)?;
        write_report(&data, staging.path(), &thumbs)?;
    }
    let index = staging.publish()?;
    // Absolute, so it can be pasted into a browser from anywhere.
    let index = std::path::absolute(&index).unwrap_or(index);
    writeln!(std::io::stdout(), "{}", index.display())?;
    Ok(ExitCode::SUCCESS)
}

/// A directory name for a channel: letters, digits, `-` and `.` kept, the
/// rest `_`.
fn dir_name(channel: &str) -> String {
    channel
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '.' {
                c
            } else {
                '_'
            }
        })
        .collect()
}

/// `DIR/index.html` linking the report of each target channel.
fn write_index(dir: &Path, links: &[(String, String)]) -> Result<()> {
    let esc = |s: &str| {
        s.replace('&', "&amp;")
            .replace('<', "&lt;")
            .replace('>', "&gt;")
            .replace('"', "&quot;")
    };
    let mut html = String::from(
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\
         <title>glitchbook reports</title></head><body>\n<h1>glitchbook reports</h1>\n\
         <p>The catalogue has several target channels: one report each \
         (<code>glitchbook report --channel NAME</code> writes one alone).</p>\n<ul>\n",
    );
    for (name, sub) in links {
        html.push_str(&format!(
            "<li><a href=\"{}/index.html\">{}</a></li>\n",
            esc(sub),
            esc(name)
        ));
    }
    html.push_str("</ul>\n</body></html>\n");
    let p = dir.join("index.html");
    std::fs::write(&p, html).with_context(|| format!("writing {}", p.display()))
}

#[cfg(test)]
mod tests {
    use super::*;
    fn parse(args: &[&str]) -> Result<ReportParams> {
        crate::cli::parse_flags::<ReportArgs>(args).validate("c.db")
    }

    #[test]
    fn flags_map_to_params() {
        let p = parse(&["--out", "r", "--since", "5", "--examples", "2"]).unwrap();
        assert_eq!((p.since_gps, p.max_examples), (Some(5.0), 2));
        assert_eq!(p.catalogue, "c.db");
        assert_eq!(p.bin_s, ReportParams::default().bin_s);
    }

    #[test]
    fn bad_flags_name_the_flag() {
        for (args, flag) in [
            (&["--out", "r", "--bin", "0"][..], "--bin"),
            (&["--out", "r", "--cl", "7"][..], "--cl"),
            (&["--out", "r", "--until", "nan"][..], "--until"),
        ] {
            let e = crate::cli::error_message(&parse(args).unwrap_err());
            assert!(e.starts_with(flag), "{args:?}: {e}");
        }
        let e = crate::cli::error_message(
            &parse(&["--out", "r", "--since", "9", "--until", "3"]).unwrap_err(),
        );
        assert!(e.contains("--until"), "{e}");
    }
}
