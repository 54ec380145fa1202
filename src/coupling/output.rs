//! Writers for witness tables and veto rounds (`table`, `json`, `csv`) and
//! the `--out DIR` segment files. JSON field names are snake_case and
//! stable. Every veto output carries [`VETO_CAUTION`] and the safety figures.

use super::db::WitnessReport;
use super::veto::{VetoReport, VetoRound};
use super::{WitnessStat, VETO_CAUTION};
use anyhow::{Context, Result};
use std::io::Write;
use std::path::{Path, PathBuf};

pub use crate::output::Format;

fn set_name(f: Option<i64>) -> String {
    f.map_or_else(|| "all".to_string(), |f| format!("family {f}"))
}

fn opt(x: Option<f64>, prec: usize) -> String {
    x.map_or_else(|| "-".to_string(), |v| format!("{v:.prec$}"))
}

/// Write a witness report. `full` writes every grid row instead of the best
/// (threshold, window) per (target set, channel). The CSV holds the witness
/// rows only; JSON and table also carry the lag/frequency summaries.
///
/// # Errors
/// I/O or serialisation errors.
pub fn write_witnesses(
    report: &WitnessReport,
    format: Format,
    full: bool,
    out: &mut dyn Write,
) -> Result<()> {
    let rows: &[WitnessStat] = if full { &report.rows } else { &report.best };
    match format {
        Format::Json => {
            let doc = serde_json::json!({
                "run_id": report.run_id,
                "params": report.params,
                "witnesses": rows,
                "lags": report.lags,
                "warnings": report.warnings,
            });
            serde_json::to_writer_pretty(&mut *out, &doc)?;
            writeln!(out)?;
        }
        Format::Csv => {
            let mut w = csv::Writer::from_writer(out);
            for r in rows {
                w.serialize(r)?;
            }
            w.flush()?;
        }
        Format::Table => {
            writeln!(
                out,
                "{:<10} {:<28} {:>6} {:>6} {:>7} {:>7} {:>7} {:>9} {:>6} {:>9} {:>8} {:>9}",
                "set",
                "channel",
                "snr>=",
                "win_s",
                "n_tgt",
                "n_coinc",
                "eff",
                "deadtime",
                "use%",
                "expected",
                "signif",
                "eff/dt"
            )?;
            for r in rows {
                writeln!(
                    out,
                    "{:<10} {:<28} {:>6} {:>6} {:>7} {:>7} {:>7.3} {:>9.2e} {:>6.1} {:>9.3} {:>8.2} {:>9.1}",
                    set_name(r.family_id),
                    r.channel,
                    r.snr_threshold,
                    r.window_s,
                    r.n_target,
                    r.n_coinc,
                    r.efficiency,
                    r.deadtime,
                    r.use_percentage,
                    r.expected,
                    r.significance,
                    r.efficiency_over_deadtime
                )?;
            }
            if !report.lags.is_empty() {
                writeln!(
                    out,
                    "\nLag (t_target - t_aux) and frequency relation of each set's best witness:"
                )?;
                for l in &report.lags {
                    writeln!(
                        out,
                        "{:<10} {:<28} pairs {:>6}  peak lag {:>10} s  median lag {:>10} s  f_aux/f_target {:>7} ({})",
                        set_name(l.family_id),
                        l.channel,
                        l.n_pairs,
                        opt(l.peak_lag_s, 4),
                        opt(l.median_lag_s, 4),
                        opt(l.freq_ratio_median, 3),
                        l.freq_relation
                    )?;
                }
            }
            for w in &report.warnings {
                writeln!(out, "warning: {w}")?;
            }
        }
    }
    Ok(())
}

