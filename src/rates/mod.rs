//! Family rates over live time: binned counts with exact Poisson limits
//! (Gehrels 1986) and change points from Bayesian blocks (Scargle et al.
//! 2013).
//!
//! Inputs (catalogue): `triggers` of one channel (by default the target
//! channel), `analysed_segments` for live time, and — when the catalogue has
//! been clustered — `families` / `family_members` to split triggers by
//! family. Without the family tables only "all triggers of the channel" is
//! available.
//!
//! Conventions: times \[GPS s\]; `live_s` = analysed time inside a bin
//! \[s\]; rates are per hour of live time \[1/h\]; limits are one-sided at the
//! chosen confidence level (default 0.9). A bin whose live time is below
//! `min_live_fraction` of its length is kept and flagged `low_live`.

pub mod blocks;
pub mod format;
pub mod live;
pub mod poisson;

use crate::catalogue::{from_ns, to_ns};
use crate::segments::SegmentList;
use anyhow::{bail, Context, Result};
use blocks::{bin_cells, cells_blocks, Block};
use live::{live_time, resolve_channel, table_exists, ChannelRef};
use poisson::LimitCache;
use rayon::prelude::*;
use rusqlite::{params, Connection};
use serde::Serialize;
use std::collections::BTreeMap;

/// Parameters of a rates query. Defaults: one-hour bins, whole catalogue,
/// no SNR cut, CL 0.9, p0 0.05, low-live flag below half a bin, at most 2000
/// cells per Bayesian-blocks fit.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RateParams {
    /// Only this family (`None` = all triggers plus each family).
    pub family: Option<i64>,
    /// Channel name (`None` = the target channel).
    pub channel: Option<String>,
    /// Bin width \[s\].
    pub bin_s: f64,
    /// Start of the span \[GPS s\] (`None` = start of live time).
    pub since_gps: Option<f64>,
    /// End of the span \[GPS s\] (`None` = end of live time).
    pub until_gps: Option<f64>,
    /// Count only triggers with SNR ≥ this.
    pub min_snr: f64,
    /// One-sided confidence level of the limits, in (0, 1).
    pub cl: f64,
    /// False-positive probability of the Bayesian-blocks prior, in (0, 1).
    pub p0: f64,
    /// Bins with live time below this fraction of their length are flagged.
    pub min_live_fraction: f64,
    /// Above this many distinct event times, events are binned into this many
    /// equal cells over the span before the blocks fit (keeps it fast).
    pub max_cells: usize,
}

/// The most time bins one `rates` or `report` run makes: a bin length that
/// would make more is refused up front (each bin holds a row of output and
/// a Poisson interval; 100,000 bins is a year in 5-minute bins).
pub const MAX_BINS: u64 = 100_000;

impl Default for RateParams {
    fn default() -> Self {
        RateParams {
            family: None,
            channel: None,
            bin_s: 3600.0,
            since_gps: None,
            until_gps: None,
            min_snr: 0.0,
            cl: 0.9,
            p0: 0.05,
            min_live_fraction: 0.5,
            max_cells: 2000,
        }
    }
}

