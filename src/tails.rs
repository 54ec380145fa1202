//! Noise tails of the tile energy: how often white Gaussian noise makes a
//! tile at or above a level, per Q plane and row band, against the
//! exponential law `e^{−z}` of a tile normalised by its true scale
//! (Chatterji et al. 2004, Class. Quantum Grav. 21, S1809). Shared by the
//! `noise_tails` bench and the long noise check `.ci/run` runs.

use crate::scan::Conditioner;
use crate::tf::{tile_significance, QPlan, Tiling};
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;

/// The standard plan the tails are measured (and the significance
/// calibrated) on: the scan's defaults for a 4096 Hz channel — fmin 16,
/// fmax 1024, Q 4–64, mismatch 0.2.
pub const STANDARD_TILING: Tiling = Tiling {
    fmin: 16.0,
    fmax: 1024.0,
    qmin: 4.0,
    qmax: 64.0,
    mismatch: 0.2,
};

/// The scan's high-pass for [`STANDARD_TILING`]: raised cosine from fmin/2
/// to 0.9 fmin \[Hz\].
pub const STANDARD_HIGHPASS: (f64, f64) = (8.0, 14.4);

/// Levels z at which tails are counted.
pub const ZS: [f64; 4] = [8.0, 12.0, 14.0, 16.0];

/// Row bands \[Hz\]: two octaves each over the standard 16–1024 Hz plan.
pub const BANDS_HZ: [(f64, f64); 3] = [(16.0, 64.0), (64.0, 256.0), (256.0, 1024.0)];

/// Kept tiles of one plane and band and how many reach each of [`ZS`].
#[derive(Debug, Clone, Copy, Default)]
pub struct Tally {
    /// Kept tiles.
    pub tiles: u64,
    /// Tiles with normalised energy ≥ z.
    pub raw: [u64; 4],
    /// Tiles with [`tile_significance`] ≥ z.
    pub sig: [u64; 4],
    /// Sum over blocks of the square of each block's `sig` counts (tiles
    /// above a level come in runs, so the counting error is taken from
    /// the scatter between the independent blocks).
    pub sig_sq: [u64; 4],
    /// Blocks tallied.
    pub blocks: u64,
}

impl Tally {
    /// `count / tiles / e^{−z}`: 1 for an exponential tail.
    pub fn ratio(&self, count: u64, z: f64) -> f64 {
        count as f64 / self.tiles as f64 / (-z).exp()
    }

    /// Standard error of [`Tally::ratio`] of `sig[k]` from the scatter of
    /// the blocks' counts.
    pub fn sig_ratio_error(&self, k: usize) -> f64 {
        let n = self.blocks.max(1) as f64;
        let (s, s2) = (self.sig[k] as f64, self.sig_sq[k] as f64);
        let var_total = (s2 - s * s / n).max(0.0) * n / (n - 1.0).max(1.0);
        var_total.sqrt() / self.tiles as f64 / (-ZS[k]).exp()
    }

    fn add(&mut self, o: &Tally) {
        self.tiles += o.tiles;
        for k in 0..4 {
            self.raw[k] += o.raw[k];
            self.sig[k] += o.sig[k];
            self.sig_sq[k] += o.sig_sq[k];
        }
        self.blocks += o.blocks;
    }
}

/// Tally the tiles of `kept_s` seconds of kept white Gaussian noise at
/// `fs_hz`, analysed in independent blocks of `block_s` seconds (2 s of
/// padding each side, each block's noise seeded from `seed` and its index)
/// with the scan's conditioning (Welch median PSD over 1-s segments) and
/// the tiling `tiling`. With `expected`, rows are normalised by their
/// PSD-based expected mean instead of the measured scale. Returns the
/// planes' Q and `[plane][band]` tallies ([`BANDS_HZ`]).
///
/// # Panics
/// On a tiling or block length the scan would refuse.
pub fn white_noise_tails(
    tiling: Tiling,
    highpass: (f64, f64),
    fs_hz: f64,
    block_s: f64,
    kept_s: f64,
    expected: bool,
    seed: u64,
) -> (Vec<f64>, Vec<Vec<Tally>>) {
    let pad_s = 2.0;
    let (bn, pad) = ((block_s * fs_hz) as usize, (pad_s * fs_hz) as usize);
    let plan = QPlan::new(
        fs_hz,
        bn,
        &tiling,
        highpass,
        &mut rustfft::FftPlanner::new(),
    )
    .expect("plan");
    let cond = Conditioner::new(bn, fs_hz, pad, fs_hz as usize, highpass)
        .expect("conditioner")
        .with_top(plan.top_hz());
    let n_blocks = (kept_s / (block_s - 2.0 * pad_s)).ceil() as u64;
    let keep = (pad_s, block_s - pad_s);
    let empty = vec![vec![Tally::default(); BANDS_HZ.len()]; plan.planes.len()];
    let tally = (0..n_blocks)
        .into_par_iter()
        .map_init(
            || (cond.buffers(), plan.workspace()),
            |(cb, ws), i| {
                let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(seed ^ (i << 20));
                let src = crate::scan::InMemory {
                    data: (0..bn).map(|_| StandardNormal.sample(&mut rng)).collect(),
                    rate_hz: fs_hz,
                    start_gps: 0.0,
                };
                cond.whiten_block_with(&src, 0, cb).expect("whiten");
                let mut out = empty.clone();
                for (p, plane) in plan.planes.iter().enumerate() {
                    for (r, row) in plane.rows.iter().enumerate() {
                        let Some(b) = BANDS_HZ
                            .iter()
                            .position(|&(lo, hi)| row.f_hz >= lo && row.f_hz < hi)
                        else {
                            continue;
                        };
                        let n_indep = plan.independent_tiles(p, r, 0.0, keep);
                        let (e, dt) = if expected {
                            plan.row_energies_expected(p, r, &cb.whitened, ws)
                        } else {
                            plan.row_energies(p, r, &cb.whitened, 0.0, keep, ws)
                        };
                        let t = &mut out[p][b];
                        for (k, &z) in e.iter().enumerate() {
                            let tk = k as f64 * dt;
                            if tk < keep.0 || tk >= keep.1 {
                                continue;
                            }
                            t.tiles += 1;
                            let z = f64::from(z);
                            if z < ZS[0] {
                                continue;
                            }
                            let s = tile_significance(z, n_indep);
                            for (j, &zt) in ZS.iter().enumerate() {
                                t.raw[j] += u64::from(z >= zt);
                                t.sig[j] += u64::from(s >= zt);
                            }
                        }
                    }
                }
                for t in out.iter_mut().flatten() {
                    t.blocks = 1;
                    t.sig_sq = t.sig.map(|c| c * c);
                }
                out
            },
        )
        .reduce(
            || empty.clone(),
            |mut a, b| {
                for (pa, pb) in a.iter_mut().zip(&b) {
                    for (ta, tb) in pa.iter_mut().zip(pb) {
                        ta.add(tb);
                    }
                }
                a
            },
        );
    (plan.planes.iter().map(|p| p.q).collect(), tally)
}
