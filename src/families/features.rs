//! Time-frequency fingerprints of triggers: normalised-energy maps on a
//! fixed log-frequency grid at several time spans around the peak, plus
//! scalar morphology. Versioned ([`FEATURE_VERSION`]); stored in the
//! catalogue as little-endian f32 BLOBs.

use crate::trigger::Trigger;
use anyhow::{bail, Result};

/// Bump when the fingerprint definition changes; stored features of another
/// version are recomputed.
pub const FEATURE_VERSION: i64 = 2;
/// Time spans of the maps, centred on the trigger peak \[s\].
pub const SPANS_S: [f64; 4] = [0.5, 1.0, 2.0, 4.0];
/// Frequencies per map (log-spaced, [`F_MIN_HZ`] to [`F_MAX_HZ`]).
pub const N_FREQS: usize = 16;
/// Time bins per map.
pub const N_TIMES: usize = 16;
/// Lowest map frequency \[Hz\].
pub const F_MIN_HZ: f64 = 16.0;
/// Highest map frequency \[Hz\].
pub const F_MAX_HZ: f64 = 2048.0;
/// Number of scalar morphology features (see [`Fingerprint::scalars`]).
pub const N_SCALARS: usize = 9;
/// Names of the scalar features, in order.
pub const SCALAR_NAMES: [&str; N_SCALARS] = [
    "ln_snr",
    "ln_duration_s",
    "ln_bandwidth_hz",
    "log2_f_peak_hz",
    "ln_q",
    "drift_oct_per_s",
    "centroid_log2_hz",
    "spread_oct",
    "time_asymmetry",
];
/// Values in one map.
pub const MAP_LEN: usize = N_FREQS * N_TIMES;

/// Source of normalised-energy maps around a time (implemented at
/// integration by the Q-transform of whitened data; here by
/// [`SineGaussianSource`] for tests).
pub trait EnergyMapSource: Sync {
    /// Normalised energy Z (mean 1 in Gaussian noise) on `n_times` equal
    /// bins spanning `[t_center_gps - span_s/2, t_center_gps + span_s/2)`
    /// × the frequencies `freqs_hz` \[Hz\], at quality factor `q`; row-major
    /// `[time][freq]`.
    fn energy_map(
        &self,
        channel: &str,
        t_center_gps: f64,
        span_s: f64,
        q: f64,
        freqs_hz: &[f64],
        n_times: usize,
    ) -> Result<Vec<f32>>;

    /// Maps at several spans around one time (same Q, grid and bins);
    /// sources that share work between spans override this.
    fn energy_maps(
        &self,
        channel: &str,
        t_center_gps: f64,
        spans_s: &[f64],
        q: f64,
        freqs_hz: &[f64],
        n_times: usize,
    ) -> Result<Vec<Vec<f32>>> {
        spans_s
            .iter()
            .map(|&span| self.energy_map(channel, t_center_gps, span, q, freqs_hz, n_times))
            .collect()
    }
}

/// The fixed log-frequency grid of the maps \[Hz\].
pub fn map_freqs_hz() -> Vec<f64> {
    log_grid(F_MIN_HZ, F_MAX_HZ, N_FREQS)
}

/// `n ≥ 2` frequencies from `lo` to `hi` inclusive, evenly spaced in log.
pub fn log_grid(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    let r = (hi / lo).ln();
    (0..n)
        .map(|i| lo * (r * i as f64 / (n - 1) as f64).exp())
        .collect()
}

/// One trigger's fingerprint.
#[derive(Debug, Clone, PartialEq)]
pub struct Fingerprint {
    /// Feature version ([`FEATURE_VERSION`]).
    pub version: i64,
    /// `SPANS_S.len()` maps of `[N_TIMES][N_FREQS]` normalised energy Z.
    pub maps: Vec<f32>,
    /// Scalar morphology, in the order of [`SCALAR_NAMES`]: ln SNR,
    /// ln duration \[s\], ln bandwidth \[Hz\], log2 peak frequency \[Hz\], ln Q,
    /// frequency drift \[octaves/s\], spectral centroid \[log2 Hz\], spectral
    /// spread \[octaves\], time asymmetry (energy after − before the peak,
    /// over the sum; in −1..1).
    pub scalars: Vec<f32>,
}