/// Write a veto report (rounds of every mode). Table footer and JSON
/// `caution` carry [`VETO_CAUTION`]; each round carries its safety figures.
///
/// # Errors
/// I/O or serialisation errors.
pub fn write_vetoes(report: &VetoReport, format: Format, out: &mut dyn Write) -> Result<()> {
    match format {
        Format::Json => {
            serde_json::to_writer_pretty(&mut *out, report)?;
            writeln!(out)?;
        }
        Format::Csv => {
            let mut w = csv::Writer::from_writer(out);
            for r in &report.rounds {
                w.serialize(r)?;
            }
            w.flush()?;
        }
        Format::Table => {
            writeln!(
                out,
                "{:<10} {:>5} {:<28} {:>6} {:>6} {:>7} {:>9} {:>6} {:>8} {:>7} {:>9} {:>12} {:>9} {:>9} {:>8}",
                "set", "round", "channel", "snr>=", "win_s", "eff", "deadtime", "use%", "signif",
                "cum_eff", "cum_dt", "inj_vetoed", "inj_exp", "safety_p", "proposed"
            )?;
            for r in &report.rounds {
                writeln!(
                    out,
                    "{:<10} {:>5} {:<28} {:>6} {:>6} {:>7.3} {:>9.2e} {:>6.1} {:>8.2} {:>7.3} {:>9.2e} {:>12} {:>9} {:>9} {:>8}",
                    set_name(r.family_id),
                    r.round,
                    r.channel,
                    r.snr_threshold,
                    r.window_s,
                    r.efficiency,
                    r.deadtime,
                    r.use_percentage,
                    r.significance,
                    r.cum_efficiency,
                    r.cum_deadtime,
                    r.n_inj_vetoed.map_or_else(|| "-".to_string(), |k| format!("{k}/{}", r.n_inj.unwrap_or(0))),
                    opt(r.inj_expected, 3),
                    r.safety_p.map_or_else(|| "-".to_string(), |p| format!("{p:.2e}")),
                    if r.proposed { "yes" } else { "UNSAFE" }
                )?;
            }
            if report.rounds.is_empty() {
                writeln!(
                    out,
                    "(no veto reached significance {})",
                    report.params.min_significance
                )?;
            }
            writeln!(out)?;
            writeln!(out, "{}", safety_note(report))?;
            for w in &report.warnings {
                writeln!(out, "warning: {w}")?;
            }
            writeln!(out, "CAUTION: {VETO_CAUTION}")?;
        }
    }
    Ok(())
}

fn safety_note(report: &VetoReport) -> String {
    match report.n_injections {
        Some(n) => format!(
            "Safety: {n} injections; a veto is unsafe (not proposed) when \
             P(N >= injections vetoed | Poisson N_inj x deadtime) < {:e} (common practice).",
            report.params.safety_p
        ),
        None => "Safety: NOT CHECKED (no injections given); run with --injections before \
                 proposing any veto."
            .to_string(),
    }
}

/// A channel name made safe for a file name: anything outside
/// `[A-Za-z0-9._-]` becomes `_` (so `X1:SUS-ETM_L2` → `X1_SUS-ETM_L2`).
pub fn sanitise_channel(name: &str) -> String {
    name.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-') {
                c
            } else {
                '_'
            }
        })
        .collect()
}

/// File stem of a round's segment file: `veto_<round>_<channel>` in mode
/// `all`, `veto_family<id>_<round>_<channel>` in mode `family`.
pub fn segment_file_stem(r: &VetoRound) -> String {
    match r.family_id {
        None => format!("veto_{}_{}", r.round, sanitise_channel(&r.channel)),
        Some(f) => format!(
            "veto_family{f}_{}_{}",
            r.round,
            sanitise_channel(&r.channel)
        ),
    }
}

/// Write one segment list per *proposed* round into `dir` (created if
/// needed): `<stem>.txt` with `start end` lines (GPS s, 6 decimals) and
/// `<stem>.json` metadata (the round's figures, safety figures, parameters
/// and the caution). Returns the files written.
///
/// # Errors
/// I/O errors, naming the file.
pub fn write_veto_segments(report: &VetoReport, dir: &Path) -> Result<Vec<PathBuf>> {
    std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
    let mut written = Vec::new();
    for r in report.rounds.iter().filter(|r| r.proposed) {
        let stem = segment_file_stem(r);
        let txt = dir.join(format!("{stem}.txt"));
        let mut body = format!(
            "# veto proposal: {} snr>={} window +-{} s ({} round {})\n# {}\n",
            r.channel, r.snr_threshold, r.window_s, r.mode, r.round, VETO_CAUTION
        );
        for s in r.segments.segments() {
            body.push_str(&format!("{:.6} {:.6}\n", s.start, s.end));
        }
        std::fs::write(&txt, body).with_context(|| format!("writing {}", txt.display()))?;
        let meta = serde_json::json!({
            "caution": VETO_CAUTION,
            "segments_file": txt.file_name().map(|f| f.to_string_lossy().to_string()),
            "n_segments": r.segments.segments().len(),
            "segments_total_s": r.segments.total(),
            "round": r,
            "safety_checked": report.n_injections.is_some(),
            "safety_note": safety_note(report),
            "params": report.params,
            "tool_version": env!("CARGO_PKG_VERSION"),
        });
        let json = dir.join(format!("{stem}.json"));
        std::fs::write(&json, serde_json::to_string_pretty(&meta)? + "\n")
            .with_context(|| format!("writing {}", json.display()))?;
        written.push(txt);
        written.push(json);
    }
    Ok(written)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sanitise_colons_and_spaces() {
        assert_eq!(
            sanitise_channel("X1:SUS-ETM_L2 out/1"),
            "X1_SUS-ETM_L2_out_1"
        );
    }
}
