//! Multi-resolution excess power: the Q-transform tiling (Chatterji et al.
//! 2004, Class. Quantum Grav. 21, S1809).
//!
//! # Conventions
//! - Tiles are placed on Q planes, frequency rows and time steps so that no
//!   point of the signal space is further than the maximum fractional energy
//!   mismatch `m` from a tile. With the step `s = 2 sqrt(m / 3)`:
//!   - planes: `n_q = ceil(ln(qmax/qmin) / sqrt(2) / s)`, Q geometric between
//!     qmin and qmax at `(0.5 + i) / n_q`;
//!   - rows of a plane: `n_f = ceil(ln(fmax/fmin) sqrt(2 + Q²) / 2 / s)`,
//!     frequency geometric at `(0.5 + i) / n_f`;
//!   - time step of a row: `dτ = s Q / (2π f)`; a row holds `n_t` tiles, the
//!     next power of two of `T / dτ` (T the block length), so the inverse FFT
//!     of the row is fast.
//! - The window is the bisquare `W(ν) = (1 − (ν/Δ)²)²` for `|ν| < Δ`, with
//!   `Δ = sqrt(11) f / Q`, which makes the standard deviation of `|W|²` equal
//!   to `f / Q` (Q ≡ f / σ_f). A tile's time spread is then `σ_t = Q / (4π f)`.
//! - Tile extents used for clustering: `t ± Q/(2π f)` (±2σ_t) and
//!   `f ± 2 f / Q` (±2σ_f).
//! - Input is a whitened spectrum with `E|X̃_k|² = 1` per bin (see
//!   [`crate::condition::whiten`]). A row's output is
//!   `y_i = Σ_j W_j X̃_{c+j} e^{2πi j i / n_t}` (baseband, unnormalised inverse
//!   FFT). Gaussian noise makes `|y_i|²` exponential with mean
//!   `Σ_j W_j² g_j²` (`g` the high-pass gain); the normalised energy divides
//!   by a robust estimate of the row's actual mean over the block's kept part
//!   (a quantile estimator at the 80th percentile, evaluated by counting: see
//!   [`QPlan::transform`]), so Z is exponential with mean 1.
//!   Tile `i` of a row sits at `t0 + i T / n_t` (tile centre).
//! - Row arithmetic is single precision; everything that feeds it is already
//!   of order one.

use crate::clusters::{grow_clusters, pack_energy, GridRow, TileCluster, SEED_SIGNIFICANCE};
use crate::condition::highpass_gain;
use anyhow::{bail, Result};
use rustfft::num_complex::Complex;
use rustfft::{Fft, FftPlanner};
use std::sync::Arc;

/// Level, in units of a row's expected mean energy, below which tiles are
/// counted to estimate the row's scale: the root of `c = 2 (1 − e^{−c})`,
/// which minimises the variance `(e^c − 1) / (c² N)` of an exponential
/// scale estimated from the fraction of N values below `c` × scale (the
/// fraction is binomial; propagate through `μ̂ = −g / ln(1 − F̂)`). The
/// optimum quantile, 0.797, is a classical result (Ogawa 1951, from memory).
pub const SCALE_LEVEL: f64 = 1.593_624_260_040_04;

/// Rows on each side of a tile's row whose measured scales are averaged
/// for its refined energy (see [`QPlan::refine`]): five rows' scales have
/// about 1/sqrt(5) of one row's scatter.
pub const RHO_ROWS: usize = 2;

/// Relative variance σ² of a row's measured scale counted from `n_indep`
/// independent tiles (see [`QPlan::independent_tiles`]):
/// `0.20 N^−0.7`.
///
/// For N independent tiles the quantile estimator of [`QPlan::transform`]
/// has `σ² = (e^c − 1) / (c² N)` ≈ 1.54 / N at c = [`SCALE_LEVEL`]. Over
/// 100 h of simulated white noise (`cargo bench --bench noise_tails`, 16,
/// 32 and 64-s blocks) narrow rows scatter less than that — 0.4–0.5× at
/// N ≈ 100: the counts of neighbouring tiles are less correlated than their
/// energies, and the block's own Welch PSD has already absorbed part of a
/// narrow row's fluctuation — and the variance falls more slowly than 1/N.
/// The form here is fitted to those tails (checked by simulation, not
/// derived); with it the tail of [`tile_significance`] is within 0.84–1.12
/// of `e^{−z}` at z = 12 and 14 in every plane and two-octave row band of
/// the standard plan.
pub fn scale_variance(n_indep: f64) -> f64 {
    0.20 * n_indep.max(1.0).powf(-0.7)
}

/// Tail significance of a tile whose energy `z` was normalised by a scale
/// measured from `n_indep` independent tiles: `−ln P(Z ≥ z)` in Gaussian
/// noise.
///
/// A measured scale μ̂ = μ (1 + ε) with ε of variance σ²
/// ([`scale_variance`]) turns the exponential tail `e^{−z}` of `|y|² / μ`
/// into `E[e^{−z (1 + ε)}]`; for μ̂/μ Gamma-distributed with that variance
/// this is `(1 + z σ²)^{−1/σ²}` (the Laplace transform of the Gamma law:
/// a compound exponential, the Lomax law), so the significance is
/// `ln(1 + z σ²) / σ²`, which tends to `z` for large N. Narrow rows (high
/// Q, low frequency) are counted from a few dozen tiles per block, and their
/// raw tail is 1.5–3× `e^{−z}` at the operating threshold: the scan
/// thresholds the significance, not the raw energy, so every row makes
/// noise tiles at the same rate (see [`energy_threshold`]).
pub fn tile_significance(z: f64, n_indep: f64) -> f64 {
    let s2 = scale_variance(n_indep);
    (z * s2).ln_1p() / s2
}

/// The energy whose [`tile_significance`] is `s` for a scale counted from
/// `n_indep` independent tiles: `(e^{s σ²} − 1) / σ²`, at least `s`.
pub fn energy_threshold(s: f64, n_indep: f64) -> f64 {
    let s2 = scale_variance(n_indep);
    ((s * s2).exp_m1() / s2).max(s)
}

/// `sqrt(11)`: bisquare half-width in units of `f / Q`.
pub const BISQUARE_HALF_WIDTH: f64 = 3.316_624_790_355_4;

/// Mismatch step `2 sqrt(m / 3)` of the tiling for maximum mismatch `m`.
pub fn mismatch_step(mismatch: f64) -> f64 {
    2.0 * (mismatch / 3.0).sqrt()
}

/// Q values of the planes between `qmin` and `qmax`.
pub fn q_planes(qmin: f64, qmax: f64, mismatch: f64) -> Vec<f64> {
    let n = ((qmax / qmin).ln() / 2f64.sqrt() / mismatch_step(mismatch))
        .ceil()
        .max(1.0) as usize;
    (0..n)
        .map(|i| qmin * (qmax / qmin).powf((0.5 + i as f64) / n as f64))
        .collect()
}

