//! Families: sort target-channel triggers into groups of similar
//! time-frequency morphology and keep their identities stable over time.
//!
//! Pipeline: fingerprint ([`features`]) → clustering vector, standardised,
//! optionally with PCA scores of the maps ([`model`], [`pca`]) → Gaussian
//! mixture with the number of components chosen by BIC ([`gmm`]), components
//! grouped into families ([`model::component_groups`]) → stable ids by
//! Hungarian assignment on member overlap, with merges and splits
//! ([`lineage`], pure) → stored in the catalogue with labels and history
//! ([`db`], all the SQL). Images of members: [`images`] (from the catalogue)
//! over [`thumbnail`] (pixels and colour map).
//!
//! Layout as in `coupling/`: plain data types here, a pure core (`model`,
//! `lineage`, `gmm`, `pca`, `hungarian`, `metrics`), one catalogue adapter
//! (`db`) and the image output (`images`, `thumbnail`).
//!
//! Typical calls (CLI wiring lives elsewhere):
//! - `cluster`: [`cluster_catalogue`]`(&mut conn, &ClusterParams { seed, min_snr, ..Default::default() }, &src)`
//!   → [`ClusterReport`] (one transaction; fingerprints computed as needed).
//! - `assign`: [`assign_new`]`(&mut conn, &src)` places unclustered triggers with
//!   the stored model (no refit); far ones become novel.
//! - `families`: [`list_families`]`(&conn)` → `Vec<`[`FamilySummary`]`>`
//!   (serde; the novel candidate group comes last with `id` 0, `novel` true).
//! - `label`: [`label`]`(&mut conn, id, name, note, &`[`default_author`]`())`.
//! - `merge-families`, `split-family`, `move-triggers`: [`merge_families`],
//!   [`split_family`], [`move_triggers`] ([`edits`]: one transaction each,
//!   recorded with author and time, pinned so later runs keep them).
//! - `classify`: [`classifier_db::train_and_classify`] trains a classifier
//!   by label on the labelled families' members ([`classifier`]) with a
//!   cross-validated confusion matrix; `assign` then classifies new triggers.
//! - images: [`render_trigger_thumbnail`], [`render_family_thumbnails`].
//!
//! Clustering vector: log2 peak frequency, ln Q, and the trigger-relative
//! morphology of its region — ln fractional bandwidth, drift, curvature
//! ([`model::CLUSTER_SCALARS`]; a column on few levels, such as the peak
//! frequency on Q-plane rows, is dequantised), z-scored; optionally PCA
//! scores of the peak-normalised maps ([`ClusterParams::n_map_components`],
//! default 0). SNR is not in the vector: loudness does not make a family.
//! k is chosen by the BIC of full-covariance mixtures (on ≤ 20,000 rows;
//! ICL on request, [`gmm::Criterion`]), then mixture components whose
//! memberships overlap by ≥ 0.1 are grouped into one family
//! ([`model::component_groups`]), components on fewer than d + 1 triggers
//! dropped first ([`gmm::Gmm::drop_degenerate`]); this selection runs from
//! 5 seeds and the partition agreeing best with the others is kept
//! ([`ClusterParams::starts`]). Every target trigger gets an answer:
//! a family with its probability, or unclassified with a reason — `novel`
//! (log-likelihood below the 0.5 % quantile of the fit data's) or `quiet`
//! (below `min_snr` and not placed with probability ≥
//! [`db::QUIET_MIN_PROBABILITY`]).

pub mod classifier;
pub mod classifier_db;
pub mod db;
pub mod edits;
pub mod features;
pub mod gmm;
pub mod hungarian;
pub mod images;
pub mod lineage;
pub mod metrics;
pub mod model;
pub mod pca;
pub mod thumbnail;

pub use db::{
    assign_new, cluster_catalogue, compute_features, family_events, family_member_ids, label,
    label_history, latest_model, list_families,
};
pub use edits::{edit_history, merge_families, move_triggers, split_family, EditKind, FamilyEdit};
pub use features::{
    fingerprint, EnergyMapSource, Fingerprint, ScanBand, SineGaussian, SineGaussianSource,
};
pub use images::{
    image_view, render_family_thumbnails, render_trigger_thumbnail, report_thumbnails, ImageExtent,
    ImageStyle, Thumbnail,
};
pub use lineage::{EventKind, FamilyStatus};
pub use model::{fit_model, ClusterParams, FamilyModel, Fingerprints, StartSummary};
pub use thumbnail::{render_thumbnail, ColourScale};