impl RateParams {
    /// Validate the parameters (before any I/O).
    ///
    /// # Errors
    /// [`crate::Error::InvalidParameter`] naming the field.
    pub fn check(&self) -> crate::Result<()> {
        use crate::Error;
        if !(self.bin_s.is_finite() && self.bin_s > 0.0) {
            return Err(Error::invalid(
                "bin_s",
                format!("must be a positive number of seconds, got {}", self.bin_s),
            ));
        }
        if !(self.cl > 0.0 && self.cl < 1.0) {
            return Err(Error::invalid(
                "cl",
                format!("must be strictly between 0 and 1, got {}", self.cl),
            ));
        }
        if !(self.p0 > 0.0 && self.p0 < 1.0) {
            return Err(Error::invalid(
                "p0",
                format!("must be strictly between 0 and 1, got {}", self.p0),
            ));
        }
        if !self.min_snr.is_finite() {
            return Err(Error::invalid(
                "min_snr",
                format!("must be a number, got {}", self.min_snr),
            ));
        }
        if !(0.0..=1.0).contains(&self.min_live_fraction) {
            return Err(Error::invalid(
                "min_live_fraction",
                format!("must be in [0, 1], got {}", self.min_live_fraction),
            ));
        }
        if self.max_cells < 2 {
            return Err(Error::invalid(
                "max_cells",
                format!("must be at least 2, got {}", self.max_cells),
            ));
        }
        for (field, t) in [("since_gps", self.since_gps), ("until_gps", self.until_gps)] {
            if let Some(x) = t.filter(|x| !x.is_finite()) {
                return Err(Error::invalid(
                    field,
                    format!("must be a finite number, got {x}"),
                ));
            }
            if let Some(x) = t {
                crate::catalogue::check_gps(field, x)?;
            }
        }
        if let (Some(a), Some(b)) = (self.since_gps, self.until_gps) {
            if b <= a {
                return Err(Error::invalid(
                    "until_gps",
                    format!("({b}) must be after {{since_gps}} ({a})"),
                ));
            }
        }
        Ok(())
    }
}

/// One time bin.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct RateBin {
    /// Bin start \[GPS s\].
    pub start_gps: f64,
    /// Bin end \[GPS s\].
    pub end_gps: f64,
    /// Events in the bin.
    pub count: u64,
    /// Live time in the bin \[s\].
    pub live_s: f64,
    /// Rate \[1/h\] (`None` without live time).
    pub rate_per_hour: Option<f64>,
    /// Lower limit on the rate \[1/h\].
    pub lower_per_hour: Option<f64>,
    /// Upper limit on the rate \[1/h\].
    pub upper_per_hour: Option<f64>,
    /// Live time below `min_live_fraction` of the bin: treat with care.
    pub low_live: bool,
}

/// One Bayesian block with its rate.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct BlockRate {
    /// Block start \[GPS s\].
    pub start_gps: f64,
    /// Block end \[GPS s\].
    pub end_gps: f64,
    /// Events in the block.
    pub count: u64,
    /// Live time in the block \[s\].
    pub live_s: f64,
    /// Rate \[1/h\].
    pub rate_per_hour: f64,
    /// Lower limit \[1/h\].
    pub lower_per_hour: f64,
    /// Upper limit \[1/h\].
    pub upper_per_hour: f64,
}

/// Rates of one family (or of all triggers of the channel).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RateSeries {
    /// Family id (`None` = all triggers of the channel).
    pub family_id: Option<i64>,
    /// Family label, if named.
    pub label: Option<String>,
    /// Events in the span.
    pub n_events: u64,
    /// Mean rate over the span \[1/h\].
    pub mean_rate_per_hour: f64,
    /// The bins.
    pub bins: Vec<RateBin>,
    /// Bayesian blocks (empty without events).
    pub blocks: Vec<BlockRate>,
    /// Change times \[GPS s\] (inner block edges).
    pub change_times_gps: Vec<f64>,
    /// Live-time-weighted median of the block rates \[1/h\].
    pub median_rate_per_hour: f64,
    /// The latest block's rate differs from the median block rate by an
    /// exact two-sided Poisson test at level `1 − cl` (equal tails; 10% at
    /// the default `cl` 0.9): the median lies outside the latest block's
    /// central interval made of one-sided limits at `(1 + cl) / 2`
    /// (Gehrels 1986). Shown as `rate_changed` by `families`. (The block
    /// limits shown beside it are one-sided at `cl` each, so together an
    /// interval of `2 cl − 1`, 80% at the default.)
    pub latest_differs: bool,
}

/// The answer to a rates query.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RateReport {
    /// The channel whose triggers are counted.
    pub channel: ChannelRef,
    /// Span start \[GPS s\].
    pub span_start_gps: f64,
    /// Span end \[GPS s\].
    pub span_end_gps: f64,
    /// Live time in the span \[s\].
    pub live_s: f64,
    /// Whether the catalogue has families (a clustering run made some).
    pub has_families: bool,
    /// Parameters used.
    pub params: RateParams,
    /// One series per subject (all triggers first, then families by id).
    pub series: Vec<RateSeries>,
}

