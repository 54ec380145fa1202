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

    /// Buffers for [`Welch::estimate_band`], sized for this plan.
    pub fn buffers(&self) -> WelchBuffers {
        WelchBuffers {
            input: self.fft.make_input_vec(),
            spec: self.fft.make_output_vec(),
            scratch: self.fft.make_scratch_vec(),
            per_seg: Vec::new(),
            column: Vec::new(),
            density: Vec::new(),
            rows_at: None,
        }
    }

    /// The median-averaged PSD of `x` sampled at `fs_hz`.
    ///
    /// # Errors
    /// Fewer samples than one segment.
    pub fn estimate(&self, x: &[f64], fs_hz: f64) -> Result<Psd> {
        let mut b = self.buffers();
        let df_hz = self.estimate_band(x, fs_hz, f64::INFINITY, &mut b)?;
        Ok(Psd {
            df_hz,
            density: b.density,
        })
    }

    /// As [`Welch::estimate`], into `b.density` (bin spacing returned), with
    /// no allocation once the buffers have grown to size; only bins up to
    /// `f_top_hz` (plus one, for interpolation) are estimated and the density
    /// above is 0 (`f64::INFINITY`: every bin). A scan that never looks above
    /// `f_top_hz` skips the rest of the medians.
    ///
    /// # Errors
    /// Fewer samples than one segment.
    pub fn estimate_band(
        &self,
        x: &[f64],
        fs_hz: f64,
        f_top_hz: f64,
        b: &mut WelchBuffers,
    ) -> Result<f64> {
        self.estimate_band_at(x, None, fs_hz, f_top_hz, b)
    }

    /// As [`Welch::estimate_band`], for `x` starting at sample `origin` of
    /// a series: the segment periodograms of the previous estimate made
    /// with these buffers (at its own origin) that lie wholly in `x` on the
    /// same segment grid are kept rather than recomputed. Overlapping
    /// blocks of one series (energy maps step by 28 s through 48-s blocks)
    /// share 40% of their segments; the result is the same, bit for bit.
    /// The caller must use the buffers with one series only (`None`: no
    /// reuse, as [`Welch::estimate_band`]).
    ///
    /// # Errors
    /// Fewer samples than one segment.
    pub fn estimate_band_at(
        &self,
        x: &[f64],
        origin: Option<usize>,
        fs_hz: f64,
        f_top_hz: f64,
        b: &mut WelchBuffers,
    ) -> Result<f64> {
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
        let df = fs_hz / nperseg as f64;
        // Bins 0..width are estimated.
        let width = if f_top_hz.is_finite() {
            ((f_top_hz / df).ceil() as usize + 2).min(nfreq)
        } else {
            nfreq
        };
        // per_seg[s * width + k]: periodogram of segment s at bin k, stored
        // as IEEE bits: values are ≥ 0, so the bits order like the values
        // (and like f64::total_cmp), and integer selection is cheaper.
        // Rows of the previous estimate on this grid: segment s + d of the
        // previous block is segment s of this one.
        let mut kept = 0;
        if let (Some(o), Some((o_prev, nseg_prev, width_prev))) = (origin, b.rows_at) {
            if width_prev == width && o >= o_prev && (o - o_prev) % step == 0 {
                let d = (o - o_prev) / step;
                if d < nseg_prev {
                    kept = (nseg_prev - d).min(nseg);
                    b.per_seg.copy_within(d * width..(d + kept) * width, 0);
                }
            }
        }
        b.rows_at = None;
        b.per_seg.resize(width * nseg, 0);
        for (s, row) in b.per_seg.chunks_exact_mut(width).enumerate().skip(kept) {
            let seg = &x[s * step..s * step + nperseg];
            let mean = sum(seg) / nperseg as f64;
            for ((o, &v), &w) in b.input.iter_mut().zip(seg).zip(&self.win) {
                *o = (v - mean) * w;
            }
            self.fft
                .process_with_scratch(&mut b.input, &mut b.spec, &mut b.scratch)
                .expect("buffer sizes come from the plan");
            for (o, c) in row.iter_mut().zip(&b.spec) {
                *o = c.norm_sqr().to_bits();
            }
        }
        let scale = 1.0 / (fs_hz * self.win_ss);
        let bias = median_bias(nseg);
        b.density.clear();
        // Columns are gathered eight bins at a time: one cache line of each
        // segment's row serves eight medians.
        const GROUP: usize = 8;
        b.column.resize(GROUP * nseg, 0);
        for k0 in (0..width).step_by(GROUP) {
            let g = GROUP.min(width - k0);
            let per_seg = &b.per_seg[..];
            for (j, col) in b.column.chunks_exact_mut(nseg).take(g).enumerate() {
                for (o, row) in col.iter_mut().zip(per_seg.chunks_exact(width)) {
                    *o = row[k0 + j];
                }
            }
            for (j, col) in b.column.chunks_exact_mut(nseg).take(g).enumerate() {
                let k = k0 + j;
                let one_sided = if k == 0 || (nperseg.is_multiple_of(2) && k == nfreq - 1) {
                    1.0
                } else {
                    2.0
                };
                b.density
                    .push(median_of_bits(col) * scale * one_sided / bias);
            }
        }
        b.density.resize(nfreq, 0.0);
        b.rows_at = origin.map(|o| (o, nseg, width));
        Ok(df)
    }
}

