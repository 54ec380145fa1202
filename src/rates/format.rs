//! Text renderings of a [`RateReport`]: `table` (for
//! people), `json` (the full record) and `csv` (one row per bin).

use super::{RateReport, RateSeries};
use anyhow::Result;
use std::fmt::Write;

pub use crate::output::Format;

/// Render a report in the chosen format.
///
/// # Errors
/// Only if JSON or CSV serialisation fails.
pub fn render(r: &RateReport, f: Format) -> Result<String> {
    match f {
        Format::Json => Ok(serde_json::to_string_pretty(r)? + "\n"),
        Format::Csv => to_csv(r),
        Format::Table => Ok(to_table(r)),
    }
}

/// Subject name: "all" or the family id and label.
pub fn subject_name(s: &RateSeries) -> String {
    match (s.family_id, &s.label) {
        (None, _) => "all".to_string(),
        (Some(id), Some(l)) => format!("{id} ({l})"),
        (Some(id), None) => id.to_string(),
    }
}

/// Every digit: the shortest text that reads back as the same `f64`.
fn opt(v: Option<f64>) -> String {
    v.map(|x| x.to_string()).unwrap_or_default()
}

/// CSV with header `subject,family_id,start_gps,end_gps,count,live_s,
/// rate_per_hour,lower_per_hour,upper_per_hour,low_live`; numbers keep every
/// digit (shortest round-trip form, as JSON).
///
/// # Errors
/// If the CSV writer fails.
pub fn to_csv(r: &RateReport) -> Result<String> {
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record([
        "subject",
        "family_id",
        "start_gps",
        "end_gps",
        "count",
        "live_s",
        "rate_per_hour",
        "lower_per_hour",
        "upper_per_hour",
        "low_live",
    ])?;
    for s in &r.series {
        for b in &s.bins {
            w.write_record([
                subject_name(s),
                s.family_id.map(|i| i.to_string()).unwrap_or_default(),
                b.start_gps.to_string(),
                b.end_gps.to_string(),
                b.count.to_string(),
                b.live_s.to_string(),
                opt(b.rate_per_hour),
                opt(b.lower_per_hour),
                opt(b.upper_per_hour),
                b.low_live.to_string(),
            ])?;
        }
    }
    Ok(String::from_utf8(w.into_inner()?)?)
}

/// Human-readable table: per subject, its blocks (change points) and bins.
pub fn to_table(r: &RateReport) -> String {
    let mut o = String::new();
    let p = &r.params;
    let _ = writeln!(
        o,
        "channel {}  span [{:.3}, {:.3}) GPS s  live {:.1} h  bin {} s  CL {}  p0 {}  min SNR {}",
        r.channel.name,
        r.span_start_gps,
        r.span_end_gps,
        r.live_s / 3600.0,
        p.bin_s,
        p.cl,
        p.p0,
        p.min_snr
    );
    if !r.has_families {
        let _ = writeln!(o, "(no family tables: all triggers of the channel only)");
    }
    for s in &r.series {
        let _ = writeln!(
            o,
            "\n== {}: {} events, mean {:.3}/h, median block rate {:.3}/h{}",
            subject_name(s),
            s.n_events,
            s.mean_rate_per_hour,
            s.median_rate_per_hour,
            if s.latest_differs {
                "  [latest block differs from median]"
            } else {
                ""
            }
        );
        let _ = writeln!(o, "blocks (change points at inner edges):");
        let _ = writeln!(
            o,
            "  {:>16} {:>16} {:>8} {:>10} {:>10} {:>10} {:>10}",
            "start_gps", "end_gps", "count", "live_h", "rate/h", "lower/h", "upper/h"
        );
        for b in &s.blocks {
            let _ = writeln!(
                o,
                "  {:>16.3} {:>16.3} {:>8} {:>10.3} {:>10.3} {:>10.3} {:>10.3}",
                b.start_gps,
                b.end_gps,
                b.count,
                b.live_s / 3600.0,
                b.rate_per_hour,
                b.lower_per_hour,
                b.upper_per_hour
            );
        }
        let _ = writeln!(
            o,
            "  {:>16} {:>16} {:>8} {:>10} {:>10} {:>10} {:>10}",
            "bin_start_gps", "bin_end_gps", "count", "live_s", "rate/h", "lower/h", "upper/h"
        );
        for b in &s.bins {
            let f = |v: Option<f64>| v.map(|x| format!("{x:.3}")).unwrap_or("-".into());
            let _ = writeln!(
                o,
                "  {:>16.3} {:>16.3} {:>8} {:>10.1} {:>10} {:>10} {:>10}{}",
                b.start_gps,
                b.end_gps,
                b.count,
                b.live_s,
                f(b.rate_per_hour),
                f(b.lower_per_hour),
                f(b.upper_per_hour),
                if b.low_live { "  low live time" } else { "" }
            );
        }
    }
    o
}