/// Per-hour factor.
const HOUR_S: f64 = 3600.0;

/// Triggers of `channel_id` in `[since, until)` with SNR ≥ `min_snr`, as
/// (t_peak \[GPS s\], family id), sorted by time. Family id is `None` when
/// unassigned or when the catalogue has no family tables.
///
/// For a catalogue on disk the span is read in parallel time slices, one
/// read-only connection per worker (SQLite row stepping dominates the cost
/// on large catalogues; measured in benches/rates.rs). Those connections see
/// committed data only: do not call this inside an uncommitted write
/// transaction on `conn`.
///
/// # Errors
/// On SQLite errors.
pub fn load_events(
    conn: &Connection,
    channel_id: i64,
    since_gps: f64,
    until_gps: f64,
    min_snr: f64,
    with_families: bool,
) -> Result<Vec<(f64, Option<i64>)>> {
    let (ns0, ns1) = (to_ns(since_gps)?, to_ns(until_gps)?);
    let workers = rayon::current_num_threads().clamp(1, 8) as i64;
    let path = conn.path().filter(|p| !p.is_empty()).map(str::to_string);
    let mut rows: Vec<(i64, Option<i64>)> = match path {
        Some(path) if workers > 1 && ns1 > ns0 => {
            let step = (ns1 - ns0) / workers + 1;
            let parts = (0..workers)
                .into_par_iter()
                .map(|k| {
                    let a = ns0 + k * step;
                    let b = (a + step).min(ns1);
                    if a >= b {
                        return Ok(Vec::new());
                    }
                    // Read-only like the listing commands (works on a
                    // catalogue shared without write access).
                    let c = crate::catalogue::open_read_only(std::path::Path::new(&path))
                        .with_context(|| format!("opening {path} for reading"))?;
                    load_chunk(&c, channel_id, a, b, min_snr, with_families)
                })
                .collect::<Result<Vec<_>>>()?;
            parts.concat()
        }
        _ => load_chunk(conn, channel_id, ns0, ns1, min_snr, with_families)?,
    };
    rows.sort_by_key(|r| r.0);
    Ok(rows.into_iter().map(|(ns, f)| (from_ns(ns), f)).collect())
}

/// One time slice `[ns0, ns1)`: two plain scans merged on trigger id (faster
/// than a join through the time index).
fn load_chunk(
    conn: &Connection,
    channel_id: i64,
    ns0: i64,
    ns1: i64,
    min_snr: f64,
    with_families: bool,
) -> Result<Vec<(i64, Option<i64>)>> {
    let mut stmt = conn.prepare(
        "SELECT id, t_peak_ns FROM triggers \
         WHERE channel_id = ?1 AND t_peak_ns >= ?2 AND t_peak_ns < ?3 AND snr >= ?4",
    )?;
    let mut trig = stmt
        .query_map(params![channel_id, ns0, ns1, min_snr], |r| {
            Ok((r.get::<_, i64>(0)?, r.get::<_, i64>(1)?))
        })?
        .collect::<rusqlite::Result<Vec<_>>>()
        .context("reading triggers")?;
    trig.sort_unstable_by_key(|x| x.0);
    let mut fam: Vec<Option<i64>> = vec![None; trig.len()];
    if with_families && !trig.is_empty() {
        let mut stmt = conn.prepare(
            "SELECT trigger_id, family_id FROM family_members \
             WHERE family_id IS NOT NULL AND trigger_id >= ?1 AND trigger_id <= ?2 ORDER BY trigger_id",
        )?;
        let mut rows = stmt.query(params![trig[0].0, trig[trig.len() - 1].0])?;
        let mut k = 0;
        while let Some(r) = rows.next().context("reading family_members")? {
            let (id, f): (i64, i64) = (r.get(0)?, r.get(1)?);
            while k < trig.len() && trig[k].0 < id {
                k += 1;
            }
            if k < trig.len() && trig[k].0 == id {
                fam[k] = Some(f);
            }
        }
    }
    Ok(trig.iter().zip(fam).map(|(&(_, ns), f)| (ns, f)).collect())
}

