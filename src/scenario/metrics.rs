//! Agreement between a clustering and the true classes: homogeneity,
//! completeness and V-measure (Rosenberg & Hirschberg 2007, "V-Measure: A
//! conditional entropy-based external cluster evaluation measure", EMNLP),
//! beside the adjusted Rand index of [`crate::families::metrics`] (Hubert &
//! Arabie 1985), computed as scikit-learn's
//! `homogeneity_completeness_v_measure(labels_true, labels_pred, beta=1.0)`
//! and checked against it (tests/data/scenario/).
//!
//! With C the true classes and K the clusters, from the contingency table:
//! - homogeneity `h = 1 − H(C|K) / H(C)` (each cluster holds one class; 1
//!   when H(C) = 0);
//! - completeness `c = 1 − H(K|C) / H(K)` (each class in one cluster; 1
//!   when H(K) = 0);
//! - V-measure `v = (1 + β) h c / (β h + c)` (0 when `h + c = 0`).
//!
//! Entropies in nats (the ratios do not depend on the base).

pub use crate::families::metrics::adjusted_rand_index;
use std::collections::HashMap;

/// Homogeneity, completeness and V-measure.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Hcv {
    /// Homogeneity.
    pub homogeneity: f64,
    /// Completeness.
    pub completeness: f64,
    /// V-measure (β = 1: the harmonic mean).
    pub v_measure: f64,
}

/// Entropy \[nats\] of the label counts.
fn entropy(counts: impl Iterator<Item = f64>, n: f64) -> f64 {
    counts
        .filter(|&c| c > 0.0)
        .map(|c| -(c / n) * (c / n).ln())
        .sum()
}

/// Homogeneity, completeness and V-measure of `pred` against `truth` with
/// weight `beta` (1 = harmonic mean). Labels are arbitrary integers.
/// Empty labellings give 1, 1, 1 (as scikit-learn).
///
/// # Panics
/// If the two slices differ in length.
pub fn homogeneity_completeness_v_measure(truth: &[i64], pred: &[i64], beta: f64) -> Hcv {
    assert_eq!(truth.len(), pred.len(), "labellings differ in length");
    if truth.is_empty() {
        return Hcv {
            homogeneity: 1.0,
            completeness: 1.0,
            v_measure: 1.0,
        };
    }
    let n = truth.len() as f64;
    let mut joint: HashMap<(i64, i64), f64> = HashMap::new();
    let mut nc: HashMap<i64, f64> = HashMap::new();
    let mut nk: HashMap<i64, f64> = HashMap::new();
    for (&c, &k) in truth.iter().zip(pred) {
        *joint.entry((c, k)).or_default() += 1.0;
        *nc.entry(c).or_default() += 1.0;
        *nk.entry(k).or_default() += 1.0;
    }
    let h_c = entropy(nc.values().copied(), n);
    let h_k = entropy(nk.values().copied(), n);
    // H(C|K) = −Σ n_ck/n ln(n_ck / n_k); H(K|C) likewise with n_c.
    let h_c_given_k: f64 = joint
        .iter()
        .map(|(&(_, k), &v)| -(v / n) * (v / nk[&k]).ln())
        .sum();
    let h_k_given_c: f64 = joint
        .iter()
        .map(|(&(c, _), &v)| -(v / n) * (v / nc[&c]).ln())
        .sum();
    let homogeneity = if h_c == 0.0 {
        1.0
    } else {
        1.0 - h_c_given_k / h_c
    };
    let completeness = if h_k == 0.0 {
        1.0
    } else {
        1.0 - h_k_given_c / h_k
    };
    let v_measure = if homogeneity + completeness == 0.0 {
        0.0
    } else {
        (1.0 + beta) * homogeneity * completeness / (beta * homogeneity + completeness)
    };
    Hcv {
        homogeneity,
        completeness,
        v_measure,
    }
}

/// Purity: the fraction of items whose cluster's majority class is their
/// own class (1 when every cluster is pure). 1 for an empty labelling.
///
/// # Panics
/// If the two slices differ in length.
pub fn purity(truth: &[i64], pred: &[i64]) -> f64 {
    assert_eq!(truth.len(), pred.len(), "labellings differ in length");
    if truth.is_empty() {
        return 1.0;
    }
    let mut joint: HashMap<(i64, i64), usize> = HashMap::new();
    for (&c, &k) in truth.iter().zip(pred) {
        *joint.entry((k, c)).or_default() += 1;
    }
    let mut best: HashMap<i64, usize> = HashMap::new();
    for (&(k, _), &v) in &joint {
        let b = best.entry(k).or_default();
        *b = (*b).max(v);
    }
    best.values().sum::<usize>() as f64 / truth.len() as f64
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn textbook_cases() {
        // Identical partitions (up to renaming): all 1.
        let a = [0, 0, 1, 1, 2, 2];
        let b = [5, 5, 3, 3, 9, 9];
        let r = homogeneity_completeness_v_measure(&a, &b, 1.0);
        assert!((r.homogeneity - 1.0).abs() < 1e-12 && (r.completeness - 1.0).abs() < 1e-12);
        // One cluster for everything: complete, not homogeneous.
        let r = homogeneity_completeness_v_measure(&a, &[0; 6], 1.0);
        assert_eq!((r.homogeneity, r.completeness), (0.0, 1.0));
        assert_eq!(r.v_measure, 0.0);
        // Singletons: homogeneous, completeness ln3 / ln6.
        let r = homogeneity_completeness_v_measure(&a, &[0, 1, 2, 3, 4, 5], 1.0);
        assert!((r.homogeneity - 1.0).abs() < 1e-12);
        assert!((r.completeness - 3f64.ln() / 6f64.ln()).abs() < 1e-12);
        assert!((purity(&a, &[0, 0, 0, 1, 1, 1]) - 4.0 / 6.0).abs() < 1e-12);
    }
}
