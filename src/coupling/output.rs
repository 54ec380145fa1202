//! Witness and veto reports as table, JSON or CSV, and veto segment files.
//!
//! Tables are for reading (figures rounded as in [`crate::output`]); JSON
//! and CSV keep every digit and their field names are stable. Every veto
//! output carries [`VETO_CAUTION`] and the safety figures; a veto whose
//! safety was not checked says `unchecked`, never safe. Lags are
//! `t_aux − t_target` everywhere.

use super::db::WitnessReport;
use super::lag::LAG_DEFINITION;
use super::veto::{ProposalState, Safety, VetoProposal, VetoReport, VetoRound};
use super::{WitnessStat, VETO_CAUTION};
use crate::output::write_rows;
use anyhow::{Context, Result};
use serde::Serialize;
use std::io::Write;
use std::path::{Path, PathBuf};

pub use crate::output::Format;

fn set_name(f: Option<i64>) -> String {
    f.map_or_else(|| "all".to_string(), |f| format!("family {f}"))
}

/// A chance probability from its log10 (readable where it underflows).
fn log_prob(log10: f64) -> String {
    if log10 < -300.0 {
        format!("1e{}", crate::output::fixed(log10, 1))
    } else {
        prob(10f64.powf(log10))
    }
}

/// A probability as a table shows it: 3 significant digits in exponent
/// form below 1e-3, else 4 decimals.
fn prob(p: f64) -> String {
    if p > 0.0 && p < 1e-3 {
        format!("{p:.2e}")
    } else {
        crate::output::fixed(p, 4)
    }
}

fn opt_prob(p: Option<f64>) -> String {
    p.map_or_else(|| "-".to_string(), prob)
}

/// One witness row as the table shows it.
#[derive(Debug, Default, Serialize)]
struct WitnessLine {
    set: String,
    aux_channel: String,
    aux_min_snr: f64,
    window_s: f64,
    targets: u64,
    targets_hit: u64,
    efficiency: f64,
    deadtime: f64,
    aux_hit_fraction: f64,
    lift: f64,
    chance_p: String,
    basis: String,
    false_alarm: String,
    false_alarm_any: String,
    verdict: String,
}

fn witness_line(r: &WitnessStat) -> WitnessLine {
    WitnessLine {
        set: set_name(r.family_id),
        aux_channel: r.aux_channel.clone(),
        aux_min_snr: r.aux_min_snr,
        window_s: r.window_s,
        targets: r.targets,
        targets_hit: r.targets_hit,
        efficiency: r.efficiency,
        deadtime: r.deadtime,
        aux_hit_fraction: r.aux_hit_fraction,
        lift: r.lift,
        chance_p: log_prob(r.chance_p_log10),
        basis: r.chance_basis.as_str().to_string(),
        false_alarm: format!("{} ({})", prob(r.false_alarm), r.false_alarm_basis.as_str()),
        false_alarm_any: prob(r.false_alarm_any),
        verdict: if r.beyond_chance {
            "beyond chance".to_string()
        } else {
            "chance".to_string()
        },
    }
}

