//! Coincidence statistics of target triggers against one aux channel, over
//! a grid of aux SNR thresholds and symmetric windows, by sorted sweeps.
//!
//! Definitions (DESIGN.md, "Coincidence and vetoes"; Smith et al. 2011,
//! Class. Quantum Grav. 28, 235005), all restricted to the *common analysed
//! time* C = target analysed ∩ aux analysed:
//! - aux triggers used: those with `snr ≥ ρ` and `t_peak` in C;
//! - a target trigger (t_peak in C) is coincident when some used aux trigger
//!   lies within `|t_target − t_aux| ≤ w`;
//! - vetoed time = (∪ [t_aux − w, t_aux + w]) ∩ C, overlaps counted once;
//! - deadtime = vetoed time / |C|; efficiency = n_coinc / n_target;
//! - use percentage = 100 × (used aux triggers with ≥ 1 coincident target) /
//!   (used aux triggers);
//! - expected μ = n_target × deadtime; significance = −log10 P(N ≥ n | μ).

use super::stats::poisson_significance;
use super::{AuxChannel, WitnessStat};
use crate::segments::{Segment, SegmentList};

/// For each sorted `t` in `from`, the distance to the nearest element of the
/// sorted `to` (`+inf` when `to` is empty). One linear two-pointer sweep.
pub(crate) fn nearest_distances(from: &[f64], to: &[f64]) -> Vec<f64> {
    let mut out = Vec::with_capacity(from.len());
    let mut j = 0;
    for &t in from {
        while j < to.len() && to[j] < t {
            j += 1;
        }
        let after = to.get(j).map_or(f64::INFINITY, |&a| a - t);
        let before = if j > 0 { t - to[j - 1] } else { f64::INFINITY };
        out.push(after.min(before));
    }
    out
}

/// For each sorted `t` in `from`, the signed offset `t − a` to the nearest
/// `a` in sorted `to` (`None` when `to` is empty).
pub(crate) fn nearest_offsets(from: &[f64], to: &[f64]) -> Vec<Option<(usize, f64)>> {
    let mut out = Vec::with_capacity(from.len());
    let mut j = 0;
    for &t in from {
        while j < to.len() && to[j] < t {
            j += 1;
        }
        let after = to.get(j).map(|&a| (j, t - a));
        let before = if j > 0 {
            Some((j - 1, t - to[j - 1]))
        } else {
            None
        };
        out.push(match (before, after) {
            (Some(b), Some(a)) => Some(if b.1.abs() <= a.1.abs() { b } else { a }),
            (b, a) => b.or(a),
        });
    }
    out
}

/// Merged windows `[t − w, t + w]` around sorted times (linear sweep).
pub(crate) fn merged_windows(times: &[f64], w: f64) -> Vec<Segment> {
    let mut out: Vec<Segment> = Vec::new();
    for &t in times {
        match out.last_mut() {
            Some(last) if t - w <= last.end => last.end = t + w,
            _ => out.push(Segment::new(t - w, t + w)),
        }
    }
    out
}

/// Vetoed time (∪ windows) ∩ `analysed` \[s\], overlaps counted once.
pub(crate) fn vetoed_seconds(times: &[f64], w: f64, analysed: &SegmentList) -> f64 {
    merged_windows(times, w)
        .iter()
        .map(|s| analysed.overlap_with(s.start, s.end))
        .sum()
}

/// Veto segments: (∪ windows around `times`) ∩ `analysed`.
pub fn veto_segments(times: &[f64], w: f64, analysed: &SegmentList) -> SegmentList {
    SegmentList::from_segments(merged_windows(times, w)).intersection(analysed)
}

/// Times of `aux` triggers with `snr ≥ threshold` inside `common`, sorted.
pub(crate) fn aux_times_above(aux: &AuxChannel, threshold: f64, common: &SegmentList) -> Vec<f64> {
    aux.triggers
        .iter()
        .filter(|t| t.snr >= threshold && common.contains(t.t_peak))
        .map(|t| t.t_peak)
        .collect()
}

/// Target times restricted to `common` (input and output sorted).
pub(crate) fn times_in(times: &[f64], common: &SegmentList) -> Vec<f64> {
    times
        .iter()
        .copied()
        .filter(|&t| common.contains(t))
        .collect()
}

