//! Time-frequency fingerprints of triggers: normalised-energy maps around
//! the trigger, sized and placed relative to the trigger itself, and the
//! scalar morphology of the trigger's whole time-frequency cluster.
//! Versioned ([`FEATURE_VERSION`]); stored in the catalogue as
//! little-endian f32 BLOBs.
//!
//! # The trigger's own frame
//! Everything is measured at the trigger's quality factor `Q` ([`map_q`])
//! and in units of the Q-transform tile at that Q and the trigger's peak
//! frequency `f` (Chatterji et al. 2004; the tile extents of
//! [`crate::tf::Tile`]): the tile lasts `Q / (π f)` (±2σ_t) and the
//! frequency rows are `1/Q` octave apart (about one σ_f of the tile), so a
//! sine-Gaussian of that Q looks the same at any centre frequency and
//! loudness ([`MapLayout`]):
//! - rows: `f · 2^(i/Q)` for `i = −16..=16` ([`HALF_ROWS`]);
//! - base duration: the longer of the trigger's extent `t_end − t_start`
//!   and one tile; the stored maps span 2, 4, 8 and 16 base durations
//!   ([`SPAN_FACTORS`], centred on the peak, clamped to
//!   [`MIN_SPAN_S`]..[`MAX_SPAN_S`]), 16 time bins each (the loudest tile
//!   of the bin) on every other row (16 rows);
//! - the morphology is measured on the widest span at a finer step
//!   ([`N_BINS`] bins holding the mean of their tiles).
//!
//! # Morphology ([`SCALAR_NAMES`])
//! The trigger's cluster is the connected region (8-neighbours) around the
//! peak cell where the 3 × 3 running mean of Z is at least
//! [`REGION_LEVEL`] (noise has mean 1). It holds the whole glitch around
//! the trigger, also where the scan cut it into pieces, and is the same
//! whether the stored extent is a fragment or the whole. Over the region,
//! with weights `w = Z − 1` (clipped at 0):
//! - duration and bandwidth in tile units: the weighted standard deviations
//!   of time over the tile's σ_t = Q/(4π f), and of row index (1/Q octave);
//! - fractional bandwidth: the region's frequency extent over `f`;
//! - number of significant pixels: cells of the region, each σ_t/2 ×
//!   1/Q octave at the narrowest (the count saturates once the glitch is
//!   resolved, see below);
//! - drift and curvature: a weighted quadratic fit of the row index
//!   against time in units of the region's own time spread,
//!   `u = a + b τ + c τ²`, reported as `b / σ_u` and `c / σ_u` (a straight
//!   upward sweep gives +1, a symmetric arch about −1, a sine-Gaussian 0);
//! - time symmetry: `(E_after − E_before) / E` about the peak cell;
//! - spectral flatness: geometric over arithmetic mean of the region's
//!   frequency marginal (noise included), across the region's rows: near 1
//!   for energy spread evenly over its band (sweeps, broadband pulses), low
//!   for a peaked spectrum.

use crate::tf::sigma_t;
use crate::trigger::Trigger;
use anyhow::{bail, Result};

/// Bump when the fingerprint definition changes; stored features of another
/// version are recomputed. Version 3: maps and morphology in the trigger's
/// own frame (spans relative to the trigger; issue 12 and 16).
pub const FEATURE_VERSION: i64 = 3;
/// Stored map spans in units of the trigger's base duration
/// ([`MapLayout::base_s`]).
pub const SPAN_FACTORS: [f64; 4] = [2.0, 4.0, 8.0, 16.0];
/// Number of stored maps.
pub const N_SPANS: usize = SPAN_FACTORS.len();
/// Shortest map span \[s\].
pub const MIN_SPAN_S: f64 = 1.0 / 64.0;
/// Longest map span \[s\] (the map source keeps 8 s of margin around a
/// block's kept part).
pub const MAX_SPAN_S: f64 = 16.0;
/// Analysis rows on each side of the peak row (1/Q octave apart).
pub const HALF_ROWS: usize = 16;
/// Analysis rows in all.
pub const N_ROWS: usize = 2 * HALF_ROWS + 1;
/// Time bins of the analysis map over the widest span.
pub const N_BINS: usize = 128;
/// Frequencies per stored map (every other analysis row, offsets −15..=15).
pub const N_FREQS: usize = 16;
/// Time bins per stored map.
pub const N_TIMES: usize = 16;
/// Values in one stored map.
pub const MAP_LEN: usize = N_FREQS * N_TIMES;
/// Level of the 3 × 3 running mean of Z that bounds a trigger's region.
/// Gaussian noise has Z exponential with mean 1; a mean of 9 independent
/// cells exceeds 2.5 with probability 2·10⁻⁴ (Gamma(9, 1) tail), and
/// neighbouring tiles overlap, so a few stray cells do join.
pub const REGION_LEVEL: f64 = 2.5;
/// Number of scalar morphology features (see [`SCALAR_NAMES`]).
pub const N_SCALARS: usize = 14;
/// Names of the scalar features, in order.
pub const SCALAR_NAMES: [&str; N_SCALARS] = [
    "ln_snr",
    "ln_duration_s",
    "ln_bandwidth_hz",
    "log2_f_peak_hz",
    "ln_q",
    "ln_duration_tiles",
    "ln_bandwidth_rows",
    "ln_frac_bandwidth",
    "ln_pixels",
    "drift",
    "curvature",
    "time_symmetry",
    "spectral_flatness",
    "region_found",
];
/// Index of ln SNR in the scalars.
pub const S_LN_SNR: usize = 0;
/// Index of log2 peak frequency.
pub const S_LOG2_F: usize = 3;
/// Index of ln Q.
pub const S_LN_Q: usize = 4;
/// Index of the ln fractional bandwidth of the region.
pub const S_LN_FRAC_BW: usize = 7;
/// Index of the drift of the region.
pub const S_DRIFT: usize = 9;
/// Index of the curvature of the region.
pub const S_CURVATURE: usize = 10;