/// Families known to the catalogue: id → label (all statuses).
///
/// # Errors
/// On SQLite errors.
pub fn load_families(conn: &Connection) -> Result<BTreeMap<i64, Option<String>>> {
    let mut stmt = conn.prepare("SELECT id, label FROM families ORDER BY id")?;
    let rows = stmt
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))?
        .collect::<rusqlite::Result<BTreeMap<_, _>>>()?;
    Ok(rows)
}

/// Bin `times` (sorted) over `[start, end)` in bins of `bin_s`.
pub fn bin_rates(
    times: &[f64],
    live: &SegmentList,
    start: f64,
    end: f64,
    p: &RateParams,
    cache: &mut LimitCache,
) -> Vec<RateBin> {
    let mut out = Vec::new();
    let mut j = times.partition_point(|&t| t < start);
    let mut k = 0u64;
    loop {
        let a = start + k as f64 * p.bin_s;
        if a >= end {
            break;
        }
        let b = (a + p.bin_s).min(end);
        let j0 = j;
        while j < times.len() && times[j] < b {
            j += 1;
        }
        let count = (j - j0) as u64;
        let live_s = live.overlap_with(a, b);
        let (rate, lo, up) = if live_s > 0.0 {
            let lim = cache.get(count);
            let f = HOUR_S / live_s;
            (
                Some(count as f64 * f),
                Some(lim.lower * f),
                Some(lim.upper * f),
            )
        } else {
            (None, None, None)
        };
        out.push(RateBin {
            start_gps: a,
            end_gps: b,
            count,
            live_s,
            rate_per_hour: rate,
            lower_per_hour: lo,
            upper_per_hour: up,
            low_live: live_s < p.min_live_fraction * (b - a),
        });
        k += 1;
    }
    out
}

/// Bayesian blocks of `times` (sorted) over the span with live-time exposure;
/// long lists are binned into `max_cells` cells first.
pub fn fit_blocks(
    times: &[f64],
    live: &SegmentList,
    start: f64,
    end: f64,
    p0: f64,
    max_cells: usize,
) -> Vec<Block> {
    if times.is_empty() {
        return Vec::new();
    }
    let distinct = 1 + times.windows(2).filter(|w| w[1] != w[0]).count();
    let (t, x) = if distinct <= max_cells {
        bin_cells_exact(times)
    } else {
        bin_cells(times, start, (end - start) / max_cells as f64)
    };
    cells_blocks(&t, &x, p0, Some((start, end)), Some(live))
        .map(|f| f.blocks)
        .unwrap_or_default()
}

/// Distinct times and multiplicities of a sorted list.
fn bin_cells_exact(times: &[f64]) -> (Vec<f64>, Vec<f64>) {
    let mut t: Vec<f64> = Vec::new();
    let mut x: Vec<f64> = Vec::new();
    for &v in times {
        if t.last() == Some(&v) {
            *x.last_mut().unwrap() += 1.0;
        } else {
            t.push(v);
            x.push(1.0);
        }
    }
    (t, x)
}

/// Block rates with limits, the live-weighted median block rate and whether
/// the latest block differs from it (see [`RateSeries::latest_differs`]:
/// an exact two-sided test at level `1 − cl`, not the pair of one-sided
/// limits at `cl` shown in the tables).
pub fn summarise_blocks(blocks: &[Block], cache: &mut LimitCache) -> (Vec<BlockRate>, f64, bool) {
    let rates: Vec<BlockRate> = blocks
        .iter()
        .map(|b| {
            let lim = cache.get(b.count);
            let f = if b.exposure_s > 0.0 {
                HOUR_S / b.exposure_s
            } else {
                0.0
            };
            BlockRate {
                start_gps: b.start,
                end_gps: b.end,
                count: b.count,
                live_s: b.exposure_s,
                rate_per_hour: b.count as f64 * f,
                lower_per_hour: lim.lower * f,
                upper_per_hour: lim.upper * f,
            }
        })
        .collect();
    let median = weighted_median(
        &rates
            .iter()
            .map(|r| (r.rate_per_hour, r.live_s))
            .collect::<Vec<_>>(),
    );
    let differs = match (rates.last(), blocks.last()) {
        (Some(last), Some(b)) if rates.len() > 1 && last.live_s > 0.0 => {
            // Central interval at 1 − (1 − cl): one-sided limits at (1 + cl)/2.
            let lim = poisson::poisson_limits(b.count, 0.5 * (1.0 + cache.cl()));
            let f = HOUR_S / last.live_s;
            median < lim.lower * f || median > lim.upper * f
        }
        _ => false,
    };
    (rates, median, differs)
}

