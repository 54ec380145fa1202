//! Trigger records and the clustering of significant tiles into triggers.
//!
//! Conventions: all times are GPS seconds (f64; the catalogue stores integer
//! nanoseconds), frequencies in Hz. `energy` is the normalised tile energy Z
//! (mean 1 in Gaussian noise) and `snr = sqrt(2 (Z - 1))` (Chatterji et al.
//! 2004, Class. Quantum Grav. 21, S1809).

use serde::{Deserialize, Serialize};

/// One transient found in one channel.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Trigger {
    /// Time of the loudest tile \[GPS s\].
    pub t_peak: f64,
    /// Start of the trigger's extent \[GPS s\].
    pub t_start: f64,
    /// End of the trigger's extent \[GPS s\].
    pub t_end: f64,
    /// Centre frequency of the loudest tile \[Hz\].
    pub f_peak: f64,
    /// Lower edge of the trigger's frequency extent \[Hz\].
    pub f_low: f64,
    /// Upper edge of the trigger's frequency extent \[Hz\].
    pub f_high: f64,
    /// Signal-to-noise ratio of the loudest tile, `sqrt(2 (Z - 1))`.
    pub snr: f64,
    /// Quality factor of the loudest tile.
    pub q: f64,
    /// Normalised energy Z of the loudest tile.
    pub energy: f64,
}

/// SNR from normalised energy: `sqrt(2 (Z - 1))`, zero below Z = 1.
pub fn snr_from_energy(z: f64) -> f64 {
    (2.0 * (z - 1.0)).max(0.0).sqrt()
}

/// Normalised energy for an SNR: `1 + snr^2 / 2`.
pub fn energy_from_snr(snr: f64) -> f64 {
    1.0 + 0.5 * snr * snr
}
