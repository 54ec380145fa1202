//! Rendering [`ReportData`] to a static site.
//!
//! HTML is written with `write!` and every piece of user text (labels,
//! notes, channel names, parameters) goes through [`html_escape`]; numbers
//! are formatted here. Not a template engine: the page is one function per
//! section with loops over rows, which a template would only move into
//! another file, and a compile-time-checked engine adds a proc-macro crate
//! to every build on this 2-core machine. What keeps it safe is tested, not
//! assumed: `reliability_injection` stores `<script>` and quotes in every
//! user-text field and `report_html` checks the page escapes them.

use super::gather::{ExampleTrigger, ProposalRow, ReportData, VetoRow, WitnessRow};
use super::plots::{self, family_colour, TfPoint};
use super::VETO_CAUTION;
use crate::families::thumbnail::colour;
use crate::families::Thumbnail;
use crate::gpstime;
use crate::rates::RateSeries;
use anyhow::{Context, Result};
use std::collections::BTreeMap;
use std::fmt::Write;
use std::path::{Path, PathBuf};

/// Escape text for HTML element content and attribute values.
pub fn html_escape(s: &str) -> String {
    let mut o = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => o.push_str("&amp;"),
            '<' => o.push_str("&lt;"),
            '>' => o.push_str("&gt;"),
            '"' => o.push_str("&quot;"),
            '\'' => o.push_str("&#39;"),
            _ => o.push(c),
        }
    }
    o
}