/// Row frequencies \[Hz\] of a plane of quality `q` between `fmin` and `fmax`.
pub fn row_freqs(q: f64, fmin: f64, fmax: f64, mismatch: f64) -> Vec<f64> {
    if fmax <= fmin {
        return Vec::new();
    }
    let n = ((fmax / fmin).ln() * (2.0 + q * q).sqrt() / 2.0 / mismatch_step(mismatch))
        .ceil()
        .max(1.0) as usize;
    (0..n)
        .map(|i| fmin * (fmax / fmin).powf((0.5 + i as f64) / n as f64))
        .collect()
}

/// Highest row frequency \[Hz\] a plane of quality `q` may use so that its
/// window stays below 95% of the Nyquist frequency.
pub fn plane_fmax_limit(q: f64, fs_hz: f64) -> f64 {
    0.95 * 0.5 * fs_hz / (1.0 + BISQUARE_HALF_WIDTH / q)
}

/// Time spread σ_t \[s\] of a tile of quality `q` at `f_hz`.
pub fn sigma_t(q: f64, f_hz: f64) -> f64 {
    q / (4.0 * std::f64::consts::PI * f_hz)
}

/// Tiling parameters (already validated and resolved for a channel).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Tiling {
    /// Lowest row frequency \[Hz\].
    pub fmin: f64,
    /// Highest row frequency \[Hz\].
    pub fmax: f64,
    /// Smallest Q.
    pub qmin: f64,
    /// Largest Q.
    pub qmax: f64,
    /// Maximum mismatch.
    pub mismatch: f64,
}

/// `|y|² × scale` of every tile of `row` (its transform in `ws.buf`).
fn scaled_energies(ws: &Workspace, row: &Row, scale: f32) -> Vec<f32> {
    ws.buf[..row.n_t]
        .iter()
        .map(|y| y.norm_sqr() * scale)
        .collect()
}

/// Kept tiles are screened for significant ones in chunks of this many
/// (16: the second look at a flagged chunk reads few tiles, and a chunk
/// is flagged less often than one of 64 at the clusters' lower screen).
const CHUNK: usize = 16;

/// The bisquare window `(1 − ν²)²` for `|ν| < 1`, else 0.
fn bisquare(nu: f64) -> f64 {
    let a = (1.0 - nu * nu).max(0.0);
    a * a
}

/// [`bisquare`] in single precision (the row loops).
fn bisquare32(nu: f32) -> f32 {
    let a = (1.0 - nu * nu).max(0.0);
    a * a
}

/// One frequency row of a plane, planned for a block length.
pub struct Row {
    /// Centre frequency \[Hz\].
    pub f_hz: f64,
    /// First block bin of the window.
    bin_lo: usize,
    /// Block bin nearest the centre frequency (baseband shift).
    bin_center: usize,
    /// Number of bins in the window (`bin_lo..bin_lo + len`).
    len: usize,
    /// Bisquare argument ν at `bin_lo` and its step per bin: the window is
    /// computed as it is applied, which is cheaper than streaming a stored
    /// copy of every row's window through the cache.
    nu0: f32,
    dnu: f32,
    /// Expected `|y|²` of whitened Gaussian noise: `Σ_j W_j² g_j²`.
    norm: f64,
    /// Independent values of `|y|²` across the block: the window's
    /// equivalent noise bandwidth in bins, `(Σ W² g²)² / Σ W⁴ g⁴` (the
    /// correlation of `|y|²` between tiles is the squared autocorrelation
    /// of the window).
    enbw_bins: f64,
    /// Tiles across the block (inverse FFT length).
    pub n_t: usize,
    ifft: Arc<dyn Fft<f32>>,
}

impl Row {
    /// Plan the row at `f_hz` of quality `q` for blocks of `n` samples at
    /// `fs_hz`, with tiles `step Q / (2π f)` apart at most. None when the
    /// window holds no bin or the high-pass removes it all.
    pub fn new(
        f_hz: f64,
        q: f64,
        fs_hz: f64,
        n: usize,
        step: f64,
        highpass_hz: (f64, f64),
        planner: &mut FftPlanner<f32>,
    ) -> Option<Row> {
        Row::with_ifft(f_hz, q, fs_hz, n, step, highpass_hz, &mut |n_t| {
            planner.plan_fft_inverse(n_t)
        })
    }

    /// As [`Row::new`], with the inverse FFT of a length from `ifft` (a
    /// cache of plans, so no planner need be locked while rows are made).
    pub fn with_ifft(
        f_hz: f64,
        q: f64,
        fs_hz: f64,
        n: usize,
        step: f64,
        highpass_hz: (f64, f64),
        ifft: &mut dyn FnMut(usize) -> Arc<dyn Fft<f32>>,
    ) -> Option<Row> {
        let t_block = n as f64 / fs_hz;
        let (lo, hi, half_width_hz) = window_bins(f_hz, q, t_block, n / 2 + 1)?;
        let (mut norm, mut norm4) = (0.0f64, 0.0f64);
        for k in lo..=hi {
            let nu = (k as f64 / t_block - f_hz) / half_width_hz;
            let w = bisquare(nu);
            let g = highpass_gain(k as f64 / t_block, highpass_hz.0, highpass_hz.1);
            norm += w * w * g * g;
            norm4 += (w * g).powi(4);
        }
        if norm <= 0.0 {
            return None;
        }
        let len = hi - lo + 1;
        let dtau = step * q / (2.0 * std::f64::consts::PI * f_hz);
        let n_t = ((t_block / dtau).ceil() as usize)
            .max(len)
            .next_power_of_two();
        Some(Row {
            f_hz,
            bin_lo: lo,
            // Any bin of the window serves as the baseband shift (it only
            // changes the phase of the row output); keep the nearest one.
            bin_center: ((f_hz * t_block).round() as usize).clamp(lo, hi),
            len,
            nu0: ((lo as f64 / t_block - f_hz) / half_width_hz) as f32,
            dnu: (1.0 / (t_block * half_width_hz)) as f32,
            norm,
            enbw_bins: norm * norm / norm4,
            n_t,
            ifft: ifft(n_t),
        })
    }
}

/// The block bins `lo..=hi` under the bisquare window of a tile at `f_hz`
/// of quality `q` (half-width `Δ = sqrt(11) f / Q`, returned third), for
/// blocks of `t_block` seconds with `nbins` bins (bin 0 never included);
/// None when no bin lies under it.
fn window_bins(f_hz: f64, q: f64, t_block: f64, nbins: usize) -> Option<(usize, usize, f64)> {
    let half = BISQUARE_HALF_WIDTH * f_hz / q;
    let lo = ((f_hz - half) * t_block).ceil().max(1.0) as usize;
    let hi = (((f_hz + half) * t_block).floor().max(0.0) as usize).min(nbins - 1);
    (hi >= lo).then_some((lo, hi, half))
}

/// Independent values of `|y|²` among `kept` consecutive tiles of `row`.
fn row_independent(row: &Row, kept: usize) -> f64 {
    row.enbw_bins * kept as f64 / row.n_t as f64
}

/// One Q plane.
pub struct Plane {
    /// Quality factor.
    pub q: f64,
    /// Rows in increasing frequency.
    pub rows: Vec<Row>,
}