/// One frequency row of normalised energies: tile `i` centred at
/// `t0_gps + i dt_s`.
#[derive(Debug, Clone, PartialEq)]
pub struct RowEnergies {
    /// Centre of the first tile \[GPS s\].
    pub t0_gps: f64,
    /// Tile spacing \[s\].
    pub dt_s: f64,
    /// Normalised energy Z of each tile (mean 1 in Gaussian noise).
    pub z: Vec<f32>,
}

/// Source of normalised energies around a time (the Q-transform of whitened
/// data: [`crate::maps::BundleMaps`]; analytic for tests:
/// [`SineGaussianSource`]).
pub trait EnergyMapSource: Sync {
    /// Rows of tiles of quality `q` at each of `freqs_hz` \[Hz\], covering
    /// at least `[t_center_gps − span_s/2, t_center_gps + span_s/2]`; None
    /// for a row the channel cannot hold (outside its band).
    fn energy_rows(
        &self,
        channel: &str,
        t_center_gps: f64,
        span_s: f64,
        q: f64,
        freqs_hz: &[f64],
    ) -> Result<Vec<Option<RowEnergies>>>;

    /// Normalised energy Z on `n_times` equal bins spanning `[t_center_gps
    /// − span_s/2, t_center_gps + span_s/2)` × the frequencies `freqs_hz`
    /// \[Hz\], at quality factor `q`; row-major `[time][freq]`; each bin the
    /// loudest tile centred in it (the nearest tile when the bin is
    /// narrower than the tile spacing); rows outside the band are 0.
    fn energy_map(
        &self,
        channel: &str,
        t_center_gps: f64,
        span_s: f64,
        q: f64,
        freqs_hz: &[f64],
        n_times: usize,
    ) -> Result<Vec<f32>> {
        let rows = self.energy_rows(channel, t_center_gps, span_s, q, freqs_hz)?;
        Ok(bin_rows(&rows, t_center_gps, span_s, n_times, Binning::Max))
    }

    /// Whether raw data of `channel` can be read (false for a channel whose
    /// triggers were imported without data: they get no fingerprint).
    fn has_data(&self, _channel: &str) -> bool {
        true
    }

    /// Whether a scan of `channel` holds GPS `t_gps` (its map can be made).
    fn has_data_at(&self, channel: &str, _t_gps: f64) -> bool {
        self.has_data(channel)
    }

    /// Whether GPS `t_gps` lies inside the analysed time of a scan of
    /// `channel`: stricter than [`EnergyMapSource::has_data_at`], which
    /// also accepts a time in a dropout within a scan's span (a trigger's
    /// refined peak may sit just past its segment's edge). Used to choose
    /// the time of an aux channel's image.
    fn analysed_at(&self, channel: &str, t_gps: f64) -> bool {
        self.has_data_at(channel, t_gps)
    }

    /// What the scan of `channel` that holds GPS `t_gps` analysed (band and
    /// threshold), when known; images use it for their frequency range and
    /// colour scale. Scans of one channel may differ (a re-scan with
    /// another `--fmin` or threshold covers only its own time).
    fn scan_band(&self, _channel: &str, _t_gps: f64) -> Option<ScanBand> {
        None
    }
}

/// The band and threshold of a channel's scan.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ScanBand {
    /// Lowest analysed frequency \[Hz\].
    pub f_lo_hz: f64,
    /// Highest analysed frequency \[Hz\].
    pub f_hi_hz: f64,
    /// The scan's trigger threshold as normalised energy, `1 + SNR²/2`.
    pub z_threshold: f64,
}

/// How a time bin summarises the tiles centred in it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Binning {
    /// The loudest tile (images).
    Max,
    /// The mean of the tiles (noise keeps mean 1 whatever the bin width).
    Mean,
}

