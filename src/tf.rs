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

/// Kept tiles are screened for significant ones in chunks of this many.
const CHUNK: usize = 64;

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
        let nbins = n / 2 + 1;
        let half_width_hz = BISQUARE_HALF_WIDTH * f_hz / q;
        let lo = ((f_hz - half_width_hz) * t_block).ceil().max(1.0) as usize;
        let hi = (((f_hz + half_width_hz) * t_block).floor() as usize).min(nbins - 1);
        if hi < lo {
            return None;
        }
        let mut norm = 0.0f64;
        for k in lo..=hi {
            let nu = (k as f64 / t_block - f_hz) / half_width_hz;
            let w = bisquare(nu);
            let g = highpass_gain(k as f64 / t_block, highpass_hz.0, highpass_hz.1);
            norm += w * w * g * g;
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
            n_t,
            ifft: ifft(n_t),
        })
    }
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
    max_n_t: usize,
    max_scratch: usize,
}

/// Per-worker buffers for [`QPlan::transform`], sized once from the plan.
pub struct Workspace {
    buf: Vec<Complex<f32>>,
    scratch: Vec<Complex<f32>>,
    med: Vec<u32>,
    hot: Vec<u32>,
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
        QPlan {
            fs_hz,
            n,
            planes: vec![Plane { q, rows }],
            highpass_hz,
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
        }
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
    /// tile with normalised energy ≥ `z_threshold` whose centre lies in
    /// `[keep.0, keep.1)` (GPS s) to `out`.
    ///
    /// Each row is normalised by its own robust scale over the kept part
    /// (a quantile estimator, evaluated by counting the tiles below 1.594 ×
    /// the row's expected mean), so a short transient hardly moves it and
    /// errors of the PSD estimate cancel.
    pub fn transform(
        &self,
        whitened: &[Complex<f32>],
        t0_gps: f64,
        keep: (f64, f64),
        z_threshold: f64,
        ws: &mut Workspace,
        out: &mut Vec<Tile>,
    ) {
        assert_eq!(whitened.len(), self.n / 2 + 1, "whitened spectrum length");
        // Chunks are flagged while the scale is measured if they hold a tile
        // above SCREEN × the threshold in units of the row's expected mean.
        const SCREEN: f64 = 0.5;
        for (p, plane) in self.planes.iter().enumerate() {
            for (r, row) in plane.rows.iter().enumerate() {
                let (i_lo, i_hi, dt) = self.kept_range(row, t0_gps, keep);
                let screen = SCREEN * z_threshold * row.norm;
                let Some(scale) = self.row_scale(p, r, whitened, (i_lo, i_hi), screen, ws) else {
                    continue;
                };
                // Compare |y|² against the threshold in raw units: no division in the loop.
                let raw_thr = z_threshold / scale;
                let n_chunks = (i_hi - i_lo).div_ceil(CHUNK);
                // When the threshold lies above the screen, only flagged
                // chunks can hold a significant tile (the usual case: the
                // scale is within a factor 2 of the expected mean).
                let all: Vec<u32>;
                let chunks: &[u32] = if raw_thr >= screen {
                    &ws.hot
                } else {
                    all = (0..n_chunks as u32).collect();
                    &all
                };
                let raw_thr = raw_thr as f32;
                for &c in chunks {
                    let first = i_lo + c as usize * CHUNK;
                    for (i, y) in ws.buf[first..(first + CHUNK).min(i_hi)].iter().enumerate() {
                        let e = y.norm_sqr();
                        if e >= raw_thr {
                            out.push(Tile {
                                t_gps: t0_gps + (first + i) as f64 * dt,
                                f_hz: row.f_hz,
                                q: plane.q,
                                energy: e as f64 * scale,
                            });
                        }
                    }
                }
            }
        }
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
    /// holding a tile with `|y|² ≥ screen`.
    fn row_scale(
        &self,
        p: usize,
        r: usize,
        whitened: &[Complex<f32>],
        kept: (usize, usize),
        screen: f64,
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
            for y in chunk {
                let e = y.norm_sqr();
                n += u32::from(e < g);
                hot |= e >= screen;
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
            .row_scale(plane, row, whitened, (lo, hi), f64::INFINITY, ws)
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

    #[test]
    fn rows_respect_nyquist() {
        for q in q_planes(4.0, 64.0, 0.2) {
            let fmax = plane_fmax_limit(q, 4096.0);
            assert!(fmax * (1.0 + BISQUARE_HALF_WIDTH / q) < 2048.0);
        }
    }
}