/// The Q-transform plan for blocks of `n` samples at `fs_hz`: planes, rows,
/// windows and inverse FFT plans, built once and shared by all workers.
pub struct QPlan {
    /// Sample rate \[Hz\].
    pub fs_hz: f64,
    /// Block length \[samples\].
    pub n: usize,
    /// Planes in increasing Q.
    pub planes: Vec<Plane>,
    /// High-pass stop and pass edges \[Hz\] assumed by the row norms.
    pub highpass_hz: (f64, f64),
    /// Searched Q range `[qmin, qmax]` (refined Q stays inside it).
    q_bounds: (f64, f64),
    /// Searched frequency range \[Hz\] (refined frequencies stay inside it).
    f_bounds: (f64, f64),
    max_n_t: usize,
    max_scratch: usize,
}

/// Per-worker buffers for [`QPlan::transform`], sized once from the plan.
pub struct Workspace {
    buf: Vec<Complex<f32>>,
    scratch: Vec<Complex<f32>>,
    med: Vec<u32>,
    hot: Vec<u32>,
    /// Measured scale over expected mean, `μ̂ / Σ W² g²`, of every row of
    /// the last [`QPlan::transform`] (NaN for a row with no kept tile).
    rho: Vec<Vec<f64>>,
    /// The plane being clustered: kept tiles' energies of every row, the
    /// rows, the seed tiles and a bitmap of the tiles reached.
    grid: Vec<u16>,
    grid_len: usize,
    grid_rows: Vec<GridRow>,
    seeds: Vec<(u32, u32)>,
    visited: Vec<u64>,
}

/// How [`QPlan::transform_clustered`] clusters tiles.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ClusterSpec {
    /// Significance of a tile to join a cluster.
    pub pixel_s: f64,
    /// Clusters whose significance cannot reach this are not reported.
    pub min_significance: f64,
    /// Time range \[GPS s\] over which clusters may grow (at least the
    /// kept range; beyond it, into the block's untapered padding).
    pub grow: (f64, f64),
}

/// A significant tile.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Tile {
    /// Centre time \[GPS s\].
    pub t_gps: f64,
    /// Centre frequency \[Hz\].
    pub f_hz: f64,
    /// Quality factor.
    pub q: f64,
    /// Normalised energy Z.
    pub energy: f64,
    /// The peak refined off the tiling grid near this tile (see
    /// [`QPlan::refine`]); set by the scan for tiles that may become a
    /// trigger's peak, None otherwise.
    pub refined: Option<Refined>,
}

/// A transient's peak located between tiles, rows and planes: the maximum
/// of the normalised tile energy over continuous (t, f, ln Q) near a tile
/// (see [`QPlan::refine`]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Refined {
    /// Time \[GPS s\].
    pub t_gps: f64,
    /// Frequency \[Hz\].
    pub f_hz: f64,
    /// Quality factor, within the searched `[qmin, qmax]`.
    pub q: f64,
    /// Normalised energy Z at the maximum.
    pub energy: f64,
}

impl Tile {
    /// Half of the tile's time extent, `Q / (2π f)` \[s\].
    pub fn half_duration(&self) -> f64 {
        2.0 * sigma_t(self.q, self.f_hz)
    }
    /// Half of the tile's frequency extent, `2 f / Q` \[Hz\].
    pub fn half_bandwidth(&self) -> f64 {
        2.0 * self.f_hz / self.q
    }
}

impl QPlan {
    /// Plan the tiling for blocks of `n` samples at `fs_hz`.
    ///
    /// Rows whose window would cross 95% of Nyquist are dropped per plane.
    /// `highpass_hz` = (stop, pass) edges of the high-pass applied by the
    /// whitening, used for the exact row normalisation.
    ///
    /// # Errors
    /// When no row fits (e.g. `fmin` above what the sample rate allows).
    pub fn new(
        fs_hz: f64,
        n: usize,
        tiling: &Tiling,
        highpass_hz: (f64, f64),
        planner: &mut FftPlanner<f32>,
    ) -> Result<QPlan> {
        let step = mismatch_step(tiling.mismatch);
        let mut planes = Vec::new();
        let (mut max_n_t, mut max_scratch) = (0, 0);
        for q in q_planes(tiling.qmin, tiling.qmax, tiling.mismatch) {
            let fmax = tiling.fmax.min(plane_fmax_limit(q, fs_hz));
            let mut rows = Vec::new();
            for f in row_freqs(q, tiling.fmin, fmax, tiling.mismatch) {
                if let Some(row) = Row::new(f, q, fs_hz, n, step, highpass_hz, planner) {
                    max_n_t = max_n_t.max(row.n_t);
                    max_scratch = max_scratch.max(row.ifft.get_inplace_scratch_len());
                    rows.push(row);
                }
            }
            if !rows.is_empty() {
                planes.push(Plane { q, rows });
            }
        }
        if planes.is_empty() {
            bail!(
                "no Q-transform row fits between {} and {} Hz at sample rate {} Hz",
                tiling.fmin,
                tiling.fmax,
                fs_hz
            );
        }
        Ok(QPlan {
            fs_hz,
            n,
            planes,
            highpass_hz,
            q_bounds: (tiling.qmin, tiling.qmax),
            f_bounds: (tiling.fmin, tiling.fmax),
            max_n_t,
            max_scratch,
        })
    }

    /// A plan with one plane of quality `q` and rows at the given
    /// frequencies (for energy maps); rows that do not fit are skipped.
    pub fn single_plane(
        fs_hz: f64,
        n: usize,
        q: f64,
        freqs_hz: &[f64],
        step: f64,
        highpass_hz: (f64, f64),
        planner: &mut FftPlanner<f32>,
    ) -> QPlan {
        QPlan::single_plane_with(fs_hz, n, q, freqs_hz, step, highpass_hz, &mut |n_t| {
            planner.plan_fft_inverse(n_t)
        })
    }

    /// As [`QPlan::single_plane`], with the rows' inverse FFTs from `ifft`
    /// (see [`Row::with_ifft`]).
    pub fn single_plane_with(
        fs_hz: f64,
        n: usize,
        q: f64,
        freqs_hz: &[f64],
        step: f64,
        highpass_hz: (f64, f64),
        ifft: &mut dyn FnMut(usize) -> Arc<dyn Fft<f32>>,
    ) -> QPlan {
        let rows: Vec<Row> = freqs_hz
            .iter()
            .filter_map(|&f| Row::with_ifft(f, q, fs_hz, n, step, highpass_hz, ifft))
            .collect();
        let max_n_t = rows.iter().map(|r| r.n_t).max().unwrap_or(1);
        let max_scratch = rows
            .iter()
            .map(|r| r.ifft.get_inplace_scratch_len())
            .max()
            .unwrap_or(0);
        let f_bounds = (
            freqs_hz.iter().copied().fold(f64::INFINITY, f64::min),
            freqs_hz.iter().copied().fold(0.0, f64::max),
        );
        QPlan {
            fs_hz,
            n,
            planes: vec![Plane { q, rows }],
            highpass_hz,
            q_bounds: (q, q),
            f_bounds,
            max_n_t,
            max_scratch,
        }
    }