/// Bin rows into `n_times` equal time bins of `span` centred on `t_center`,
/// row-major `[time][freq]`; a bin narrower than the tile spacing takes the
/// nearest tile; missing rows are 0.
pub fn bin_rows(
    rows: &[Option<RowEnergies>],
    t_center: f64,
    span: f64,
    n_times: usize,
    how: Binning,
) -> Vec<f32> {
    let mut out = Vec::new();
    bin_rows_into(
        rows.iter().map(Option::as_ref),
        t_center,
        span,
        n_times,
        how,
        &mut out,
    );
    out
}

/// As [`bin_rows`], from borrowed rows, appending to `out`.
fn bin_rows_into<'a>(
    rows: impl ExactSizeIterator<Item = Option<&'a RowEnergies>>,
    t_center: f64,
    span: f64,
    n_times: usize,
    how: Binning,
    out: &mut Vec<f32>,
) {
    let n_freqs = rows.len();
    let base = out.len();
    out.resize(base + n_times * n_freqs, 0.0);
    let out = &mut out[base..];
    let w = span / n_times as f64;
    let start = t_center - 0.5 * span;
    // First tile index at or after each bin edge (bin b spans edges b and
    // b + 1): one division per edge rather than two per bin.
    let mut edge = vec![0usize; n_times + 1];
    for (j, row) in rows.enumerate() {
        let Some(r) = row else { continue };
        let (z, dt, t0) = (&r.z, r.dt_s, r.t0_gps);
        for (b, e) in edge.iter_mut().enumerate() {
            *e = ceil_index((start + b as f64 * w - t0) / dt);
        }
        let tiles = |b: usize| (edge[b], edge[b + 1].min(z.len()));
        let mut b = 0;
        while b < n_times {
            // Means of four neighbouring bins side by side: four independent
            // sums, each in its own order (a sum is one chain of additions).
            if how == Binning::Mean && b + 4 <= n_times {
                let s: [&[f32]; 4] = std::array::from_fn(|k| {
                    let (lo, hi) = tiles(b + k);
                    if hi > lo {
                        &z[lo..hi]
                    } else {
                        &[]
                    }
                });
                if s.iter().all(|s| !s.is_empty()) {
                    for (k, v) in mean4(s).into_iter().enumerate() {
                        out[(b + k) * n_freqs + j] = v;
                    }
                    b += 4;
                    continue;
                }
            }
            let (i_lo, i_hi) = tiles(b);
            let v = if i_hi > i_lo {
                let s = &z[i_lo..i_hi];
                match how {
                    Binning::Max => s.iter().copied().fold(0.0f32, f32::max),
                    Binning::Mean => s.iter().sum::<f32>() / s.len() as f32,
                }
            } else {
                let (lo, hi) = (start + b as f64 * w, start + (b + 1) as f64 * w);
                let i = round_index(((lo + hi) * 0.5 - t0) / dt);
                z.get(i).copied().unwrap_or(0.0)
            };
            out[b * n_freqs + j] = v;
            b += 1;
        }
    }
}

// Index loops over the four slices in lockstep read clearer than zips.
#[allow(clippy::needless_range_loop)]
/// `s.iter().sum::<f32>() / s.len()` of four non-empty slices, each summed
/// left to right as that expression does (the same values), interleaved.
fn mean4(s: [&[f32]; 4]) -> [f32; 4] {
    // The library's float sum starts at −0.0.
    let mut acc = [-0.0f32; 4];
    let common = s.iter().map(|s| s.len()).min().unwrap_or(0);
    for i in 0..common {
        for k in 0..4 {
            acc[k] += s[k][i];
        }
    }
    for k in 0..4 {
        for v in &s[k][common..] {
            acc[k] += v;
        }
    }
    std::array::from_fn(|k| acc[k] / s[k].len() as f32)
}

/// `x.round().max(0.0) as usize`, without the library call `round`
/// becomes on the baseline x86-64 target (the same value for every `x`).
fn round_index(x: f64) -> usize {
    if x.abs() < 4_503_599_627_370_496.0 {
        // Both exact below 2^52: the truncation, and the fraction left.
        let t = x as i64 as f64;
        let d = x - t;
        let r = if d >= 0.5 {
            t + 1.0
        } else if d <= -0.5 {
            t - 1.0
        } else {
            t
        };
        r.max(0.0) as usize
    } else {
        x.round().max(0.0) as usize
    }
}

/// `x.ceil().max(0.0) as usize`, without the library call `ceil` becomes
/// on the baseline x86-64 target (the same value for every `x`).
fn ceil_index(x: f64) -> usize {
    // Below 2^52 in magnitude the truncation is exact in an i64.
    if x.abs() < 4_503_599_627_370_496.0 {
        let t = x as i64 as f64;
        let c = if t < x { t + 1.0 } else { t };
        c.max(0.0) as usize
    } else {
        x.ceil().max(0.0) as usize
    }
}

/// `n ≥ 2` frequencies from `lo` to `hi` inclusive, evenly spaced in log.
pub fn log_grid(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    let r = (hi / lo).ln();
    (0..n)
        .map(|i| lo * (r * i as f64 / (n - 1) as f64).exp())
        .collect()
}

