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

/// `ln(e^a + e^b)` without overflow; `-inf` is the neutral element.
pub fn ln_add(a: f64, b: f64) -> f64 {
    let (hi, lo) = if a >= b { (a, b) } else { (b, a) };
    if lo == f64::NEG_INFINITY {
        return hi;
    }
    hi + (lo - hi).exp().ln_1p()
}

/// Šidák's correction: the probability that at least one of `m` independent
/// tests reaches a level whose single-test probability is `p`,
/// `1 − (1 − p)^m` (Šidák 1967, J. Am. Stat. Assoc. 62, 626), computed as
/// `−expm1(m · ln1p(−p))` so that tiny `p` keep their precision. `m` may be
/// fractional (an effective number of tests); `m ≤ 1` returns `p`.
pub fn sidak(p: f64, m: f64) -> f64 {
    if m <= 1.0 || p <= 0.0 {
        return p.max(0.0);
    }
    if p >= 1.0 {
        return 1.0;
    }
    -(m * (-p).ln_1p()).exp_m1()
}

/// A count model whose upper tails [`TailTable`] can tabulate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum CountModel {
    /// Poisson with this mean.
    Poisson(f64),
    /// Binomial with this many trials and this success probability.
    Binomial(u64, f64),
}

impl CountModel {
    /// `ln P(N ≥ n)` under the model.
    pub fn ln_sf(&self, n: u64) -> f64 {
        match *self {
            CountModel::Poisson(mu) => poisson_ln_sf(n, mu),
            CountModel::Binomial(trials, p) => binomial_ln_sf(n, trials, p),
        }
    }

    /// `ln P(N = n)`, or `-inf` where the pmf is zero.
    fn ln_pmf(&self, n: u64) -> f64 {
        let x = n as f64;
        match *self {
            CountModel::Poisson(mu) => {
                if mu <= 0.0 {
                    return if n == 0 { 0.0 } else { f64::NEG_INFINITY };
                }
                -mu + x * mu.ln() - ln_gamma(x + 1.0)
            }
            CountModel::Binomial(trials, p) => {
                if n > trials {
                    return f64::NEG_INFINITY;
                }
                if p <= 0.0 {
                    return if n == 0 { 0.0 } else { f64::NEG_INFINITY };
                }
                if p >= 1.0 {
                    return if n == trials { 0.0 } else { f64::NEG_INFINITY };
                }
                let t = trials as f64;
                ln_gamma(t + 1.0) - ln_gamma(x + 1.0) - ln_gamma(t - x + 1.0)
                    + x * p.ln()
                    + (t - x) * (-p).ln_1p()
            }
        }
    }
}

/// `ln P(N ≥ n)` for every `n` in `lo..=hi`, from one exact tail at `hi`
/// and the pmf recurrence downwards (`sf(n) = sf(n+1) + pmf(n)`, added in
/// log space): the time-slide background needs the tail at many nearby
/// counts, and one series per count would cost far more.
#[derive(Debug, Clone)]
pub struct TailTable {
    lo: u64,
    sf: Vec<f64>,
}

impl TailTable {
    /// Tabulate `model` over `lo..=hi` (`lo ≤ hi`).
    pub fn new(model: CountModel, lo: u64, hi: u64) -> Self {
        let len = (hi - lo + 1) as usize;
        let mut ln_sf = vec![0.0; len];
        let mut sf = model.ln_sf(hi);
        ln_sf[len - 1] = sf;
        for i in (0..len - 1).rev() {
            let n = lo + i as u64;
            sf = if n == 0 {
                0.0
            } else {
                ln_add(sf, model.ln_pmf(n)).min(0.0)
            };
            ln_sf[i] = sf;
        }
        TailTable {
            lo,
            sf: ln_sf.into_iter().map(f64::exp).collect(),
        }
    }

    /// `P(N ≥ n)` for `n` in the tabulated range (clamped to it).
    pub fn p(&self, n: u64) -> f64 {
        let i = n.saturating_sub(self.lo).min(self.sf.len() as u64 - 1) as usize;
        self.sf[i]
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

    // The recurrence table agrees with the direct tails it replaces.
    #[test]
    fn tail_table_matches_direct_tails() {
        for model in [
            CountModel::Poisson(37.5),
            CountModel::Poisson(0.2),
            CountModel::Binomial(400, 0.07),
            CountModel::Binomial(30, 0.6),
        ] {
            let t = TailTable::new(model, 0, 60);
            for n in 0..=60u64 {
                let (a, b) = (t.p(n), model.ln_sf(n).exp());
                assert!(
                    (a - b).abs() <= 1e-12 * b.max(1e-300) + 1e-300,
                    "{model:?} n={n}: {a} vs {b}"
                );
            }
        }
    }

    // Šidák by hand: 1 − (1 − 0.01)^3 = 0.029701.
    #[test]
    fn sidak_by_hand() {
        assert!((sidak(0.01, 3.0) - 0.029701).abs() < 1e-15);
        assert!((sidak(1e-20, 300.0) - 3e-18).abs() < 1e-30);
        assert_eq!(sidak(0.2, 1.0), 0.2);
        assert_eq!(sidak(1.0, 5.0), 1.0);
    }
}