    /// Highest frequency any row's window reads \[Hz\].
    pub fn top_hz(&self) -> f64 {
        let t_block = self.n as f64 / self.fs_hz;
        self.planes
            .iter()
            .flat_map(|p| &p.rows)
            .map(|r| (r.bin_lo + r.len - 1) as f64 / t_block)
            .fold(0.0, f64::max)
    }

    /// Buffers for one worker.
    pub fn workspace(&self) -> Workspace {
        Workspace {
            buf: vec![Complex::new(0.0, 0.0); self.max_n_t],
            scratch: vec![Complex::new(0.0, 0.0); self.max_scratch],
            med: Vec::with_capacity(self.max_n_t),
            hot: Vec::with_capacity(self.max_n_t / CHUNK + 1),
            rho: self.rho_shape(),
            grid: Vec::new(),
            grid_len: 0,
            grid_rows: Vec::new(),
            seeds: Vec::new(),
            visited: Vec::new(),
        }
    }

    /// One NaN per row of every plane (the shape of [`Workspace`]'s `rho`).
    fn rho_shape(&self) -> Vec<Vec<f64>> {
        self.planes
            .iter()
            .map(|p| vec![f64::NAN; p.rows.len()])
            .collect()
    }

    /// Grow `ws` (made for another plan) to serve this one: buffers are
    /// reused rather than allocated per call (energy maps make a plan per
    /// trigger). Every buffer is overwritten before it is read.
    pub fn fit_workspace(&self, ws: &mut Workspace) {
        // Grown afresh rather than resized: the old contents need no copy.
        if ws.buf.len() < self.max_n_t {
            ws.buf = vec![Complex::new(0.0, 0.0); self.max_n_t];
        }
        if ws.scratch.len() < self.max_scratch {
            ws.scratch = vec![Complex::new(0.0, 0.0); self.max_scratch];
        }
        let shape_fits = ws.rho.len() == self.planes.len()
            && ws
                .rho
                .iter()
                .zip(&self.planes)
                .all(|(r, p)| r.len() == p.rows.len());
        if !shape_fits {
            ws.rho = self.rho_shape();
        }
    }

    /// Total number of tiles per block (all planes and rows).
    pub fn tiles_per_block(&self) -> usize {
        self.planes
            .iter()
            .flat_map(|p| &p.rows)
            .map(|r| r.n_t)
            .sum()
    }

    /// Compute one row's baseband inverse FFT into `ws.buf`.
    ///
    /// Window bin `k` goes to index `k − c` modulo `n_t` (`c` the centre
    /// bin): bins from the centre up fill `buf[0..]`, bins below it fill the
    /// top of `buf`, and only the gap between them is zeroed.
    fn row_transform(&self, row: &Row, whitened: &[Complex<f32>], ws: &mut Workspace) {
        let n_t = row.n_t;
        let buf = &mut ws.buf[..n_t];
        let (lo, c, len) = (row.bin_lo, row.bin_center, row.len);
        let spec = &whitened[lo..lo + len];
        // Row::new keeps c within [lo, lo + len) and len ≤ n_t.
        let below = c - lo;
        let (spec_neg, spec_pos) = spec.split_at(below);
        let above = len - below;
        let weigh = |j: usize, x: &Complex<f32>| x * bisquare32(row.nu0 + j as f32 * row.dnu);
        for (j, (o, x)) in buf[..above].iter_mut().zip(spec_pos).enumerate() {
            *o = weigh(below + j, x);
        }
        buf[above..n_t - below].fill(Complex::new(0.0, 0.0));
        for (j, (o, x)) in buf[n_t - below..].iter_mut().zip(spec_neg).enumerate() {
            *o = weigh(j, x);
        }
        row.ifft
            .process_with_scratch(buf, &mut ws.scratch[..row.ifft.get_inplace_scratch_len()]);
    }

    /// Transform one whitened block (`n/2 + 1` bins, see
    /// [`crate::condition::whiten`]) that starts at `t0_gps`, and append every
    /// tile whose centre lies in `[keep.0, keep.1)` (GPS s) and whose
    /// [`tile_significance`] is ≥ `z_threshold` to `out`.
    ///
    /// Each row is normalised by its own robust scale over the kept part
    /// (a quantile estimator, evaluated by counting the tiles below 1.594 ×
    /// the row's expected mean), so a short transient hardly moves it and
    /// errors of the PSD estimate cancel. A row's scale is counted from
    /// [`QPlan::independent_tiles`] values, so its normalised energies have
    /// a heavier tail than `e^{−z}` where those are few: each row's energy
    /// threshold is [`energy_threshold`]`(z_threshold, N)`, which keeps the
    /// rate of noise tiles the same in every row (a wide row's threshold is
    /// within a fraction of a percent of `z_threshold`). Tiles keep their
    /// measured energy.
    pub fn transform(
        &self,
        whitened: &[Complex<f32>],
        t0_gps: f64,
        keep: (f64, f64),
        z_threshold: f64,
        ws: &mut Workspace,
        out: &mut Vec<Tile>,
    ) {
        self.transform_with(whitened, t0_gps, keep, z_threshold, ws, out, None);
    }

    /// [`QPlan::transform`], and the clusters of connected tiles of each
    /// plane (see [`crate::clusters`] and [`ClusterSpec`]), at least two
    /// tiles each, appended to `clusters`: grown over `spec.grow` from
    /// seeds in `keep`, reported when their loudest tile lies in `keep`
    /// (so a cluster across the edge of two blocks' kept times is found
    /// whole, once).
    #[allow(clippy::too_many_arguments)]
    pub fn transform_clustered(
        &self,
        whitened: &[Complex<f32>],
        t0_gps: f64,
        keep: (f64, f64),
        z_threshold: f64,
        spec: ClusterSpec,
        ws: &mut Workspace,
        out: &mut Vec<Tile>,
        clusters: &mut Vec<TileCluster>,
    ) {
        self.transform_with(
            whitened,
            t0_gps,
            keep,
            z_threshold,
            ws,
            out,
            Some((spec, clusters)),
        );
    }

