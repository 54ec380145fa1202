//! Exact (classical) Poisson confidence limits for a small number of counts,
//! as tabulated by Gehrels (1986, ApJ 303, 336, Tables 1 and 3).
//!
//! For `n` observed events and confidence level `CL` (one-sided):
//! - upper limit λ_u solves `P(N ≤ n | λ_u) = 1 − CL`, i.e.
//!   λ_u = ½ χ²_{2(n+1)}(CL) (the chi-square quantile, Gehrels 1986 eq. 5 and
//!   its chi-square form);
//! - lower limit λ_l solves `P(N ≥ n | λ_l) = 1 − CL`, i.e.
//!   λ_l = ½ χ²_{2n}(1 − CL), and λ_l = 0 for n = 0.
//!
//! Both are quantiles of the gamma distribution with shape `n + 1` (resp. `n`)
//! and unit scale, found here by a safeguarded Newton iteration on the
//! regularised incomplete gamma function.

use statrs::function::gamma::{gamma_lr, ln_gamma};

/// Lower and upper one-sided confidence limits on a Poisson mean \[events\].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PoissonLimits {
    /// Lower limit λ_l (0 for no events).
    pub lower: f64,
    /// Upper limit λ_u.
    pub upper: f64,
}

/// Quantile of the unit-scale gamma distribution with shape `a > 0`:
/// the `x ≥ 0` with `P(a, x) = p` (regularised lower incomplete gamma).
///
/// # Panics
/// If `a ≤ 0` or `p` is not in `(0, 1)` (callers validate the confidence level).
pub fn gamma_quantile(a: f64, p: f64) -> f64 {
    assert!(a > 0.0 && p > 0.0 && p < 1.0, "gamma_quantile({a}, {p})");
    let ln_ga = ln_gamma(a);
    // Bracket: P(a, x) increases from 0 to 1.
    let (mut lo, mut hi) = (0.0_f64, a.max(1.0));
    while gamma_lr(a, hi) < p {
        lo = hi;
        hi *= 2.0;
    }
    let mut x = 0.5 * (lo + hi);
    for _ in 0..200 {
        let f = gamma_lr(a, x) - p;
        if f == 0.0 {
            return x;
        }
        if f < 0.0 {
            lo = x;
        } else {
            hi = x;
        }
        // Newton step with the gamma density; fall back to bisection when it
        // leaves the bracket.
        let pdf = ((a - 1.0) * x.ln() - x - ln_ga).exp();
        let mut next = x - f / pdf;
        if !(next > lo && next < hi && next.is_finite()) {
            next = 0.5 * (lo + hi);
        }
        if (next - x).abs() <= 1e-15 * x.abs().max(1e-300) || hi - lo <= 1e-15 * hi {
            return next;
        }
        x = next;
    }
    x
}

/// Exact Poisson limits for `n` observed events at one-sided confidence level
/// `cl` in (0, 1), e.g. 0.8413 (the "1σ" column of Gehrels 1986) or 0.9.
///
/// # Panics
/// If `cl` is not strictly between 0 and 1.
pub fn poisson_limits(n: u64, cl: f64) -> PoissonLimits {
    assert!(cl > 0.0 && cl < 1.0, "confidence level {cl} not in (0, 1)");
    let upper = gamma_quantile(n as f64 + 1.0, cl);
    let lower = if n == 0 {
        0.0
    } else {
        gamma_quantile(n as f64, 1.0 - cl)
    };
    PoissonLimits { lower, upper }
}

/// A cache of limits by count for one confidence level (rates over many bins
/// reuse the same small counts).
#[derive(Debug, Clone)]
pub struct LimitCache {
    cl: f64,
    table: Vec<Option<PoissonLimits>>,
}

impl LimitCache {
    /// An empty cache for confidence level `cl`.
    pub fn new(cl: f64) -> Self {
        LimitCache {
            cl,
            table: Vec::new(),
        }
    }

    /// The one-sided confidence level of the cached limits.
    pub fn cl(&self) -> f64 {
        self.cl
    }

    /// Limits for `n` events (computed once, then cached).
    pub fn get(&mut self, n: u64) -> PoissonLimits {
        let i = n as usize;
        if i >= self.table.len() {
            self.table.resize(i + 1, None);
        }
        *self.table[i].get_or_insert_with(|| poisson_limits(n, self.cl))
    }
}
