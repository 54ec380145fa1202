//! Conditioning: power spectral density by Welch's method with median
//! averaging, and frequency-domain whitening with a high-pass.
//!
//! # Conventions
//! - FFTs are unnormalised (realfft/rustfft do no scaling): `X_k = Σ_n x_n e^{-2πi kn/N}`.
//! - PSDs are one-sided densities \[unit²/Hz\]: white noise of variance σ² sampled at
//!   `fs` has PSD `2σ²/fs`.
//! - Welch: periodic Hann window, mean removed from each segment, median of the
//!   segment periodograms divided by the median bias of Allen et al. (2012,
//!   Phys. Rev. D 85, 122006); this is the same estimate as
//!   `scipy.signal.welch(..., average='median')`.
//! - Whitening: each bin of the block spectrum is divided by its expected
//!   magnitude, so whitened Gaussian noise has `E|X̃_k|² = 1` in every bin.
//!   Data are processed in f64 here; only whitened (order-one) values are
//!   handed to single-precision code, so strain of order 1e-21 never has its
//!   squares underflow.

use anyhow::{bail, Result};
use realfft::num_complex::Complex;
use realfft::RealFftPlanner;

/// Median bias factor for `n` averages of exponentially distributed
/// periodogram values: `1 + Σ_{i=1}^{(n-1)/2} (1/(2i+1) − 1/(2i))`
/// (Allen et al. 2012; scipy.signal's `_median_bias`).
pub fn median_bias(n: usize) -> f64 {
    let mut b = 1.0;
    for i in 1..=(n.saturating_sub(1) / 2) {
        let ii = 2.0 * i as f64;
        b += 1.0 / (ii + 1.0) - 1.0 / ii;
    }
    b
}

/// Periodic Hann window of length `n` (`scipy.signal.get_window('hann', n)`).
pub fn hann_periodic(n: usize) -> Vec<f64> {
    (0..n)
        .map(|i| 0.5 - 0.5 * (2.0 * std::f64::consts::PI * i as f64 / n as f64).cos())
        .collect()
}

/// A one-sided PSD on a regular frequency grid `k · df`, k = 0..len.
#[derive(Debug, Clone)]
pub struct Psd {
    /// Bin spacing \[Hz\].
    pub df_hz: f64,
    /// One-sided density per bin \[unit²/Hz\].
    pub density: Vec<f64>,
}

impl Psd {
    /// Frequencies of the bins \[Hz\].
    pub fn freqs_hz(&self) -> Vec<f64> {
        (0..self.density.len())
            .map(|k| k as f64 * self.df_hz)
            .collect()
    }

    /// Linear interpolation at `f_hz` (clamped to the grid).
    pub fn at(&self, f_hz: f64) -> f64 {
        let x = (f_hz / self.df_hz).max(0.0);
        let i = x.floor() as usize;
        if i + 1 >= self.density.len() {
            return *self.density.last().unwrap_or(&0.0);
        }
        let w = x - i as f64;
        self.density[i] * (1.0 - w) + self.density[i + 1] * w
    }
}

/// Welch PSD with median averaging: segments of `nperseg` samples stepping by
/// `nperseg - noverlap`, periodic Hann window, constant detrend, density
/// scaling, one-sided, median over segments divided by [`median_bias`].
///
/// # Errors
/// Fewer samples than one segment, or `noverlap >= nperseg`.
pub fn welch_median(x: &[f64], fs_hz: f64, nperseg: usize, noverlap: usize) -> Result<Psd> {
    Welch::new(nperseg, noverlap)?.estimate(x, fs_hz)
}

/// A planned Welch estimator (window and FFT plan made once, shareable
/// between threads).
pub struct Welch {
    nperseg: usize,
    noverlap: usize,
    win: Vec<f64>,
    win_ss: f64,
    fft: std::sync::Arc<dyn realfft::RealToComplex<f64>>,
}

impl Welch {
    /// Plan for segments of `nperseg` samples overlapping by `noverlap`.
    ///
    /// # Errors
    /// `nperseg < 2` or `noverlap >= nperseg`.
    pub fn new(nperseg: usize, noverlap: usize) -> Result<Welch> {
        if nperseg < 2 || noverlap >= nperseg {
            bail!("Welch: need nperseg >= 2 and noverlap < nperseg (got {nperseg}, {noverlap})");
        }
        let win = hann_periodic(nperseg);
        let win_ss = win.iter().map(|w| w * w).sum();
        let fft = RealFftPlanner::<f64>::new().plan_fft_forward(nperseg);
        Ok(Welch {
            nperseg,
            noverlap,
            win,
            win_ss,
            fft,
        })
    }