    #[allow(clippy::too_many_arguments)]
    fn transform_with(
        &self,
        whitened: &[Complex<f32>],
        t0_gps: f64,
        keep: (f64, f64),
        z_threshold: f64,
        ws: &mut Workspace,
        out: &mut Vec<Tile>,
        mut clusters: Option<(ClusterSpec, &mut Vec<TileCluster>)>,
    ) {
        assert_eq!(whitened.len(), self.n / 2 + 1, "whitened spectrum length");
        // Chunks are flagged while the scale is measured if they hold a tile
        // above SCREEN × the threshold in units of the row's expected mean;
        // when clustering, also above SEED_SCREEN × the seed level.
        const SCREEN: f64 = 0.5;
        const SEED_SCREEN: f64 = 0.7;
        let pixel_s = clusters.as_ref().map(|c| c.0.pixel_s);
        let grow = clusters.as_ref().map_or(keep, |c| c.0.grow);
        for (p, plane) in self.planes.iter().enumerate() {
            ws.grid_len = 0;
            ws.grid_rows.clear();
            ws.seeds.clear();
            for (r, row) in plane.rows.iter().enumerate() {
                let (i_lo, i_hi, dt) = self.kept_range(row, t0_gps, keep);
                let n_indep = row_independent(row, i_hi - i_lo);
                let z_row = energy_threshold(z_threshold, n_indep);
                let z_seed = pixel_s.map(|_| energy_threshold(SEED_SIGNIFICANCE, n_indep));
                let mut screen = SCREEN * z_row * row.norm;
                if let Some(zs) = z_seed {
                    screen = screen.min(SEED_SCREEN * zs * row.norm);
                }
                // The row's grid: the kept tiles and those around them
                // within `grow`, stored in tile order from `off`.
                let (g_lo, g_hi, _) = self.kept_range(row, t0_gps, grow);
                let (g_lo, g_hi) = (g_lo.min(i_lo), g_hi.max(i_hi));
                let off = ws.grid_len;
                if pixel_s.is_some() && ws.grid.len() < off + g_hi - g_lo {
                    // Grown to the largest plane once; never cleared (every
                    // tile read is written first).
                    ws.grid.resize(off + g_hi - g_lo, 0);
                }
                let store = pixel_s.map(|_| off + i_lo - g_lo);
                let scale = self.row_scale(p, r, whitened, (i_lo, i_hi), screen, store, ws);
                if pixel_s.is_some() {
                    // The margins (the kept part was stored by row_scale).
                    for (o, y) in ws.grid[off..].iter_mut().zip(&ws.buf[g_lo..i_lo]) {
                        *o = pack_energy(y.norm_sqr());
                    }
                    let at = off + i_lo - g_lo + (i_hi - i_lo);
                    for (o, y) in ws.grid[at..].iter_mut().zip(&ws.buf[i_hi..g_hi]) {
                        *o = pack_energy(y.norm_sqr());
                    }
                    ws.grid_len = off + g_hi - g_lo;
                }
                ws.rho[p][r] = scale.map_or(f64::NAN, |s| 1.0 / (s * row.norm));
                if let Some(pixel_s) = pixel_s {
                    let nb = |k: usize| plane.rows.get(k).map(|x| x.f_hz);
                    let df = match (r.checked_sub(1).and_then(nb), nb(r + 1)) {
                        (Some(a), Some(b)) => 0.5 * (b - a),
                        (Some(a), None) => row.f_hz - a,
                        (None, Some(b)) => b - row.f_hz,
                        (None, None) => 2.0 * row.f_hz / plane.q,
                    };
                    let s = scale.unwrap_or(0.0);
                    ws.grid_rows.push(GridRow {
                        f_hz: row.f_hz,
                        t0_gps,
                        dt,
                        df,
                        off,
                        lo: g_lo as u32,
                        hi: if scale.is_some() {
                            g_hi as u32
                        } else {
                            g_lo as u32
                        },
                        scale: s as f32,
                        raw_pixel: (energy_threshold(pixel_s, n_indep) / s) as f32,
                    });
                }
                let Some(scale) = scale else {
                    continue;
                };
                // Compare |y|² against the thresholds in raw units: no division in the loop.
                let raw_thr = z_row / scale;
                let raw_seed = z_seed.map_or(f64::INFINITY, |z| z / scale);
                let raw_low = raw_thr.min(raw_seed);
                let n_chunks = (i_hi - i_lo).div_ceil(CHUNK);
                // When the thresholds lie above the screen, only flagged
                // chunks can hold a significant tile or a seed (the usual
                // case: the scale is within a factor 2 of the expected mean).
                let all: Vec<u32>;
                let chunks: &[u32] = if raw_low >= screen {
                    &ws.hot
                } else {
                    all = (0..n_chunks as u32).collect();
                    &all
                };
                let (raw_thr, raw_seed, raw_low) =
                    (raw_thr as f32, raw_seed as f32, raw_low as f32);
                for &c in chunks {
                    let first = i_lo + c as usize * CHUNK;
                    for (i, y) in ws.buf[first..(first + CHUNK).min(i_hi)].iter().enumerate() {
                        let e = y.norm_sqr();
                        if e < raw_low {
                            continue;
                        }
                        if e >= raw_thr {
                            out.push(Tile {
                                t_gps: t0_gps + (first + i) as f64 * dt,
                                f_hz: row.f_hz,
                                q: plane.q,
                                energy: e as f64 * scale,
                                refined: None,
                            });
                        }
                        if e >= raw_seed {
                            ws.seeds.push((r as u32, (first + i) as u32));
                        }
                    }
                }
            }
            if let Some((spec, found)) = clusters.as_mut() {
                let first = found.len();
                grow_clusters(
                    plane.q,
                    &ws.grid_rows,
                    &ws.grid[..ws.grid_len],
                    &ws.seeds,
                    2,
                    spec.min_significance,
                    &mut ws.visited,
                    found,
                );
                let mut k = first;
                for i in first..found.len() {
                    let t = found[i].peak.0;
                    if t >= keep.0 && t < keep.1 {
                        found[k] = found[i];
                        k += 1;
                    }
                }
                found.truncate(k);
            }
        }
    }

    /// Independent values of `|y|²` among the tiles of row `r` of plane `p`
    /// whose centres lie in `keep` (GPS s, the block starting at `t0_gps`):
    /// the number a row's measured scale is counted from (see
    /// [`QPlan::transform`]).
    pub fn independent_tiles(&self, p: usize, r: usize, t0_gps: f64, keep: (f64, f64)) -> f64 {
        let row = &self.planes[p].rows[r];
        let (lo, hi, _) = self.kept_range(row, t0_gps, keep);
        row_independent(row, hi - lo)
    }

    /// Time between the tiles of `row` \[s\].
    fn tile_spacing(&self, row: &Row) -> f64 {
        self.n as f64 / self.fs_hz / row.n_t as f64
    }

    /// Tile index range `[lo, hi)` of `row` whose centres lie in `keep`, and
    /// the tile spacing \[s\].
    fn kept_range(&self, row: &Row, t0_gps: f64, keep: (f64, f64)) -> (usize, usize, f64) {
        let dt = self.tile_spacing(row);
        let lo = (((keep.0 - t0_gps) / dt).ceil().max(0.0) as usize).min(row.n_t);
        let hi = (((keep.1 - t0_gps) / dt).ceil().max(0.0) as usize).min(row.n_t);
        (lo.min(hi), hi, dt)
    }

