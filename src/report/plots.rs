//! SVG charts drawn with plotters' SVG backend (text as SVG `<text>`, no
//! font files needed). Palette, layout and labels are glitchbook's own.

use crate::rates::RateSeries;
use anyhow::{anyhow, Result};
use plotters::prelude::*;
use std::path::Path;

/// glitchbook's palette (family colour = `PALETTE[index % len]`).
pub const PALETTE: [RGBColor; 8] = [
    RGBColor(0x1b, 0x6c, 0xa8),
    RGBColor(0xd9, 0x5f, 0x02),
    RGBColor(0x2a, 0x9d, 0x5c),
    RGBColor(0xa3, 0x3b, 0x8f),
    RGBColor(0x8c, 0x6d, 0x1f),
    RGBColor(0xc2, 0x28, 0x3d),
    RGBColor(0x3f, 0x8f, 0xa8),
    RGBColor(0x5c, 0x5c, 0x5c),
];
/// Shade of stretches that were not analysed.
const GAP: RGBColor = RGBColor(0xe4, 0xe1, 0xda);

/// The time axis's title: hours since the span's start, in UTC and GPS.
fn hours_since(t0_gps: f64) -> String {
    format!(
        "hours since {} (GPS {t0_gps:.0}); shaded: not analysed",
        crate::gpstime::utc_label(t0_gps)
    )
}

/// Colour of unassigned / novel points.
pub const GREY: RGBColor = RGBColor(0xb0, 0xb0, 0xb0);
const INK: RGBColor = RGBColor(0x22, 0x22, 0x33);
const CHANGE: RGBColor = RGBColor(0xcc, 0x22, 0x88);

fn err<E: std::fmt::Debug>(e: E) -> anyhow::Error {
    anyhow!("plot: {e:?}")
}

/// Colour for the `i`-th family.
pub fn family_colour(i: usize) -> RGBColor {
    PALETTE[i % PALETTE.len()]
}

/// Rate versus time for one subject: bins with their confidence limits
/// (hollow markers for bins with little live time), Bayesian-block rates as
/// a step line and change points as vertical lines. x axis: hours since
/// `t0_gps`.
///
/// # Errors
/// If the SVG cannot be drawn or written.
pub fn rate_plot(
    path: &Path,
    s: &RateSeries,
    t0_gps: f64,
    t1_gps: f64,
    title: &str,
    colour: RGBColor,
    gaps: &[(f64, f64)],
) -> Result<()> {
    let root = SVGBackend::new(path, (900, 340)).into_drawing_area();
    root.fill(&WHITE).map_err(err)?;
    let h = |t: f64| (t - t0_gps) / 3600.0;
    // Scale to the binned limits: a burst's Bayesian block can be seconds
    // long with a rate far above everything else; it is drawn clipped, with
    // a marker and its rate written at the top.
    let bins_max = s
        .bins
        .iter()
        .filter_map(|b| b.upper_per_hour.filter(|_| !b.low_live))
        .fold(0.0_f64, f64::max);
    let blocks_max = s
        .blocks
        .iter()
        .map(|b| b.rate_per_hour)
        .fold(0.0_f64, f64::max);
    let ymax = if bins_max > 0.0 {
        bins_max * 1.3
    } else {
        blocks_max.max(1.0) * 1.1
    };
    let mut chart = ChartBuilder::on(&root)
        .caption(title, ("sans-serif", 18).into_font().color(&INK))
        .margin(12)
        .x_label_area_size(40)
        .y_label_area_size(60)
        .build_cartesian_2d(0.0..h(t1_gps).max(1e-9), 0.0..ymax)
        .map_err(err)?;
    chart
        .configure_mesh()
        .x_desc(hours_since(t0_gps))
        .y_desc("rate per live hour")
        .y_label_formatter(&plain_label)
        .light_line_style(RGBColor(0xee, 0xee, 0xf2))
        .draw()
        .map_err(err)?;
    chart
        .draw_series(
            gaps.iter()
                .map(|&(a, b)| Rectangle::new([(h(a), 0.0), (h(b), ymax)], GAP.filled())),
        )
        .map_err(err)?;
    for &c in &s.change_times_gps {
        chart
            .draw_series(std::iter::once(PathElement::new(
                vec![(h(c), 0.0), (h(c), ymax)],
                CHANGE.stroke_width(2),
            )))
            .map_err(err)?;
    }
    // limits as vertical bars, rates as markers
    chart
        .draw_series(s.bins.iter().filter_map(|b| {
            let (lo, up) = (b.lower_per_hour?, b.upper_per_hour?);
            let x = h(0.5 * (b.start_gps + b.end_gps));
            Some(PathElement::new(
                vec![(x, lo), (x, up.min(ymax))],
                colour.mix(0.5).stroke_width(1),
            ))
        }))
        .map_err(err)?;
    chart
        .draw_series(s.bins.iter().filter_map(|b| {
            let x = h(0.5 * (b.start_gps + b.end_gps));
            let y = b.rate_per_hour?.min(ymax);
            let style = if b.low_live {
                colour.stroke_width(1)
            } else {
                colour.filled()
            };
            Some(Circle::new((x, y), 3, style))
        }))
        .map_err(err)?
        .label("binned rate with limits")
        .legend(move |(x, y)| Circle::new((x, y), 3, colour.filled()));
    let mut step = Vec::new();
    for b in &s.blocks {
        step.push((h(b.start_gps), b.rate_per_hour.min(ymax)));
        step.push((h(b.end_gps), b.rate_per_hour.min(ymax)));
    }
    chart
        .draw_series(std::iter::once(PathElement::new(step, INK.stroke_width(2))))
        .map_err(err)?
        .label("Bayesian-block rate")
        .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], INK.stroke_width(2)));
    for b in s.blocks.iter().filter(|b| b.rate_per_hour > ymax) {
        let x = h(0.5 * (b.start_gps + b.end_gps));
        chart
            .draw_series([EmptyElement::at((x, ymax))
                + TriangleMarker::new((0, 6), 5, INK.filled())
                + Text::new(
                    if b.rate_per_hour < 1e6 {
                        format!("{:.0}/h", b.rate_per_hour)
                    } else {
                        format!("{:.2e}/h", b.rate_per_hour)
                    },
                    (6, 2),
                    ("sans-serif", 11).into_font().color(&INK),
                )])
            .map_err(err)?;
    }
    chart
        .configure_series_labels()
        .background_style(WHITE.mix(0.85))
        .border_style(RGBColor(0xcc, 0xcc, 0xcc))
        .position(SeriesLabelPosition::UpperLeft)
        .draw()
        .map_err(err)?;
    root.present().map_err(err)?;
    Ok(())
}

