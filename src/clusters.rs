//! Clusters of connected tiles in one Q plane: the summed energy of an
//! extended glitch (an arch, a sweep, a long tone) that no single tile
//! holds, with its significance in Gaussian noise.
//!
//! Excess-power statistics sum the normalised energy over a region of the
//! time-frequency plane (Anderson et al. 2001, Phys. Rev. D 63, 042003);
//! Q-transform searches cluster neighbouring significant tiles and add
//! their energies (Chatterji et al. 2004, Class. Quantum Grav. 21, S1809).
//! Here, per plane:
//!
//! - **Pixels** are tiles whose significance (see
//!   [`crate::tf::tile_significance`]) is at least a pixel level below the
//!   trigger threshold; tiles are connected when they are neighbours in a
//!   row or their time cells overlap in neighbouring rows.
//! - **Weights.** Tiles overlap: a row holds more tiles than independent
//!   values, rows overlap in frequency. A tile stands for its cell of the
//!   plane, `w = dτ Δf` (its time step times the row spacing, s × Hz). With
//!   the whitened data at unit power per bin, `Σ w (Z − 1)` over a region
//!   estimates the signal energy `Σ |s̃|²` there, and a matched filter's
//!   SNR is `ρ² = 2 Σ |s̃|²` (a tile that matches the signal has
//!   `Z − 1 = ρ²/2`): the **equivalent SNR** is `sqrt(2 Σ w (Z − 1))`.
//! - **Significance.** In Gaussian noise each `Z` is a unit exponential,
//!   and `S = Σ w Z` a weighted sum of correlated exponentials: mean `Σ w`,
//!   variance `Σ_ij w_i w_j c_ij`, with `c_ij` the correlation of the two
//!   tiles' energies, the squared overlap of their windows, taken for
//!   Gaussian windows of the tiles' spreads: `exp(−Δt²/(4σ_t²) −
//!   Δf²/(4σ_f²))` (σ_t = Q/(4πf), σ_f = f/Q at the pair's mean frequency).
//!   Matching the first two moments with a Gamma law (Satterthwaite 1946,
//!   Psychometrics Bulletin 2, 110; for independent tiles of unit weight it
//!   is exact: the sum of k unit exponentials is Gamma(k, 1)) gives
//!   `k = (Σ w)² / var` degrees of freedom and scale `θ = var / Σ w`; the
//!   significance is `−ln Q(k, S/θ)`, Q the regularised upper incomplete
//!   gamma function. One tile alone has `k = 1` and significance `Z`.
//!   Pixels are selected because they are high, so noise clusters come out
//!   more significant than this law says: the scan's cluster threshold is
//!   set by simulation of Gaussian noise (see [`CLUSTER_SIGNIFICANCE`]).

use crate::tf::sigma_t;
use statrs::function::gamma::{gamma_ur, ln_gamma};

/// Significance of a tile to be a pixel of a cluster (tiles of a row at or
/// above this level). Measured on simulated arches, sweeps and tones.
pub const PIXEL_SIGNIFICANCE: f64 = 3.0;

/// Significance of a tile to seed a cluster: clusters are grown only from
/// such tiles. In the scan's checks
/// (arches, sweeps, tones at SNR 8–20, `tests/scan_extended.rs`) seeds
/// at 8, 9 and 10 find the same glitches and 12 loses some, while each
/// step of 1 divides the walks from noise seeds by about e (most of the
/// clusters' cost).
pub const SEED_SIGNIFICANCE: f64 = 10.0;

/// Significance of the tiles that make a cluster's extent, its core.
pub const CORE_SIGNIFICANCE: f64 = 8.0;

/// Cluster significance a cluster needs to make a trigger of its own.
pub const CLUSTER_SIGNIFICANCE: f64 = 30.0;

/// A tile of a cluster.
#[derive(Debug, Clone, Copy)]
pub struct Pixel {
    /// Row index in the plane.
    pub row: u32,
    /// Tile index in the row.
    pub idx: u32,
    /// Normalised energy Z.
    pub z: f32,
}