    /// Transform row `r` of plane `p` into `ws.buf` and return the factor
    /// that turns `|y|²` into normalised energy, `1/μ̂`, with μ̂ the row's
    /// robust scale over the tiles in `kept`. None for a row with no power
    /// (e.g. removed by the high-pass).
    ///
    /// Gaussian noise makes `|y|²` exponential with mean μ, so the fraction
    /// F of tiles below a level `g` is `1 − e^{−g/μ}` and `μ̂ = −g / ln(1 − F̂)`:
    /// a quantile estimator evaluated by counting instead of selecting (one
    /// pass, every kept tile). Its variance is `μ² (e^c − 1) / (c² N)` for
    /// `g = c μ` and N independent tiles, least at `c = 2 (1 − e^{−c})`,
    /// c ≈ 1.594 (the 80th percentile; the median, c = ln 2, has 35% more
    /// variance). So `g` is [`SCALE_LEVEL`] × the row's expected mean. A loud
    /// transient moves F̂ by at most the fraction of tiles it covers, as for
    /// the median. When F̂ is outside 0.05..0.95 (the scale is off its
    /// expectation by a factor of about 2 below or 30 above) the median of
    /// the tiles is used instead.
    ///
    /// The same pass records in `ws.hot` the chunks of [`CHUNK`] kept tiles
    /// holding a tile with `|y|² ≥ screen`, and with `store = Some(at)`
    /// writes the kept tiles' `|y|²` (see [`pack_energy`]) to
    /// `ws.grid[at..]` (sized by the caller): in the same pass, as a
    /// loop of its own costs three times as much.
    #[allow(clippy::too_many_arguments)]
    fn row_scale(
        &self,
        p: usize,
        r: usize,
        whitened: &[Complex<f32>],
        kept: (usize, usize),
        screen: f64,
        store: Option<usize>,
        ws: &mut Workspace,
    ) -> Option<f64> {
        let row = &self.planes[p].rows[r];
        self.row_transform(row, whitened, ws);
        let (lo, hi) = kept;
        ws.hot.clear();
        if hi <= lo {
            return None;
        }
        let g = (SCALE_LEVEL * row.norm) as f32;
        let screen = screen as f32;
        let mut below = 0usize;
        for (c, chunk) in ws.buf[lo..hi].chunks(CHUNK).enumerate() {
            let (mut n, mut hot) = (0u32, false);
            if let Some(first) = store {
                let at = first + c * CHUNK;
                for (y, o) in chunk.iter().zip(&mut ws.grid[at..at + chunk.len()]) {
                    let e = y.norm_sqr();
                    *o = pack_energy(e);
                    n += u32::from(e < g);
                    hot |= e >= screen;
                }
            } else {
                for y in chunk {
                    let e = y.norm_sqr();
                    n += u32::from(e < g);
                    hot |= e >= screen;
                }
            }
            below += n as usize;
            if hot {
                ws.hot.push(c as u32);
            }
        }
        let f = below as f64 / (hi - lo) as f64;
        let mu = if (0.05..=0.95).contains(&f) {
            -f64::from(g) / (1.0 - f).ln()
        } else {
            self.median_scale(row, (lo, hi), ws) / std::f64::consts::LN_2
        };
        (mu > 0.0 && mu.is_finite()).then(|| 1.0 / mu)
    }

    /// Median of `|y|²` over the kept tiles of the row in `ws.buf`, sampled
    /// at about one value per independent tile (at most 4096 of them).
    fn median_scale(&self, row: &Row, kept: (usize, usize), ws: &mut Workspace) -> f64 {
        const MEDIAN_SAMPLES: usize = 4096;
        let (lo, hi) = kept;
        let independent = ((hi - lo) * row.len / row.n_t).max(1);
        let stride = ((hi - lo) / independent.min(MEDIAN_SAMPLES)).max(1);
        // Energies are ≥ 0, so their IEEE bit patterns sort like the values:
        // selecting on u32 is cheaper than a float comparison.
        ws.med.clear();
        ws.med.extend(
            ws.buf[lo..hi]
                .iter()
                .step_by(stride)
                .map(|y| y.norm_sqr().to_bits()),
        );
        let mid = ws.med.len() / 2;
        let (_, m, _) = ws.med.select_nth_unstable(mid);
        f64::from(f32::from_bits(*m))
    }

    /// Normalised energies of one row over the block (for maps and tests),
    /// normalised over the tiles whose centres lie in `keep` (GPS s, with the
    /// block starting at `t0_gps`): `(Z_i, dt)` with tile `i` at `t0 + i dt`.
    pub fn row_energies(
        &self,
        plane: usize,
        row: usize,
        whitened: &[Complex<f32>],
        t0_gps: f64,
        keep: (f64, f64),
        ws: &mut Workspace,
    ) -> (Vec<f32>, f64) {
        let r = &self.planes[plane].rows[row];
        let (lo, hi, dt) = self.kept_range(r, t0_gps, keep);
        let scale = self
            .row_scale(plane, row, whitened, (lo, hi), f64::INFINITY, None, ws)
            .unwrap_or(0.0) as f32;
        (scaled_energies(ws, r, scale), dt)
    }

    /// Energies of one row over the whole of a spectrum whitened to unit
    /// power per bin (see [`crate::condition::whiten`]), normalised by the
    /// row's expected mean `Σ W² g²` rather than measured: `(Z_i, dt)` with
    /// tile `i` at `i dt` from the start of the data. For short stretches
    /// (energy maps), where a measured scale would be biased by the
    /// transient itself.
    pub fn row_energies_expected(
        &self,
        plane: usize,
        row: usize,
        whitened: &[Complex<f32>],
        ws: &mut Workspace,
    ) -> (Vec<f32>, f64) {
        let r = &self.planes[plane].rows[row];
        self.row_transform(r, whitened, ws);
        (
            scaled_energies(ws, r, (1.0 / r.norm) as f32),
            self.tile_spacing(r),
        )
    }

    /// Measured-over-expected scale `ρ` near `(f_hz, q)`, from the rows of
    /// the last [`QPlan::transform`] in `ws`: the mean over the rows within
    /// `k` rows of the row nearest `f_hz` in the plane nearest in ln Q (rows
    /// with no measurement skipped); 1 when none was measured.
    ///
    /// The refinement holds ρ fixed while it moves: each row's scale is
    /// measured from a finite number of tiles (about 15% apart between
    /// neighbouring narrow rows in 32-s blocks), and interpolating it
    /// between rows tilts the energy surface and pulls the peak frequency
    /// by a good fraction of a row (measured: 3× the Cramér–Rao bound at
    /// SNR 60–90).
    pub fn rho_near(&self, ws: &Workspace, f_hz: f64, q: f64, k: usize) -> f64 {
        let Some((p, plane)) = self
            .planes
            .iter()
            .enumerate()
            .min_by(|a, b| (a.1.q / q).ln().abs().total_cmp(&(b.1.q / q).ln().abs()))
        else {
            return 1.0;
        };
        let rho = match ws.rho.get(p) {
            Some(r) if r.len() == plane.rows.len() && !r.is_empty() => r,
            _ => return 1.0,
        };
        let i = plane
            .rows
            .iter()
            .enumerate()
            .min_by(|a, b| {
                (a.1.f_hz / f_hz)
                    .ln()
                    .abs()
                    .total_cmp(&(b.1.f_hz / f_hz).ln().abs())
            })
            .map_or(0, |(i, _)| i);
        let lo = i.saturating_sub(k);
        let hi = (i + k + 1).min(rho.len());
        let (sum, n) = rho[lo..hi]
            .iter()
            .filter(|r| r.is_finite() && **r > 0.0)
            .fold((0.0, 0usize), |(s, n), r| (s + r, n + 1));
        if n == 0 {
            1.0
        } else {
            sum / n as f64
        }
    }