/// Ticks of a log axis over `[lo, hi]`: 1, 2 and 5 times each power of ten
/// in range, every partial decade included (every integer multiple when
/// that gives fewer than two).
fn log_ticks(lo: f64, hi: f64) -> Vec<f64> {
    let pick = |mults: &[f64]| -> Vec<f64> {
        let (d0, d1) = (lo.log10().floor() as i32, hi.log10().ceil() as i32);
        (d0..=d1)
            .flat_map(|d| mults.iter().map(move |m| m * 10f64.powi(d)))
            .filter(|v| *v >= lo * (1.0 - 1e-9) && *v <= hi * (1.0 + 1e-9))
            .collect()
    };
    if !(lo > 0.0 && hi > lo && hi.is_finite()) {
        return Vec::new();
    }
    let ticks = pick(&[1.0, 2.0, 5.0]);
    if ticks.len() >= 2 {
        ticks
    } else {
        pick(&[1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0])
    }
}

/// A linear-axis tick value with at most three decimals and no trailing
/// zeros (250, 0.5).
fn plain_label(v: &f64) -> String {
    crate::output::fixed(*v, 3)
}

/// A tick value without trailing decimals (0.05, 2, 1000).
fn tick_label(v: &f64) -> String {
    let digits = if *v > 0.0 && *v < 1.0 {
        (-v.log10()).ceil() as usize
    } else {
        0
    };
    crate::output::fixed(*v, digits)
}

/// One point of the time-frequency scatter.
#[derive(Debug, Clone, Copy)]
pub struct TfPoint {
    /// Peak time \[GPS s\].
    pub t_gps: f64,
    /// Peak frequency \[Hz\].
    pub f_hz: f64,
    /// Colour index (`None` = unassigned, drawn grey).
    pub colour: Option<usize>,
}