/// Weighted median of (value, weight) pairs: the smallest value whose
/// cumulative weight reaches half the total (0 for no weight).
pub fn weighted_median(v: &[(f64, f64)]) -> f64 {
    let mut s: Vec<(f64, f64)> = v.iter().copied().filter(|p| p.1 > 0.0).collect();
    s.sort_by(|a, b| a.0.total_cmp(&b.0));
    let total: f64 = s.iter().map(|p| p.1).sum();
    let mut acc = 0.0;
    for (x, w) in &s {
        acc += w;
        if acc >= 0.5 * total {
            return *x;
        }
    }
    0.0
}

/// The span `[since, until)` with either end defaulting to the edge of
/// `live` (the channel's analysed time).
fn span_of(
    live: &SegmentList,
    channel: &str,
    since: Option<f64>,
    until: Option<f64>,
) -> Result<(f64, f64)> {
    let extent = live.extent();
    let no_time = || anyhow::anyhow!("channel {channel:?} has no analysed time in the catalogue");
    let start = match (since, extent) {
        (Some(s), _) => s,
        (None, Some(e)) => e.start,
        (None, None) => return Err(no_time()),
    };
    let end = match (until, extent) {
        (Some(u), _) => u,
        (None, Some(e)) => e.end,
        (None, None) => return Err(no_time()),
    };
    Ok((start, end))
}

/// The span a rates query would cover \[GPS s\]: `since`/`until`, or the
/// edges of `channel`'s analysed time (the target channel when None).
///
/// # Errors
/// Unknown channel, no analysed time, SQLite errors.
pub fn live_span(
    conn: &Connection,
    channel: Option<&str>,
    since: Option<f64>,
    until: Option<f64>,
) -> Result<(f64, f64)> {
    let channel = resolve_channel(conn, channel)?;
    span_of(&live_time(conn, channel.id)?, &channel.name, since, until)
}

/// Widths a chosen bin may take \[s\]: minutes to days, on clock marks.
const NICE_BINS_S: [f64; 14] = [
    60.0, 120.0, 300.0, 600.0, 900.0, 1200.0, 1800.0, 3600.0, 7200.0, 10800.0, 21600.0, 43200.0,
    86400.0, 604800.0,
];

/// The bin width for a span of `span_s` seconds: the widest clock-mark
/// width (`NICE_BINS_S`: 1 min to 1 week) that still gives at least 12 bins; below 12
/// minutes of span, a 1-2-5 number of seconds giving at least 12.
pub fn auto_bin_s(span_s: f64) -> f64 {
    const MIN_BINS: f64 = 12.0;
    if let Some(w) = NICE_BINS_S.iter().rev().find(|&&w| span_s / w >= MIN_BINS) {
        return *w;
    }
    let raw = (span_s / MIN_BINS).max(1e-3);
    let p = 10f64.powf(raw.log10().floor());
    [5.0, 2.0, 1.0]
        .iter()
        .map(|m| m * p)
        .find(|w| *w <= raw)
        .unwrap_or(p)
}