    /// Normalised energy Z of a single tile centred at `t_gps`, `f_hz`, of
    /// quality `q`, evaluated directly from the whitened block (`n/2 + 1`
    /// bins starting at `t0_gps`) as one sum over the window's bins:
    /// `|Σ_k W_k X̃_k e^{2πi k τ / T}|² / (ρ Σ_k W_k² g_k²)` with `τ = t − t0`,
    /// the same as a row's output at a tile centre (see the module
    /// conventions) but at any time, frequency and Q. `rho` is the measured
    /// row scale over its expectation (see [`QPlan::rho_near`]). None when
    /// the window holds no bin.
    #[allow(clippy::too_many_arguments)]
    pub fn energy_at(
        &self,
        whitened: &[Complex<f32>],
        t0_gps: f64,
        rho: f64,
        t_gps: f64,
        f_hz: f64,
        q: f64,
    ) -> Option<f64> {
        let t_block = self.n as f64 / self.fs_hz;
        let (lo, hi, half) = window_bins(f_hz, q, t_block, whitened.len())?;
        let dphi = 2.0 * std::f64::consts::PI * (t_gps - t0_gps) / t_block;
        let rot = Complex::new(dphi.cos(), dphi.sin());
        let phase0 = (lo as f64 * dphi).rem_euclid(2.0 * std::f64::consts::PI);
        let mut z = Complex::new(phase0.cos(), phase0.sin());
        let (mut acc, mut norm) = (Complex::new(0.0f64, 0.0f64), 0.0f64);
        let (stop, pass) = self.highpass_hz;
        for (k, x) in whitened[lo..=hi].iter().enumerate() {
            let fk = (lo + k) as f64 / t_block;
            let w = bisquare((fk - f_hz) / half);
            let g = highpass_gain(fk, stop, pass);
            acc += Complex::new(f64::from(x.re), f64::from(x.im)) * z * w;
            norm += w * w * g * g;
            z *= rot;
        }
        if norm <= 0.0 {
            return None;
        }
        Some(acc.norm_sqr() / (norm * rho))
    }

    /// The peak near `tile` located between tiles, rows and planes: the
    /// maximum of [`QPlan::energy_at`] over (t, ln f, ln Q), by Nelder–Mead
    /// (Nelder & Mead 1965) in units of the tile's time spread σ_t, its
    /// plane's row spacing and the plane spacing, starting at the tile with
    /// Q = `q_start` (the between-plane estimate). The search stays within
    /// 2 σ_t, 1.5 rows and 1.5 planes of the tile, within the searched
    /// frequency range and Nyquist limit, and within `[qmin, qmax]`.
    /// `ws` must hold the row scales of the `transform` that found `tile`.
    /// The energy is normalised by the mean row scale ρ of the tile's row
    /// and its neighbours within [`RHO_ROWS`] rows, held fixed (see
    /// [`QPlan::rho_near`]). Never worse than the tile itself under that
    /// normalisation: the tile is one of the starting points.
    pub fn refine(
        &self,
        whitened: &[Complex<f32>],
        t0_gps: f64,
        ws: &Workspace,
        tile: &Tile,
        q_start: f64,
    ) -> Refined {
        let (qmin, qmax) = self.q_bounds;
        let plane = self.planes.iter().min_by(|a, b| {
            (a.q / tile.q)
                .ln()
                .abs()
                .total_cmp(&(b.q / tile.q).ln().abs())
        });
        let row_step = plane
            .filter(|p| p.rows.len() > 1)
            .map_or(0.05, |p| (p.rows[1].f_hz / p.rows[0].f_hz).ln());
        let plane_step = if self.planes.len() > 1 {
            (self.planes[1].q / self.planes[0].q).ln()
        } else {
            0.0
        };
        let sig_t = sigma_t(tile.q, tile.f_hz);
        let (ln_f0, ln_q0) = (tile.f_hz.ln(), tile.q.ln());
        let ln_q_lo = (ln_q0 - 1.5 * plane_step).max(qmin.ln());
        let ln_q_hi = (ln_q0 + 1.5 * plane_step).min(qmax.ln());
        let f_top = self.f_bounds.1.min(self.fs_hz * 0.5);
        let clamp = |x: [f64; 3]| -> [f64; 3] {
            let ln_q = (ln_q0 + x[2] * plane_step).clamp(ln_q_lo, ln_q_hi.max(ln_q_lo));
            let q = ln_q.exp();
            let ln_f_hi = (f_top.min(plane_fmax_limit(q, self.fs_hz)))
                .ln()
                .max(self.f_bounds.0.ln());
            let ln_f = (ln_f0 + x[1] * row_step)
                .clamp(ln_f0 - 1.5 * row_step, ln_f0 + 1.5 * row_step)
                .clamp(self.f_bounds.0.ln(), ln_f_hi);
            [
                x[0].clamp(-2.0, 2.0),
                (ln_f - ln_f0) / row_step,
                if plane_step > 0.0 {
                    (ln_q - ln_q0) / plane_step
                } else {
                    0.0
                },
            ]
        };
        let params = |x: [f64; 3]| {
            (
                tile.t_gps + x[0] * sig_t,
                (ln_f0 + x[1] * row_step).exp(),
                (ln_q0 + x[2] * plane_step).exp(),
            )
        };
        let rho = self.rho_near(ws, tile.f_hz, tile.q, RHO_ROWS);
        let evals = std::cell::Cell::new(0usize);
        let value = |x: [f64; 3]| -> f64 {
            evals.set(evals.get() + 1);
            let (t, f, q) = params(x);
            self.energy_at(whitened, t0_gps, rho, t, f, q)
                .unwrap_or(f64::NEG_INFINITY)
        };
        // The tile (Q clamped into range) and the start at the estimated Q.
        let x_tile = clamp([0.0; 3]);
        let x_start = clamp([
            0.0,
            0.0,
            if plane_step > 0.0 {
                (q_start.ln() - ln_q0) / plane_step
            } else {
                0.0
            },
        ]);
        let mut simplex: Vec<([f64; 3], f64)> = Vec::with_capacity(4);
        let z_tile = value(x_tile);
        let z_start = value(x_start);
        let x0 = if z_start > z_tile { x_start } else { x_tile };
        simplex.push((x0, z_tile.max(z_start)));
        let dims = if plane_step > 0.0 { 3 } else { 2 };
        for d in 0..dims {
            let mut x = x0;
            x[d] += 0.4;
            let x = clamp(x);
            simplex.push((x, value(x)));
        }
        // Nelder–Mead maximisation with the standard coefficients
        // (reflection 1, expansion 2, contraction 1/2, shrink 1/2), points
        // projected into the search box.
        const MAX_EVALS: usize = 90;
        const X_TOL: f64 = 0.01;
        while evals.get() < MAX_EVALS {
            simplex.sort_by(|a, b| b.1.total_cmp(&a.1));
            let size = simplex[1..]
                .iter()
                .map(|p| {
                    (0..3)
                        .map(|d| (p.0[d] - simplex[0].0[d]).abs())
                        .fold(0.0, f64::max)
                })
                .fold(0.0, f64::max);
            if size < X_TOL {
                break;
            }
            let nv = simplex.len();
            let mut c = [0.0; 3];
            for p in &simplex[..nv - 1] {
                for (cd, pd) in c.iter_mut().zip(p.0) {
                    *cd += pd / (nv - 1) as f64;
                }
            }
            let worst = simplex[nv - 1];
            let along = |a: f64| clamp(std::array::from_fn(|d| c[d] + a * (c[d] - worst.0[d])));
            let xr = along(1.0);
            let zr = value(xr);
            if zr > simplex[0].1 {
                let xe = along(2.0);
                let ze = value(xe);
                simplex[nv - 1] = if ze > zr { (xe, ze) } else { (xr, zr) };
            } else if zr > simplex[nv - 2].1 {
                simplex[nv - 1] = (xr, zr);
            } else {
                let xc = if zr > worst.1 {
                    along(0.5)
                } else {
                    along(-0.5)
                };
                let zc = value(xc);
                if zc > worst.1.max(zr) {
                    simplex[nv - 1] = (xc, zc);
                } else {
                    let best = simplex[0].0;
                    for p in simplex.iter_mut().skip(1) {
                        let x = clamp(std::array::from_fn(|d| 0.5 * (best[d] + p.0[d])));
                        *p = (x, value(x));
                    }
                }
            }
        }
        let (x, z) = simplex
            .iter()
            .copied()
            .max_by(|a, b| a.1.total_cmp(&b.1))
            .expect("simplex");
        let (t_gps, f_hz, q) = params(x);
        // The start points are among the simplex's, so z is at least the
        // energy at the tile with the same ρ.
        if z.is_finite() {
            Refined {
                t_gps,
                f_hz,
                q,
                energy: z,
            }
        } else {
            Refined {
                t_gps: tile.t_gps,
                f_hz: tile.f_hz,
                q: tile.q.clamp(qmin, qmax),
                energy: tile.energy,
            }
        }
    }

