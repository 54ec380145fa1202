//! Trigger records and the clustering of significant tiles into triggers.
//!
//! Conventions: all times are GPS seconds (f64; the catalogue stores integer
//! nanoseconds), frequencies in Hz. `energy` is the normalised tile energy Z
//! (mean 1 in Gaussian noise) and `snr = sqrt(2 (Z - 1))` (Chatterji et al.
//! 2004, Class. Quantum Grav. 21, S1809).

use serde::{Deserialize, Serialize};

/// One transient found in one channel.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Trigger {
    /// Peak time \[GPS s\]: the time of the maximum tile energy, located
    /// between the tiles (see [`crate::tf::QPlan::refine`]); the loudest
    /// tile's time when not refined.
    pub t_peak: f64,
    /// Start of the trigger's extent \[GPS s\].
    pub t_start: f64,
    /// End of the trigger's extent \[GPS s\].
    pub t_end: f64,
    /// Peak frequency \[Hz\]: the centre frequency of the maximum tile
    /// energy, located between the rows and planes (see
    /// [`crate::tf::QPlan::refine`]); the loudest tile's when not refined.
    pub f_peak: f64,
    /// Lower edge of the trigger's frequency extent \[Hz\].
    pub f_low: f64,
    /// Upper edge of the trigger's frequency extent \[Hz\].
    pub f_high: f64,
    /// Signal-to-noise ratio at the peak, `sqrt(2 (Z - 1))` of the refined
    /// maximum energy (which removes the tiling's mismatch loss).
    pub snr: f64,
    /// Quality factor at the peak, located between the planes (see
    /// [`crate::tf::QPlan::refine`], started from the between-plane
    /// estimate of [`cluster_tiles`]). Scans keep it within the searched
    /// `[qmin, qmax]`: a Q equal to qmin or qmax means at or beyond that
    /// edge. Unrefined (tiles clustered without a scan): the between-plane
    /// estimate, which may fall outside the range.
    pub q: f64,
    /// Normalised energy Z at the peak (refined maximum; the loudest
    /// tile's when not refined).
    pub energy: f64,
    /// Equivalent SNR of the trigger's clustered tiles,
    /// `sqrt(2 Σ w (Z − 1))` over the connected tiles of its best plane
    /// (see [`crate::clusters`]); at least `snr`, and equal to it when no
    /// cluster was measured.
    pub snr_eq: f64,
}

/// SNR from normalised energy: `sqrt(2 (Z - 1))`, zero below Z = 1.
pub fn snr_from_energy(z: f64) -> f64 {
    (2.0 * (z - 1.0)).max(0.0).sqrt()
}

/// Normalised energy for an SNR: `1 + snr^2 / 2`.
pub fn energy_from_snr(snr: f64) -> f64 {
    1.0 + 0.5 * snr * snr
}

use crate::clusters::TileCluster;
use crate::tf::{Refined, Tile};

/// Largest gap \[s\] between the time extents of kept tiles that still
/// makes them one trigger (common practice: a loud transient's tiles at
/// different Q abut with millisecond gaps).
pub const CLUSTER_GAP_S: f64 = 0.1;

/// Cluster significant tiles into triggers, one per transient.
///
/// 1. Most significant first, keep a tile only if it overlaps no kept tile in
///    both time (`t ± Q/(2πf)`) and frequency (`f ± 2f/Q`); this removes the
///    cloud of overlapping tiles of other Q planes and neighbouring rows. The
///    loudest tile of each Q plane that a kept tile removes is remembered.
/// 2. Kept tiles whose time extents overlap, or leave gaps shorter than
///    [`CLUSTER_GAP_S`], are one trigger: its peak is the loudest kept tile,
///    its extent the union of the kept tiles' extents.
/// 3. The trigger's Q is estimated between the planes: the excess energy
///    `Z − 1` of the loudest tile of each plane at the peak is fitted with
///    `A sech(ln Q − ln Q̂)`, the energy a tile of quality Q keeps of a
///    sine-Gaussian of quality Q̂ (for Gaussian windows the overlap is
///    `sqrt(2 Q Q̂ / (Q² + Q̂²))`, whose square is that sech; Chatterji et
///    al. 2004 give its second-order form, the mismatch metric). ln Q̂ is
///    searched within one plane step of the observed planes.
///
/// Returns triggers sorted by `t_peak`.
pub fn cluster_tiles(tiles: Vec<Tile>) -> Vec<Trigger> {
    if tiles.is_empty() {
        return Vec::new();
    }
    let mut kept: Vec<(Tile, PlanePeaks)> = suppress(&tiles)
        .into_iter()
        .map(|(i, peaks)| (tiles[i], peaks))
        .collect();
    kept.sort_by(|a, b| {
        (a.0.t_gps - a.0.half_duration()).total_cmp(&(b.0.t_gps - b.0.half_duration()))
    });
    let mut out = Vec::new();
    let mut group: Vec<(Tile, PlanePeaks)> = Vec::new();
    let mut group_end = f64::NEG_INFINITY;
    for (tile, peaks) in kept {
        if !group.is_empty() && tile.t_gps - tile.half_duration() > group_end + CLUSTER_GAP_S {
            out.push(trigger_of(&group));
            group.clear();
        }
        group_end = if group.is_empty() {
            tile.t_gps + tile.half_duration()
        } else {
            group_end.max(tile.t_gps + tile.half_duration())
        };
        group.push((tile, peaks));
    }
    out.push(trigger_of(&group));
    out.sort_by(|a, b| a.t_peak.total_cmp(&b.t_peak));
    out
}

