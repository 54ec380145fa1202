//! Tail probabilities in log space.
//!
//! `P(N ≥ n)` for Poisson and binomial counts, computed as natural logs so
//! that extreme tails (n = 50, μ = 1: P ≈ 1.7e-65; far beyond where a
//! plain `1 - cdf` or an `sf` built on it underflows or cancels) keep full
//! relative precision. Two convergent series are used, each on the side of
//! the mean where its terms shrink:
//! - above the mean, `P(N ≥ n) = pmf(n) · Σ_k pmf(n+k)/pmf(n)`;
//! - at or below the mean, `P(N ≥ n) = 1 − cdf(n−1)` with
//!   `cdf(m) = pmf(m) · Σ_k pmf(m−k)/pmf(m)`, which is then at most about
//!   one half, so the subtraction loses nothing.

use statrs::function::gamma::ln_gamma;

/// Relative size of a series term below which the sum is taken as final.
const SERIES_TOL: f64 = 1e-17;

/// `ln P(N ≥ n)` for `N ~ Poisson(mu)`.
///
/// Edge cases: `n = 0` gives `0` (P = 1, for any μ ≥ 0); `mu = 0` with
/// `n ≥ 1` gives `-inf` (P = 0).
pub fn poisson_ln_sf(n: u64, mu: f64) -> f64 {
    if n == 0 {
        return 0.0;
    }
    if mu <= 0.0 {
        return f64::NEG_INFINITY;
    }
    let nf = n as f64;
    if nf > mu {
        // Upper tail: pmf(n) Σ_k Π_{j=1..k} μ/(n+j).
        let ln_pmf = -mu + nf * mu.ln() - ln_gamma(nf + 1.0);
        let (mut term, mut sum, mut k) = (1.0_f64, 1.0_f64, 1.0_f64);
        while term > SERIES_TOL * sum {
            term *= mu / (nf + k);
            sum += term;
            k += 1.0;
        }
        ln_pmf + sum.ln()
    } else {
        // Lower side: 1 - cdf(m), m = n-1 < μ; cdf(m) = pmf(m) Σ_k Π m..(m-k+1)/μ^k.
        let m = nf - 1.0;
        let ln_pmf = -mu + m * mu.ln() - ln_gamma(m + 1.0);
        let (mut term, mut sum, mut j) = (1.0_f64, 1.0_f64, 0.0_f64);
        while j < m && term > SERIES_TOL * sum {
            term *= (m - j) / mu;
            sum += term;
            j += 1.0;
        }
        let cdf = (ln_pmf + sum.ln()).exp();
        (-cdf.min(1.0)).ln_1p()
    }
}

/// Significance `−log10 P(N ≥ n | Poisson μ)` (≥ 0).
///
/// `n = 0` gives `0` (nothing observed is never significant); `mu = 0` with
/// `n ≥ 1` gives `+inf`, which cannot happen for a coincidence count with a
/// positive window (a coincidence needs an aux trigger, which makes μ > 0).
pub fn poisson_significance(n: u64, mu: f64) -> f64 {
    let s = -poisson_ln_sf(n, mu) / std::f64::consts::LN_10;
    if s == 0.0 {
        0.0 // avoid -0.0
    } else {
        s
    }
}

/// `ln P(X ≥ k)` for `X ~ Binomial(n_trials, p)`.
///
/// Edge cases: `k = 0` gives `0`; `k > n_trials` gives `-inf`; `p = 0`
/// with `k ≥ 1` gives `-inf`; `p = 1` with `k ≤ n_trials` gives `0`.
pub fn binomial_ln_sf(k: u64, n_trials: u64, p: f64) -> f64 {
    if k == 0 {
        return 0.0;
    }
    if k > n_trials || p <= 0.0 {
        return f64::NEG_INFINITY;
    }
    if p >= 1.0 {
        return 0.0;
    }
    let (n, q) = (n_trials as f64, 1.0 - p);
    let ln_pmf = |x: f64| {
        ln_gamma(n + 1.0) - ln_gamma(x + 1.0) - ln_gamma(n - x + 1.0)
            + x * p.ln()
            + (n - x) * (-p).ln_1p()
    };
    let kf = k as f64;
    if kf > n * p {
        // Upper tail: pmf(k+1)/pmf(k) = (n-k)/(k+1) · p/q.
        let (mut term, mut sum, mut j) = (1.0_f64, 1.0_f64, 0.0_f64);
        while kf + j < n && term > SERIES_TOL * sum {
            term *= (n - kf - j) / (kf + j + 1.0) * (p / q);
            sum += term;
            j += 1.0;
        }
        ln_pmf(kf) + sum.ln()
    } else {
        // 1 - cdf(m), m = k-1; pmf(m-1)/pmf(m) = m/(n-m+1) · q/p.
        let m = kf - 1.0;
        let (mut term, mut sum, mut j) = (1.0_f64, 1.0_f64, 0.0_f64);
        while j < m && term > SERIES_TOL * sum {
            term *= (m - j) / (n - m + j + 1.0) * (q / p);
            sum += term;
            j += 1.0;
        }
        let cdf = (ln_pmf(m) + sum.ln()).exp();
        (-cdf.min(1.0)).ln_1p()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Hand-worked: P(N ≥ 1 | μ) = 1 - e^{-μ}; P(N ≥ 2 | 1) = 1 - 2/e.
    #[test]
    fn small_cases_by_hand() {
        assert!((poisson_ln_sf(1, 0.5).exp() - (1.0 - (-0.5f64).exp())).abs() < 1e-15);
        assert!((poisson_ln_sf(2, 1.0).exp() - (1.0 - 2.0 / std::f64::consts::E)).abs() < 1e-15);
        assert_eq!(poisson_significance(0, 0.0), 0.0);
        assert_eq!(poisson_significance(0, 3.0), 0.0);
        assert!(poisson_significance(1, 0.0).is_infinite());
        // Binomial(3, 1/2): P(X ≥ 2) = 4/8.
        assert!((binomial_ln_sf(2, 3, 0.5).exp() - 0.5).abs() < 1e-12);
        assert_eq!(binomial_ln_sf(4, 3, 0.5), f64::NEG_INFINITY);
    }
}
