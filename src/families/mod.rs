//! Families: sort target-channel triggers into groups of similar
//! time-frequency morphology and keep their identities stable over time.
//!
//! Pipeline: fingerprint ([`features`]) → standardise and reduce
//! ([`pca`]) → Gaussian mixture with the number of families chosen by BIC
//! ([`gmm`]) → stable ids by Hungarian assignment on member overlap
//! ([`hungarian`]) → stored in the catalogue with labels and history.
//!
//! Typical calls (CLI wiring lives elsewhere):
//! - `cluster`: [`cluster_catalogue`]`(&mut conn, &ClusterParams { seed, min_snr, ..Default::default() }, &src)`
//!   → [`ClusterReport`] (one transaction; fingerprints computed as needed).
//! - `assign`: [`assign_new`]`(&mut conn, &src)` places unclustered triggers with
//!   the stored model (no refit); far ones become novel.
//! - `families`: [`list_families`]`(&conn)` → `Vec<`[`FamilySummary`]`>`
//!   (serde; the novel candidate group comes last with `id` 0, `novel` true).
//! - `label`: [`label`]`(&mut conn, id, name, note, &`[`default_author`]`())`.
//! - images: [`render_trigger_thumbnail`], [`render_family_thumbnails`].
//!
//! Clustering vector: log2 peak frequency and ln Q of the trigger
//! ([`store::CLUSTER_SCALARS`]; a column on few levels, such as the peak
//! frequency on Q-plane rows, or Q from scans that recorded the plane's Q,
//! is dequantised), z-scored; optionally PCA scores of the peak-normalised
//! maps ([`ClusterParams::n_map_components`], default 0). SNR is not in the
//! vector: loudness does not make a family. k is chosen by the BIC of
//! full-covariance mixtures (on ≤ 20,000 rows), then mixture components
//! whose memberships overlap by ≥ 0.5 are grouped into one family
//! ([`store::component_groups`]). Novelty: log-likelihood below the 0.5 %
//! quantile of the fit data's.

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
pub use store::{render_family_thumbnails, render_trigger_thumbnail, ImageExtent, Thumbnail};
pub mod thumbnail;
pub use thumbnail::render_thumbnail;