/// Join the clusters of connected tiles (see [`crate::clusters`]) to the
/// triggers: each cluster, most significant first, goes to the trigger it
/// overlaps in time (within [`CLUSTER_GAP_S`]) and frequency, whose
/// equivalent SNR becomes the larger of its own and the cluster's (the
/// best plane's cluster: energy is never summed across planes or
/// clusters) and whose extent grows to cover the cluster. A cluster that
/// overlaps no trigger and whose significance is at least `min_significance`
/// makes a trigger of its own, at its loudest tile (on the tiling grid,
/// its single-tile SNR below the tile threshold). Triggers stay sorted by
/// `t_peak`.
pub fn attach_clusters(
    triggers: &mut Vec<Trigger>,
    mut clusters: Vec<TileCluster>,
    min_significance: f64,
) {
    clusters.sort_by(|a, b| b.significance.total_cmp(&a.significance));
    // Triggers by start time (ns), for range queries; extents only grow.
    let key = |t: f64| (t * 1e9).round() as i64;
    let mut by_start: std::collections::BTreeMap<i64, Vec<usize>> = Default::default();
    let mut longest = 0.0f64;
    for (i, t) in triggers.iter().enumerate() {
        by_start.entry(key(t.t_start)).or_default().push(i);
        longest = longest.max(t.t_end - t.t_start);
    }
    let mut added = false;
    for c in clusters {
        let lo = key(c.t_start - CLUSTER_GAP_S - longest - c.duration());
        // A trigger stays keyed by the start it had when added; a cluster
        // may since have moved its start back by at most `longest`.
        let hi = key(c.t_end + CLUSTER_GAP_S + longest);
        let hit = by_start
            .range(lo..=hi)
            .flat_map(|(_, v)| v)
            .copied()
            .find(|&i| {
                let t = &triggers[i];
                t.t_start - CLUSTER_GAP_S <= c.t_end
                    && c.t_start <= t.t_end + CLUSTER_GAP_S
                    && t.f_low <= c.f_high
                    && c.f_low <= t.f_high
            });
        match hit.map(|i| &mut triggers[i]) {
            Some(t) => {
                longest = longest.max(c.t_end.max(t.t_end) - c.t_start.min(t.t_start));
                t.snr_eq = t.snr_eq.max(c.snr());
                t.t_start = t.t_start.min(c.t_start);
                t.t_end = t.t_end.max(c.t_end);
                t.f_low = t.f_low.min(c.f_low);
                t.f_high = t.f_high.max(c.f_high);
            }
            None if c.significance >= min_significance => {
                let (t, f, z) = c.peak;
                let snr = snr_from_energy(z);
                triggers.push(Trigger {
                    t_peak: t,
                    t_start: c.t_start,
                    t_end: c.t_end,
                    f_peak: f,
                    f_low: c.f_low,
                    f_high: c.f_high,
                    snr,
                    q: c.q,
                    energy: z,
                    snr_eq: c.snr().max(snr),
                });
                by_start
                    .entry(key(c.t_start))
                    .or_default()
                    .push(triggers.len() - 1);
                longest = longest.max(c.duration());
                added = true;
            }
            None => {}
        }
    }
    if added {
        triggers.sort_by(|a, b| a.t_peak.total_cmp(&b.t_peak));
    }
}

