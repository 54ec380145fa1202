//! Families: sort target-channel triggers into groups of similar
//! time-frequency morphology and keep their identities stable over time.
//!
//! Pipeline: fingerprint ([`features`]) → standardise and reduce
//! ([`pca`]) → Gaussian mixture with the number of families chosen by BIC
//! ([`gmm`]) → stable ids by Hungarian assignment on member overlap
//! ([`hungarian`]) → stored in the catalogue with labels and history.

pub mod features;
pub mod gmm;
pub mod hungarian;
pub mod metrics;
pub mod pca;
pub mod store;

pub use features::{fingerprint, EnergyMapSource, Fingerprint, SineGaussian, SineGaussianSource};
pub use store::{
    assign_new, cluster_catalogue, compute_features, default_author, label, label_history,
    list_families, AssignReport, ClusterParams, ClusterReport, FamilyEvent, FamilyModel,
    FamilySummary,
};
pub use store::{render_family_thumbnails, render_trigger_thumbnail};
pub mod thumbnail;
pub use thumbnail::render_thumbnail;