/// Quality factor of a trigger's maps: its own Q clamped to 2–128, or 8
/// when it has none (imported triggers may lack one). Below Q ≈ 2 a tile
/// has no meaningful frequency extent (common practice).
pub fn map_q(trigger: &Trigger) -> f64 {
    if trigger.q.is_finite() && trigger.q > 0.0 {
        trigger.q.clamp(2.0, 128.0)
    } else {
        8.0
    }
}

/// Where a trigger's maps lie: its own frame (see the module docs).
#[derive(Debug, Clone, PartialEq)]
pub struct MapLayout {
    /// Quality factor of every row.
    pub q: f64,
    /// Peak frequency \[Hz\] (the centre row).
    pub f_hz: f64,
    /// Peak time \[GPS s\] (the centre of every map).
    pub t_gps: f64,
    /// Tile duration at (Q, f): `Q / (π f)` \[s\].
    pub tile_s: f64,
    /// Base duration: the longer of the trigger's extent and one tile \[s\].
    pub base_s: f64,
    /// Spans of the stored maps \[s\].
    pub spans_s: [f64; N_SPANS],
    /// Analysis rows \[Hz\]: `f · 2^(i/Q)`, `i = −HALF_ROWS..=HALF_ROWS`.
    pub rows_hz: Vec<f64>,
}

impl MapLayout {
    /// The layout of `trigger`'s maps.
    pub fn of(trigger: &Trigger) -> MapLayout {
        let q = map_q(trigger);
        let f = trigger.f_peak.max(1.0);
        let tile_s = 4.0 * sigma_t(q, f);
        let dur = trigger.t_end - trigger.t_start;
        let base_s = if dur.is_finite() {
            dur.max(tile_s)
        } else {
            tile_s
        };
        let spans_s = SPAN_FACTORS.map(|k| (k * base_s).clamp(MIN_SPAN_S, MAX_SPAN_S));
        let rows_hz = (0..N_ROWS)
            .map(|i| f * ((i as f64 - HALF_ROWS as f64) / q).exp2())
            .collect();
        MapLayout {
            q,
            f_hz: f,
            t_gps: trigger.t_peak,
            tile_s,
            base_s,
            spans_s,
            rows_hz,
        }
    }

    /// The widest span (the analysis map's) \[s\].
    pub fn analysis_span_s(&self) -> f64 {
        self.spans_s[N_SPANS - 1]
    }

    /// Frequencies of the stored maps' rows \[Hz\] (analysis rows
    /// `1, 3, ..., 31`: offsets −15..=15 in steps of 2).
    pub fn map_freqs_hz(&self) -> Vec<f64> {
        (0..N_FREQS).map(|j| self.rows_hz[2 * j + 1]).collect()
    }
}

/// One trigger's fingerprint.
#[derive(Debug, Clone, PartialEq)]
pub struct Fingerprint {
    /// Feature version ([`FEATURE_VERSION`]).
    pub version: i64,
    /// [`N_SPANS`] maps of `[N_TIMES][N_FREQS]` normalised energy Z (see
    /// [`MapLayout`]).
    pub maps: Vec<f32>,
    /// Scalar morphology, in the order of [`SCALAR_NAMES`].
    pub scalars: Vec<f32>,
}

impl Fingerprint {
    /// The map at span index `i` (of [`SPAN_FACTORS`]).
    pub fn map(&self, i: usize) -> &[f32] {
        &self.maps[i * MAP_LEN..(i + 1) * MAP_LEN]
    }
}

/// Compute the fingerprint of `trigger` (seen in `channel`) from `src`.
///
/// # Errors
/// The source fails, or returns rows with non-finite values.
pub fn fingerprint(
    trigger: &Trigger,
    channel: &str,
    src: &dyn EnergyMapSource,
) -> Result<Fingerprint> {
    let lay = MapLayout::of(trigger);
    let span = lay.analysis_span_s();
    let rows = src.energy_rows(channel, lay.t_gps, span, lay.q, &lay.rows_hz)?;
    if rows.len() != N_ROWS {
        bail!(
            "energy rows for {channel} at GPS {:.3}: {} rows, expected {N_ROWS}",
            trigger.t_peak,
            rows.len()
        );
    }
    // A fold without early exit vectorises; rows are finite but for errors.
    if !rows
        .iter()
        .flatten()
        .all(|r| r.z.iter().fold(true, |ok, v| ok & v.is_finite()))
    {
        bail!(
            "energy rows for {channel} at GPS {:.3}: non-finite values",
            trigger.t_peak
        );
    }
    // Stored maps: every other row, loudest tile per bin.
    let mut maps = Vec::with_capacity(N_SPANS * MAP_LEN);
    for &s in &lay.spans_s {
        let stored = (0..N_FREQS).map(|j| rows[2 * j + 1].as_ref());
        bin_rows_into(stored, lay.t_gps, s, N_TIMES, Binning::Max, &mut maps);
    }
    let grid = bin_rows(&rows, lay.t_gps, span, N_BINS, Binning::Mean);
    let in_band: Vec<bool> = rows.iter().map(Option::is_some).collect();
    let m = morphology(&grid, &in_band, &lay, span / N_BINS as f64);
    let q = lay.q;
    let scalars = [
        trigger.snr.max(1e-3).ln(),
        (trigger.t_end - trigger.t_start).max(1e-3).ln(),
        (trigger.f_high - trigger.f_low).max(1.0).ln(),
        lay.f_hz.log2(),
        q.ln(),
        m.ln_duration_tiles,
        m.ln_bandwidth_rows,
        m.ln_frac_bandwidth,
        m.ln_pixels,
        m.drift,
        m.curvature,
        m.time_symmetry,
        m.flatness,
        if m.found { 1.0 } else { 0.0 },
    ]
    .iter()
    .map(|&v| v as f32)
    .collect();
    Ok(Fingerprint {
        version: FEATURE_VERSION,
        maps,
        scalars,
    })
}