/// Compute rates from the catalogue.
///
/// # Errors
/// Invalid parameters; unknown channel or family; no live time in the span;
/// SQLite errors.
pub fn rates(conn: &Connection, p: &RateParams) -> Result<RateReport> {
    p.check()?;
    let channel = resolve_channel(conn, p.channel.as_deref())?;
    // Families exist once a clustering run has made some (the tables alone
    // are there from the schema on).
    let has_families = table_exists(conn, "families")?
        && table_exists(conn, "family_members")?
        && conn.query_row("SELECT EXISTS (SELECT 1 FROM families)", [], |r| {
            r.get::<_, bool>(0)
        })?;
    let families = if has_families {
        load_families(conn)?
    } else {
        BTreeMap::new()
    };
    if let Some(f) = p.family {
        if !has_families {
            return Err(crate::Error::not_found(
                "family",
                f,
                format!("family {f}: the catalogue has no families yet (cluster it first)"),
            )
            .into());
        }
        if !families.contains_key(&f) {
            return Err(crate::Error::not_found(
                "family",
                f,
                format!("family {f}: no such family in the catalogue"),
            )
            .into());
        }
    }
    let all_live = live_time(conn, channel.id)?;
    let (start, end) = span_of(&all_live, &channel.name, p.since_gps, p.until_gps)?;
    if end <= start {
        bail!("empty span: start {start} is not before end {end} [GPS s]");
    }
    let n_bins = ((end - start) / p.bin_s).ceil();
    if n_bins > MAX_BINS as f64 {
        return Err(crate::Error::invalid(
            "bin_s",
            format!(
                "{} s over the span {start}–{end} [GPS s] makes {n_bins:.0} bins; at most \
                 {MAX_BINS} are allowed (choose a longer bin or a shorter span)",
                p.bin_s
            ),
        )
        .into());
    }
    let live = all_live.intersection(&SegmentList::single(start, end));
    let events = load_events(conn, channel.id, start, end, p.min_snr, has_families)?;

    // Subjects: all triggers (unless one family is asked for), then families.
    let mut subjects: Vec<(Option<i64>, Option<String>, Vec<f64>)> = Vec::new();
    if p.family.is_none() {
        subjects.push((None, None, events.iter().map(|e| e.0).collect()));
    }
    let mut by_family: BTreeMap<i64, Vec<f64>> = BTreeMap::new();
    for (t, f) in &events {
        if let Some(f) = f {
            if p.family.is_none_or(|want| want == *f) {
                by_family.entry(*f).or_default().push(*t);
            }
        }
    }
    for (id, label) in &families {
        if p.family.is_none_or(|want| want == *id) {
            let t = by_family.remove(id).unwrap_or_default();
            subjects.push((Some(*id), label.clone(), t));
        }
    }
    let live_total = live.total();
    let series: Vec<RateSeries> = subjects
        .into_par_iter()
        .map(|(family_id, label, times)| {
            let mut cache = LimitCache::new(p.cl);
            let bins = bin_rates(&times, &live, start, end, p, &mut cache);
            let blocks = fit_blocks(&times, &live, start, end, p.p0, p.max_cells);
            let (blocks, median, differs) = summarise_blocks(&blocks, &mut cache);
            let change_times_gps = blocks.iter().skip(1).map(|b| b.start_gps).collect();
            RateSeries {
                family_id,
                label,
                n_events: times.len() as u64,
                mean_rate_per_hour: if live_total > 0.0 {
                    times.len() as f64 * HOUR_S / live_total
                } else {
                    0.0
                },
                bins,
                blocks,
                change_times_gps,
                median_rate_per_hour: median,
                latest_differs: differs,
            }
        })
        .collect();
    Ok(RateReport {
        channel,
        span_start_gps: start,
        span_end_gps: end,
        live_s: live_total,
        has_families,
        params: p.clone(),
        series,
    })
}

#[cfg(test)]
mod tests {
    use super::auto_bin_s;

    #[test]
    fn auto_bins_give_at_least_twelve() {
        // Two hours: 10-minute bins (12); a day: 2-hour bins (12); a week:
        // 12-hour bins (14); 90 s: 5-s bins (18).
        assert_eq!(auto_bin_s(7200.0), 600.0);
        assert_eq!(auto_bin_s(86400.0), 7200.0);
        assert_eq!(auto_bin_s(7.0 * 86400.0), 43200.0);
        assert_eq!(auto_bin_s(90.0), 5.0);
        for span in [13.0, 100.0, 719.0, 720.0, 5000.0, 1e5, 3e7] {
            let w = auto_bin_s(span);
            assert!(span / w >= 12.0, "{span} s -> {w} s");
        }
    }
}