/// Time-frequency scatter over the run (log frequency axis).
///
/// # Errors
/// If the SVG cannot be drawn or written.
pub fn tf_scatter(
    path: &Path,
    pts: &[TfPoint],
    t0_gps: f64,
    t1_gps: f64,
    gaps: &[(f64, f64)],
) -> Result<()> {
    let root = SVGBackend::new(path, (900, 380)).into_drawing_area();
    root.fill(&WHITE).map_err(err)?;
    let (fmin, fmax) = pts.iter().fold((f64::INFINITY, 0.0_f64), |(a, b), p| {
        (a.min(p.f_hz), b.max(p.f_hz))
    });
    let (fmin, fmax) = if fmax > 0.0 {
        (fmin * 0.8, fmax * 1.25)
    } else {
        (1.0, 10.0)
    };
    let mut chart = ChartBuilder::on(&root)
        .caption(
            "triggers over the run",
            ("sans-serif", 18).into_font().color(&INK),
        )
        .margin(12)
        .x_label_area_size(40)
        .y_label_area_size(60)
        .build_cartesian_2d(
            0.0..((t1_gps - t0_gps) / 3600.0).max(1e-9),
            (fmin..fmax)
                .log_scale()
                .with_key_points(log_ticks(fmin, fmax)),
        )
        .map_err(err)?;
    chart
        .configure_mesh()
        .x_desc(hours_since(t0_gps))
        .y_desc("peak frequency [Hz]")
        .y_label_formatter(&tick_label)
        .light_line_style(RGBColor(0xee, 0xee, 0xf2))
        .draw()
        .map_err(err)?;
    let hr = |t: f64| (t - t0_gps) / 3600.0;
    chart
        .draw_series(
            gaps.iter()
                .map(|&(a, b)| Rectangle::new([(hr(a), fmin), (hr(b), fmax)], GAP.filled())),
        )
        .map_err(err)?;
    chart
        .draw_series(pts.iter().map(|p| {
            let c = p.colour.map_or(GREY, family_colour);
            Circle::new(
                ((p.t_gps - t0_gps) / 3600.0, p.f_hz),
                2,
                c.mix(0.8).filled(),
            )
        }))
        .map_err(err)?;
    root.present().map_err(err)?;
    Ok(())
}

/// Cumulative SNR distributions: for each curve, the number of triggers with
/// SNR ≥ x, log-log. `curves` = (name, colour, SNRs sorted ascending).
///
/// # Errors
/// If the SVG cannot be drawn or written.
pub fn snr_cumulative(path: &Path, curves: &[(String, RGBColor, Vec<f64>)]) -> Result<()> {
    let root = SVGBackend::new(path, (900, 380)).into_drawing_area();
    root.fill(&WHITE).map_err(err)?;
    let all = curves.iter().flat_map(|c| c.2.iter().copied());
    let (smin, smax) = all.fold((f64::INFINITY, 0.0_f64), |(a, b), s| (a.min(s), b.max(s)));
    let (smin, smax) = if smax > 0.0 {
        (smin.max(1e-3) * 0.9, smax * 1.1)
    } else {
        (1.0, 10.0)
    };
    let nmax = curves.iter().map(|c| c.2.len()).max().unwrap_or(1).max(1) as f64;
    let mut chart = ChartBuilder::on(&root)
        .caption(
            "SNR distribution (cumulative, loudest first)",
            ("sans-serif", 18).into_font().color(&INK),
        )
        .margin(12)
        .x_label_area_size(40)
        .y_label_area_size(60)
        .build_cartesian_2d(
            (smin..smax)
                .log_scale()
                .with_key_points(log_ticks(smin, smax)),
            (0.8..nmax * 1.5)
                .log_scale()
                .with_key_points(log_ticks(0.8, nmax * 1.5)),
        )
        .map_err(err)?;
    chart
        .configure_mesh()
        .x_desc("SNR")
        .y_desc("triggers with SNR at least x")
        .x_label_formatter(&tick_label)
        .y_label_formatter(&tick_label)
        .light_line_style(RGBColor(0xee, 0xee, 0xf2))
        .draw()
        .map_err(err)?;
    for (name, colour, snr) in curves {
        let n = snr.len();
        if n == 0 {
            continue;
        }
        // at most ~400 vertices per curve
        let stride = n.div_ceil(400).max(1);
        let mut pts: Vec<(f64, f64)> = (0..n)
            .step_by(stride)
            .map(|i| (snr[i], (n - i) as f64))
            .collect();
        pts.push((snr[n - 1], 1.0));
        let colour = *colour;
        chart
            .draw_series(std::iter::once(PathElement::new(
                pts,
                colour.stroke_width(2),
            )))
            .map_err(err)?
            .label(name.clone())
            .legend(move |(x, y)| {
                PathElement::new(vec![(x, y), (x + 16, y)], colour.stroke_width(2))
            });
    }
    chart
        .configure_series_labels()
        .background_style(WHITE.mix(0.85))
        .border_style(RGBColor(0xcc, 0xcc, 0xcc))
        .position(SeriesLabelPosition::UpperRight)
        .draw()
        .map_err(err)?;
    root.present().map_err(err)?;
    Ok(())
}

