//! Streaming coloured Gaussian noise of any length in bounded memory.
//!
//! Independent stationary pieces of `seg` samples are made in the frequency
//! domain (as [`crate::demo::colored_gaussian_noise`], with the plan and the
//! amplitude spectrum made once per stream): bin k gets
//! `√(n fs S(f_k)/2) · (a + i b)/√2` with a, b ~ N(0, 1) (real at the
//! Nyquist bin, zero at DC), so `E|X_k|² = n fs S(f_k)/2` and
//! `x = IFFT(X)/n` has one-sided PSD S on the piece's frequency grid. The
//! pieces are joined with equal-power
//! cross-fades over `overlap` samples: in a fade
//! `y = cos θ · a + sin θ · b`, θ rising from 0 to π/2, so the variance is
//! unchanged and the autocovariance at lag τ is multiplied by
//! `cos(θ(t + τ) − θ(t))`, which stays within 1e-3 of 1 for lags below
//! `overlap / 35` (16 s fades: lags below ~0.45 s, far longer than the
//! correlation time of anything but the narrowest lines). The pieces are
//! drawn one after another from one seeded generator, so the stream is
//! the same whatever the chunk sizes asked for.

use anyhow::{anyhow, bail, Result};
use rand::Rng;
use rand_distr::StandardNormal;
use rand_xoshiro::Xoshiro256Plus;
use realfft::num_complex::Complex;
use realfft::{ComplexToReal, RealFftPlanner};
use std::f64::consts::{FRAC_1_SQRT_2, FRAC_PI_2};
use std::sync::Arc;

/// A noise stream (see the module docs).
pub struct NoiseStream {
    rng: Xoshiro256Plus,
    /// `√(n fs S(f_k) / 2)` per bin.
    amp: Vec<f64>,
    fft: Arc<dyn ComplexToReal<f64>>,
    spec: Vec<Complex<f64>>,
    scratch: Vec<Complex<f64>>,
    seg: usize,
    overlap: usize,
    fade_cos: Vec<f64>,
    fade_sin: Vec<f64>,
    /// Current piece and its first global sample.
    a: Vec<f64>,
    a_start: usize,
    /// The next piece, made when the fade into it begins.
    b: Option<Vec<f64>>,
    /// Next global sample to emit.
    pos: usize,
}

impl NoiseStream {
    /// A stream at `fs_hz` with one-sided PSD `psd`, pieces of `seg`
    /// samples joined over `overlap` samples.
    ///
    /// # Errors
    /// `seg < 2`, or `overlap` not below `seg / 2`.
    pub fn new(
        fs_hz: f64,
        psd: &dyn Fn(f64) -> f64,
        rng: Xoshiro256Plus,
        seg: usize,
        overlap: usize,
    ) -> Result<NoiseStream> {
        if seg < 2 || 2 * overlap >= seg {
            bail!("noise stream: need 2 × overlap ({overlap}) < piece length ({seg})");
        }
        let theta = |i: usize| FRAC_PI_2 * (i as f64 + 0.5) / overlap as f64;
        let fft = RealFftPlanner::<f64>::new().plan_fft_inverse(seg);
        let df = fs_hz / seg as f64;
        let amp = (0..seg / 2 + 1)
            .map(|k| {
                let s = if k == 0 { 0.0 } else { psd(k as f64 * df) };
                (seg as f64 * fs_hz * s.max(0.0) / 2.0).sqrt()
            })
            .collect();
        let mut s = NoiseStream {
            rng,
            amp,
            spec: fft.make_input_vec(),
            scratch: fft.make_scratch_vec(),
            fft,
            seg,
            overlap,
            fade_cos: (0..overlap).map(|i| theta(i).cos()).collect(),
            fade_sin: (0..overlap).map(|i| theta(i).sin()).collect(),
            a: Vec::new(),
            a_start: 0,
            b: None,
            pos: 0,
        };
        s.a = s.piece()?;
        Ok(s)
    }