    /// The median-averaged PSD of `x` sampled at `fs_hz`.
    ///
    /// # Errors
    /// Fewer samples than one segment.
    pub fn estimate(&self, x: &[f64], fs_hz: f64) -> Result<Psd> {
        let nperseg = self.nperseg;
        if x.len() < nperseg {
            bail!(
                "Welch: {} samples is shorter than one segment of {nperseg}",
                x.len()
            );
        }
        let step = nperseg - self.noverlap;
        let nseg = (x.len() - nperseg) / step + 1;
        let nfreq = nperseg / 2 + 1;
        let mut input = self.fft.make_input_vec();
        let mut spec = self.fft.make_output_vec();
        let mut scratch = self.fft.make_scratch_vec();
        // per_bin[k * nseg + s]: periodogram of segment s at bin k.
        let mut per_bin = vec![0.0f64; nfreq * nseg];
        for s in 0..nseg {
            let seg = &x[s * step..s * step + nperseg];
            let mean = seg.iter().sum::<f64>() / nperseg as f64;
            for ((o, &v), &w) in input.iter_mut().zip(seg).zip(&self.win) {
                *o = (v - mean) * w;
            }
            self.fft
                .process_with_scratch(&mut input, &mut spec, &mut scratch)
                .expect("buffer sizes come from the plan");
            for (k, c) in spec.iter().enumerate() {
                per_bin[k * nseg + s] = c.norm_sqr();
            }
        }
        let scale = 1.0 / (fs_hz * self.win_ss);
        let bias = median_bias(nseg);
        let density = per_bin
            .chunks_mut(nseg)
            .enumerate()
            .map(|(k, vals)| {
                let one_sided = if k == 0 || (nperseg.is_multiple_of(2) && k == nfreq - 1) {
                    1.0
                } else {
                    2.0
                };
                median(vals) * scale * one_sided / bias
            })
            .collect();
        Ok(Psd {
            df_hz: fs_hz / nperseg as f64,
            density,
        })
    }
}

/// Median as numpy computes it (mean of the two middle values for even length).
/// Reorders `v`.
pub fn median(v: &mut [f64]) -> f64 {
    let n = v.len();
    assert!(n > 0, "median of an empty slice");
    let (_, hi, _) = v.select_nth_unstable_by(n / 2, f64::total_cmp);
    let hi = *hi;
    if n % 2 == 1 {
        hi
    } else {
        let lo = v[..n / 2].iter().copied().fold(f64::NEG_INFINITY, f64::max);
        0.5 * (lo + hi)
    }
}

/// Smooth high-pass gain at `f_hz`: 0 below `f_stop`, 1 above `f_pass`,
/// raised-cosine in between.
pub fn highpass_gain(f_hz: f64, f_stop: f64, f_pass: f64) -> f64 {
    if f_hz <= f_stop {
        0.0
    } else if f_hz >= f_pass {
        1.0
    } else {
        let x = (f_hz - f_stop) / (f_pass - f_stop);
        0.5 - 0.5 * (std::f64::consts::PI * x).cos()
    }
}

/// Tukey (tapered cosine) window of `n` samples with `taper` samples of
/// raised-cosine at each end.
pub fn tukey(n: usize, taper: usize) -> Vec<f64> {
    let taper = taper.min(n / 2);
    (0..n)
        .map(|i| {
            let j = i.min(n - 1 - i);
            if j >= taper {
                1.0
            } else {
                0.5 - 0.5 * (std::f64::consts::PI * (j as f64 + 0.5) / taper as f64).cos()
            }
        })
        .collect()
}

/// Whiten a block spectrum in place.
///
/// `spec` is the unnormalised real FFT (N/2+1 bins) of N samples at `fs_hz`
/// that were multiplied by a window whose mean square is `win_ms`. Each bin is
/// divided by `sqrt(N fs S(f) / 2 · win_ms)` and multiplied by the high-pass
/// gain `hp(f)`, so stationary Gaussian noise with PSD `S` becomes unit
/// variance per bin. Bins where the PSD is not positive and finite, or the
/// value is not finite, are set to zero. Returns the whitened bins as f32
/// (magnitudes clamped to 1e12 so absurd inputs cannot overflow).
pub fn whiten(
    spec: &[Complex<f64>],
    n: usize,
    fs_hz: f64,
    win_ms: f64,
    psd: &Psd,
    hp: impl Fn(f64) -> f64,
    out: &mut [Complex<f32>],
) {
    let df = fs_hz / n as f64;
    let norm = n as f64 * fs_hz * 0.5 * win_ms;
    for (k, (o, x)) in out.iter_mut().zip(spec).enumerate() {
        let f = k as f64 * df;
        let s = psd.at(f);
        let g = hp(f);
        *o = if s > 0.0 && s.is_finite() && g > 0.0 {
            let w = x * (g / (norm * s).sqrt());
            if w.re.is_finite() && w.im.is_finite() {
                const CAP: f64 = 1e12;
                Complex::new(w.re.clamp(-CAP, CAP) as f32, w.im.clamp(-CAP, CAP) as f32)
            } else {
                Complex::new(0.0, 0.0)
            }
        } else {
            Complex::new(0.0, 0.0)
        };
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn median_bias_matches_scipy_small_n() {
        // scipy.signal._spectral_py._median_bias(n) for n = 1, 3, 5 (SciPy 1.17.1):
        // 1, 1 + 1/3 - 1/2, 1 + 1/3 - 1/2 + 1/5 - 1/4.
        assert_eq!(median_bias(1), 1.0);
        assert!((median_bias(3) - (1.0 + 1.0 / 3.0 - 0.5)).abs() < 1e-15);
        assert!((median_bias(5) - (1.0 + 1.0 / 3.0 - 0.5 + 0.2 - 0.25)).abs() < 1e-15);
        // Large n tends to ln 2 (median of an exponential / its mean).
        assert!((median_bias(100_001) - std::f64::consts::LN_2).abs() < 1e-5);
    }

    #[test]
    fn median_like_numpy() {
        assert_eq!(median(&mut [3.0, 1.0, 2.0]), 2.0);
        assert_eq!(median(&mut [4.0, 1.0, 3.0, 2.0]), 2.5);
    }

    #[test]
    fn tukey_is_flat_in_the_middle() {
        let w = tukey(100, 10);
        assert!(w[10..90].iter().all(|&v| v == 1.0));
        assert!(w[0] > 0.0 && w[0] < 0.05 && (w[0] - w[99]).abs() < 1e-15);
    }
}
