//! Lag histogram and frequency relation for one (target set, aux channel,
//! threshold, window).
//!
//! For every target trigger coincident with a used aux trigger (nearest aux
//! trigger within ±w), the lag `t_target − t_aux` \[s\] goes into a histogram
//! over `[−w, w]`, and the ratio `f_aux / f_target` of peak frequencies is
//! collected. A consistent lag indicates a propagation delay; the median
//! frequency ratio is classified as:
//! - `same`: within 10% of 1;
//! - `harmonic`: within 5% of k or 1/k for k = 2, 3, 4;
//! - `low_frequency_driver`: below 0.5 otherwise (aux well below target);
//! - `other`: anything else; `none` when there are no pairs.
//!
//! These tolerances are our own rule of thumb, not from a publication.

use super::coinc::nearest_offsets;
use super::{AuxChannel, TargetSet};
use serde::{Deserialize, Serialize};

/// Lag histogram and frequency relation of coincident pairs.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LagSummary {
    /// Family id; `None` = all target triggers.
    pub family_id: Option<i64>,
    /// Aux channel id.
    pub aux_channel_id: i64,
    /// Aux channel name.
    pub channel: String,
    /// Aux SNR threshold.
    pub snr_threshold: f64,
    /// Window half-width \[s\].
    pub window_s: f64,
    /// Histogram bin edges over `[−w, w]` \[s\] (`counts.len() + 1` values).
    pub edges_s: Vec<f64>,
    /// Pairs per bin of `t_target − t_aux`.
    pub counts: Vec<u64>,
    /// Number of coincident pairs.
    pub n_pairs: u64,
    /// Centre of the fullest bin \[s\] (`None` without pairs).
    pub peak_lag_s: Option<f64>,
    /// Median of `t_target − t_aux` \[s\].
    pub median_lag_s: Option<f64>,
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

/// Lag histogram (`n_bins` bins over `[−w, w]`; an odd number keeps 0 in a
/// bin centre) and frequency relation for `family` of `targets` against
/// `aux` at threshold `rho` and window `w` \[s\].
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
    let members: Vec<(f64, f64)> = targets
        .triggers
        .iter()
        .filter(|t| (family.is_none() || t.family == family) && common.contains(t.t_peak))
        .map(|t| (t.t_peak, t.f_peak))
        .collect();
    let t_times: Vec<f64> = members.iter().map(|m| m.0).collect();
    let used: Vec<(f64, f64)> = aux
        .triggers
        .iter()
        .filter(|a| a.snr >= rho && common.contains(a.t_peak))
        .map(|a| (a.t_peak, a.f_peak))
        .collect();
    let a_times: Vec<f64> = used.iter().map(|u| u.0).collect();
    let width = 2.0 * w / n_bins as f64;
    let edges_s: Vec<f64> = (0..=n_bins).map(|i| -w + i as f64 * width).collect();
    let mut counts = vec![0u64; n_bins];
    let (mut lags, mut ratios) = (Vec::new(), Vec::new());
    for (m, off) in members.iter().zip(nearest_offsets(&t_times, &a_times)) {
        let Some((j, lag)) = off else { continue };
        if lag.abs() > w {
            continue;
        }
        let bin = (((lag + w) / width).floor() as usize).min(n_bins - 1);
        counts[bin] += 1;
        lags.push(lag);
        if m.1 > 0.0 {
            ratios.push(used[j].1 / m.1);
        }
    }
    let peak_lag_s = if lags.is_empty() {
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
        channel: aux.name.clone(),
        snr_threshold: rho,
        window_s: w,
        edges_s,
        counts,
        n_pairs: lags.len() as u64,
        peak_lag_s,
        median_lag_s: median(&lags),
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