/// Morphology of the region around the peak (see the module docs).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Morphology {
    /// ln(σ_time / σ_t of the tile).
    pub ln_duration_tiles: f64,
    /// ln(σ of the row index) (rows are 1/Q octave apart).
    pub ln_bandwidth_rows: f64,
    /// ln(frequency extent of the region / peak frequency).
    pub ln_frac_bandwidth: f64,
    /// ln(number of cells in the region).
    pub ln_pixels: f64,
    /// Linear drift of the row index with time, over its spread (−3..3).
    pub drift: f64,
    /// Curvature of the row index with time, over its spread (−3..3).
    pub curvature: f64,
    /// (E after − E before the peak) / E (−1..1).
    pub time_symmetry: f64,
    /// Spectral flatness of the region's frequency marginal (0..1).
    pub flatness: f64,
    /// Whether the peak cell reached [`REGION_LEVEL`] (else the values
    /// describe a single tile).
    pub found: bool,
}

/// Morphology of the analysis grid `z` (`[N_BINS][N_ROWS]`, Z of each cell,
/// `bin_s` wide; rows outside the band flagged in `in_band`).
// Index loops over the (time, row) grid read clearer than iterator chains.
#[allow(clippy::needless_range_loop)]
pub fn morphology(z: &[f32], in_band: &[bool], lay: &MapLayout, bin_s: f64) -> Morphology {
    let (nt, nf) = (N_BINS, N_ROWS);
    debug_assert_eq!(z.len(), nt * nf);
    let at = |t: usize, f: usize| z[t * nf + f] as f64;
    // 3 × 3 running mean over in-band cells. Out-of-band cells, and the
    // cells beyond the first and last rows, enter the sums as +0 in their
    // place, which leaves every sum as it was (the values are ≥ 0): each
    // cell still adds its neighbours in the order (t−1, f−1), (t−1, f), ...,
    // (t+1, f+1), and all rows of a time step are summed side by side (33
    // independent sums instead of one chain of nine additions per cell).
    let w = nf + 2;
    let mut padded = vec![0.0f64; nt * w];
    for (t, row) in padded.chunks_exact_mut(w).enumerate() {
        for f in 0..nf {
            if in_band[f] {
                row[f + 1] = at(t, f);
            }
        }
    }
    let band_n: Vec<f64> = (0..nf)
        .map(|f| {
            let (f0, f1) = (f.saturating_sub(1), (f + 1).min(nf - 1));
            in_band[f0..=f1].iter().filter(|&&b| b).count() as f64
        })
        .collect();
    let mut smooth = vec![0.0f64; nt * nf];
    let mut acc = vec![0.0f64; nf];
    for t in 0..nt {
        let (t0, t1) = (t.saturating_sub(1), (t + 1).min(nt - 1));
        let n_t = (t1 - t0 + 1) as f64;
        acc.fill(0.0);
        for row in padded[t0 * w..(t1 + 1) * w].chunks_exact(w) {
            for d in 0..3 {
                for (a, v) in acc.iter_mut().zip(&row[d..d + nf]) {
                    *a += v;
                }
            }
        }
        for f in 0..nf {
            if in_band[f] {
                smooth[t * nf + f] = acc[f] / (n_t * band_n[f]);
            }
        }
    }
    // Seed: the highest running mean within ±2 cells of the peak cell.
    let (tc, fc) = (nt / 2, HALF_ROWS);
    let mut seed = (tc, fc);
    let mut best = f64::NEG_INFINITY;
    for t in tc - 2..=tc + 2 {
        for f in fc - 2..=fc + 2 {
            if in_band[f] && smooth[t * nf + f] > best {
                best = smooth[t * nf + f];
                seed = (t, f);
            }
        }
    }
    let sigma_tile_s = 0.25 * lay.tile_s;
    let found = best >= REGION_LEVEL;
    let mut region = vec![false; nt * nf];
    let mut cells: Vec<(usize, usize)> = Vec::new();
    if found {
        let mut stack = vec![seed];
        region[seed.0 * nf + seed.1] = true;
        while let Some((t, f)) = stack.pop() {
            cells.push((t, f));
            for tt in t.saturating_sub(1)..=(t + 1).min(nt - 1) {
                for ff in f.saturating_sub(1)..=(f + 1).min(nf - 1) {
                    let i = tt * nf + ff;
                    if in_band[ff] && !region[i] && smooth[i] >= REGION_LEVEL {
                        region[i] = true;
                        stack.push((tt, ff));
                    }
                }
            }
        }
    } else if in_band[fc] {
        cells.push((tc, fc));
    }
    // Weighted moments (time in s from the map centre, row offset in rows).
    let t_of = |t: usize| (t as f64 + 0.5 - 0.5 * nt as f64) * bin_s;
    let u_of = |f: usize| f as f64 - HALF_ROWS as f64;
    let w_of = |t: usize, f: usize| (at(t, f) - 1.0).max(0.0);
    let (mut sw, mut st, mut su) = (0.0, 0.0, 0.0);
    for &(t, f) in &cells {
        let w = w_of(t, f);
        sw += w;
        st += w * t_of(t);
        su += w * u_of(f);
    }
    let single = Morphology {
        ln_duration_tiles: (tile_sigma_floor(bin_s, sigma_tile_s) / sigma_tile_s).ln(),
        ln_bandwidth_rows: (0.5f64).ln(),
        ln_frac_bandwidth: ((1.0 / lay.q).exp2() - (-1.0 / lay.q).exp2()).ln(),
        ln_pixels: (cells.len().max(1) as f64).ln(),
        drift: 0.0,
        curvature: 0.0,
        time_symmetry: 0.0,
        flatness: 1.0,
        found,
    };
    if sw <= 0.0 || cells.len() < 2 {
        return single;
    }
    let (mt, mu) = (st / sw, su / sw);
    let (mut stt, mut suu) = (0.0, 0.0);
    for &(t, f) in &cells {
        let w = w_of(t, f);
        stt += w * (t_of(t) - mt).powi(2);
        suu += w * (u_of(f) - mu).powi(2);
    }
    // A single bin or row has the spread of a uniform cell at least.
    let sd_t = (stt / sw).sqrt().max(bin_s / 12f64.sqrt());
    let sd_u = (suu / sw).sqrt().max(1.0 / 12f64.sqrt());
    // Quadratic fit of u on τ = (t − mt)/sd_t, weighted.
    let (mut a, mut b, mut c) = (0.0, 0.0, 0.0);
    {
        let mut m = [[0.0f64; 3]; 3];
        let mut v = [0.0f64; 3];
        for &(t, f) in &cells {
            let w = w_of(t, f);
            let tau = (t_of(t) - mt) / sd_t;
            let x = [1.0, tau, tau * tau];
            for i in 0..3 {
                v[i] += w * x[i] * u_of(f);
                for j in 0..3 {
                    m[i][j] += w * x[i] * x[j];
                }
            }
        }
        if let Some(s) = solve3(m, v) {
            (a, b, c) = (s[0], s[1], s[2]);
        }
    }
    let _ = a;
    // Time symmetry about the peak cell (the loudest of the region).
    let (tp, _) = cells
        .iter()
        .copied()
        .max_by(|x, y| at(x.0, x.1).total_cmp(&at(y.0, y.1)))
        .expect("non-empty");
    let (mut before, mut after) = (0.0, 0.0);
    for &(t, f) in &cells {
        let w = w_of(t, f);
        if t < tp {
            before += w;
        } else if t > tp {
            after += w;
        }
    }
    let symmetry = if before + after > 0.0 {
        (after - before) / sw
    } else {
        0.0
    };
    // Frequency extent and marginal over the region's rows and columns.
    let f_lo = cells.iter().map(|c| c.1).min().expect("non-empty");
    let f_hi = cells.iter().map(|c| c.1).max().expect("non-empty");
    let t_lo = cells.iter().map(|c| c.0).min().expect("non-empty");
    let t_hi = cells.iter().map(|c| c.0).max().expect("non-empty");
    let q = lay.q;
    let frac_bw = ((u_of(f_hi) + 0.5) / q).exp2() - ((u_of(f_lo) - 0.5) / q).exp2();
    let (mut lsum, mut sum, mut n) = (0.0, 0.0, 0.0);
    for f in f_lo..=f_hi {
        if !in_band[f] {
            continue;
        }
        let e: f64 = (t_lo..=t_hi).map(|t| at(t, f)).sum::<f64>().max(1e-6);
        lsum += e.ln();
        sum += e;
        n += 1.0;
    }
    let flatness = if n > 0.0 && sum > 0.0 {
        ((lsum / n).exp() / (sum / n)).clamp(0.0, 1.0)
    } else {
        1.0
    };
    Morphology {
        ln_duration_tiles: (sd_t.max(tile_sigma_floor(bin_s, 0.0)) / sigma_tile_s).ln(),
        ln_bandwidth_rows: sd_u.ln(),
        ln_frac_bandwidth: frac_bw.max(1e-6).ln(),
        ln_pixels: (cells.len() as f64).ln(),
        drift: (b / sd_u).clamp(-3.0, 3.0),
        curvature: (c / sd_u).clamp(-3.0, 3.0),
        time_symmetry: symmetry,
        flatness,
        found,
    }
}