/// Reusable buffers of a [`Welch`] estimate (one per worker).
pub struct WelchBuffers {
    input: Vec<f64>,
    spec: Vec<Complex<f64>>,
    scratch: Vec<Complex<f64>>,
    per_seg: Vec<u64>,
    column: Vec<u64>,
    /// The last estimate: one-sided density per bin \[unit²/Hz\].
    pub density: Vec<f64>,
    /// Where the rows of `per_seg` come from, when the caller said
    /// ([`Welch::estimate_band_at`]): origin of the block, segments, bins.
    rows_at: Option<(usize, usize, usize)>,
}

impl WelchBuffers {
    /// Origin, segments and bins of the kept periodograms (see
    /// [`Welch::estimate_band_at`]).
    pub(crate) fn rows_at(&self) -> Option<(usize, usize, usize)> {
        self.rows_at
    }
}

/// Sum of `x` with eight running partial sums (vectorises; the rounding
/// differs from a left-to-right sum only in the last bits).
pub fn sum(x: &[f64]) -> f64 {
    let mut acc = [0.0f64; 8];
    let chunks = x.chunks_exact(8);
    let tail: f64 = chunks.remainder().iter().sum();
    for c in chunks {
        for (a, v) in acc.iter_mut().zip(c) {
            *a += v;
        }
    }
    acc.iter().sum::<f64>() + tail
}