/// The full (threshold × window × target set) grid for one aux channel.
///
/// `sets` are (family id or `None` for all target triggers, sorted target
/// times); `analysed` is the target analysed time. Returns one
/// [`WitnessStat`] per (set, threshold, window), or nothing when the common
/// analysed time is empty.
pub fn channel_grid(
    sets: &[(Option<i64>, Vec<f64>)],
    aux: &AuxChannel,
    analysed: &SegmentList,
    snr_thresholds: &[f64],
    windows_s: &[f64],
) -> Vec<WitnessStat> {
    let common = analysed.intersection(&aux.analysed);
    let analysed_s = common.total();
    if analysed_s <= 0.0 {
        return Vec::new();
    }
    let sets_in: Vec<(Option<i64>, Vec<f64>)> = sets
        .iter()
        .map(|(f, t)| (*f, times_in(t, &common)))
        .collect();
    let mut out = Vec::with_capacity(sets.len() * snr_thresholds.len() * windows_s.len());
    for &rho in snr_thresholds {
        let a = aux_times_above(aux, rho, &common);
        // Per set: target → nearest aux, aux → nearest target distances.
        let dists: Vec<(Vec<f64>, Vec<f64>)> = sets_in
            .iter()
            .map(|(_, t)| (nearest_distances(t, &a), nearest_distances(&a, t)))
            .collect();
        for &w in windows_s {
            let vetoed_s = vetoed_seconds(&a, w, &common);
            let deadtime = vetoed_s / analysed_s;
            for ((family, t), (d_t, d_a)) in sets_in.iter().zip(&dists) {
                let n_target = t.len() as u64;
                let n_coinc = d_t.iter().filter(|&&d| d <= w).count() as u64;
                let n_aux_used = d_a.iter().filter(|&&d| d <= w).count() as u64;
                let expected = n_target as f64 * deadtime;
                let efficiency = ratio(n_coinc as f64, n_target as f64);
                out.push(WitnessStat {
                    family_id: *family,
                    aux_channel_id: aux.id,
                    channel: aux.name.clone(),
                    snr_threshold: rho,
                    window_s: w,
                    n_target,
                    n_coinc,
                    n_aux: a.len() as u64,
                    n_aux_used,
                    vetoed_s,
                    analysed_s,
                    deadtime,
                    efficiency,
                    use_percentage: 100.0 * ratio(n_aux_used as f64, a.len() as f64),
                    expected,
                    significance: poisson_significance(n_coinc, expected),
                    efficiency_over_deadtime: ratio(efficiency, deadtime),
                });
            }
        }
    }
    out
}

/// `a / b`, or 0 when `b` is 0 (no trials: nothing measured).
fn ratio(a: f64, b: f64) -> f64 {
    if b > 0.0 {
        a / b
    } else {
        0.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nearest_and_windows_by_hand() {
        let a = [1.0, 5.0, 5.5, 20.0];
        let t = [0.0, 3.2, 5.2, 30.0];
        let d = nearest_distances(&t, &a);
        for (x, y) in d.iter().zip([1.0, 1.8, 0.2, 10.0]) {
            assert!((x - y).abs() < 1e-12, "{d:?}");
        }
        // Windows ±1 around 1, 5, 5.5, 20: [0,2], [4,6.5], [19,21] -> 2+2.5+2.
        let all = SegmentList::single(0.0, 100.0);
        assert!((vetoed_seconds(&a, 1.0, &all) - 6.5).abs() < 1e-12);
        // Restricted to [1.5, 19.5): [1.5,2] + [4,6.5] + [19,19.5] = 3.5.
        let part = SegmentList::single(1.5, 19.5);
        assert!((vetoed_seconds(&a, 1.0, &part) - 3.5).abs() < 1e-12);
        assert!((veto_segments(&a, 1.0, &part).total() - 3.5).abs() < 1e-12);
        let off = nearest_offsets(&[4.9, 21.0], &a);
        assert_eq!(off[0].unwrap().0, 1);
        assert!((off[1].unwrap().1 - 1.0).abs() < 1e-12);
    }
}
