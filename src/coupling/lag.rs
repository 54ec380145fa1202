//! Lag histogram and frequency relation for one (target set, aux channel,
//! threshold, window).
//!
//! For every target trigger inside the window of a used aux trigger (the
//! aux trigger's extent widened by `w`; of several, the one with the
//! nearest peak), the lag **`t_aux − t_target`** of peak times \[s\]
//! (negative when the aux trigger comes first; the one convention of the
//! whole tool) goes into a histogram over `[−r, r]`, `r` the larger of `w`
//! and the largest lag, and the ratio `f_aux / f_target` of peak
//! frequencies is collected. A consistent lag indicates a propagation delay; the median
//! frequency ratio is classified as:
//! - `same`: within 10% of 1;
//! - `harmonic`: within 5% of k or 1/k for k = 2, 3, 4;
//! - `low_frequency_driver`: below 0.5 otherwise (aux well below target);
//! - `other`: anything else; `none` when there are no pairs.
//!
//! These tolerances are our own rule of thumb, not from a publication.

use super::coinc::distance_to;
use super::{AuxChannel, TargetSet};
use serde::{Deserialize, Serialize};

/// The lag convention of the whole tool, written beside lag figures.
pub const LAG_DEFINITION: &str = "t_aux - t_target (negative: the aux trigger comes first)";

/// Lag histogram and frequency relation of coincident pairs.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LagSummary {
    /// Family id; `None` = all target triggers.
    pub family_id: Option<i64>,
    /// Aux channel id.
    pub aux_channel_id: i64,
    /// Aux channel name.
    pub aux_channel: String,
    /// Aux triggers with `snr ≥` this are used.
    pub aux_min_snr: f64,
    /// Padding around the aux extents \[s\].
    pub window_s: f64,
    /// Histogram bin edges \[s\] (`counts.len() + 1` values, symmetric).
    pub edges_s: Vec<f64>,
    /// Pairs per bin of `t_aux − t_target`.
    pub counts: Vec<u64>,
    /// Number of pairs.
    pub pairs: u64,
    /// Centre of the fullest bin of `t_aux − t_target` \[s\] (`None`
    /// without pairs).
    pub lag_peak_s: Option<f64>,
    /// Median of `t_aux − t_target` \[s\].
    pub lag_median_s: Option<f64>,
    /// Median of `f_aux / f_target`.
    pub freq_ratio_median: Option<f64>,
    /// `same`, `harmonic`, `low_frequency_driver`, `other` or `none`.
    pub freq_relation: String,
}

/// Median of a slice (sorted copy); `None` when empty.
fn median(v: &[f64]) -> Option<f64> {
    (!v.is_empty()).then(|| crate::condition::median(&mut v.to_vec()))
}

/// Classify a median frequency ratio `f_aux / f_target` (see module docs).
pub fn classify_freq_ratio(r: Option<f64>) -> &'static str {
    let Some(r) = r else { return "none" };
    if (r - 1.0).abs() <= 0.1 {
        return "same";
    }
    for k in 2..=4 {
        let k = k as f64;
        if (r / k - 1.0).abs() <= 0.05 || (r * k - 1.0).abs() <= 0.05 {
            return "harmonic";
        }
    }
    if r < 0.5 {
        "low_frequency_driver"
    } else {
        "other"
    }
}

/// Lag histogram (`n_bins` bins; an odd number keeps 0 in a bin centre)
/// and frequency relation for `family` of `targets` against `aux` at
/// threshold `rho` and padding `w` \[s\].
pub fn lag_summary(
    targets: &TargetSet,
    family: Option<i64>,
    aux: &AuxChannel,
    rho: f64,
    w: f64,
    n_bins: usize,
) -> LagSummary {
    let n_bins = n_bins.max(1);
    let common = targets.analysed.intersection(&aux.analysed);
    // Used aux triggers, sorted by peak, and the largest peak-to-edge span.
    let used: Vec<_> = aux
        .triggers
        .iter()
        .filter(|a| {
            a.snr >= rho && distance_to(&common, a.t_start.min(a.t_peak), a.t_end.max(a.t_peak)) < w
        })
        .collect();
    let span = used
        .iter()
        .map(|a| (a.t_peak - a.t_start).max(a.t_end - a.t_peak).max(0.0))
        .fold(0.0, f64::max);
    let (mut lags, mut ratios) = (Vec::new(), Vec::new());
    for t in targets
        .triggers
        .iter()
        .filter(|t| (family.is_none() || t.family == family) && common.contains(t.t_peak))
    {
        let lo = used.partition_point(|a| a.t_peak < t.t_peak - w - span);
        let best = used[lo..]
            .iter()
            .take_while(|a| a.t_peak <= t.t_peak + w + span)
            .filter(|a| {
                a.t_start.min(a.t_peak) - w <= t.t_peak && t.t_peak <= a.t_end.max(a.t_peak) + w
            })
            .min_by(|a, b| {
                (a.t_peak - t.t_peak)
                    .abs()
                    .total_cmp(&(b.t_peak - t.t_peak).abs())
            });
        if let Some(a) = best {
            lags.push(a.t_peak - t.t_peak);
            if t.f_peak > 0.0 {
                ratios.push(a.f_peak / t.f_peak);
            }
        }
    }
    let range = lags.iter().map(|l| l.abs()).fold(w, f64::max);
    let width = 2.0 * range / n_bins as f64;
    let edges_s: Vec<f64> = (0..=n_bins).map(|i| -range + i as f64 * width).collect();
    let mut counts = vec![0u64; n_bins];
    for &lag in &lags {
        let bin = (((lag + range) / width).floor().max(0.0) as usize).min(n_bins - 1);
        counts[bin] += 1;
    }
    let lag_peak_s = if lags.is_empty() {
        None
    } else {
        let (i, _) = counts
            .iter()
            .enumerate()
            .max_by(|a, b| a.1.cmp(b.1).then(b.0.cmp(&a.0)))
            .expect("at least one bin");
        Some(0.5 * (edges_s[i] + edges_s[i + 1]))
    };
    let freq_ratio_median = median(&ratios);
    LagSummary {
        family_id: family,
        aux_channel_id: aux.id,
        aux_channel: aux.name.clone(),
        aux_min_snr: rho,
        window_s: w,
        edges_s,
        counts,
        pairs: lags.len() as u64,
        lag_peak_s,
        lag_median_s: median(&lags),
        freq_ratio_median,
        freq_relation: classify_freq_ratio(freq_ratio_median).to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn classify_by_hand() {
        assert_eq!(classify_freq_ratio(None), "none");
        assert_eq!(classify_freq_ratio(Some(1.05)), "same");
        assert_eq!(classify_freq_ratio(Some(2.02)), "harmonic");
        assert_eq!(classify_freq_ratio(Some(0.335)), "harmonic");
        assert_eq!(classify_freq_ratio(Some(0.1)), "low_frequency_driver");
        assert_eq!(classify_freq_ratio(Some(1.6)), "other");
    }
}