/// Median (numpy's: mean of the two middle values for even length) of
/// non-negative f64 values given by their IEEE bits. Reorders `v`.
fn median_of_bits(v: &mut [u64]) -> f64 {
    let n = v.len();
    assert!(n > 0, "median of an empty slice");
    let (lo_part, hi, _) = v.select_nth_unstable(n / 2);
    let hi = f64::from_bits(*hi);
    if n % 2 == 1 {
        hi
    } else {
        let lo = f64::from_bits(*lo_part.iter().max().expect("n ≥ 2"));
        0.5 * (lo + hi)
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

/// Whiten a block spectrum.
///
/// `spec` is the unnormalised real FFT (N/2+1 bins) of N samples at `fs_hz`
/// that were multiplied by a window whose mean square is `win_ms`; `psd` is
/// the one-sided density `S` on bins `k · psd_df_hz`. Each bin is
/// divided by `sqrt(N fs S(f) / 2 · win_ms)` and multiplied by the high-pass
/// gain `hp_gain[k]` (one per bin, see [`highpass_gain`]), so stationary
/// Gaussian noise with PSD `S` becomes unit variance per bin. Between the
/// bins of `psd` the factor `1/sqrt(S)` is interpolated linearly (computed
/// once per PSD bin, not per block bin). PSD bins that are not positive and
/// finite give factor 0, and so do values that are not finite. Writes the
/// whitened bins as f32 to `out` (magnitudes clamped to 1e12 so absurd
/// inputs cannot overflow); `inv_amp` is scratch.
#[allow(clippy::too_many_arguments)]
pub fn whiten(
    spec: &[Complex<f64>],
    n: usize,
    fs_hz: f64,
    win_ms: f64,
    psd_df_hz: f64,
    psd: &[f64],
    hp_gain: &[f64],
    inv_amp: &mut Vec<f64>,
    out: &mut [Complex<f32>],
) {
    const CAP: f64 = 1e12;
    let norm = n as f64 * fs_hz * 0.5 * win_ms;
    inv_amp.clear();
    inv_amp.extend(psd.iter().map(|&s| {
        if s > 0.0 && s < f64::INFINITY {
            1.0 / (norm * s).sqrt()
        } else {
            0.0
        }
    }));
    // Bin k of the block sits at PSD bin k · ratio; the factor is
    // interpolated between PSD bins i = ⌊k · ratio⌋ and i + 1 (the last bin
    // holds its value). The bins are taken in runs of equal i, so the inner
    // loop is straight-line arithmetic that vectorises.
    let ratio = fs_hz / n as f64 / psd_df_hz;
    let a = &inv_amp[..];
    let last = a.len().saturating_sub(1);
    let bin_of = |k: usize| ((k as f64 * ratio) as usize).min(last); // floor for ≥ 0
    let len = out.len().min(spec.len()).min(hp_gain.len());
    let mut k = 0;
    while k < len {
        let i = bin_of(k);
        // First bin of the next run: estimate, then settle on the exact
        // boundary of the formula above.
        let mut end = if i < last {
            (((i + 1) as f64 / ratio) as usize).clamp(k + 1, len)
        } else {
            len
        };
        while end > k + 1 && bin_of(end - 1) != i {
            end -= 1;
        }
        while end < len && bin_of(end) == i {
            end += 1;
        }
        let (a0, a1) = (a[i], if i < last { a[i + 1] } else { a[i] });
        let run = k..end;
        for (kk, ((o, x), &g)) in out[run.clone()]
            .iter_mut()
            .zip(&spec[run.clone()])
            .zip(&hp_gain[run])
            .enumerate()
        {
            let w = if i < last {
                (k + kk) as f64 * ratio - i as f64
            } else {
                0.0
            };
            let f = (a0 * (1.0 - w) + a1 * w) * g;
            let (re, im) = (x.re * f, x.im * f);
            let ok = re.is_finite() && im.is_finite();
            let (re, im) = if ok { (re, im) } else { (0.0, 0.0) };
            *o = Complex::new(re.clamp(-CAP, CAP) as f32, im.clamp(-CAP, CAP) as f32);
        }
        k = end;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn kept_segments_give_the_same_estimate_bit_for_bit() {
        // Overlapping blocks of one series, as energy maps whiten them: the
        // estimate that keeps the previous block's segment periodograms
        // equals a fresh one exactly, whether or not the blocks share the
        // segment grid or overlap at all.
        let mut state = 99u64;
        let x: Vec<f64> = (0..20_000)
            .map(|_| {
                state = state
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                (state >> 11) as f64 / (1u64 << 53) as f64 - 0.5
            })
            .collect();
        let (n, nperseg) = (6_000, 256);
        let w = Welch::new(nperseg, nperseg / 2).unwrap();
        let mut reused = w.buffers();
        let mut fresh = w.buffers();
        let bits = |d: &[f64]| d.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
        // On the grid (steps of 128), off it, backwards, beyond the overlap.
        let origins = [
            0,
            128 * 20,
            128 * 43,
            128 * 43 + 5,
            1_000,
            9_000,
            14_000,
            13_872,
        ];
        for &o in &origins {
            let block = &x[o..o + n];
            let df_a = w
                .estimate_band_at(block, Some(o), 512.0, 100.0, &mut reused)
                .unwrap();
            let df_b = w.estimate_band(block, 512.0, 100.0, &mut fresh).unwrap();
            assert_eq!(df_a.to_bits(), df_b.to_bits());
            assert_eq!(bits(&reused.density), bits(&fresh.density), "origin {o}");
        }
        assert_eq!(reused.rows_at().map(|r| r.0), Some(13_872));
        assert_eq!(fresh.rows_at(), None);
    }

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
    fn whitening_runs_match_the_per_bin_formula() {
        // The run-by-run loop of `whiten` against the plain per-bin
        // interpolation it replaces, for ratios that do and do not divide.
        for &(n, fs, psd_df, npsd) in &[
            (4096usize, 4096.0, 1.0, 1025usize),
            (1000, 300.0, 0.7, 100),
            (64, 64.0, 4.0, 3),
            (256, 100.0, 0.25, 400),
        ] {
            let nb = n / 2 + 1;
            let spec: Vec<Complex<f64>> = (0..nb)
                .map(|k| Complex::new((k as f64 * 0.37).sin(), (k as f64 * 0.11).cos()))
                .collect();
            let psd: Vec<f64> = (0..npsd)
                .map(|i| 1.0 + (i as f64 * 0.3).sin().abs())
                .collect();
            let gain: Vec<f64> = (0..nb).map(|k| (k % 7) as f64 / 6.0).collect();
            let mut out = vec![Complex::new(0.0f32, 0.0); nb];
            whiten(
                &spec,
                n,
                fs,
                0.9,
                psd_df,
                &psd,
                &gain,
                &mut Vec::new(),
                &mut out,
            );
            let norm = n as f64 * fs * 0.5 * 0.9;
            let a: Vec<f64> = psd.iter().map(|s| 1.0 / (norm * s).sqrt()).collect();
            let ratio = fs / n as f64 / psd_df;
            for k in 0..nb {
                let pos = k as f64 * ratio;
                let i = (pos as usize).min(a.len() - 1);
                let amp = if i + 1 < a.len() {
                    let w = pos - i as f64;
                    a[i] * (1.0 - w) + a[i + 1] * w
                } else {
                    a[i]
                };
                let f = amp * gain[k];
                let want = Complex::new((spec[k].re * f) as f32, (spec[k].im * f) as f32);
                assert_eq!(out[k], want, "n {n}, bin {k}");
            }
        }
    }

    #[test]
    fn tukey_is_flat_in_the_middle() {
        let w = tukey(100, 10);
        assert!(w[10..90].iter().all(|&v| v == 1.0));
        assert!(w[0] > 0.0 && w[0] < 0.05 && (w[0] - w[99]).abs() < 1e-15);
    }
}