/// Step 1 of [`cluster_tiles`]: the indices into `tiles` of the tiles kept
/// (loudest first, overlapping no louder kept tile), each with the loudest
/// tile of every plane it removed.
fn suppress(tiles: &[Tile]) -> Vec<(usize, PlanePeaks)> {
    let mut order: Vec<usize> = (0..tiles.len()).collect();
    order.sort_by(|&a, &b| tiles[b].energy.total_cmp(&tiles[a].energy));
    let max_half = tiles.iter().map(Tile::half_duration).fold(0.0, f64::max);
    // Kept tiles indexed by centre time (ns) for range queries.
    let mut kept_by_time: std::collections::BTreeMap<i64, Vec<usize>> = Default::default();
    let mut kept: Vec<(usize, PlanePeaks)> = Vec::new();
    let key = |t: f64| (t * 1e9).round() as i64;
    for i in order {
        let tile = &tiles[i];
        let (hd, hb) = (tile.half_duration(), tile.half_bandwidth());
        let lo = key(tile.t_gps - hd - max_half);
        let hi = key(tile.t_gps + hd + max_half);
        let over = kept_by_time
            .range(lo..=hi)
            .flat_map(|(_, v)| v)
            .copied()
            .find(|&j| {
                let k = &tiles[kept[j].0];
                (k.t_gps - tile.t_gps).abs() < hd + k.half_duration()
                    && (k.f_hz - tile.f_hz).abs() < hb + k.half_bandwidth()
            });
        match over {
            // Tiles come loudest first: the first of a plane is its loudest.
            Some(j) => kept[j].1.note(tile),
            None => {
                kept_by_time
                    .entry(key(tile.t_gps))
                    .or_default()
                    .push(kept.len());
                let mut peaks = PlanePeaks::default();
                peaks.note(tile);
                kept.push((i, peaks));
            }
        }
    }
    kept
}

/// Set [`Tile::refined`] on the tiles that may become a trigger's peak —
/// those kept by step 1 of [`cluster_tiles`] — with `refine(tile, q̂)`,
/// `q̂` the between-plane Q estimate of [`cluster_tiles`] step 3. The scan
/// calls this per block, where the whitened data are at hand; a trigger's
/// peak tile is kept within its own block, so it is refined there.
pub fn refine_peaks(
    mut tiles: Vec<Tile>,
    mut refine: impl FnMut(&Tile, f64) -> Refined,
) -> Vec<Tile> {
    for (i, peaks) in suppress(&tiles) {
        let r = refine(&tiles[i], peaks.estimate_q(tiles[i].q));
        tiles[i].refined = Some(r);
    }
    tiles
}

/// The loudest tile energy of each Q plane around a kept tile.
#[derive(Debug, Default, Clone)]
struct PlanePeaks(Vec<(f64, f64)>);

impl PlanePeaks {
    /// Remember `tile` if its plane has no louder tile yet.
    fn note(&mut self, tile: &Tile) {
        if !self.0.iter().any(|&(q, _)| q == tile.q) {
            self.0.push((tile.q, tile.energy));
        }
    }

    /// Q̂ from the plane peaks (see [`cluster_tiles`]), or `q0` when only
    /// one plane is significant.
    fn estimate_q(&self, q0: f64) -> f64 {
        if self.0.len() < 2 {
            return q0;
        }
        let pts: Vec<(f64, f64)> = self
            .0
            .iter()
            .map(|&(q, z)| (q.ln(), (z - 1.0).max(0.0)))
            .collect();
        let mut lnq: Vec<f64> = pts.iter().map(|p| p.0).collect();
        lnq.sort_by(f64::total_cmp);
        let step = lnq
            .windows(2)
            .map(|w| w[1] - w[0])
            .fold(f64::INFINITY, f64::min);
        let (lo, hi) = (lnq[0] - step, lnq[lnq.len() - 1] + step);
        // Least squares in A for each trial ln Q̂ (closed form), grid in ln Q̂.
        const GRID: usize = 400;
        let mut best = (f64::INFINITY, q0.ln());
        for i in 0..=GRID {
            let u = lo + (hi - lo) * i as f64 / GRID as f64;
            let (mut se, mut ss, mut ee) = (0.0, 0.0, 0.0);
            for &(x, e) in &pts {
                let s = 1.0 / (x - u).cosh();
                se += s * e;
                ss += s * s;
                ee += e * e;
            }
            let resid = ee - se * se / ss;
            if resid < best.0 {
                best = (resid, u);
            }
        }
        best.1.exp()
    }
}