    fn piece(&mut self) -> Result<Vec<f64>> {
        let n = self.seg;
        let nyquist = n.is_multiple_of(2).then_some(n / 2);
        for (k, (c, &a)) in self.spec.iter_mut().zip(&self.amp).enumerate().skip(1) {
            let re: f64 = self.rng.sample(StandardNormal);
            if Some(k) == nyquist {
                *c = Complex::new(a * re, 0.0);
            } else {
                let im: f64 = self.rng.sample(StandardNormal);
                *c = Complex::new(a * re, a * im) * FRAC_1_SQRT_2;
            }
        }
        self.spec[0] = Complex::new(0.0, 0.0);
        let mut out = self.fft.make_output_vec();
        self.fft
            .process_with_scratch(&mut self.spec, &mut out, &mut self.scratch)
            .map_err(|e| anyhow!("noise stream: inverse FFT failed: {e}"))?;
        let scale = 1.0 / n as f64;
        out.iter_mut().for_each(|x| *x *= scale);
        Ok(out)
    }

    /// Fill `out` with the next `out.len()` samples of the stream.
    ///
    /// # Errors
    /// An FFT failure.
    pub fn fill(&mut self, out: &mut [f64]) -> Result<()> {
        let hop = self.seg - self.overlap;
        let mut k = 0;
        while k < out.len() {
            let local = self.pos - self.a_start;
            if local >= self.seg {
                // The fade into `b` is complete: `b` becomes current.
                self.a = self.b.take().expect("made at the fade's start");
                self.a_start += hop;
                continue;
            }
            if local < hop {
                // Pure `a` up to the next fade.
                let n = (hop - local).min(out.len() - k);
                out[k..k + n].copy_from_slice(&self.a[local..local + n]);
                k += n;
                self.pos += n;
            } else {
                if self.b.is_none() {
                    self.b = Some(self.piece()?);
                }
                let b = self.b.as_ref().expect("just made");
                let n = (self.seg - local).min(out.len() - k);
                for i in 0..n {
                    let f = local - hop + i;
                    out[k + i] = self.fade_cos[f] * self.a[local + i] + self.fade_sin[f] * b[f];
                }
                k += n;
                self.pos += n;
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;

    #[test]
    fn pieces_equal_the_demo_generator() {
        // Same draws, same spectrum: the stream's first piece is the demo's
        // one-shot coloured noise with the same generator.
        let psd = |f: f64| 1e-3 * (1.0 + (10.0 / (f + 1.0)).powi(2));
        let mut s =
            NoiseStream::new(128.0, &psd, Xoshiro256Plus::seed_from_u64(9), 1024, 64).unwrap();
        let mut ours = vec![0.0; 900];
        s.fill(&mut ours).unwrap();
        let demo = crate::demo::colored_gaussian_noise(
            &mut Xoshiro256Plus::seed_from_u64(9),
            1024,
            128.0,
            &psd,
        )
        .unwrap();
        for (a, b) in ours.iter().zip(&demo) {
            assert!((a - b).abs() <= 1e-12 * b.abs().max(1e-3), "{a} vs {b}");
        }
    }

    #[test]
    fn chunking_does_not_change_the_stream_and_variance_is_kept() {
        let psd = |_f: f64| 2.0 / 64.0; // unit-variance white noise at 64 Hz
        let make =
            || NoiseStream::new(64.0, &psd, Xoshiro256Plus::seed_from_u64(3), 256, 32).unwrap();
        let mut one = vec![0.0; 5000];
        make().fill(&mut one).unwrap();
        let mut s = make();
        let mut parts = Vec::new();
        for n in [1, 7, 300, 33, 2000, 2659] {
            let mut buf = vec![0.0; n];
            s.fill(&mut buf).unwrap();
            parts.extend(buf);
        }
        assert_eq!(one, parts);
        // Variance 1 everywhere, also in the fades (equal-power cross-fade).
        let var = one.iter().map(|x| x * x).sum::<f64>() / one.len() as f64;
        assert!((var - 1.0).abs() < 0.06, "variance {var}");
        let hop = 256 - 32;
        let fades: Vec<f64> = (1..20)
            .flat_map(|p| (p * hop..p * hop + 32).map(|i| one[i]))
            .collect();
        let vf = fades.iter().map(|x| x * x).sum::<f64>() / fades.len() as f64;
        assert!((vf - 1.0).abs() < 0.15, "variance in fades {vf}");
    }
}