impl Fingerprint {
    /// The map at span index `i` (of [`SPANS_S`]).
    pub fn map(&self, i: usize) -> &[f32] {
        &self.maps[i * MAP_LEN..(i + 1) * MAP_LEN]
    }
}

/// Quality factor of a trigger's maps: its own Q, or 8 when it has none
/// (imported triggers may lack one).
pub fn map_q(trigger: &Trigger) -> f64 {
    if trigger.q.is_finite() && trigger.q > 0.0 {
        trigger.q
    } else {
        8.0
    }
}

/// Compute the fingerprint of `trigger` (seen in `channel`) from `src`.
///
/// # Errors
/// The source fails, or returns a map of the wrong size or with
/// non-finite values.
pub fn fingerprint(
    trigger: &Trigger,
    channel: &str,
    src: &dyn EnergyMapSource,
) -> Result<Fingerprint> {
    let freqs = map_freqs_hz();
    let q = map_q(trigger);
    let mut maps = Vec::with_capacity(SPANS_S.len() * MAP_LEN);
    for m in src.energy_maps(channel, trigger.t_peak, &SPANS_S, q, &freqs, N_TIMES)? {
        if m.len() != MAP_LEN {
            bail!(
                "energy map for {channel} at GPS {:.3}: {} values, expected {MAP_LEN}",
                trigger.t_peak,
                m.len()
            );
        }
        if m.iter().any(|v| !v.is_finite()) {
            bail!(
                "energy map for {channel} at GPS {:.3}: non-finite values",
                trigger.t_peak
            );
        }
        maps.extend_from_slice(&m);
    }
    let log2f: Vec<f64> = freqs.iter().map(|f| f.log2()).collect();
    // Morphology from the 1 s map (excess energy Z - 1, clipped at 0).
    let m1 = &maps[MAP_LEN..2 * MAP_LEN];
    let w = |t: usize, f: usize| (m1[t * N_FREQS + f] as f64 - 1.0).max(0.0);
    let dt = SPANS_S[1] / N_TIMES as f64;
    let t_rel = |t: usize| (t as f64 + 0.5) * dt - 0.5 * SPANS_S[1];
    let (mut sw, mut sf, mut sff) = (0.0, 0.0, 0.0);
    let mut col = Vec::with_capacity(N_TIMES); // (t, weight, mean log2 f)
    for t in 0..N_TIMES {
        let (mut cw, mut cf) = (0.0, 0.0);
        for (f, lf) in log2f.iter().enumerate() {
            let v = w(t, f);
            cw += v;
            cf += v * lf;
            sff += v * lf * lf;
        }
        sw += cw;
        sf += cf;
        if cw > 0.0 {
            col.push((t_rel(t), cw, cf / cw));
        }
    }
    let (centroid, spread) = if sw > 0.0 {
        let c = sf / sw;
        (c, (sff / sw - c * c).max(0.0).sqrt())
    } else {
        (trigger.f_peak.max(1.0).log2(), 0.0)
    };
    // Weighted least-squares slope of mean log2 f against time.
    let drift = {
        let cw: f64 = col.iter().map(|c| c.1).sum();
        if col.len() >= 2 && cw > 0.0 {
            let mt = col.iter().map(|c| c.1 * c.0).sum::<f64>() / cw;
            let mf = col.iter().map(|c| c.1 * c.2).sum::<f64>() / cw;
            let stt: f64 = col.iter().map(|c| c.1 * (c.0 - mt).powi(2)).sum();
            let stf: f64 = col.iter().map(|c| c.1 * (c.0 - mt) * (c.2 - mf)).sum();
            if stt > 0.0 {
                stf / stt
            } else {
                0.0
            }
        } else {
            0.0
        }
    };
    // Time asymmetry from the 0.5 s map.
    let m0 = &maps[..MAP_LEN];
    let (mut before, mut after) = (0.0, 0.0);
    for t in 0..N_TIMES {
        let e: f64 = (0..N_FREQS)
            .map(|f| (m0[t * N_FREQS + f] as f64 - 1.0).max(0.0))
            .sum();
        if t < N_TIMES / 2 {
            before += e;
        } else {
            after += e;
        }
    }
    let asym = if before + after > 0.0 {
        (after - before) / (after + before)
    } else {
        0.0
    };
    let scalars = [
        trigger.snr.max(1e-3).ln(),
        (trigger.t_end - trigger.t_start).max(1e-3).ln(),
        (trigger.f_high - trigger.f_low).max(1.0).ln(),
        trigger.f_peak.max(1.0).log2(),
        q.ln(),
        drift,
        centroid,
        spread,
        asym,
    ]
    .iter()
    .map(|&v| v as f32)
    .collect();
    Ok(Fingerprint {
        version: FEATURE_VERSION,
        maps,
        scalars,
    })
}

