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
/// `times` must be sorted; one linear sweep over windows and segments.
pub(crate) fn vetoed_seconds(times: &[f64], w: f64, analysed: &SegmentList) -> f64 {
    let segs = analysed.segments();
    let mut total = 0.0;
    let mut j = 0;
    let mut clip = |start: f64, end: f64, j: &mut usize| {
        while *j < segs.len() && segs[*j].end <= start {
            *j += 1;
        }
        let mut k = *j;
        while k < segs.len() && segs[k].start < end {
            total += segs[k].end.min(end) - segs[k].start.max(start);
            k += 1;
        }
    };
    let mut cur: Option<(f64, f64)> = None;
    for &t in times {
        match cur {
            Some((s, e)) if t - w <= e => cur = Some((s, t + w)),
            Some((s, e)) => {
                clip(s, e, &mut j);
                cur = Some((t - w, t + w));
            }
            None => cur = Some((t - w, t + w)),
        }
    }
    if let Some((s, e)) = cur {
        clip(s, e, &mut j);
    }
    total
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
/// [`WitnessStat`] per (set, threshold, window) — ordered by threshold (as
/// given), then window (ascending), then set — or nothing when the common
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
    // Windows in ascending order, so one pass over the distances counts
    // every window at once (cumulative bucket counts).
    let mut order: Vec<usize> = (0..windows_s.len()).collect();
    order.sort_by(|&i, &j| windows_s[i].total_cmp(&windows_s[j]));
    let sorted_w: Vec<f64> = order.iter().map(|&i| windows_s[i]).collect();
    for &rho in snr_thresholds {
        let a = aux_times_above(aux, rho, &common);
        // Per set: coincident targets and used aux triggers per window.
        let counts: Vec<(Vec<u64>, Vec<u64>)> = sets_in
            .iter()
            .map(|(_, t)| {
                (
                    counts_within(&nearest_distances(t, &a), &sorted_w),
                    counts_within(&nearest_distances(&a, t), &sorted_w),
                )
            })
            .collect();
        for (k, &w_index) in order.iter().enumerate() {
            let w = windows_s[w_index];
            let vetoed_s = vetoed_seconds(&a, w, &common);
            let deadtime = vetoed_s / analysed_s;
            for ((family, t), (c_t, c_a)) in sets_in.iter().zip(&counts) {
                let n_target = t.len() as u64;
                let n_coinc = c_t[k];
                let n_aux_used = c_a[k];
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

/// For ascending windows `w_k`, how many distances are `≤ w_k`, for every
/// k in one pass.
pub(crate) fn counts_within(dists: &[f64], sorted_w: &[f64]) -> Vec<u64> {
    let mut bucket = vec![0u64; sorted_w.len() + 1];
    for &d in dists {
        bucket[sorted_w.partition_point(|&w| w < d)] += 1;
    }
    let mut acc = 0;
    bucket[..sorted_w.len()]
        .iter()
        .map(|&b| {
            acc += b;
            acc
        })
        .collect()
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
        assert_eq!(
            counts_within(&[0.0, 0.3, 0.3, 2.0, 9.0], &[0.25, 0.3, 1.0]),
            vec![1, 3, 3]
        );
        let off = nearest_offsets(&[4.9, 21.0], &a);
        assert_eq!(off[0].unwrap().0, 1);
        assert!((off[1].unwrap().1 - 1.0).abs() < 1e-12);
    }
}
