//! Families: sort target-channel triggers into groups of similar
//! time-frequency morphology and keep their identities stable over time.
//!
//! Pipeline: fingerprint ([`features`]) → standardise and reduce
//! ([`pca`]) → Gaussian mixture with the number of families chosen by BIC
//! ([`gmm`]) → stable ids by Hungarian assignment on member overlap
//! ([`hungarian`]) → stored in the catalogue with labels and history.

pub mod gmm;
pub mod hungarian;
pub mod metrics;
pub mod pca;