/// Write a witness report. `full` writes every grid row instead of the best
/// cell per (target set, channel). The CSV holds the witness rows only;
/// JSON and table also carry the lag/frequency summaries.
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
                "lag_definition": report.lag_definition,
                "witnesses": rows,
                "lags": report.lags,
                "warnings": report.warnings,
            });
            serde_json::to_writer_pretty(&mut *out, &doc)?;
            writeln!(out)?;
        }
        Format::Csv => write_rows(out, Format::Csv, rows)?,
        Format::Table => {
            let lines: Vec<WitnessLine> = rows.iter().map(witness_line).collect();
            write_rows(out, Format::Table, &lines)?;
            writeln!(
                out,
                "chance_p: probability of the cell's count by chance (basis: targets_poisson, \
                 aux_binomial or slides); false_alarm: the channel's best cell of its grid at \
                 least this extreme (time slides); false_alarm_any: any of the channels compared."
            )?;
            if !report.lags.is_empty() {
                writeln!(
                    out,
                    "\nLag ({LAG_DEFINITION}) and frequency relation of each set's best witness:"
                )?;
                for l in &report.lags {
                    writeln!(
                        out,
                        "{:<10} {:<28} pairs {:>6}  peak lag {:>10} s  median lag {:>10} s  f_aux/f_target {:>7} ({})",
                        set_name(l.family_id),
                        l.aux_channel,
                        l.pairs,
                        l.lag_peak_s.map_or("-".into(), |x| crate::output::fixed(x, 4)),
                        l.lag_median_s.map_or("-".into(), |x| crate::output::fixed(x, 4)),
                        l.freq_ratio_median.map_or("-".into(), |x| crate::output::fixed(x, 3)),
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

/// One round as the table shows it.
#[derive(Debug, Default, Serialize)]
struct RoundLine {
    set: String,
    round: u32,
    aux_channel: String,
    aux_min_snr: f64,
    window_s: f64,
    targets_hit: u64,
    efficiency: f64,
    deadtime: f64,
    lift: f64,
    chance_p: String,
    basis: String,
    false_alarm: String,
    total_efficiency: f64,
    total_deadtime: f64,
    injections_vetoed: String,
    safety_p: String,
    safety: String,
}

fn injections_cell(k: Option<u64>, n: Option<u64>, chance: Option<f64>) -> String {
    match (k, n) {
        (Some(k), Some(n)) => format!(
            "{k}/{n} (chance {})",
            crate::output::fixed(chance.unwrap_or(0.0), 2)
        ),
        _ => "-".to_string(),
    }
}

fn safety_cell(s: Safety) -> String {
    match s {
        Safety::Safe => "safe".into(),
        Safety::Unsafe => "UNSAFE".into(),
        Safety::Unchecked => "UNCHECKED".into(),
    }
}

fn round_line(r: &VetoRound) -> RoundLine {
    RoundLine {
        set: set_name(r.family_id),
        round: r.round,
        aux_channel: r.aux_channel.clone(),
        aux_min_snr: r.aux_min_snr,
        window_s: r.window_s,
        targets_hit: r.targets_hit,
        efficiency: r.efficiency,
        deadtime: r.deadtime,
        lift: r.lift,
        chance_p: log_prob(r.chance_p_log10),
        basis: r.chance_basis.as_str().to_string(),
        false_alarm: format!("{} ({})", prob(r.false_alarm), r.false_alarm_basis.as_str()),
        total_efficiency: r.total_efficiency,
        total_deadtime: r.total_deadtime,
        injections_vetoed: injections_cell(r.injections_vetoed, r.injections, r.injections_chance),
        safety_p: opt_prob(r.safety_binomial_p),
        safety: safety_cell(r.safety),
    }
}

/// One proposal as the table shows it.
#[derive(Debug, Default, Serialize)]
struct ProposalLine {
    aux_channel: String,
    state: String,
    deadtime: f64,
    covered_s: f64,
    efficiency: f64,
    injections_vetoed: String,
    safety_p: String,
    safety_p_poisson: String,
    rounds: String,
}

fn proposal_line(p: &VetoProposal) -> ProposalLine {
    ProposalLine {
        aux_channel: p.aux_channel.clone(),
        state: match p.state {
            ProposalState::Proposed => "proposed".into(),
            ProposalState::Unchecked => "UNCHECKED".into(),
            ProposalState::Unsafe => "UNSAFE".into(),
        },
        deadtime: p.deadtime,
        covered_s: p.covered_s,
        efficiency: p.efficiency,
        injections_vetoed: injections_cell(p.injections_vetoed, p.injections, p.injections_chance),
        safety_p: opt_prob(p.safety_binomial_p),
        safety_p_poisson: opt_prob(p.safety_poisson_p),
        rounds: p.rounds.clone(),
    }
}

/// One CSV row: a round with its safety figures, the state and combined
/// deadtime of its channel's proposal, and the caution (so the caution
/// travels with every row of the file). Fields as in [`VetoRound`].
#[derive(Debug, Default, Serialize)]
struct CsvRound {
    mode: String,
    family_id: Option<i64>,
    round: u32,
    aux_channel_id: i64,
    aux_channel: String,
    aux_min_snr: f64,
    window_s: f64,
    targets: u64,
    targets_hit: u64,
    efficiency: f64,
    deadtime: f64,
    aux_hit_fraction: f64,
    lift: f64,
    chance_p: f64,
    chance_p_log10: f64,
    chance_basis: String,
    false_alarm: f64,
    false_alarm_basis: String,
    channels_compared: u32,
    covered_s: f64,
    total_efficiency: f64,
    total_deadtime: f64,
    injections: Option<u64>,
    injections_vetoed: Option<u64>,
    injections_chance: Option<f64>,
    safety_binomial_p: Option<f64>,
    safety_poisson_p: Option<f64>,
    safety: String,
    proposal_state: String,
    proposal_deadtime: Option<f64>,
    caution: String,
}

fn csv_round(r: &VetoRound, p: Option<&VetoProposal>) -> CsvRound {
    CsvRound {
        mode: r.mode.clone(),
        family_id: r.family_id,
        round: r.round,
        aux_channel_id: r.aux_channel_id,
        aux_channel: r.aux_channel.clone(),
        aux_min_snr: r.aux_min_snr,
        window_s: r.window_s,
        targets: r.targets,
        targets_hit: r.targets_hit,
        efficiency: r.efficiency,
        deadtime: r.deadtime,
        aux_hit_fraction: r.aux_hit_fraction,
        lift: r.lift,
        chance_p: r.chance_p,
        chance_p_log10: r.chance_p_log10,
        chance_basis: r.chance_basis.as_str().to_string(),
        false_alarm: r.false_alarm,
        false_alarm_basis: r.false_alarm_basis.as_str().to_string(),
        channels_compared: r.channels_compared,
        covered_s: r.covered_s,
        total_efficiency: r.total_efficiency,
        total_deadtime: r.total_deadtime,
        injections: r.injections,
        injections_vetoed: r.injections_vetoed,
        injections_chance: r.injections_chance,
        safety_binomial_p: r.safety_binomial_p,
        safety_poisson_p: r.safety_poisson_p,
        safety: r.safety.as_str().to_string(),
        proposal_state: p.map_or("none".into(), |p| p.state.as_str().to_string()),
        proposal_deadtime: p.map(|p| p.deadtime),
        caution: VETO_CAUTION.to_string(),
    }
}

/// Write a veto report (rounds of every mode, then one proposal per
/// channel). Table footer, JSON `caution` and a CSV column carry
/// [`VETO_CAUTION`]; each round and proposal carries its safety figures.
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
            let rows: Vec<CsvRound> = report
                .rounds
                .iter()
                .map(|r| {
                    let p = report
                        .proposals
                        .iter()
                        .find(|p| p.aux_channel_id == r.aux_channel_id);
                    csv_round(r, p)
                })
                .collect();
            write_rows(out, Format::Csv, &rows)?;
        }
        Format::Table => {
            if report.rounds.is_empty() {
                writeln!(
                    out,
                    "(no round reached a false-alarm probability below {})",
                    report.params.false_alarm
                )?;
            } else {
                let lines: Vec<RoundLine> = report.rounds.iter().map(round_line).collect();
                write_rows(out, Format::Table, &lines)?;
                writeln!(
                    out,
                    "false_alarm: the round's pick at least this extreme by chance among every \
                     channel and cell compared; rounds stop above {}.",
                    report.params.false_alarm
                )?;
            }
            if !report.proposals.is_empty() {
                writeln!(
                    out,
                    "\nOne proposal per aux channel (all its rounds merged):"
                )?;
                let lines: Vec<ProposalLine> = report.proposals.iter().map(proposal_line).collect();
                write_rows(out, Format::Table, &lines)?;
                writeln!(
                    out,
                    "Combined, every proposal not unsafe: deadtime {} ({} s of {} s), efficiency {}.",
                    prob(report.combined_deadtime),
                    crate::output::fixed(
                        report.combined_deadtime
                            * report.proposals.first().map_or(0.0, |p| p.analysed_s),
                        1
                    ),
                    crate::output::fixed(report.proposals.first().map_or(0.0, |p| p.analysed_s), 1),
                    crate::output::fixed(report.combined_efficiency, 4)
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

/// How safety was decided, or that it was not checked.
pub fn safety_note(report: &VetoReport) -> String {
    match report.injections_given {
        Some(n) => format!(
            "Safety: {n} injections given, each veto judged on those inside the analysed time \
             (vetoed/inside in its row); a veto is unsafe (not proposed) when \
             P(X >= injections vetoed | Binomial(injections, deadtime)) < {:e} (common practice); \
             the Poisson figure is shown for reference. A veto is UNCHECKED when its injections \
             are too few to show it unsafe at its deadtime (even all vetoed would not be below \
             the limit).",
            report.params.safety_p
        ),
        None => "Safety: NOT CHECKED (no injections given): every veto is UNCHECKED; run with \
                 --injections before proposing any veto."
            .to_string(),
    }
}

/// A channel name made safe for a file name: anything outside
/// `[A-Za-z0-9._-]` becomes `_` (so `Z1:SEIS_X out/1-b` → `Z1_SEIS_X_out_1-b`).
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

/// File stem of a proposal's segment file: `veto_<channel>`.
pub fn segment_file_stem(p: &VetoProposal) -> String {
    format!("veto_{}", sanitise_channel(&p.aux_channel))
}

/// Write one segment list per proposal that is `proposed` or `unchecked`
/// into `dir` (created if needed): `<stem>.txt` with `start end` lines (GPS
/// s, 6 decimals) headed by the state and the caution, and `<stem>.json`
/// metadata (the proposal, its rounds, safety figures, parameters and the
/// caution). Unsafe proposals get no file. Returns the files written.
///
/// # Errors
/// I/O errors, naming the file.
pub fn write_veto_segments(report: &VetoReport, dir: &Path) -> Result<Vec<PathBuf>> {
    std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
    let mut written = Vec::new();
    for p in report
        .proposals
        .iter()
        .filter(|p| p.state != ProposalState::Unsafe)
    {
        let stem = segment_file_stem(p);
        let txt = dir.join(format!("{stem}.txt"));
        let state = match p.state {
            ProposalState::Proposed => "proposed (safe against the injections given)",
            _ => "UNCHECKED (no injections given: safety NOT checked)",
        };
        let mut body = format!(
            "# veto proposal: {} — state: {state}\n# rounds: {}\n# combined deadtime {} \
             ({} s), efficiency {}\n# {}\n",
            p.aux_channel, p.rounds, p.deadtime, p.covered_s, p.efficiency, VETO_CAUTION
        );
        for s in p.segments.segments() {
            body.push_str(&format!("{:.6} {:.6}\n", s.start, s.end));
        }
        std::fs::write(&txt, body).with_context(|| format!("writing {}", txt.display()))?;
        let rounds: Vec<&VetoRound> = report
            .rounds
            .iter()
            .filter(|r| r.aux_channel_id == p.aux_channel_id && r.safety != Safety::Unsafe)
            .collect();
        let meta = serde_json::json!({
            "caution": VETO_CAUTION,
            "segments_file": txt.file_name().map(|f| f.to_string_lossy().to_string()),
            "proposal": p,
            "rounds": rounds,
            "state": p.state,
            "safety": p.safety,
            "safety_note": safety_note(report),
            "conventions": report.conventions,
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
        assert_eq!(sanitise_channel("Z1:SEIS_X out/1-b"), "Z1_SEIS_X_out_1-b");
    }
}