/// f32 slice → little-endian bytes (catalogue BLOB).
pub fn f32_to_blob(v: &[f32]) -> Vec<u8> {
    v.iter().flat_map(|x| x.to_le_bytes()).collect()
}

/// Little-endian bytes → f32 values.
///
/// # Errors
/// A length that is not a multiple of 4.
pub fn blob_to_f32(b: &[u8]) -> Result<Vec<f32>> {
    if !b.len().is_multiple_of(4) {
        bail!(
            "feature BLOB of {} bytes is not a whole number of f32",
            b.len()
        );
    }
    Ok(b.chunks_exact(4)
        .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
        .collect())
}

/// One analytic sine-Gaussian transient in a [`SineGaussianSource`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SineGaussian {
    /// Peak time \[GPS s\].
    pub t0_gps: f64,
    /// Centre frequency at `t0_gps` \[Hz\].
    pub f0_hz: f64,
    /// Quality factor.
    pub q: f64,
    /// Matched-filter SNR.
    pub snr: f64,
    /// Linear frequency drift \[Hz/s\] (0 for a pure sine-Gaussian).
    pub drift_hz_per_s: f64,
}

/// Synthetic [`EnergyMapSource`]: Gaussian-noise energy (exponential with
/// mean 1, from a hash of channel, time and frequency, so maps are
/// reproducible) plus analytic sine-Gaussian tiles. A sine-Gaussian
/// `exp(-(2π f0 t / Q)²) sin(2π f0 t)` has time spread `σ_t = Q / (2√2 π f0)`
/// and frequency spread `σ_f = f0 / (√2 Q)` in energy (Chatterji et al.
/// 2004, from memory); its energy tile is `1 + snr²/2` at the peak.
#[derive(Debug, Clone, Default)]
pub struct SineGaussianSource {
    /// Transients per channel name.
    pub events: Vec<(String, SineGaussian)>,
    /// Add exponential noise energy (else the background is exactly 1).
    pub noise: bool,
}

fn hash_unit(a: u64, b: u64, c: u64) -> f64 {
    let h =
        xxhash_rust::xxh3::xxh3_64(&[a.to_le_bytes(), b.to_le_bytes(), c.to_le_bytes()].concat());
    ((h >> 11) as f64 + 0.5) / (1u64 << 53) as f64
}