    /// Run only the inverse FFTs of every row (the plan's FFT-only cost, for
    /// benchmarks).
    pub fn ffts_only(&self, ws: &mut Workspace) {
        for row in self.planes.iter().flat_map(|p| &p.rows) {
            let buf = &mut ws.buf[..row.n_t];
            row.ifft
                .process_with_scratch(buf, &mut ws.scratch[..row.ifft.get_inplace_scratch_len()]);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn standard_plan_has_four_planes_and_expected_tile_rate() {
        // qmin 4, qmax 64, m = 0.2: ln(16)/sqrt(2)/0.5164 = 3.8 -> 4 planes
        // at Q = 4 * 16^((0.5+i)/4) = 5.66, 11.3, 22.6, 45.3.
        let qs = q_planes(4.0, 64.0, 0.2);
        assert_eq!(qs.len(), 4);
        assert!((qs[0] - 5.657).abs() < 1e-3 && (qs[3] - 45.25).abs() < 1e-2);
        // The plan for 4096 Hz, 16-1024 Hz: of order 67,000 tiles per second
        // of data (the figure quoted in the scan issue for a standard plan).
        let tiling = Tiling {
            fmin: 16.0,
            fmax: 1024.0,
            qmin: 4.0,
            qmax: 64.0,
            mismatch: 0.2,
        };
        let plan = QPlan::new(
            4096.0,
            64 * 4096,
            &tiling,
            (8.0, 12.0),
            &mut FftPlanner::new(),
        )
        .unwrap();
        let per_s = plan.tiles_per_block() as f64 / 64.0;
        assert!((50_000.0..90_000.0).contains(&per_s), "{per_s} tiles/s");
    }

    /// `energy_at` at a tile's centre is the tile's energy from the row's
    /// inverse FFT (the module's convention `y_i = Σ_j W_j X̃_{c+j}
    /// e^{2πi j i / n_t}`, tile i at `t0 + i T / n_t`): same sum, evaluated
    /// directly. One σ_t away it differs (so the check can fail on a wrong
    /// time convention).
    #[test]
    fn energy_at_matches_the_row_transform_at_tile_centres() {
        use rand::{Rng, SeedableRng};
        let (fs, n) = (256.0, 256 * 32);
        let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(5);
        let spec: Vec<Complex<f32>> = (0..n / 2 + 1)
            .map(|_| Complex::new(rng.gen::<f32>() - 0.5, rng.gen::<f32>() - 0.5))
            .collect();
        let tiling = Tiling {
            fmin: 8.0,
            fmax: 64.0,
            qmin: 4.0,
            qmax: 64.0,
            mismatch: 0.2,
        };
        let plan = QPlan::new(fs, n, &tiling, (4.0, 7.0), &mut FftPlanner::new()).unwrap();
        let mut ws = plan.workspace();
        let mut tiles = Vec::new();
        let t0 = 1000.0;
        plan.transform(&spec, t0, (t0 + 4.0, t0 + 28.0), 0.0, &mut ws, &mut tiles);
        assert!(tiles.len() > 1000);
        let (mut checked, mut differs) = (0, 0);
        for tile in tiles.iter().step_by(97) {
            let rho = plan.rho_near(&ws, tile.f_hz, tile.q, 0);
            let z = plan
                .energy_at(&spec, t0, rho, tile.t_gps, tile.f_hz, tile.q)
                .unwrap();
            assert!(
                (z - tile.energy).abs() <= 1e-3 * tile.energy.max(1e-3),
                "{tile:?}: {z}"
            );
            let off = sigma_t(tile.q, tile.f_hz);
            let z_off = plan
                .energy_at(&spec, t0, rho, tile.t_gps + off, tile.f_hz, tile.q)
                .unwrap();
            differs += usize::from((z_off - tile.energy).abs() > 1e-3 * tile.energy);
            checked += 1;
        }
        assert!(differs > checked / 2, "{differs} of {checked}");
    }

    /// The significance inverts its threshold, tends to the energy for a
    /// scale counted from many tiles, and matches the Lomax tail
    /// `(1 + z σ²)^{−1/σ²}` computed by hand at one point (σ² = 0.20 ×
    /// 100^−0.7 = 0.00796: `ln(1 + 16 × 0.00796) / 0.00796` = 15.06).
    #[test]
    fn tile_significance_inverts_and_tends_to_the_energy() {
        for n in [10.0, 100.0, 1e3, 1e5] {
            for s in [5.0, 16.1, 40.0] {
                let z = energy_threshold(s, n);
                assert!(z >= s && (tile_significance(z, n) - s).abs() < 1e-9);
            }
        }
        assert!((tile_significance(16.0, 1e8) - 16.0).abs() < 1e-3);
        let s2 = 0.20 * 100f64.powf(-0.7);
        assert!((s2 - 0.00796).abs() < 1e-4);
        assert!((tile_significance(16.0, 100.0) - 15.06).abs() < 0.01);
    }

    #[test]
    fn rows_respect_nyquist() {
        for q in q_planes(4.0, 64.0, 0.2) {
            let fmax = plane_fmax_limit(q, 4096.0);
            assert!(fmax * (1.0 + BISQUARE_HALF_WIDTH / q) < 2048.0);
        }
    }
}