/// One row of a plane's energy grid: where its tiles lie and which of
/// them may join a cluster.
#[derive(Debug, Clone, Copy)]
pub struct GridRow {
    /// Centre frequency \[Hz\].
    pub f_hz: f64,
    /// Time of tile 0 \[GPS s\].
    pub t0_gps: f64,
    /// Time between tiles \[s\].
    pub dt: f64,
    /// Frequency spacing of the rows around this one \[Hz\].
    pub df: f64,
    /// Offset of tile `lo` in the plane's energy array.
    pub off: usize,
    /// Kept tiles `lo..hi` (empty for a row with no scale).
    pub lo: u32,
    /// End of the kept tiles.
    pub hi: u32,
    /// Factor from stored energy to normalised energy Z.
    pub scale: f32,
    /// Stored energy at or above which a tile is a pixel.
    pub raw_pixel: f32,
}

impl GridRow {
    /// The cell a tile of this row stands for, `w = dτ Δf` (its time step
    /// times the row spacing, s × Hz): its weight in a cluster's sums.
    pub fn cell(&self) -> f64 {
        self.dt * self.df
    }
}

/// A connected set of pixels in one plane.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TileCluster {
    /// The plane's Q.
    pub q: f64,
    /// Extent of the cluster's core, its tiles at the core level or above
    /// (normalised energy ≥ [`CORE_SIGNIFICANCE`]), as tile extents
    /// `t ± Q/(2πf)`, `f ± 2f/Q` \[GPS s\].
    pub t_start: f64,
    /// End of the extent \[GPS s\].
    pub t_end: f64,
    /// Lowest frequency of the core \[Hz\].
    pub f_low: f64,
    /// Highest frequency of the core \[Hz\].
    pub f_high: f64,
    /// Pixels in the cluster.
    pub n_pixels: usize,
    /// Gamma degrees of freedom `k`.
    pub dof: f64,
    /// Excess energy `Σ w (Z − 1)`.
    pub excess: f64,
    /// `−ln Q(k, S/θ)`.
    pub significance: f64,
    /// Loudest pixel: time \[GPS s\], frequency \[Hz\], Z.
    pub peak: (f64, f64, f64),
}

impl TileCluster {
    /// Equivalent SNR `sqrt(2 Σ w (Z − 1))`.
    pub fn snr(&self) -> f64 {
        (2.0 * self.excess).max(0.0).sqrt()
    }

    /// Length of the extent \[s\].
    pub fn duration(&self) -> f64 {
        self.t_end - self.t_start
    }
}

/// `−ln Q(k, x)` for the regularised upper incomplete gamma function Q;
/// where Q underflows, the leading term of its asymptotic series,
/// `x − (k − 1) ln x + ln Γ(k)`.
pub fn gamma_significance(k: f64, x: f64) -> f64 {
    if x <= 0.0 {
        return 0.0;
    }
    let q = gamma_ur(k, x);
    if q > 1e-300 {
        -q.ln()
    } else {
        x - (k - 1.0) * x.ln() + ln_gamma(k)
    }
}

/// A tile's energy as stored in a plane's grid: the upper half of its
/// `f32`, rounded (bfloat16: 8 significant bits, relative error at most
/// 2⁻⁸). Half the memory of the `f32` keeps more of the row transforms'
/// buffers in cache, and a cluster's sums average the rounding out.
/// For `e ≥ 0`.
pub fn pack_energy(e: f32) -> u16 {
    ((e.to_bits() + 0x8000) >> 16) as u16
}

/// The energy a [`pack_energy`] code stands for.
fn unpack_energy(u: u16) -> f32 {
    f32::from_bits(u32::from(u) << 16)
}

/// What [`grow_clusters`] finds at a tile.
enum Take {
    /// Not a pixel (or outside the kept tiles).
    No,
    /// A pixel already reached.
    Seen,
    /// A pixel reached now, with its normalised energy.
    New(f32),
}

/// Correlation of the energies of two tiles of quality `q` at `fi` and
/// `fj` \[Hz\], `dt` and `df` apart: the squared overlap of Gaussian
/// windows of spreads σ_t = Q/(4πf), σ_f = f/Q at the mean frequency
/// `f = sqrt(fi fj)`, `exp(−dt²/(4σ_t²) − df²/(4σ_f²))` (0 beyond e^−12),
/// written without the square root.
fn energy_correlation(q: f64, dt: f64, df: f64, fi: f64, fj: f64) -> f64 {
    let (ff, qq) = (fi * fj, q * q);
    let pi2 = std::f64::consts::PI * std::f64::consts::PI;
    let arg = 4.0 * pi2 * ff * dt * dt / qq + df * df * qq / (4.0 * ff);
    if arg < 12.0 {
        (-arg).exp()
    } else {
        0.0
    }
}