/// The time spread of one cell (uniform over the bin) or of a tile,
/// whichever is larger \[s\].
fn tile_sigma_floor(bin_s: f64, sigma_tile_s: f64) -> f64 {
    (bin_s / 12f64.sqrt()).max(sigma_tile_s)
}

/// Solve a 3 × 3 symmetric system by Gaussian elimination with partial
/// pivoting; None when singular.
#[allow(clippy::needless_range_loop)]
fn solve3(mut m: [[f64; 3]; 3], mut v: [f64; 3]) -> Option<[f64; 3]> {
    for col in 0..3 {
        let p = (col..3).max_by(|&a, &b| m[a][col].abs().total_cmp(&m[b][col].abs()))?;
        if m[p][col].abs() < 1e-12 {
            return None;
        }
        m.swap(col, p);
        v.swap(col, p);
        for r in col + 1..3 {
            let k = m[r][col] / m[col][col];
            for c in col..3 {
                m[r][c] -= k * m[col][c];
            }
            v[r] -= k * v[col];
        }
    }
    let mut x = [0.0; 3];
    for r in (0..3).rev() {
        let s: f64 = (r + 1..3).map(|c| m[r][c] * x[c]).sum();
        x[r] = (v[r] - s) / m[r][r];
    }
    Some(x)
}

