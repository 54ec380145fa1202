//! Agreement between two labellings: the adjusted Rand index
//! (Hubert & Arabie 1985), as scikit-learn's `adjusted_rand_score`.

use std::collections::HashMap;

/// Adjusted Rand index of two labellings of the same items (1 = identical
/// partitions, ≈ 0 for independent ones). Labels are arbitrary integers.
///
/// # Panics
/// If the two slices differ in length.
pub fn adjusted_rand_index(a: &[i64], b: &[i64]) -> f64 {
    assert_eq!(a.len(), b.len(), "labellings differ in length");
    let n = a.len() as f64;
    let mut table: HashMap<(i64, i64), f64> = HashMap::new();
    let mut ra: HashMap<i64, f64> = HashMap::new();
    let mut rb: HashMap<i64, f64> = HashMap::new();
    for (&x, &y) in a.iter().zip(b) {
        *table.entry((x, y)).or_default() += 1.0;
        *ra.entry(x).or_default() += 1.0;
        *rb.entry(y).or_default() += 1.0;
    }
    let c2 = |v: f64| v * (v - 1.0) / 2.0;
    let index: f64 = table.values().map(|&v| c2(v)).sum();
    let sa: f64 = ra.values().map(|&v| c2(v)).sum();
    let sb: f64 = rb.values().map(|&v| c2(v)).sum();
    let expected = sa * sb / c2(n);
    let max = 0.5 * (sa + sb);
    if (max - expected).abs() < 1e-12 {
        // Both partitions trivial (one cluster or all singletons): identical.
        return 1.0;
    }
    (index - expected) / (max - expected)
}