impl EnergyMapSource for SineGaussianSource {
    fn energy_map(
        &self,
        channel: &str,
        t_center_gps: f64,
        span_s: f64,
        _q: f64,
        freqs_hz: &[f64],
        n_times: usize,
    ) -> Result<Vec<f32>> {
        let dt = span_s / n_times as f64;
        let t0 = t_center_gps - 0.5 * span_s;
        let ch = xxhash_rust::xxh3::xxh3_64(channel.as_bytes());
        let near: Vec<&SineGaussian> = self
            .events
            .iter()
            .filter(|(c, e)| c == channel && (e.t0_gps - t_center_gps).abs() < span_s + 1.0)
            .map(|(_, e)| e)
            .collect();
        let mut out = Vec::with_capacity(n_times * freqs_hz.len());
        for i in 0..n_times {
            let t = t0 + (i as f64 + 0.5) * dt;
            for (j, &f) in freqs_hz.iter().enumerate() {
                let mut z = if self.noise {
                    // Time bin keyed by rounded ms so overlapping maps agree.
                    -hash_unit(ch, (t * 1000.0).round() as u64, j as u64).ln()
                } else {
                    1.0
                };
                for e in &near {
                    let fc = (e.f0_hz + e.drift_hz_per_s * (t - e.t0_gps)).max(1.0);
                    let sig_t = e.q / (2.0 * std::f64::consts::SQRT_2 * std::f64::consts::PI * fc);
                    // Bins wider than the burst spread its energy.
                    let sig_t = (sig_t * sig_t + dt * dt / 12.0).sqrt();
                    let sig_f = fc / (std::f64::consts::SQRT_2 * e.q);
                    let a = 0.5 * e.snr * e.snr;
                    z += a
                        * (-0.5 * ((t - e.t0_gps) / sig_t).powi(2)
                            - 0.5 * ((f - fc) / sig_f).powi(2))
                        .exp();
                }
                out.push(z as f32);
            }
        }
        Ok(out)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn trig(t: f64, f: f64, q: f64, snr: f64) -> Trigger {
        let dur = q / (std::f64::consts::PI * f);
        Trigger {
            t_peak: t,
            t_start: t - dur,
            t_end: t + dur,
            f_peak: f,
            f_low: f * 0.8,
            f_high: f * 1.2,
            snr,
            q,
            energy: crate::trigger::energy_from_snr(snr),
        }
    }

    #[test]
    fn grid_is_log_spaced() {
        let f = map_freqs_hz();
        assert_eq!(f.len(), N_FREQS);
        assert!((f[0] - F_MIN_HZ).abs() < 1e-9 && (f[N_FREQS - 1] - F_MAX_HZ).abs() < 1e-6);
        let r = f[1] / f[0];
        for w in f.windows(2) {
            assert!((w[1] / w[0] - r).abs() < 1e-9);
        }
    }

    #[test]
    fn centroid_drift_and_asymmetry_follow_the_signal() {
        // Noise-free maps: centroid of a 256 Hz sine-Gaussian is log2(256) = 8
        // within the grid resolution; no drift; symmetric in time.
        let sg = SineGaussian {
            t0_gps: 1000.0,
            f0_hz: 256.0,
            q: 9.0,
            snr: 20.0,
            drift_hz_per_s: 0.0,
        };
        let src = SineGaussianSource {
            events: vec![("X".into(), sg)],
            noise: false,
        };
        let fp = fingerprint(&trig(1000.0, 256.0, 9.0, 20.0), "X", &src).unwrap();
        assert_eq!(fp.maps.len(), SPANS_S.len() * MAP_LEN);
        assert!(
            (fp.scalars[6] - 8.0).abs() < 0.15,
            "centroid {}",
            fp.scalars[6]
        );
        assert!(fp.scalars[5].abs() < 0.05, "drift {}", fp.scalars[5]);
        assert!(fp.scalars[8].abs() < 0.05, "asym {}", fp.scalars[8]);
        // A chirp rising 200 Hz/s around 100 Hz drifts upwards.
        let ch = SineGaussian {
            t0_gps: 1000.0,
            f0_hz: 100.0,
            q: 3.0,
            snr: 30.0,
            drift_hz_per_s: 200.0,
        };
        let src = SineGaussianSource {
            events: vec![("X".into(), ch)],
            noise: false,
        };
        let fp = fingerprint(&trig(1000.0, 100.0, 3.0, 30.0), "X", &src).unwrap();
        assert!(fp.scalars[5] > 0.5, "drift {}", fp.scalars[5]);
        // Peak energy of the tile is 1 + snr²/2 (Chatterji et al. 2004).
        let m = fp.map(0);
        let max = m.iter().cloned().fold(0.0f32, f32::max);
        assert!(max < 1.0 + 0.5 * 900.0 + 1e-3);
    }

    #[test]
    fn blob_round_trip() {
        let v = vec![1.5f32, -2.25, 3e-7];
        assert_eq!(blob_to_f32(&f32_to_blob(&v)).unwrap(), v);
        assert!(blob_to_f32(&[0u8; 5]).is_err());
    }
}