/// Grow the clusters of one plane of quality `q` from its seed tiles
/// (`seeds`: row and tile index; see [`SEED_SIGNIFICANCE`]): from each
/// seed not yet reached, every pixel connected to it — neighbours in a row,
/// and in the neighbouring rows the tiles whose time cells overlap. `energy`
/// holds the kept tiles' stored energies of every row (see [`GridRow`]);
/// `visited` is a scratch bitmap. Every cluster of at least `min_pixels`
/// pixels whose significance may reach `min_significance` is appended to
/// `out` (clusters that cannot are skipped before their variance is
/// summed).
#[allow(clippy::too_many_arguments)]
pub fn grow_clusters(
    q: f64,
    rows: &[GridRow],
    energy: &[u16],
    seeds: &[(u32, u32)],
    min_pixels: usize,
    min_significance: f64,
    visited: &mut Vec<u64>,
    out: &mut Vec<TileCluster>,
) {
    if seeds.is_empty() {
        return;
    }
    visited.clear();
    visited.resize(energy.len().div_ceil(64), 0);
    // A pixel's normalised energy, when the tile is one and not yet
    // visited (it then is).
    let mut take = |r: usize, i: i64| -> Take {
        let Some(row) = rows.get(r) else {
            return Take::No;
        };
        if i < i64::from(row.lo) || i >= i64::from(row.hi) {
            return Take::No;
        }
        let at = row.off + (i as usize - row.lo as usize);
        let e = unpack_energy(energy[at]);
        let (word, bit) = (at / 64, 1u64 << (at % 64));
        if e < row.raw_pixel {
            Take::No
        } else if visited[word] & bit != 0 {
            Take::Seen
        } else {
            visited[word] |= bit;
            Take::New(e * row.scale)
        }
    };
    // Lower bounds of the energy correlation of a tile and a connected
    // neighbour: in its row (exact: the same for every pair), and in the
    // row above (the farthest overlapping cells: half a cell of each apart).
    let in_row: Vec<f64> = rows
        .iter()
        .map(|c| energy_correlation(q, c.dt, 0.0, c.f_hz, c.f_hz))
        .collect();
    let up_row: Vec<f64> = rows
        .windows(2)
        .map(|w| {
            energy_correlation(
                q,
                0.5 * (w[0].dt + w[1].dt),
                w[1].f_hz - w[0].f_hz,
                w[0].f_hz,
                w[1].f_hz,
            )
        })
        .collect();
    let (mut stack, mut members): (Vec<Pixel>, Vec<Pixel>) = (Vec::new(), Vec::new());
    for &(r, i) in seeds {
        let Take::New(z) = take(r as usize, i64::from(i)) else {
            continue;
        };
        stack.push(Pixel { row: r, idx: i, z });
        members.clear();
        // Σ_{i≠j} w_i w_j c_ij over the connected pairs of neighbouring
        // rows, from below: part of the variance, for the bound that skips
        // clusters that cannot be significant.
        let mut pairs = 0.0;
        while let Some(p) = stack.pop() {
            members.push(p);
            let (r, i) = (p.row as usize, i64::from(p.idx));
            let row = rows[r];
            let w = row.cell();
            let t = row.t0_gps + i as f64 * row.dt;
            let mut near: [(usize, i64, i64); 3] =
                [(r, i - 1, i + 1), (usize::MAX, 0, -1), (usize::MAX, 0, -1)];
            // Tiles of the neighbouring rows whose time cells overlap this
            // one's (strictly).
            for (slot, r2) in [r.wrapping_sub(1), r + 1].into_iter().enumerate() {
                let Some(other) = rows.get(r2) else {
                    continue;
                };
                let h = 0.5 * (row.dt + other.dt) / other.dt;
                let x = (t - other.t0_gps) / other.dt;
                near[slot + 1] = (r2, floor(x - h) + 1, ceil(x + h) - 1);
            }
            for (k, &(r2, a, b)) in near.iter().enumerate() {
                let step = if k == 0 { (b - a).max(1) } else { 1 };
                // The pair's index in `up_row` is the lower of the two rows.
                let c = match k {
                    0 => in_row[r],
                    1 => up_row.get(r2).copied().unwrap_or(0.0),
                    _ => up_row.get(r).copied().unwrap_or(0.0),
                };
                let mut j = a;
                while j <= b {
                    match take(r2, j) {
                        Take::New(z) => {
                            stack.push(Pixel {
                                row: r2 as u32,
                                idx: j as u32,
                                z,
                            });
                            if k > 0 {
                                pairs += w * rows[r2].cell() * c;
                            }
                        }
                        Take::Seen if k > 0 => pairs += w * rows[r2].cell() * c,
                        _ => {}
                    }
                    j += step;
                }
            }
        }
        if members.len() < min_pixels {
            continue;
        }
        // The variance is at least its diagonal, its pairs within a row
        // (exact: a row's pairs d tiles apart have c = ρ^{d²}, ρ its
        // neighbours' correlation) and the connected pairs of neighbouring
        // rows (every c_ij ≥ 0); and the significance −ln Q(k, k Z̄) with
        // the mean Z̄ = Σ w Z / Σ w > 1 grows as the variance shrinks
        // (k = (Σ w)²/var grows): with that bound it bounds the
        // significance, and clusters below `min_significance` by it are
        // not summarised.
        let (mut sw, mut swz, mut var) = (0.0, 0.0, pairs);
        for p in &members {
            let c = &rows[p.row as usize];
            let w = c.cell();
            sw += w;
            swz += w * f64::from(p.z);
            var += w * w;
        }
        members.sort_unstable_by_key(|p| (p.row, p.idx));
        for run in members.chunk_by(|a, b| a.row == b.row) {
            let r = run[0].row as usize;
            let ww = rows[r].cell();
            let ln_rho = in_row[r].max(f64::MIN_POSITIVE).ln();
            for (a, p) in run.iter().enumerate() {
                for q in &run[a + 1..] {
                    let d = f64::from(q.idx - p.idx);
                    // Pairs within 5 σ_t, which `null_variance` always sums.
                    let e = -d * d * ln_rho;
                    if e > 6.25 {
                        break;
                    }
                    var += 2.0 * ww * ww * (-e).exp();
                }
            }
        }
        if gamma_significance(sw * sw / var, swz * sw / var) >= min_significance {
            out.push(summarise(q, rows, &members));
        }
    }
}