fn trigger_of(group: &[(Tile, PlanePeaks)]) -> Trigger {
    let (peak, peaks) = group
        .iter()
        .max_by(|a, b| a.0.energy.total_cmp(&b.0.energy))
        .expect("non-empty group");
    let fold = |f: fn(&Tile) -> f64, init: f64, pick: fn(f64, f64) -> f64| {
        group.iter().map(|g| f(&g.0)).fold(init, pick)
    };
    // The peak refined between tiles, rows and planes when the scan did so;
    // else the loudest tile with the between-plane Q estimate.
    let r = peak.refined.unwrap_or(Refined {
        t_gps: peak.t_gps,
        f_hz: peak.f_hz,
        q: peaks.estimate_q(peak.q),
        energy: peak.energy,
    });
    Trigger {
        t_peak: r.t_gps,
        t_start: fold(|t| t.t_gps - t.half_duration(), f64::INFINITY, f64::min),
        t_end: fold(|t| t.t_gps + t.half_duration(), f64::NEG_INFINITY, f64::max),
        f_peak: r.f_hz,
        f_low: fold(
            |t| (t.f_hz - t.half_bandwidth()).max(0.0),
            f64::INFINITY,
            f64::min,
        ),
        f_high: fold(|t| t.f_hz + t.half_bandwidth(), f64::NEG_INFINITY, f64::max),
        snr: snr_from_energy(r.energy),
        q: r.q,
        energy: r.energy,
        snr_eq: snr_from_energy(r.energy),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tile(t: f64, f: f64, q: f64, e: f64) -> Tile {
        Tile {
            t_gps: t,
            f_hz: f,
            q,
            energy: e,
            refined: None,
        }
    }

    #[test]
    fn overlapping_tiles_make_one_trigger() {
        // A loud tile with weaker neighbours in time, frequency and Q.
        let tiles = vec![
            tile(100.0, 200.0, 8.0, 50.0),
            tile(100.002, 200.0, 8.0, 40.0),
            tile(100.0, 210.0, 16.0, 30.0),
            tile(100.001, 190.0, 5.6, 20.0),
            // Far away in time: a second transient.
            tile(105.0, 60.0, 8.0, 20.0),
            // Abutting the first (a 5 ms gap) at another frequency: same transient.
            tile(100.025, 600.0, 8.0, 12.0),
        ];
        let trig = cluster_tiles(tiles);
        assert_eq!(trig.len(), 2);
        assert_eq!(trig[0].t_peak, 100.0);
        assert_eq!(trig[0].energy, 50.0);
        assert!((trig[0].snr - (2.0f64 * 49.0).sqrt()).abs() < 1e-12);
        assert!(trig[0].t_start < 100.0 && trig[0].t_end > 100.0);
        assert_eq!(trig[1].f_peak, 60.0);
    }

    #[test]
    fn q_between_planes_follows_the_sech_overlap() {
        // Plane peaks of a Q = 8 transient with excess energy 100 at the
        // best Q: Z − 1 = 100 sech(ln Q − ln 8) on the standard planes.
        for q_true in [4.5, 8.0, 15.0, 30.0] {
            let mut peaks = PlanePeaks::default();
            for q in [5.657, 11.314, 22.627, 45.255] {
                let z = 1.0 + 100.0 / (f64::ln(q / q_true)).cosh();
                peaks.note(&tile(0.0, 100.0, q, z));
            }
            let q = peaks.estimate_q(5.657);
            assert!((q / q_true).ln().abs() < 0.01, "{q} vs {q_true}");
        }
        // One significant plane: its Q.
        let mut one = PlanePeaks::default();
        one.note(&tile(0.0, 100.0, 11.314, 30.0));
        assert_eq!(one.estimate_q(11.314), 11.314);
    }

    /// A refined peak (set by the scan, see `tf::QPlan::refine`) replaces
    /// the loudest tile's time, frequency, Q and energy; the extent still
    /// comes from the tiles.
    #[test]
    fn refined_peak_is_reported() {
        let mut loud = tile(100.0, 200.0, 8.0, 50.0);
        loud.refined = Some(Refined {
            t_gps: 100.003,
            f_hz: 203.0,
            q: 9.1,
            energy: 52.0,
        });
        let trig = cluster_tiles(vec![loud, tile(100.002, 200.0, 8.0, 40.0)]);
        assert_eq!(trig.len(), 1);
        let t = &trig[0];
        assert_eq!(
            (t.t_peak, t.f_peak, t.q, t.energy),
            (100.003, 203.0, 9.1, 52.0)
        );
        assert!((t.snr - (2.0f64 * 51.0).sqrt()).abs() < 1e-12);
        assert!(t.t_start < 100.0 && t.t_end > 100.003);
        // refine_peaks refines the kept tile only.
        let mut calls = 0;
        let out = refine_peaks(
            vec![
                tile(100.0, 200.0, 8.0, 50.0),
                tile(100.002, 200.0, 8.0, 40.0),
            ],
            |t, _| {
                calls += 1;
                Refined {
                    t_gps: t.t_gps,
                    f_hz: t.f_hz,
                    q: t.q,
                    energy: t.energy,
                }
            },
        );
        assert_eq!((calls, out.len()), (1, 2));
        assert_eq!(out.iter().filter(|t| t.refined.is_some()).count(), 1);
    }

    #[test]
    fn snr_energy_inverse() {
        for s in [0.0, 5.5, 8.0, 100.0] {
            assert!((snr_from_energy(energy_from_snr(s)) - s).abs() < 1e-12);
        }
    }
}