use serde::Serialize;

/// Per-family summary (JSON field names are part of the interface).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FamilySummary {
    /// Family id (0 for the candidate group of novel triggers).
    pub id: i64,
    /// Human label, if any.
    pub label: Option<String>,
    /// Human note, if any.
    pub note: Option<String>,
    /// Number of member triggers.
    pub count: usize,
    /// Median SNR of the members.
    pub median_snr: f64,
    /// Lowest member peak frequency \[Hz\].
    pub f_peak_min_hz: f64,
    /// Highest member peak frequency \[Hz\].
    pub f_peak_max_hz: f64,
    /// Shortest member duration \[s\].
    pub duration_min_s: f64,
    /// Longest member duration \[s\].
    pub duration_max_s: f64,
    /// First member peak time \[GPS s\].
    pub first_gps: f64,
    /// Last member peak time \[GPS s\].
    pub last_gps: f64,
    /// Mean membership probability of the members (0..1; 1 = every member
    /// unambiguously in this family). NaN for the novel group.
    pub cohesion: f64,
    /// Up to 5 representative trigger ids (highest probability, then SNR).
    pub example_trigger_ids: Vec<i64>,
    /// True for the candidate group of novel triggers.
    pub novel: bool,
}

/// An identity change recorded by a clustering run (see [`lineage`]).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FamilyEvent {
    /// What happened (stored and serialised as `kept`, `new`, `split`,
    /// `merge` or `retired`).
    pub kind: EventKind,
    /// The family concerned.
    pub family_id: i64,
    /// For [`EventKind::Split`]: the family it split from; for
    /// [`EventKind::Merge`]: the family it merged into.
    pub other_family_id: Option<i64>,
    /// Triggers shared with the previous/other family.
    pub n_shared: usize,
}

/// Result of [`cluster_catalogue`].
#[derive(Debug, Clone, Serialize)]
pub struct ClusterReport {
    /// Catalogue id of the run.
    pub run_id: i64,
    /// Triggers clustered (SNR ≥ `min_snr`).
    pub n_clustered: usize,
    /// Quieter target triggers placed in a family with confidence.
    pub n_quiet_placed: usize,
    /// Quieter target triggers left unclassified as `quiet`.
    pub n_quiet: usize,
    /// Fingerprints computed in this run (others were stored already).
    pub n_features_computed: usize,
    /// `(k, BIC)` for every number of families tried (the kept start's).
    pub bic: Vec<(usize, f64)>,
    /// Every seeded start of the selection, its agreement with the others
    /// and which was kept (see [`ClusterParams::starts`]).
    pub starts: Vec<model::StartSummary>,
    /// Identity changes.
    pub events: Vec<FamilyEvent>,
    /// The active families after the run.
    pub families: Vec<FamilySummary>,
    /// Target channels whose triggers were left out, having no raw data
    /// (imported without it), with their number of triggers.
    pub without_data: Vec<(String, usize)>,
}

/// Result of [`assign_new`].
#[derive(Debug, Clone, Serialize)]
pub struct AssignReport {
    /// Triggers placed in a family.
    pub n_assigned: usize,
    /// Triggers marked novel.
    pub n_novel: usize,
    /// Triggers below the clustering SNR left unclassified as `quiet`.
    pub n_quiet: usize,
    /// Triggers the latest classifier gave a label (0 without a classifier).
    pub n_class_labelled: usize,
    /// Triggers the latest classifier left without a label.
    pub n_class_unclassified: usize,
    /// Target channels whose new triggers were left out, having no raw
    /// data (imported without it), with their number of triggers.
    pub without_data: Vec<(String, usize)>,
}

/// One entry of a family's label history.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LabelChange {
    /// When \[UTC, ISO 8601\].
    pub changed_utc: String,
    /// Who.
    pub author: String,
    /// Label before.
    pub old_label: Option<String>,
    /// Label after.
    pub new_label: Option<String>,
    /// Note before.
    pub old_note: Option<String>,
    /// Note after.
    pub new_note: Option<String>,
}

/// Author for label history: `$USER`, or "unknown".
pub fn default_author() -> String {
    std::env::var("USER")
        .ok()
        .filter(|s| !s.is_empty())
        .unwrap_or_else(|| "unknown".into())
}