/// `⌊v⌋` for `|v| < 2⁶³` (`f64::floor` is a library call on the baseline
/// x86-64 target, and this one sits in the walk's inner loop).
fn floor(v: f64) -> i64 {
    let t = v as i64;
    t - i64::from((t as f64) > v)
}

/// `⌈v⌉` for `|v| < 2⁶³` (see [`floor`]).
fn ceil(v: f64) -> i64 {
    let t = v as i64;
    t + i64::from((t as f64) < v)
}

/// Variance of `S = Σ w Z` in Gaussian noise over tiles of quality `q`
/// given as `(t, f, w, _)` sorted by time: `Σ_ij w_i w_j c_ij` (see
/// `energy_correlation`), over pairs within 5 σ_t of the lowest
/// frequency's tiles (c < 0.2% beyond). Its mean is `Σ w`.
pub fn null_variance(q: f64, pts: &[(f64, f64, f64, f64)]) -> f64 {
    let f_min = pts.iter().map(|p| p.1).fold(f64::INFINITY, f64::min);
    let reach = 5.0 * sigma_t(q, f_min.max(1e-3));
    let mut var = 0.0;
    for (i, &(ti, fi, wi, _)) in pts.iter().enumerate() {
        var += wi * wi;
        for &(tj, fj, wj, _) in &pts[i + 1..] {
            if tj - ti > reach {
                break;
            }
            var += 2.0 * wi * wj * energy_correlation(q, tj - ti, fj - fi, fi, fj);
        }
    }
    var
}