/// f32 slice → little-endian bytes (catalogue BLOB).
pub fn f32_to_blob(v: &[f32]) -> Vec<u8> {
    v.iter().flat_map(|x| x.to_le_bytes()).collect()
}

/// Little-endian bytes → f32 values.
///
/// # Errors
/// A length that is not a multiple of 4.
pub fn blob_to_f32(b: &[u8]) -> Result<Vec<f32>> {
    if !b.len().is_multiple_of(4) {
        bail!(
            "feature BLOB of {} bytes is not a whole number of f32",
            b.len()
        );
    }
    Ok(b.chunks_exact(4)
        .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
        .collect())
}

/// One analytic sine-Gaussian transient in a [`SineGaussianSource`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SineGaussian {
    /// Peak time \[GPS s\].
    pub t0_gps: f64,
    /// Centre frequency at `t0_gps` \[Hz\].
    pub f0_hz: f64,
    /// Quality factor.
    pub q: f64,
    /// Matched-filter SNR.
    pub snr: f64,
    /// Linear frequency drift \[Hz/s\] (0 for a pure sine-Gaussian).
    pub drift_hz_per_s: f64,
}

/// Synthetic [`EnergyMapSource`]: Gaussian-noise energy (exponential with
/// mean 1, from a hash of channel, tile time and row frequency, so rows are
/// reproducible) plus analytic sine-Gaussian tiles. In energy, a
/// sine-Gaussian of quality Q at f0 has time spread `σ_t = Q / (4π f0)`
/// and frequency spread `σ_f = f0 / Q` (`σ_t σ_f = 1/4π` for Gaussians);
/// a tile of quality q at (t, f) sees it with spreads added in quadrature
/// and keeps the fraction `2 q Q / (q² + Q²)` of its energy (the sech
/// overlap of Gaussian tiles, see [`crate::trigger::cluster_tiles`]); its
/// matched tile is `1 + snr²/2` (Chatterji et al. 2004). Tiles are σ_t of
/// the row apart.
#[derive(Debug, Clone, Default)]
pub struct SineGaussianSource {
    /// Transients per channel name.
    pub events: Vec<(String, SineGaussian)>,
    /// Add exponential noise energy (else the background is exactly 1).
    pub noise: bool,
}

fn hash_unit(a: u64, b: u64, c: u64) -> f64 {
    let h =
        xxhash_rust::xxh3::xxh3_64(&[a.to_le_bytes(), b.to_le_bytes(), c.to_le_bytes()].concat());
    ((h >> 11) as f64 + 0.5) / (1u64 << 53) as f64
}