/// Histogram of witness lags, `t_aux − t_target` \[s\] (the one lag
/// convention of the tool; negative when the aux trigger comes first).
///
/// # Errors
/// If `edges_s.len() != counts.len() + 1`, or the SVG cannot be written.
pub fn lag_histogram(path: &Path, edges_s: &[f64], counts: &[f64], title: &str) -> Result<()> {
    if edges_s.len() != counts.len() + 1 || counts.is_empty() {
        anyhow::bail!(
            "lag histogram: {} edges for {} counts",
            edges_s.len(),
            counts.len()
        );
    }
    let root = SVGBackend::new(path, (440, 260)).into_drawing_area();
    root.fill(&WHITE).map_err(err)?;
    let cmax = counts.iter().copied().fold(1.0, f64::max) * 1.1;
    let mut chart = ChartBuilder::on(&root)
        .caption(title, ("sans-serif", 14).into_font().color(&INK))
        .margin(8)
        .x_label_area_size(32)
        .y_label_area_size(44)
        .build_cartesian_2d(edges_s[0]..edges_s[edges_s.len() - 1], 0.0..cmax)
        .map_err(err)?;
    chart
        .configure_mesh()
        .x_desc("lag t_aux − t_target [s]")
        .y_desc("pairs")
        .y_label_formatter(&plain_label)
        .x_label_formatter(&plain_label)
        .light_line_style(RGBColor(0xee, 0xee, 0xf2))
        .draw()
        .map_err(err)?;
    chart
        .draw_series(counts.iter().enumerate().map(|(i, &c)| {
            Rectangle::new(
                [(edges_s[i], 0.0), (edges_s[i + 1], c)],
                PALETTE[6].mix(0.75).filled(),
            )
        }))
        .map_err(err)?;
    root.present().map_err(err)?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rates::{BlockRate, RateBin};

    #[test]
    fn log_axes_tick_one_two_five_with_partial_decades() {
        assert_eq!(
            log_ticks(14.0, 1250.0),
            [20.0, 50.0, 100.0, 200.0, 500.0, 1000.0]
        );
        assert_eq!(log_ticks(0.8, 30.0), [1.0, 2.0, 5.0, 10.0, 20.0]);
        assert_eq!(log_ticks(3.0, 4.5), [3.0, 4.0]);
        let labels: Vec<String> = [0.05, 2.0, 1000.0].iter().map(tick_label).collect();
        assert_eq!(labels, ["0.05", "2", "1000"]);
        let labels: Vec<String> = [250.0, 0.5, -0.0001, -0.025]
            .iter()
            .map(plain_label)
            .collect();
        assert_eq!(labels, ["250", "0.5", "0", "-0.025"]);
    }

    #[test]
    fn a_clipped_burst_block_is_marked_with_its_rate() {
        let bin = |i: u32| {
            let a = f64::from(i) * 3600.0;
            RateBin {
                start_gps: a,
                end_gps: a + 3600.0,
                count: 4,
                live_s: 3600.0,
                rate_per_hour: Some(4.0),
                lower_per_hour: Some(1.4),
                upper_per_hour: Some(9.2),
                low_live: false,
            }
        };
        let block = |a: f64, b: f64, rate: f64| BlockRate {
            start_gps: a,
            end_gps: b,
            count: 1,
            live_s: b - a,
            rate_per_hour: rate,
            lower_per_hour: 0.5 * rate,
            upper_per_hour: 2.0 * rate,
        };
        let s = RateSeries {
            family_id: None,
            label: None,
            n_events: 12,
            mean_rate_per_hour: 4.0,
            bins: (0..3).map(bin).collect(),
            blocks: vec![
                block(0.0, 5000.0, 4.0),
                block(5000.0, 5010.0, 36_000.0),
                block(5010.0, 10800.0, 4.0),
            ],
            change_times_gps: vec![5000.0, 5010.0],
            median_rate_per_hour: 4.0,
            latest_differs: false,
        };
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("rate.svg");
        rate_plot(
            &path,
            &s,
            0.0,
            10800.0,
            "test",
            family_colour(0),
            &[(600.0, 1200.0)],
        )
        .unwrap();
        let svg = std::fs::read_to_string(&path).unwrap();
        assert!(
            svg.contains("36000/h"),
            "the clipped block's rate is written"
        );
        assert!(
            !svg.contains(">4/h"),
            "blocks inside the axes are not labelled"
        );
    }
}