/// The statistics of one cluster (see the module notes).
fn summarise(q: f64, rows: &[GridRow], members: &[Pixel]) -> TileCluster {
    // Pixels by time, for the neighbour sums of the variance.
    let mut pts: Vec<(f64, f64, f64, f64)> = members
        .iter()
        .map(|p| {
            let c = &rows[p.row as usize];
            let t = c.t0_gps + f64::from(p.idx) * c.dt;
            (t, c.f_hz, c.cell(), f64::from(p.z))
        })
        .collect();
    pts.sort_by(|a, b| a.0.total_cmp(&b.0));
    let (mut t_start, mut t_end) = (f64::INFINITY, f64::NEG_INFINITY);
    let (mut f_low, mut f_high) = (f64::INFINITY, f64::NEG_INFINITY);
    // The extent of the cluster's core: its tiles at the core level or
    // above, as tile extents (t ± Q/(2πf), f ± 2f/Q, as a trigger's
    // tiles); the tiles just above the pixel level scatter into the noise
    // around a glitch and would make its extent a noisy measure.
    let z_core = members
        .iter()
        .map(|p| p.z)
        .fold(f32::NEG_INFINITY, f32::max)
        .min(CORE_SIGNIFICANCE as f32);
    for p in members.iter().filter(|p| p.z >= z_core) {
        let c = &rows[p.row as usize];
        let t = c.t0_gps + f64::from(p.idx) * c.dt;
        let (hd, hb) = (2.0 * sigma_t(q, c.f_hz), 2.0 * c.f_hz / q);
        t_start = t_start.min(t - hd);
        t_end = t_end.max(t + hd);
        f_low = f_low.min(c.f_hz - hb);
        f_high = f_high.max(c.f_hz + hb);
    }
    let (mut sw, mut swz, mut excess) = (0.0, 0.0, 0.0);
    let mut peak = (0.0, 0.0, f64::NEG_INFINITY);
    for &(t, f, w, z) in &pts {
        sw += w;
        swz += w * z;
        excess += w * (z - 1.0);
        if z > peak.2 {
            peak = (t, f, z);
        }
    }
    let var = null_variance(q, &pts);
    let k = sw * sw / var;
    let theta = var / sw;
    TileCluster {
        q,
        t_start,
        t_end,
        f_low: f_low.max(0.0),
        f_high,
        n_pixels: members.len(),
        dof: k,
        excess,
        significance: gamma_significance(k, swz / theta),
        peak,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn packed_energies_keep_eight_significant_bits() {
        for e in [0.0f32, 1e-30, 0.37, 1.0, 3.0, 12.5, 1234.5, 3.3e7] {
            let back = unpack_energy(pack_energy(e));
            assert!((back - e).abs() <= e * 2f32.powi(-8), "{e} -> {back}");
        }
        assert_eq!(unpack_energy(pack_energy(12.0)), 12.0);
    }

    #[test]
    fn integer_floor_and_ceiling_match_the_library_ones() {
        for v in [-2.5, -2.0, -0.3, 0.0, 0.3, 1.0, 1.7, 1e9 + 0.5] {
            assert_eq!(floor(v), v.floor() as i64, "{v}");
            assert_eq!(ceil(v), v.ceil() as i64, "{v}");
        }
    }

    #[test]
    fn one_pixel_has_one_degree_of_freedom_and_its_energy_as_significance() {
        let rows = [GridRow {
            f_hz: 100.0,
            t0_gps: 0.0,
            dt: 0.01,
            df: 5.0,
            off: 0,
            lo: 0,
            hi: 8,
            scale: 1.0,
            raw_pixel: 3.0,
        }];
        let energy = [1.0, 0.5, 2.0, 12.0, 0.1, 0.2, 1.0, 1.0].map(pack_energy);
        let mut out = Vec::new();
        grow_clusters(
            8.0,
            &rows,
            &energy,
            &[(0, 3)],
            1,
            0.0,
            &mut Vec::new(),
            &mut out,
        );
        assert_eq!(out.len(), 1);
        assert_eq!(out[0].n_pixels, 1);
        assert!((out[0].dof - 1.0).abs() < 1e-12);
        assert!((out[0].significance - 12.0).abs() < 1e-9);
    }
}