impl EnergyMapSource for SineGaussianSource {
    fn energy_rows(
        &self,
        channel: &str,
        t_center_gps: f64,
        span_s: f64,
        q: f64,
        freqs_hz: &[f64],
    ) -> Result<Vec<Option<RowEnergies>>> {
        let ch = xxhash_rust::xxh3::xxh3_64(channel.as_bytes());
        let near: Vec<&SineGaussian> = self
            .events
            .iter()
            .filter(|(c, e)| c == channel && (e.t0_gps - t_center_gps).abs() < span_s + 1.0)
            .map(|(_, e)| e)
            .collect();
        let rows = freqs_hz
            .iter()
            .map(|&f| {
                let dt = sigma_t(q, f);
                // Tiles on a grid of dt from GPS 0, covering the span.
                let i0 = ((t_center_gps - 0.5 * span_s) / dt).floor() - 1.0;
                let n = (span_s / dt).ceil() as usize + 3;
                let z = (0..n)
                    .map(|i| {
                        let t = (i0 + i as f64) * dt;
                        let mut z = if self.noise {
                            -hash_unit(ch, (t * 1e4).round() as u64, f.to_bits()).ln()
                        } else {
                            1.0
                        };
                        for e in &near {
                            let fc = (e.f0_hz + e.drift_hz_per_s * (t - e.t0_gps)).max(1.0);
                            let st2 = sigma_t(e.q, fc).powi(2) + dt * dt;
                            let sf2 = (fc / e.q).powi(2) + (f / q).powi(2);
                            let keep = 2.0 * q * e.q / (q * q + e.q * e.q);
                            z += 0.5
                                * e.snr
                                * e.snr
                                * keep
                                * (-0.5 * (t - e.t0_gps).powi(2) / st2
                                    - 0.5 * (f - fc).powi(2) / sf2)
                                    .exp();
                        }
                        z as f32
                    })
                    .collect();
                Some(RowEnergies {
                    t0_gps: i0 * dt,
                    dt_s: dt,
                    z,
                })
            })
            .collect();
        Ok(rows)
    }
}

#[cfg(test)]
mod tests {
    #[test]
    fn index_rounding_matches_the_library() {
        // ceil_index and round_index replace `ceil`/`round` calls in the
        // binning; they must give the same index for every value.
        let mut x: Vec<f64> = vec![
            0.0,
            -0.0,
            0.5,
            -0.5,
            1.5,
            2.5,
            -1.5,
            0.49999999999999994,
            1e-300,
            -1e-300,
            4_503_599_627_370_495.5,
            4_503_599_627_370_496.0,
            1e20,
            -1e20,
            f64::NAN,
            f64::INFINITY,
            f64::NEG_INFINITY,
        ];
        let mut state = 12345u64;
        for _ in 0..100_000 {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            let u = (state >> 11) as f64 / (1u64 << 53) as f64;
            x.push((u - 0.3) * 4096.0);
            x.push(((u * 2000.0).round() - 500.0) * 0.5);
        }
        for v in x {
            assert_eq!(ceil_index(v), v.ceil().max(0.0) as usize, "ceil {v}");
            assert_eq!(round_index(v), v.round().max(0.0) as usize, "round {v}");
        }
    }

    use super::*;

    /// Scalars of an analytic sine-Gaussian (no noise) seen as a trigger
    /// with its own Q and centre frequency.
    fn scalars(f0: f64, q: f64, drift: f64) -> Vec<f32> {
        let t0 = 1.0e9 + 10.0;
        let src = SineGaussianSource {
            events: vec![(
                "T".into(),
                SineGaussian {
                    t0_gps: t0,
                    f0_hz: f0,
                    q,
                    snr: 20.0,
                    drift_hz_per_s: drift,
                },
            )],
            noise: false,
        };
        let half = 2.0 * sigma_t(q, f0);
        let trig = Trigger {
            t_peak: t0,
            t_start: t0 - half,
            t_end: t0 + half,
            f_peak: f0,
            f_low: f0 * (1.0 - 1.0 / q),
            f_high: f0 * (1.0 + 1.0 / q),
            snr: 20.0,
            snr_eq: 20.0,
            q,
            energy: 201.0,
        };
        fingerprint(&trig, "T", &src).unwrap().scalars
    }

    #[test]
    fn drift_sign_and_scale_invariance() {
        // A sine-Gaussian's energy is a Gaussian blob, σ_t σ_f = 1/4π
        // (Chatterji et al. 2004): no drift, no curvature; the same Q at
        // three times the frequency has the same shape in tile units.
        let still = scalars(100.0, 20.0, 0.0);
        assert!(still[S_DRIFT].abs() < 0.2, "drift {}", still[S_DRIFT]);
        assert!(still[S_CURVATURE].abs() < 0.2, "{}", still[S_CURVATURE]);
        let high = scalars(300.0, 20.0, 0.0);
        for i in [S_LN_FRAC_BW, 5, 6] {
            assert!(
                (still[i] - high[i]).abs() < 0.2,
                "{}: {} vs {}",
                SCALAR_NAMES[i],
                still[i],
                high[i]
            );
        }
        // A linear upward (downward) track: positive (negative) drift.
        let up = scalars(100.0, 20.0, 1000.0);
        let down = scalars(100.0, 20.0, -1000.0);
        assert!(up[S_DRIFT] > 0.5, "up {}", up[S_DRIFT]);
        assert!(down[S_DRIFT] < -0.5, "down {}", down[S_DRIFT]);
    }
}