const CSS: &str = "
body{font-family:Georgia,'DejaVu Serif',serif;margin:0;background:#f7f5f0;color:#222233}
header{background:#23314a;color:#f7f5f0;padding:18px 28px}
header h1{margin:0;font-size:26px;letter-spacing:1px}
main{padding:10px 28px 40px}
section{background:#fff;border:1px solid #d8d3c8;border-radius:6px;margin:18px 0;padding:6px 18px 14px;overflow-x:auto}
h2{color:#23314a;border-bottom:2px solid #e3a857;padding-bottom:4px}
table{border-collapse:collapse;font-size:13px;margin:8px 0}
th,td{border:1px solid #d8d3c8;padding:3px 8px;text-align:right}
th{background:#efe9dc}
td.t{text-align:left}
.prov{font-size:12px;color:#555;background:#efe9dc;padding:6px 10px;border-radius:4px}
nav{background:#fff;border:1px solid #d8d3c8;border-radius:6px;margin:12px 0;padding:2px 18px;font-size:14px}
.key{display:inline-block;width:10px;height:10px;margin:0 4px 0 10px;border-radius:2px}
.caution{border-left:6px solid #c2283d;background:#fbeaea;padding:8px 12px;font-weight:bold}
.flag{color:#c2283d;font-weight:bold}
.thumbs figure{display:inline-block;margin:4px 10px 8px 0;vertical-align:top}
.thumbs figcaption,.cbar{font-size:12px;color:#444}
svg.spec text,svg.cbar text{font-family:sans-serif;font-size:10px;fill:#333}
img.plot{max-width:100%;display:block;margin:6px 0}
table.veto,table.triage{font-size:12px}
";

fn f3(x: f64) -> String {
    format!("{x:.3}")
}

fn family_title(id: i64, label: Option<&str>) -> String {
    match label {
        Some(l) => format!("Family {id}: {}", html_escape(l)),
        None => format!("Family {id} (unnamed)"),
    }
}

fn trigger_table(o: &mut String, rows: &[ExampleTrigger]) {
    o.push_str("<table><tr><th>trigger</th><th>GPS time [s]</th><th>peak f [Hz]</th><th>SNR</th><th>Q</th></tr>\n");
    for e in rows {
        let _ = writeln!(
            o,
            "<tr><td>{}</td><td>{:.3}</td><td>{:.1}</td><td>{:.2}</td><td>{}</td></tr>",
            e.id,
            e.t_gps,
            e.f_hz,
            e.snr,
            e.q.map(|q| format!("{q:.1}")).unwrap_or("-".into())
        );
    }
    o.push_str("</table>\n");
}

/// A probability for reading: 3 significant digits in exponent form below
/// 1e-3, else 3 decimals.
fn prob(p: f64) -> String {
    if p > 0.0 && p < 1e-3 {
        format!("{p:.2e}")
    } else {
        crate::output::fixed(p, 3)
    }
}

fn opt_prob(p: Option<f64>) -> String {
    p.map(prob).unwrap_or_else(|| "-".into())
}

/// A safety or proposal state; anything but safe / proposed is flagged.
fn state_cell(s: &str) -> String {
    match s {
        "safe" | "proposed" => html_escape(s),
        other => format!(
            "<span class=\"flag\">{}</span>",
            html_escape(&other.to_uppercase())
        ),
    }
}

/// The best grid setting of each aux channel: `rows` come best first (see
/// `gather::read_witnesses`), so that is each channel's first row, and the
/// channels stay in the order of their best rows. The whole grid is one
/// command away.
fn witness_table(o: &mut String, rows: &[&WitnessRow]) {
    let mut best: Vec<&WitnessRow> = Vec::new();
    for w in rows {
        if !best.iter().any(|b| b.aux_channel == w.aux_channel) {
            best.push(w);
        }
    }
    let _ = writeln!(
        o,
        "<p>Each aux channel's best SNR threshold and window ({} of {} grid rows; \
         every row: <code>glitchbook witnesses --all-rows</code>). Chance p: probability of \
         the count by chance; false alarm: of the channel's best cell among its grid (time \
         slides) and among all channels compared.</p>",
        best.len(),
        rows.len()
    );
    let rows = best;
    o.push_str(
        "<table><tr><th>aux channel</th><th>aux SNR ≥</th><th>window ± [s]</th><th>target</th><th>hit</th>\
         <th>hit by chance</th><th>efficiency</th><th>deadtime</th><th>aux hit fraction</th>\
         <th>chance p (basis)</th><th>false alarm, this channel</th><th>false alarm, any channel</th>\
         <th>verdict</th></tr>\n",
    );
    for w in rows {
        let verdict = match w.beyond_chance {
            Some(true) => "beyond chance",
            Some(false) => "consistent with chance",
            None => "not assessed (old run)",
        };
        let _ = writeln!(
            o,
            "<tr><td class=\"t\">{}</td><td>{:.1}</td><td>{}</td><td>{}</td><td>{}</td><td>{:.2}</td>\
             <td>{:.3}</td><td>{:.2e}</td><td>{:.3}</td><td>{} ({})</td><td>{}{}</td><td>{}</td><td>{}</td></tr>",
            html_escape(&w.aux_channel),
            w.aux_min_snr,
            w.window_s,
            w.targets,
            w.targets_hit,
            w.targets_hit_chance,
            w.efficiency,
            w.deadtime,
            w.aux_hit_fraction,
            prob(w.chance_p),
            html_escape(&w.chance_basis),
            opt_prob(w.false_alarm),
            w.false_alarm_basis
                .as_deref()
                .map(|b| format!(" ({})", html_escape(b)))
                .unwrap_or_default(),
            opt_prob(w.false_alarm_any),
            verdict
        );
    }
    o.push_str("</table>\n");
}

fn veto_table(o: &mut String, rows: &[&VetoRow]) {
    let _ = writeln!(o, "<p class=\"caution\">{}</p>", html_escape(VETO_CAUTION));
    // Safety first after the setting: it is what decides a proposal.
    o.push_str(
        "<table class=\"veto\"><tr><th>round</th><th>aux channel</th><th>aux SNR ≥</th><th>window ± [s]</th>\
         <th>safety</th><th>safety p binomial (Poisson)</th><th>injections vetoed / by chance</th>\
         <th>efficiency</th><th>deadtime</th><th>aux hit fraction</th><th>chance p</th><th>false alarm</th>\
         <th>cumulative efficiency / deadtime</th></tr>\n",
    );
    let opt = |v: Option<f64>, p: usize| v.map(|x| format!("{x:.p$}")).unwrap_or("-".into());
    for v in rows {
        let _ = writeln!(
            o,
            "<tr><td>{}</td><td class=\"t\">{}</td><td>{:.1}</td><td>{}</td><td>{}</td><td>{} ({})</td><td>{} / {}</td>\
             <td>{:.3}</td><td>{:.2e}</td><td>{:.3}</td><td>{}</td><td>{}</td><td>{:.3} / {:.2e}</td></tr>",
            v.round,
            html_escape(&v.aux_channel),
            v.aux_min_snr,
            v.window_s,
            state_cell(&v.safety),
            opt_prob(v.safety_binomial_p),
            opt_prob(v.safety_poisson_p),
            v.injections_vetoed.map(|n| n.to_string()).unwrap_or("-".into()),
            opt(v.injections_chance, 2),
            v.efficiency,
            v.deadtime,
            v.aux_hit_fraction,
            prob(v.chance_p),
            opt_prob(v.false_alarm),
            v.total_efficiency,
            v.total_deadtime,
        );
    }
    o.push_str("</table>\n");
}

/// One proposal per aux channel with its combined deadtime and safety.
fn proposal_table(o: &mut String, rows: &[ProposalRow]) {
    o.push_str(
        "<h3>Proposals, one per aux channel</h3>\n<table class=\"veto\"><tr><th>aux channel</th><th>state</th>\
         <th>combined deadtime</th><th>vetoed time [s]</th><th>efficiency</th>\
         <th>injections vetoed / by chance</th><th>safety p binomial (Poisson)</th><th>rounds merged</th></tr>\n",
    );
    for p in rows {
        let _ = writeln!(
            o,
            "<tr><td class=\"t\">{}</td><td>{}</td><td>{:.2e}</td><td>{:.1}</td><td>{:.3}</td><td>{} / {}</td>\
             <td>{} ({})</td><td class=\"t\">{}</td></tr>",
            html_escape(&p.aux_channel),
            state_cell(&p.state),
            p.deadtime,
            p.covered_s,
            p.efficiency,
            p.injections_vetoed.map(|n| n.to_string()).unwrap_or("-".into()),
            p.injections_chance
                .map(|x| format!("{x:.2}"))
                .unwrap_or("-".into()),
            opt_prob(p.safety_binomial_p),
            opt_prob(p.safety_poisson_p),
            html_escape(&p.rounds),
        );
    }
    o.push_str("</table>\n");
}

fn blocks_table(o: &mut String, s: &RateSeries) {
    o.push_str("<table><tr><th>block start [GPS s]</th><th>end [GPS s]</th><th>events</th><th>live [h]</th><th>rate [/h]</th><th>lower</th><th>upper</th></tr>\n");
    for b in &s.blocks {
        let _ = writeln!(
            o,
            "<tr><td>{:.1}</td><td>{:.1}</td><td>{}</td><td>{:.2}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            b.start_gps,
            b.end_gps,
            b.count,
            b.live_s / 3600.0,
            f3(b.rate_per_hour),
            f3(b.lower_per_hour),
            f3(b.upper_per_hour)
        );
    }
    o.push_str("</table>\n");
}

/// Plot area of a spectrogram figure: left, top, width, height \[px\].
const SPEC_BOX: (f64, f64, f64, f64) = (44.0, 6.0, 320.0, 160.0);
/// What every spectrogram's colour bar means (shown under each family's
/// images).
const SPECTROGRAM_LEGEND: &str = "<p class=\"cbar\">Each image spans 8 times the trigger's duration (or one tile at its Q, if longer) and the trigger's own band widened to at least three octaves inside the channel's analysed band. Colour: square root of the normalised energy (mean 1 in Gaussian noise) from 0 to the number at the top of the image's bar, its own peak or the scan threshold if higher; <em>thr</em> marks the scan threshold. A witness image shows the aux channel at the time of the member beside it.</p>\n";
/// Colour bar of a spectrogram figure: gap after the plot, width \[px\].
const SPEC_BAR: (f64, f64) = (10.0, 10.0);

/// The classifier by label: its cross-validated confusion matrix (rows:
/// the family label, columns: the predicted label) with per-label
/// precision and recall.
fn classifier_table(o: &mut String, cv: &crate::families::classifier::CrossValidation) {
    let _ = writeln!(
        o,
        "<h3>Classifier by label</h3>\n<p>Logistic regression trained on the labelled \
         families' members; {}-fold cross-validated accuracy {} over {} members ({} below the \
         confidence threshold, which stay unclassified). Rows: the family's label; columns: \
         the label predicted.</p>",
        cv.folds,
        f3(cv.accuracy),
        cv.n,
        cv.n_uncertain
    );
    o.push_str("<table><tr><th>label</th>");
    for l in &cv.labels {
        let _ = write!(o, "<th>{}</th>", html_escape(l));
    }
    o.push_str("<th>precision</th><th>recall</th></tr>\n");
    for (c, row) in cv.confusion.iter().enumerate() {
        let _ = write!(o, "<tr><td class=\"t\">{}</td>", html_escape(&cv.labels[c]));
        for n in row {
            let _ = write!(o, "<td>{n}</td>");
        }
        let s = &cv.per_label[c];
        let _ = writeln!(
            o,
            "<td>{}</td><td>{}</td></tr>",
            f3(s.precision),
            f3(s.recall)
        );
    }
    o.push_str("</table>\n");
}

/// An example spectrogram as inline SVG: the image `img/{name}` inside
/// axes of time from the peak and log frequency, its own colour bar (sqrt
/// of normalised energy, the scan threshold marked), and what it shows
/// below. `id` makes the bar's gradient unique on the page.
fn spectrogram_figure(o: &mut String, name: &str, id: &str, t: &Thumbnail) {
    let (x0, y0, w, h) = SPEC_BOX;
    let (half, (f_lo, f_hi)) = (0.5 * t.extent.span_s, t.extent.f_edges_hz);
    let y_of = |f: f64| y0 + h * (1.0 - (f / f_lo).ln() / (f_hi / f_lo).ln());
    let what = if t.witness {
        format!(
            "witness {} at trigger {}",
            html_escape(&t.channel),
            t.trigger_id
        )
    } else {
        format!("trigger {}", t.trigger_id)
    };
    let bx = x0 + w + SPEC_BAR.0;
    let _ = write!(
        o,
        "<figure><svg class=\"spec\" width=\"{}\" height=\"{}\" role=\"img\" aria-label=\"spectrogram of {what}\">\
         <image href=\"img/{name}\" x=\"{x0}\" y=\"{y0}\" width=\"{w}\" height=\"{h}\" preserveAspectRatio=\"none\"/>\
         <rect x=\"{x0}\" y=\"{y0}\" width=\"{w}\" height=\"{h}\" fill=\"none\" stroke=\"#888\"/>",
        bx + SPEC_BAR.1 + 40.0,
        y0 + h + 34.0,
    );
    for f in crate::families::thumbnail::log_ticks(f_lo, f_hi) {
        let y = y_of(f);
        let _ = write!(
            o,
            "<line x1=\"{}\" x2=\"{x0}\" y1=\"{y:.1}\" y2=\"{y:.1}\" stroke=\"#444\"/>\
             <text x=\"{}\" y=\"{:.1}\" text-anchor=\"end\">{}</text>",
            x0 - 4.0,
            x0 - 6.0,
            y + 3.5,
            crate::output::fixed(f, if f < 10.0 { 1 } else { 0 })
        );
    }
    for dt in crate::families::thumbnail::linear_ticks(-half, half) {
        let x = x0 + w * (dt + half) / (2.0 * half);
        let _ = write!(
            o,
            "<line x1=\"{x:.1}\" x2=\"{x:.1}\" y1=\"{}\" y2=\"{}\" stroke=\"#444\"/>\
             <text x=\"{x:.1}\" y=\"{}\" text-anchor=\"middle\">{}</text>",
            y0 + h,
            y0 + h + 4.0,
            y0 + h + 15.0,
            crate::output::fixed(dt, 3)
        );
    }
    // Colour bar: the ramp bottom (0) to top (the image's own top).
    let _ = write!(
        o,
        "<defs><linearGradient id=\"z{id}\" x1=\"0\" y1=\"1\" x2=\"0\" y2=\"0\">"
    );
    for k in 0..=16 {
        let u = f64::from(k) / 16.0;
        let [r, g, b] = colour(u);
        let _ = write!(
            o,
            "<stop offset=\"{u:.4}\" stop-color=\"#{r:02x}{g:02x}{b:02x}\"/>"
        );
    }
    let _ = write!(
        o,
        "</linearGradient></defs><rect x=\"{bx}\" y=\"{y0}\" width=\"{}\" height=\"{h}\" fill=\"url(#z{id})\" stroke=\"#888\"/>",
        SPEC_BAR.1
    );
    let s = &t.scale;
    let y_of_z = |z: f64| y0 + h * (1.0 - s.unit(z));
    let mut marks = vec![
        (0.0, String::from("0")),
        (s.z_top, crate::output::fixed(s.z_top, 1)),
    ];
    if let Some(zt) = s.z_threshold.filter(|z| *z <= s.z_top) {
        marks.push((zt, "thr".to_string()));
    }
    for (z, label) in marks {
        let y = y_of_z(z);
        // A threshold just below the top is labelled under its tick.
        let text_y = if label == "thr" && y - y0 < 11.0 {
            y + 11.0
        } else {
            y + 3.5
        };
        let _ = write!(
            o,
            "<line x1=\"{}\" x2=\"{}\" y1=\"{y:.1}\" y2=\"{y:.1}\" stroke=\"#444\"/>\
             <text x=\"{}\" y=\"{text_y:.1}\">{label}</text>",
            bx - 3.0,
            bx + SPEC_BAR.1 + 3.0,
            bx + SPEC_BAR.1 + 5.0,
        );
    }
    let detail = if t.snr.is_finite() {
        format!(
            "{} Hz · SNR {:.1} · Q {:.1}",
            crate::output::fixed(t.f_peak_hz, 1),
            t.snr,
            t.q
        )
    } else {
        "no aux trigger near this time".to_string()
    };
    let _ = writeln!(
        o,
        "<text x=\"{:.1}\" y=\"{}\" text-anchor=\"middle\">time from peak [s]</text>\
         <text transform=\"translate(10 {:.1}) rotate(-90)\" text-anchor=\"middle\">frequency [Hz]</text>\
         <text x=\"{}\" y=\"{}\">Z</text></svg>\
         <figcaption>{what} · GPS {:.3} · {detail}</figcaption></figure>",
        x0 + 0.5 * w,
        y0 + h + 30.0,
        y0 + 0.5 * h,
        bx,
        y0 + h + 15.0,
        t.t_peak_gps,
    );
}

/// The table of contents: the summary, each family, the all-trigger
/// witnesses and vetoes, the novel triggers and the parameters.
fn contents(o: &mut String, d: &ReportData) {
    o.push_str("<nav id=\"contents\" aria-label=\"contents\"><h2>Contents</h2><ol>\n<li><a href=\"#summary\">Run summary</a>");
    if !d.families.is_empty() {
        o.push_str(" · <a href=\"#triage\">families at a glance</a>");
    }
    o.push_str("</li>\n");
    for f in &d.families {
        let _ = writeln!(
            o,
            "<li><a href=\"#family-{}\">{}</a></li>",
            f.id,
            family_title(f.id, f.label.as_deref())
        );
    }
    if !d.proposals.is_empty() || d.vetoes.iter().any(|v| v.mode == "all") {
        o.push_str(
            "<li><a href=\"#all-vetoes\">All target triggers: witnesses and vetoes</a></li>\n",
        );
    }
    o.push_str("<li><a href=\"#novel\">Novel triggers</a></li>\n<li><a href=\"#parameters\">Parameters and provenance</a></li>\n</ol></nav>\n");
}

/// A family's veto rounds summarised: aux channels, total efficiency and
/// deadtime (of the last round), and the worst safety of its rounds.
fn family_veto(d: &ReportData, family: i64) -> Option<(String, f64, f64, String)> {
    let rounds: Vec<&VetoRow> = d
        .vetoes
        .iter()
        .filter(|v| v.mode == "family" && v.family_id == Some(family))
        .collect();
    let last = rounds.iter().max_by_key(|v| v.round)?;
    // Each channel once, in round order (a channel can come back in a
    // later round with another threshold or window).
    let mut aux: Vec<&str> = Vec::new();
    for v in &rounds {
        if !aux.contains(&v.aux_channel.as_str()) {
            aux.push(&v.aux_channel);
        }
    }
    let safety = ["unsafe", "unchecked", "safe"]
        .into_iter()
        .find(|s| rounds.iter().any(|v| v.safety == *s))
        .unwrap_or("unchecked");
    Some((
        aux.join(", "),
        last.total_efficiency,
        last.total_deadtime,
        safety.to_string(),
    ))
}

/// The triage table: per family its size, rate now against its median,
/// last change point, best witness and what a veto would cost.
fn triage_table(o: &mut String, d: &ReportData) {
    let r = &d.rates;
    o.push_str("<h3 id=\"triage\">Families at a glance</h3>\n<table class=\"triage\"><tr><th>family</th><th>label</th><th>status</th><th>triggers</th><th>rate now [/h]</th><th>median [/h]</th><th>last change</th><th>best witness</th><th>false alarm</th><th>veto channels</th><th>efficiency [%]</th><th>deadtime [% (s)]</th><th>safety</th></tr>\n");
    let best = d.witnessed_families();
    for f in &d.families {
        let s = r.series.iter().find(|s| s.family_id == Some(f.id));
        let now = s.and_then(|s| s.blocks.last()).map(|b| b.rate_per_hour);
        let now_cell = match (s, now) {
            (Some(s), Some(v)) if s.latest_differs => {
                format!(
                    "<span class=\"flag\">{} (differs from median)</span>",
                    crate::output::fixed(v, 1)
                )
            }
            (_, Some(v)) => crate::output::fixed(v, 1),
            _ => "-".into(),
        };
        let change = s
            .and_then(|s| s.change_times_gps.last())
            .map_or("none".to_string(), |&c| {
                format!("{} ({c:.0})", gpstime::utc_label(c))
            });
        let (wit, fa) = match best.iter().find(|b| b.0 == f.id) {
            Some((_, aux, _)) => {
                let row = d
                    .witnesses
                    .iter()
                    .find(|w| w.family_id == Some(f.id) && &w.aux_channel == aux);
                let tail = row.and_then(|w| w.false_alarm_basis.as_deref()) == Some("slides_tail");
                (
                    html_escape(aux),
                    opt_prob(row.and_then(|w| w.false_alarm.or(Some(w.chance_p))))
                        + if tail { " (tail)" } else { "" },
                )
            }
            None => ("none beyond chance".to_string(), "-".to_string()),
        };
        let veto = family_veto(d, f.id);
        let cells = match &veto {
            Some((aux, eff, dt, safety)) => format!(
                "<td class=\"t\">{}</td><td>{}</td><td>{} ({})</td><td>{}</td>",
                html_escape(aux),
                crate::output::fixed(100.0 * eff, 1),
                crate::output::fixed(100.0 * dt, 3),
                crate::output::fixed(dt * r.live_s, 1),
                state_cell(safety)
            ),
            None => "<td class=\"t\">none</td><td>-</td><td>-</td><td>-</td>".into(),
        };
        let _ = writeln!(
            o,
            "<tr><td><a href=\"#family-{id}\">{id}</a></td><td class=\"t\">{}</td><td class=\"t\">{}</td><td>{}</td><td>{now_cell}</td><td>{}</td><td class=\"t\">{change}</td><td class=\"t\">{wit}</td><td>{fa}</td>{cells}</tr>",
            f.label.as_deref().map(html_escape).unwrap_or_default(),
            html_escape(&f.status),
            s.map_or(0, |s| s.n_events),
            s.map_or("-".into(), |s| crate::output::fixed(s.median_rate_per_hour, 1)),
            id = f.id
        );
    }
    o.push_str("</table>\n<p class=\"cbar\"><em>rate now</em>: the latest Bayesian block's rate per live hour, in red when it differs from the family's median block rate (exact Poisson test at the report's confidence level); <em>last change</em>: the latest change point, UTC (GPS s); <em>best witness</em>: the aux channel whose coincidences with the family are beyond chance, with its false-alarm probability over all channels and thresholds compared (from time slides; <em>(tail)</em>: beyond the slides' resolution, Šidák's correction with the effective number of cells measured on the slides); <em>veto</em>: the family's veto rounds with their combined efficiency (fraction of the family's triggers removed) and deadtime (fraction and seconds of analysed time), and the worst safety of the rounds against injections.</p>\n");
    if d.families.iter().any(|f| family_veto(d, f.id).is_some()) {
        let _ = writeln!(o, "<p class=\"caution\">{}</p>", html_escape(VETO_CAUTION));
    }
}

/// Colour key of the families in the time-frequency scatter (one colour
/// each up to the palette's size; families beyond it are named with the
/// colour they share).
fn colour_legend(o: &mut String, d: &ReportData) {
    o.push_str("<p class=\"cbar\">Colours: ");
    for (i, f) in d.families.iter().enumerate() {
        let c = family_colour(i);
        let _ = write!(
            o,
            "<span class=\"key\" style=\"background:#{:02x}{:02x}{:02x}\"></span>{} ",
            c.0,
            c.1,
            c.2,
            family_title(f.id, f.label.as_deref())
        );
    }
    o.push_str("<span class=\"key\" style=\"background:#b0b0b0\"></span>no family</p>\n");
}

/// How far the seeded starts of the latest clustering agreed (nothing for
/// a run with one start); a caution when the families hang on the seed.
fn starts_line(o: &mut String, starts: &[crate::families::StartSummary]) {
    let Some((kept, least)) = crate::families::model::kept_start(starts) else {
        return;
    };
    let _ = writeln!(
        o,
        "<p>The clustering ran from {} seeds and kept seed {}, whose families agree best with \
         the other runs': mean adjusted Rand index {:.2} (least agreeing run {:.2}).</p>",
        starts.len(),
        kept.seed,
        kept.agreement,
        least
    );
    if kept.agreement < crate::families::model::SEED_AGREEMENT_WARN {
        let _ = writeln!(
            o,
            "<p class=\"caution\">These families depend on the clustering seed: check each \
             family's images for two shapes before labelling, and split or merge as needed.</p>"
        );
    }
}

/// The parameters and provenance, as a table at the end of the page.
fn parameters_section(o: &mut String, d: &ReportData) -> Result<()> {
    o.push_str("<section id=\"parameters\"><h2>Parameters and provenance</h2><table>\n");
    let mut rows = vec![
        ("catalogue".to_string(), d.params.catalogue.clone()),
        ("tool".to_string(), format!("glitchbook {}", d.tool_version)),
        ("generated (UTC)".to_string(), d.generated_utc.clone()),
        (
            "rate bin [s]".to_string(),
            crate::output::fixed(d.rates.params.bin_s, 3),
        ),
    ];
    if let serde_json::Value::Object(m) = serde_json::to_value(&d.params)? {
        for (k, v) in m {
            if k == "catalogue" {
                continue;
            }
            let text = match v {
                serde_json::Value::Null => "default".to_string(),
                serde_json::Value::String(s) => s,
                other => other.to_string(),
            };
            rows.push((k, text));
        }
    }
    for (k, v) in rows {
        let _ = writeln!(
            o,
            "<tr><th scope=\"row\">{}</th><td class=\"t\">{}</td></tr>",
            html_escape(&k),
            html_escape(&v)
        );
    }
    o.push_str("</table></section>\n");
    Ok(())
}

/// Write `out/index.html` and `out/img/*`. `thumbnails` are example
/// spectrograms made by the caller (see
/// [`crate::families::render_family_thumbnails`]); the images are copied
/// into `out/img/` and drawn with their axes.
///
/// # Errors
/// If the directory, a plot or a copy cannot be written.
pub fn write_report(d: &ReportData, out: &Path, thumbnails: &[Thumbnail]) -> Result<PathBuf> {
    let img = out.join("img");
    std::fs::create_dir_all(&img).with_context(|| format!("creating {}", img.display()))?;
    let r = &d.rates;
    let (t0, t1) = (r.span_start_gps, r.span_end_gps);
    let colour_of: BTreeMap<i64, usize> = d
        .families
        .iter()
        .enumerate()
        .map(|(i, f)| (f.id, i))
        .collect();

    // Overview plots.
    let pts: Vec<TfPoint> = d
        .tf_points
        .iter()
        .map(|&(t, f, fam)| TfPoint {
            t_gps: t,
            f_hz: f,
            colour: fam.and_then(|x| colour_of.get(&x).copied()),
        })
        .collect();
    plots::tf_scatter(&img.join("tf.svg"), &pts, t0, t1, &d.gaps_gps)?;
    let mut curves = vec![(
        "all".to_string(),
        plotters::style::RGBColor(0x22, 0x22, 0x33),
        d.all_snr_sorted.clone(),
    )];
    for (i, f) in d.families.iter().enumerate() {
        let name = f
            .label
            .clone()
            .map_or(format!("family {}", f.id), |l| format!("{} {}", f.id, l));
        curves.push((name, family_colour(i), f.snr_sorted.clone()));
    }
    plots::snr_cumulative(&img.join("snr.svg"), &curves)?;

    let mut o = String::new();
    let _ = write!(
        o,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>glitchbook report</title>\
         <style>{CSS}</style></head><body>\n<header><h1>glitchbook report</h1></header>\n<main>\n"
    );
    let _ = writeln!(
        o,
        "<p class=\"prov\" id=\"provenance\">Target {} · {} · made by glitchbook {} on {} (parameters at the <a href=\"#parameters\">end</a>)</p>",
        html_escape(&r.channel.name),
        html_escape(&d.params.catalogue),
        html_escape(&d.tool_version),
        html_escape(&d.generated_utc)
    );
    contents(&mut o, d);

    // Run summary.
    let _ = writeln!(o, "<section id=\"summary\"><h2>Run summary</h2>");
    let _ = writeln!(
        o,
        "<p>Span {:.1} – {:.1} GPS s ({} – {}, {:.2} h); live time of {} {:.2} h ({:.1} %); {} not-analysed stretch(es) shaded on the time plots.</p>",
        t0,
        t1,
        gpstime::utc_label(t0),
        gpstime::utc_label(t1),
        (t1 - t0) / 3600.0,
        html_escape(&r.channel.name),
        r.live_s / 3600.0,
        100.0 * r.live_s / (t1 - t0),
        d.gaps_gps.len()
    );
    if d.families.is_empty() {
        o.push_str("<p>No families in this catalogue (not clustered yet).</p>\n");
    } else {
        triage_table(&mut o, d);
        starts_line(&mut o, &d.cluster_starts);
    }
    o.push_str("<h3>Channels</h3>\n<table><tr><th>channel</th><th>role</th><th>triggers</th><th>live [h]</th></tr>\n");
    for (name, role, n, live) in &d.channels {
        let _ = writeln!(
            o,
            "<tr><td class=\"t\">{}</td><td class=\"t\">{}</td><td>{n}</td><td>{:.2}</td></tr>",
            html_escape(name),
            html_escape(role),
            live / 3600.0
        );
    }
    o.push_str("</table>\n");
    if let Some(cv) = &d.classifier {
        classifier_table(&mut o, cv);
    }
    o.push_str(
        "<img class=\"plot\" src=\"img/tf.svg\" alt=\"time-frequency scatter of triggers, coloured by family\">\n",
    );
    colour_legend(&mut o, d);
    o.push_str("<img class=\"plot\" src=\"img/snr.svg\" alt=\"cumulative SNR distributions\">\n");
    if let Some(all) = r.series.iter().find(|s| s.family_id.is_none()) {
        plots::rate_plot(
            &img.join("rate_all.svg"),
            all,
            t0,
            t1,
            "all target triggers",
            plotters::style::RGBColor(0x22, 0x22, 0x33),
            &d.gaps_gps,
        )?;
        o.push_str(
            "<img class=\"plot\" src=\"img/rate_all.svg\" alt=\"rate of all target triggers\">\n",
        );
    }
    o.push_str("</section>\n");

    // One section per family.
    for (i, f) in d.families.iter().enumerate() {
        let _ = writeln!(
            o,
            "<section class=\"family\" id=\"family-{}\"><h2>{}</h2>",
            f.id,
            family_title(f.id, f.label.as_deref())
        );
        if let Some(note) = &f.note {
            let _ = writeln!(o, "<p class=\"note\">{}</p>", html_escape(note));
        }
        if let Some(s) = r.series.iter().find(|s| s.family_id == Some(f.id)) {
            let _ = writeln!(
                o,
                "<p>{} events; mean {} per live hour; median block rate {} /h; {} change point(s){}.</p>",
                s.n_events,
                f3(s.mean_rate_per_hour),
                f3(s.median_rate_per_hour),
                s.change_times_gps.len(),
                if s.latest_differs { " — <span class=\"flag\">latest block differs from the median (exact two-sided Poisson test at level 1 − CL)</span>" } else { "" }
            );
            let file = format!("rate_f{}.svg", f.id);
            let title = f.label.clone().map_or(format!("family {}", f.id), |l| {
                format!("family {} {}", f.id, l)
            });
            plots::rate_plot(
                &img.join(&file),
                s,
                t0,
                t1,
                &title,
                family_colour(i),
                &d.gaps_gps,
            )?;
            let _ = writeln!(
                o,
                "<img class=\"plot rate\" src=\"img/{file}\" alt=\"rate of family {}\">",
                f.id
            );
            if !s.change_times_gps.is_empty() {
                let cps: Vec<String> = s
                    .change_times_gps
                    .iter()
                    .map(|&c| format!("{c:.1} ({})", gpstime::utc_label(c)))
                    .collect();
                let _ = writeln!(o, "<p>Change times [GPS s]: {}</p>", cps.join(", "));
            }
            blocks_table(&mut o, s);
        }
        let thumbs: Vec<&Thumbnail> = thumbnails.iter().filter(|t| t.family_id == f.id).collect();
        if !thumbs.is_empty() {
            o.push_str("<h3>Example spectrograms</h3><div class=\"thumbs\">\n");
            for (k, t) in thumbs.iter().enumerate() {
                let name = format!("thumb_f{}_{k}.png", f.id);
                std::fs::copy(&t.path, img.join(&name))
                    .with_context(|| format!("copying spectrogram {}", t.path.display()))?;
                spectrogram_figure(&mut o, &name, &format!("f{}_{k}", f.id), t);
            }
            o.push_str("</div>\n");
            o.push_str(SPECTROGRAM_LEGEND);
        }
        if !f.examples.is_empty() {
            o.push_str("<h3>Loudest members</h3>\n");
            trigger_table(&mut o, &f.examples);
        }
        let w: Vec<&WitnessRow> = d
            .witnesses
            .iter()
            .filter(|w| w.family_id == Some(f.id))
            .collect();
        if !w.is_empty() {
            o.push_str("<h3>Witness channels</h3>\n");
            witness_table(&mut o, &w);
        }
        for (k, l) in d
            .lags
            .iter()
            .filter(|l| l.family_id == Some(f.id))
            .enumerate()
        {
            let file = format!("lag_f{}_{k}.svg", f.id);
            plots::lag_histogram(
                &img.join(&file),
                &l.edges_s,
                &l.counts,
                &format!("lag vs {}", l.aux_channel),
            )?;
            let _ = writeln!(
                o,
                "<figure><img class=\"plot lag\" src=\"img/{file}\" alt=\"lag histogram (t_aux − t_target)\"><figcaption>{} — lag t_aux − t_target (negative: aux first){}</figcaption></figure>",
                html_escape(&l.aux_channel),
                l.freq_relation.as_deref().map(|x| format!(" — frequency relation: {}", html_escape(x))).unwrap_or_default()
            );
        }
        let v: Vec<&VetoRow> = d
            .vetoes
            .iter()
            .filter(|v| v.mode == "family" && v.family_id == Some(f.id))
            .collect();
        if !v.is_empty() {
            o.push_str("<h3>Veto rounds</h3>\n");
            veto_table(&mut o, &v);
        }
        o.push_str("</section>\n");
    }

    // Vetoes over all target triggers, and all-trigger witnesses.
    let w_all: Vec<&WitnessRow> = d
        .witnesses
        .iter()
        .filter(|w| w.family_id.is_none())
        .collect();
    let v_all: Vec<&VetoRow> = d.vetoes.iter().filter(|v| v.mode == "all").collect();
    if !w_all.is_empty() || !v_all.is_empty() || !d.proposals.is_empty() {
        o.push_str(
            "<section id=\"all-vetoes\"><h2>All target triggers: witnesses and vetoes</h2>\n",
        );
        if !w_all.is_empty() {
            witness_table(&mut o, &w_all);
        }
        if !v_all.is_empty() {
            veto_table(&mut o, &v_all);
        }
        if !d.proposals.is_empty() {
            proposal_table(&mut o, &d.proposals);
        }
        o.push_str("</section>\n");
    }

    // Novel triggers.
    let _ = writeln!(o, "<section id=\"novel\"><h2>Novel triggers</h2>");
    if d.n_novel == 0 {
        o.push_str("<p>No trigger was marked novel in this span.</p>\n");
    } else {
        let _ = writeln!(
            o,
            "<p>{} novel trigger(s); the {} loudest:</p>",
            d.n_novel,
            d.novel.len()
        );
        trigger_table(&mut o, &d.novel);
    }
    o.push_str("</section>\n");
    parameters_section(&mut o, d)?;
    o.push_str("</main></body></html>\n");
    let index = out.join("index.html");
    std::fs::write(&index, o).with_context(|| format!("writing {}", index.display()))?;
    Ok(index)
}
