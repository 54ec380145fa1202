//! The family model: the clustering vector of a fingerprint (which
//! scalars, dequantised and standardised; optional PCA scores of the
//! peak-normalised maps), the fit (Gaussian mixture with k chosen by BIC)
//! and the grouping of mixture components into families. Pure numerics:
//! no catalogue access (that is [`super::db`]).

use super::features::{
    f32_to_blob, FEATURE_VERSION, MAP_LEN, N_FREQS, N_SCALARS, N_SPANS, N_TIMES,
};
use super::gmm::{refit_all, seeded_subset, select_k, AutoK, Criterion, Gmm, GmmParams};
use super::metrics::adjusted_rand_index;
use super::pca::{PcaModel, Scaler};
use anyhow::{bail, Result};
use ndarray::{Array2, Axis};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;

/// Options of a clustering run.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ClusterParams {
    /// Seed for every random choice (subsets, k-means initialisation).
    pub seed: u64,
    /// Target triggers below this SNR are left unclustered (default 7).
    pub min_snr: f64,
    /// Largest number of families tried (default 12).
    pub k_max: usize,
    /// PCA components kept from the peak-normalised maps (default 0: the
    /// clustering vector is then the [`CLUSTER_SCALARS`] only). On the demo
    /// scenario (~300 triggers) map components added noise, not separation
    /// (measured ARI 0.3–0.75 with 2–15 components vs 0.9 without); keep
    /// them for large catalogues where full covariances in more dimensions
    /// can be estimated (≳ 20 d² triggers per family, common practice).
    pub n_map_components: usize,
    /// Rows used to fit the PCA and to choose k by BIC (default 20,000;
    /// the chosen mixture is then refitted on all rows).
    pub select_rows: usize,
    /// A trigger is novel when its log-likelihood under the mixture is
    /// below this quantile of the fit data's (default 0.005).
    pub novelty_quantile: f64,
    /// Seeded initialisations per mixture fit (default 2).
    pub n_init: usize,
    /// Choose k by the BIC of diagonal-covariance mixtures (default false:
    /// full). Diagonal selection over-splits correlated features; full
    /// selection needs roughly ≥ 300 triggers per family at 24 dimensions.
    /// The final mixture is full-covariance either way.
    pub select_diagonal: bool,
    /// Mixture components whose memberships overlap by at least this much
    /// are one family (default 0.1; see [`component_groups`]): two
    /// Gaussians spent on one skewed or curved cloud share their edge
    /// members (Baudry et al. 2010); separate mechanisms share almost none.
    /// Measured on the second scenario (BIC, 3 seeds): 0.5–0.2 left the
    /// broad pulses in two families on one seed (ARI 0.76), 0.1 joined them
    /// (0.96), the other seeds unchanged.
    pub merge_overlap: f64,
    /// How k is chosen (default BIC; see [`Criterion`]). Measured on the
    /// second scenario (3 seeds): ICL under-splits (sweeps with tones and
    /// pulses, ARI 0.52 on one seed) where BIC with component grouping
    /// ([`ClusterParams::merge_overlap`] 0.1) holds ≥ 0.85.
    #[serde(default)]
    pub criterion: Criterion,
    /// Cluster on the trigger-relative morphology ([`CLUSTER_SCALARS`],
    /// default true); false: peak frequency and Q only
    /// ([`PEAK_SCALARS`], the vector of feature version 2).
    #[serde(default)]
    pub morphology: bool,
    /// Seeded starts of the whole selection (k and mixture; default 5):
    /// each start `i` fits with seed `seed + i` on the same selection rows,
    /// and the start whose family partition agrees best with the others'
    /// (largest summed adjusted Rand index: the medoid partition of a
    /// cluster ensemble, Strehl & Ghosh 2002, JMLR 3, 583) is kept. One
    /// start reproduces a single fit. Measured on the second scenario
    /// (README, "families"): single seeds fell to ARI 0.46 and 0.60 on 2
    /// of 18 seed pairs; the medoid of 3–6 starts held 0.85–0.96.
    #[serde(default = "one_start")]
    pub starts: usize,
}

/// Runs stored before [`ClusterParams::starts`] made one start.
fn one_start() -> usize {
    1
}

impl Default for ClusterParams {
    fn default() -> Self {
        ClusterParams {
            seed: 0,
            min_snr: 7.0,
            k_max: 12,
            n_map_components: 0,
            select_rows: 20_000,
            novelty_quantile: 0.005,
            n_init: 2,
            select_diagonal: false,
            merge_overlap: 0.1,
            criterion: Criterion::Bic,
            morphology: true,
            starts: 5,
        }
    }
}

impl ClusterParams {
    /// Check the parameters (no I/O).
    ///
    /// # Errors
    /// [`crate::Error::InvalidParameter`] naming the field: `min_snr` not a
    /// finite number ≥ 0, `k_max` or `starts` outside 1..=64, a novelty
    /// quantile outside `[0, 1)`.
    pub fn check(&self) -> crate::Result<()> {
        use crate::Error;
        if !(self.min_snr.is_finite() && self.min_snr >= 0.0) {
            return Err(Error::invalid(
                "min_snr",
                format!("must be a finite number ≥ 0 (got {})", self.min_snr),
            ));
        }
        if !(1..=64).contains(&self.k_max) {
            return Err(Error::invalid(
                "k_max",
                format!("must be between 1 and 64 (got {})", self.k_max),
            ));
        }
        if !(1..=64).contains(&self.starts) {
            return Err(Error::invalid(
                "starts",
                format!("must be between 1 and 64 (got {})", self.starts),
            ));
        }
        if !(0.0..1.0).contains(&self.novelty_quantile) {
            return Err(Error::invalid(
                "novelty_quantile",
                format!("must be in [0, 1), got {}", self.novelty_quantile),
            ));
        }
        Ok(())
    }
}

/// Everything needed to place a new trigger without refitting.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct FamilyModel {
    /// Feature version the model was fitted on.
    pub feature_version: i64,
    /// Parameters of the run.
    pub params: ClusterParams,
    /// Standardisation of the scalar features.
    pub scalar_scaler: Scaler,
    /// PCA of the pooled log maps.
    pub map_pca: PcaModel,
    /// Divisor of the map PCA scores (standard deviation along the first axis).
    pub map_scale: f64,
    /// The mixture.
    pub gmm: Gmm,
    /// Log-likelihood below which a trigger is novel.
    pub novelty_loglik: f64,
    /// Family id of each mixture component (several components may share one).
    pub component_family: Vec<i64>,
    /// Indices (into [`super::features::SCALAR_NAMES`]) of the scalars in
    /// the clustering vector (models before this field: all 9).
    #[serde(default = "all_scalars")]
    pub scalar_cols: Vec<usize>,
    /// Dequantisation width of each clustering scalar (0 = continuous); see
    /// [`quantisation_step`] and [`dequantise`].
    #[serde(default)]
    pub dequant_step: Vec<f64>,
    /// Map PCA made on peak-normalised maps (false for models made before).
    #[serde(default)]
    pub map_peak_norm: bool,
    /// Every seeded start of the selection and which was kept (empty for
    /// models made before [`ClusterParams::starts`]).
    #[serde(default)]
    pub starts: Vec<StartSummary>,
    /// Peak frequencies of the fitted triggers sit on the tiling's rows
    /// (catalogues scanned before peaks were refined between rows), so
    /// log2 f is dequantised by [`log2_row_spacing`]; false when they are
    /// continuous (see [`frequencies_on_rows`]). Models made before this
    /// field: true.
    #[serde(default = "yes")]
    pub f_on_rows: bool,
    /// Values of ln Q at which fit triggers pile up at the low and high end
    /// (see [`pile_up_edges`]): Q held at the searched range's edge, whose
    /// true value lies at or beyond it. Such values are spread over
    /// [`CENSOR_SPREAD_LN_Q`] beyond the edge ([`spread_censored`]). None
    /// for models made before, on grid peaks (see [`FamilyModel::f_on_rows`])
    /// or without a pile-up.
    #[serde(default)]
    pub ln_q_edges: (Option<f64>, Option<f64>),
}

/// Width in ln Q over which a Q held at an edge of the searched range is
/// spread beyond it: half an octave, ln √2 (the Q planes of the default
/// tiling are an octave apart, so this stays within the plane beyond).
pub const CENSOR_SPREAD_LN_Q: f64 = std::f64::consts::LN_2 / 2.0;

/// The lowest and the highest value of a column when at least
/// max(3, 2 %) of the values sit exactly on it (a pile-up: values held at
/// an edge, as Q is at the searched range when peaks are refined); None
/// otherwise.
pub fn pile_up_edges(values: &[f64]) -> (Option<f64>, Option<f64>) {
    let v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    let need = 3.max(v.len() / 50);
    let edge = |e: f64| {
        let n = v.iter().filter(|&&x| (x - e).abs() < 1e-6).count();
        (n >= need).then_some(e)
    };
    let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if v.is_empty() || lo >= hi {
        return (None, None);
    }
    (edge(lo), edge(hi))
}

/// Spread a value held at a pile-up edge over `width` beyond it (a uniform
/// offset from a hash of `key`, as [`dequantise`]); other values unchanged.
pub fn spread_censored(
    value: f64,
    edges: (Option<f64>, Option<f64>),
    width: f64,
    key: &[u8],
    column: usize,
) -> f64 {
    let at = |e: Option<f64>| e.is_some_and(|e| (value - e).abs() < 1e-6);
    if !at(edges.0) && !at(edges.1) {
        return value;
    }
    let u = hash_uniform(key, 1000 + column as u64);
    if at(edges.0) {
        value - u * width
    } else {
        value + u * width
    }
}

fn yes() -> bool {
    true
}

/// Whether peak frequencies (any monotone function of them, e.g. log2 f)
/// sit on a grid: at least a quarter of the values repeat one another.
/// Peaks on the tiling's rows repeat as soon as there are more triggers
/// than rows; peaks refined between rows (see [`crate::tf::QPlan::refine`])
/// are continuous and repeat only by rounding to f32. Few triggers on rows
/// seldom repeat and need no dequantisation either: a Gaussian mixture
/// only degenerates on values that repeat.
pub fn frequencies_on_rows(values: &[f64]) -> bool {
    let mut d: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    let n = d.len();
    d.sort_by(f64::total_cmp);
    d.dedup();
    n >= 2 && 4 * (n - d.len()) >= n
}

/// Below this mean agreement of the kept start with the others the
/// families are called seed-dependent (bands of the adjusted Rand index
/// in Steinley 2004, Psychological Methods 9, 386, from memory: ≥ 0.80
/// good agreement, 0.65–0.80 moderate, below poor).
pub const SEED_AGREEMENT_WARN: f64 = 0.8;

/// The kept start and the least agreement of any start with the others,
/// when there were several starts (None for one start or none recorded).
pub fn kept_start(starts: &[StartSummary]) -> Option<(&StartSummary, f64)> {
    if starts.len() < 2 {
        return None;
    }
    let kept = starts.iter().find(|s| s.chosen)?;
    let least = starts
        .iter()
        .map(|s| s.agreement)
        .fold(f64::INFINITY, f64::min);
    Some((kept, least))
}

/// One seeded start of the mixture selection (see [`ClusterParams::starts`]).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StartSummary {
    /// Seed of the start.
    pub seed: u64,
    /// Mixture components it chose.
    pub components: usize,
    /// Families (groups of components) it made on the selection rows.
    pub families: usize,
    /// Mean adjusted Rand index of its family partition with each other
    /// start's, on the selection rows (1 when there is one start): how
    /// much the families it found depend on the seed.
    pub agreement: f64,
    /// True for the start kept.
    pub chosen: bool,
}

fn all_scalars() -> Vec<usize> {
    (0..N_SCALARS).collect()
}

/// Scalars of the clustering vector: log2 peak frequency, ln Q, the
/// fractional bandwidth, the drift and the curvature of the trigger's
/// region (see [`super::features`]). Loudness (ln SNR) is left out on
/// purpose: one morphology seen at several SNRs is one family. Drift
/// separates sweeps from pulses, curvature arches from sweeps, the
/// fractional bandwidth broadband pulses from tones at any centre
/// frequency. The other morphology scalars were measured and left out
/// (README, "families"): the duration in tiles and the pixel count grow
/// with SNR, the time symmetry is noise at SNR < 15, and the spectral
/// flatness repeats the fractional bandwidth.
pub const CLUSTER_SCALARS: [usize; 5] = [
    SCALAR_LOG2_F,
    SCALAR_LN_Q,
    super::features::S_LN_FRAC_BW,
    super::features::S_DRIFT,
    super::features::S_CURVATURE,
];

/// The clustering vector of feature version 2: log2 peak frequency and ln Q.
pub const PEAK_SCALARS: [usize; 2] = [SCALAR_LOG2_F, SCALAR_LN_Q];

/// Scalar column of log2 peak frequency \[log2 Hz\].
const SCALAR_LOG2_F: usize = 3;
/// Scalar column of ln Q.
const SCALAR_LN_Q: usize = 4;

/// Spacing \[log2 Hz\] of the frequency rows of the Q plane `exp(ln_q)` in
/// the default tiling (maximum mismatch 0.2): rows are geometric with ratio
/// `exp(2 s / sqrt(2 + Q²))`, `s` the mismatch step (Chatterji et al. 2004).
/// Peak frequencies of catalogues scanned before peaks were refined sit on
/// these rows, so they are dequantised by it (see [`FamilyModel::f_on_rows`]).
/// Trigger Q is estimated between the planes (see
/// [`crate::trigger::cluster_tiles`]), so this is the spacing at that Q,
/// within a factor 2 of the peak plane's.
pub fn log2_row_spacing(ln_q: f64) -> f64 {
    let q = ln_q.exp();
    2.0 * crate::tf::mismatch_step(0.2) / (2.0 + q * q).sqrt() / std::f64::consts::LN_2
}

/// Columns with at most this many distinct values are treated as quantised.
const MAX_QUANTISED_LEVELS: usize = 32;

/// Quantisation step of a column: the median gap between its distinct
/// values when it takes at most 32 of them (trigger Q comes from a few Q
/// planes), else 0 (continuous).
pub fn quantisation_step(values: &[f64]) -> f64 {
    let mut d: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    d.sort_by(f64::total_cmp);
    d.dedup_by(|a, b| (*a - *b).abs() < 1e-6);
    if d.len() < 2 || d.len() > MAX_QUANTISED_LEVELS {
        return 0.0;
    }
    let mut gaps: Vec<f64> = d.windows(2).map(|w| w[1] - w[0]).collect();
    median(&mut gaps)
}

/// Dequantise a value of a quantised column: add a uniform offset in
/// `[-step/2, step/2)` drawn from a hash of `key` (so the same trigger gets
/// the same offset in every run). A Gaussian mixture on a few discrete
/// levels puts a degenerate component on each level and BIC rewards it;
/// uniform dequantisation (Theis, van den Oord & Bethge 2016, ICLR, "A note
/// on the evaluation of generative models") restores a density.
pub fn dequantise(value: f64, step: f64, key: &[u8], column: usize) -> f64 {
    if step <= 0.0 {
        return value;
    }
    value + (hash_uniform(key, column as u64) - 0.5) * step
}

/// A number in (0, 1) from a hash of `key` and `seed`: the same trigger
/// gets the same offset in every run.
fn hash_uniform(key: &[u8], seed: u64) -> f64 {
    let h = xxhash_rust::xxh3::xxh3_64_with_seed(key, seed);
    ((h >> 11) as f64 + 0.5) / (1u64 << 53) as f64
}

/// Stored fingerprints as (maps, scalars) per trigger.
pub type Fingerprints = Vec<(Vec<f32>, Vec<f32>)>;

/// Pooled map length: each 16 × 16 map averaged over 2 × 2 cells.
const POOLED_LEN: usize = N_SPANS * (N_TIMES / 2) * (N_FREQS / 2);

/// Floor of the peak-normalised log maps: e⁻³ ≈ 5 % of the peak, about
/// the noise level (Z ≈ 1) under the peak of an SNR-7 tile (Z = 25.5).
const REL_LN_FLOOR: f64 = -3.0;

/// ln(Z / Z_peak) of the maps, pooled 2 × 2 (keeps the PCA covariance at
/// 256 × 256), per span, floored at [`REL_LN_FLOOR`]: the shape of the
/// transient, independent of its loudness (raw ln Z maps grow in extent
/// with SNR and split one morphology into loud and quiet families).
/// With `peak_norm` false: plain pooled ln Z (models made before the
/// peak normalisation, kept readable for `assign`).
pub(crate) fn pooled_log_maps(maps: &[f32], peak_norm: bool) -> Vec<f64> {
    let mut out = Vec::with_capacity(POOLED_LEN);
    for s in 0..N_SPANS {
        let first = out.len();
        let m = &maps[s * MAP_LEN..(s + 1) * MAP_LEN];
        for t in (0..N_TIMES).step_by(2) {
            for f in (0..N_FREQS).step_by(2) {
                let v = m[t * N_FREQS + f]
                    + m[t * N_FREQS + f + 1]
                    + m[(t + 1) * N_FREQS + f]
                    + m[(t + 1) * N_FREQS + f + 1];
                out.push((0.25 * v as f64).max(1e-3).ln());
            }
        }
        if !peak_norm {
            continue;
        }
        let peak = out[first..]
            .iter()
            .copied()
            .fold(f64::NEG_INFINITY, f64::max);
        for v in &mut out[first..] {
            *v = (*v - peak).max(REL_LN_FLOOR);
        }
    }
    out
}

impl FamilyModel {
    /// Clustering vectors (rows) of fingerprints given as (maps, scalars).
    pub fn vectors(&self, fps: &[(Vec<f32>, Vec<f32>)]) -> Array2<f64> {
        let nm = self.map_pca.components.len();
        let ns = self.scalar_cols.len();
        let mut x = Array2::zeros((fps.len(), nm + ns));
        x.axis_iter_mut(Axis(0))
            .into_par_iter()
            .zip(fps.par_iter())
            .for_each(|(mut row, (maps, sc))| {
                if nm > 0 {
                    let p = ndarray::Array1::from(pooled_log_maps(maps, self.map_peak_norm));
                    let s = self.map_pca.transform_row(p.view());
                    for (j, v) in s.iter().enumerate() {
                        row[j] = v / self.map_scale;
                    }
                }
                let raw = self.raw_scalars(sc);
                for j in 0..ns {
                    row[nm + j] =
                        (raw[j] - self.scalar_scaler.mean[j]) / self.scalar_scaler.scale[j];
                }
            });
        x
    }

    /// The clustering scalars of one fingerprint, dequantised, unscaled.
    fn raw_scalars(&self, sc: &[f32]) -> Vec<f64> {
        let key = f32_to_blob(sc);
        self.scalar_cols
            .iter()
            .enumerate()
            .map(|(j, &c)| {
                let step = if c == SCALAR_LOG2_F && self.f_on_rows && sc.len() > SCALAR_LN_Q {
                    log2_row_spacing(sc[SCALAR_LN_Q] as f64)
                } else {
                    self.dequant_step.get(j).copied().unwrap_or(0.0)
                };
                let v = dequantise(sc[c] as f64, step, &key, c);
                if c == SCALAR_LN_Q && !self.f_on_rows {
                    spread_censored(v, self.ln_q_edges, CENSOR_SPREAD_LN_Q, &key, c)
                } else {
                    v
                }
            })
            .collect()
    }
}

pub(crate) fn quantile(v: &[f64], q: f64) -> f64 {
    let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
    if s.is_empty() {
        return f64::NEG_INFINITY;
    }
    s.sort_by(f64::total_cmp);
    let pos = q.clamp(0.0, 1.0) * (s.len() - 1) as f64;
    let (lo, hi) = (pos.floor() as usize, pos.ceil() as usize);
    s[lo] + (s[hi] - s[lo]) * (pos - lo as f64)
}

/// Group mixture components that describe one family. A Gaussian mixture
/// fitted with BIC often spends two or more components on one non-Gaussian
/// cloud (Baudry et al. 2010, J. Comput. Graph. Stat. 19, 332); such
/// components share many ambiguous members. Overlap of components a and b:
/// `Σ_i min(r_ia, r_ib) / min(N_a, N_b)` (responsibilities `r`, soft sizes
/// `N`); pairs at or above `threshold` are joined (union-find). Returns the
/// group index of every component, groups numbered by first component.
pub fn component_groups(resp: &[f64], k: usize, threshold: f64) -> Vec<usize> {
    let mut shared = vec![0.0; k * k];
    let mut size = vec![0.0; k];
    for r in resp.chunks(k) {
        for a in 0..k {
            size[a] += r[a];
            for b in a + 1..k {
                shared[a * k + b] += r[a].min(r[b]);
            }
        }
    }
    let mut parent: Vec<usize> = (0..k).collect();
    fn find(p: &mut [usize], mut i: usize) -> usize {
        while p[i] != i {
            p[i] = p[p[i]];
            i = p[i];
        }
        i
    }
    for a in 0..k {
        for b in a + 1..k {
            let o = shared[a * k + b] / size[a].min(size[b]).max(1e-12);
            if o >= threshold {
                let (ra, rb) = (find(&mut parent, a), find(&mut parent, b));
                parent[ra.max(rb)] = ra.min(rb);
            }
        }
    }
    let mut ids: HashMap<usize, usize> = HashMap::new();
    (0..k)
        .map(|c| {
            let r = find(&mut parent, c);
            let n = ids.len();
            *ids.entry(r).or_insert(n)
        })
        .collect()
}

/// Sum responsibilities per group: `n × n_groups`.
pub(crate) fn group_resp(resp: &[f64], k: usize, groups: &[usize]) -> (Vec<f64>, usize) {
    let g = groups.iter().max().map_or(0, |m| m + 1);
    let mut out = vec![0.0; resp.len() / k * g];
    for (i, r) in resp.chunks(k).enumerate() {
        for c in 0..k {
            out[i * g + groups[c]] += r[c];
        }
    }
    (out, g)
}

pub(crate) fn argmax(r: &[f64]) -> usize {
    (0..r.len())
        .max_by(|&a, &b| r[a].total_cmp(&r[b]))
        .unwrap_or(0)
}

/// Fit the model (standardise, PCA, mixture with k by BIC) on fingerprints.
pub fn fit_model(
    fps: &[(Vec<f32>, Vec<f32>)],
    p: &ClusterParams,
) -> Result<(FamilyModel, Vec<(usize, f64)>)> {
    let n = fps.len();
    if n < 2 {
        bail!(
            "clustering needs at least 2 target triggers with SNR ≥ {}, found {n}",
            p.min_snr
        );
    }
    // Scalars: dequantise the quantised ones, then z-score.
    let scalar_cols = if p.morphology {
        CLUSTER_SCALARS.to_vec()
    } else {
        PEAK_SCALARS.to_vec()
    };
    let dequant_step: Vec<f64> = scalar_cols
        .iter()
        .map(|&c| quantisation_step(&fps.iter().map(|f| f.1[c] as f64).collect::<Vec<_>>()))
        .collect();
    // Maps: PCA of pooled, peak-normalised ln Z on a seeded subset.
    let idx = seeded_subset(n, p.select_rows, p.seed);
    let nc = p.n_map_components.min(idx.len() - 1).min(POOLED_LEN);
    let (map_pca, map_scale) = if nc == 0 {
        let none = PcaModel {
            mean: vec![],
            components: vec![],
            explained_variance: vec![],
            explained_variance_ratio: vec![],
        };
        (none, 1.0)
    } else {
        let mut pm = Array2::zeros((idx.len(), POOLED_LEN));
        for (r, &i) in idx.iter().enumerate() {
            for (j, v) in pooled_log_maps(&fps[i].0, true).into_iter().enumerate() {
                pm[[r, j]] = v;
            }
        }
        let pca = PcaModel::fit(pm.view(), nc)?;
        let scale = pca.explained_variance[0].sqrt().max(1e-12);
        (pca, scale)
    };
    let mut model = FamilyModel {
        feature_version: FEATURE_VERSION,
        params: *p,
        scalar_scaler: Scaler {
            mean: vec![],
            scale: vec![],
        },
        map_pca,
        map_scale,
        gmm: Gmm {
            dim: 0,
            weights: vec![],
            means: vec![],
            covariances: vec![],
            chol: vec![],
            mean_loglik: 0.0,
            converged: false,
            n_iter: 0,
            diagonal: false,
        },
        novelty_loglik: f64::NEG_INFINITY,
        component_family: vec![],
        scalar_cols,
        dequant_step,
        map_peak_norm: true,
        starts: vec![],
        f_on_rows: frequencies_on_rows(
            &fps.iter()
                .map(|f| f.1[SCALAR_LOG2_F] as f64)
                .collect::<Vec<_>>(),
        ),
        ln_q_edges: (None, None),
    };
    // Refined peaks only: there Q is held at the searched range's edges
    // (on grid peaks the lowest plane's Q is a level of its own, and
    // spreading it lost ARI 0.96 → 0.46 on the second scenario).
    if !model.f_on_rows {
        model.ln_q_edges = pile_up_edges(
            &fps.iter()
                .filter(|f| f.1.len() > SCALAR_LN_Q)
                .map(|f| f.1[SCALAR_LN_Q] as f64)
                .collect::<Vec<_>>(),
        );
    }
    let sc = Array2::from_shape_fn((n, model.scalar_cols.len()), |(i, j)| {
        model.raw_scalars(&fps[i].1)[j]
    });
    model.scalar_scaler = Scaler::fit(sc.view());
    let x = model.vectors(fps);
    let base = GmmParams {
        n_init: p.n_init.max(1),
        ..GmmParams::new(1, p.seed)
    };
    let sub: Option<Array2<f64>> =
        (n > p.select_rows).then(|| x.select(Axis(0), &seeded_subset(n, p.select_rows, p.seed)));
    let xs = sub.as_ref().map_or(x.view(), |s| s.view());
    let (auto, starts) = medoid_start(xs, &base, p)?;
    let chosen = starts.iter().find(|s| s.chosen).map_or(p.seed, |s| s.seed);
    let mut best = auto.best;
    if n > p.select_rows || best.diagonal {
        best = refit_all(
            x.view(),
            &best,
            &GmmParams {
                seed: chosen,
                ..base
            },
        )?;
        best.drop_degenerate(x.view());
    }
    let ll = best.score_samples(x.view());
    model.novelty_loglik = quantile(&ll, p.novelty_quantile);
    model.gmm = best;
    model.starts = starts;
    Ok((model, auto.bic))
}

/// Run the selection of k and the mixture from `p.starts` seeds
/// (`p.seed`, `p.seed + 1`, …) on the rows `xs` and keep the start whose
/// family partition of `xs` has the largest summed adjusted Rand index
/// with the other starts' (the first on a tie; the medoid partition of the
/// ensemble, Strehl & Ghosh 2002). Components are grouped into families
/// as in the final fit ([`component_groups`] at `p.merge_overlap`).
fn medoid_start(
    xs: ndarray::ArrayView2<f64>,
    base: &GmmParams,
    p: &ClusterParams,
) -> Result<(AutoK, Vec<StartSummary>)> {
    let mut fits = Vec::new();
    let mut parts: Vec<Vec<i64>> = Vec::new();
    for i in 0..p.starts.max(1) as u64 {
        let seed = p.seed.wrapping_add(i);
        let mut auto = select_k(
            xs,
            p.k_max.max(1),
            &GmmParams { seed, ..*base },
            p.select_diagonal,
            p.criterion,
        )?;
        // A component on fewer than d + 1 triggers is no family.
        auto.best.drop_degenerate(xs);
        let k = auto.best.k();
        let (resp, _) = auto.best.predict_proba(xs);
        let groups = component_groups(&resp, k, p.merge_overlap);
        let (gresp, gk) = group_resp(&resp, k, &groups);
        parts.push(gresp.chunks(gk).map(|r| argmax(r) as i64).collect());
        fits.push((seed, gk, auto));
    }
    let (pick, agreement) = medoid(&parts);
    let summaries = fits
        .iter()
        .enumerate()
        .map(|(i, (seed, families, auto))| StartSummary {
            seed: *seed,
            components: auto.best.k(),
            families: *families,
            agreement: agreement[i],
            chosen: i == pick,
        })
        .collect();
    let (_, _, auto) = fits.swap_remove(pick);
    Ok((auto, summaries))
}

/// The medoid of several labellings of the same items: the index of the
/// one with the largest summed adjusted Rand index with the others (the
/// first on a tie), and each one's mean ARI with the others (1 for a
/// single labelling).
pub fn medoid(parts: &[Vec<i64>]) -> (usize, Vec<f64>) {
    let m = parts.len();
    let mut sums = vec![0.0; m];
    for i in 0..m {
        for j in i + 1..m {
            let a = adjusted_rand_index(&parts[i], &parts[j]);
            sums[i] += a;
            sums[j] += a;
        }
    }
    let mut pick = 0;
    for (i, &s) in sums.iter().enumerate() {
        if s > sums[pick] {
            pick = i;
        }
    }
    let mean = sums
        .iter()
        .map(|s| if m > 1 { s / (m - 1) as f64 } else { 1.0 })
        .collect();
    (pick, mean)
}

/// [`crate::condition::median`], NaN for no values.
pub(crate) fn median(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        f64::NAN
    } else {
        crate::condition::median(v)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn groups_join_overlapping_components_only() {
        // Components 0 and 1 share ambiguous rows; 2 is cleanly separate.
        let resp = [
            1.0, 0.0, 0.0, //
            0.5, 0.5, 0.0, //
            0.4, 0.6, 0.0, //
            0.0, 1.0, 0.0, //
            0.0, 0.0, 1.0, //
            0.0, 0.0, 1.0,
        ];
        assert_eq!(component_groups(&resp, 3, 0.02), vec![0, 0, 1]);
        // A high threshold keeps them apart.
        assert_eq!(component_groups(&resp, 3, 0.9), vec![0, 1, 2]);
        let (g, n) = group_resp(&resp, 3, &[0, 0, 1]);
        assert_eq!(n, 2);
        assert_eq!(&g[2..4], &[1.0, 0.0]);
    }

    /// Peak frequencies on the rows of the default tiling (Chatterji et al.
    /// 2004 row layout, via `tf::row_freqs`) repeat and are dequantised;
    /// refined, continuous ones are not.
    #[test]
    fn frequencies_on_rows_are_told_from_continuous_ones() {
        let rows = crate::tf::row_freqs(11.3, 16.0, 1024.0, 0.2);
        let on: Vec<f64> = (0..400)
            .map(|i| rows[(i * 7) % rows.len()].log2())
            .collect();
        assert!(frequencies_on_rows(&on));
        let cont: Vec<f64> = (0..400)
            .map(|i| (16.0 * (64f64).powf((i as f64 * 0.618_034) % 1.0)).log2())
            .collect();
        assert!(!frequencies_on_rows(&cont));
        // f32 storage rounds continuous values but hardly makes them repeat.
        let cont32: Vec<f64> = cont.iter().map(|&v| v as f32 as f64).collect();
        assert!(!frequencies_on_rows(&cont32));
    }

    #[test]
    fn medoid_is_the_labelling_closest_to_the_others() {
        // Three starts agree up to renaming; one merges two groups.
        let a = vec![0, 0, 0, 1, 1, 1, 2, 2, 2];
        let renamed = vec![5, 5, 5, 3, 3, 3, 1, 1, 1];
        let merged = vec![0, 0, 0, 0, 0, 0, 2, 2, 2];
        let (pick, mean) = medoid(&[merged.clone(), a.clone(), renamed, a.clone()]);
        assert_eq!(pick, 1, "first of the agreeing starts");
        let am = adjusted_rand_index(&a, &merged);
        assert!(am < 0.7, "merged differs: {am}");
        assert!((mean[1] - (2.0 + am) / 3.0).abs() < 1e-12);
        assert!((mean[0] - am).abs() < 1e-12);
        assert_eq!(medoid(&[merged]), (0, vec![1.0]));
    }

    #[test]
    fn one_start_is_a_single_fit_and_starts_are_recorded() {
        // Two well-separated Gaussian blobs in the 5 clustering scalars.
        use rand::SeedableRng;
        use rand_distr::{Distribution, StandardNormal};
        let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(7);
        let mut fps: Fingerprints = Vec::new();
        for i in 0..300 {
            let c = if i % 2 == 0 { 0.0 } else { 6.0 };
            let mut sc = vec![0.0f32; N_SCALARS];
            for &col in &CLUSTER_SCALARS {
                let z: f64 = StandardNormal.sample(&mut rng);
                sc[col] = (c + z) as f32;
            }
            fps.push((vec![], sc));
        }
        let one = ClusterParams {
            starts: 1,
            k_max: 4,
            ..Default::default()
        };
        let (m1, _) = fit_model(&fps, &one).unwrap();
        let x = m1.vectors(&fps);
        let single = super::super::gmm::fit_auto_k_by(
            x.view(),
            4,
            &GmmParams {
                n_init: one.n_init,
                ..GmmParams::new(1, 0)
            },
            one.select_rows,
            false,
            Criterion::Bic,
        )
        .unwrap();
        assert_eq!(m1.gmm.means, single.best.means);
        assert_eq!(m1.starts.len(), 1);
        let (m3, _) = fit_model(&fps, &ClusterParams { starts: 3, ..one }).unwrap();
        let seeds: Vec<u64> = m3.starts.iter().map(|s| s.seed).collect();
        assert_eq!(seeds, vec![0, 1, 2]);
        assert_eq!(m3.starts.iter().filter(|s| s.chosen).count(), 1);
        // Clean blobs: every start finds the same two families.
        assert!(
            m3.starts
                .iter()
                .all(|s| s.families == 2 && s.agreement > 0.99),
            "{:?}",
            m3.starts
        );
        assert!(m3.starts[0].chosen);
    }

    #[test]
    fn q_held_at_a_range_edge_is_spread_beyond_it() {
        // ln Q continuous in (ln 4, ln 64) with 30 values held at ln 4.
        let lo = 4f64.ln();
        let mut v: Vec<f64> = (0..300)
            .map(|i| lo + 0.1 + 2.5 * ((i as f64 * 0.618_034) % 1.0))
            .collect();
        v.extend(std::iter::repeat_n(lo, 30));
        let edges = pile_up_edges(&v);
        assert_eq!(edges, (Some(lo), None));
        // Two values at the edge are no pile-up; neither is a constant.
        assert_eq!(pile_up_edges(&v[..302]).0, None);
        assert_eq!(pile_up_edges(&[1.0; 50]), (None, None));
        // Held values spread over (lo − ln √2, lo], repeatably; others kept.
        let spread: Vec<f64> = (0..1000u32)
            .map(|i| spread_censored(lo, edges, CENSOR_SPREAD_LN_Q, &i.to_le_bytes(), 4))
            .collect();
        assert!(spread
            .iter()
            .all(|&x| x <= lo && x > lo - CENSOR_SPREAD_LN_Q));
        let mean = spread.iter().sum::<f64>() / spread.len() as f64;
        assert!(
            (mean - (lo - CENSOR_SPREAD_LN_Q / 2.0)).abs() < 0.02,
            "{mean}"
        );
        let k = 7u32.to_le_bytes();
        assert_eq!(
            spread_censored(lo, edges, CENSOR_SPREAD_LN_Q, &k, 4),
            spread_censored(lo, edges, CENSOR_SPREAD_LN_Q, &k, 4)
        );
        assert_eq!(spread_censored(2.0, edges, CENSOR_SPREAD_LN_Q, &k, 4), 2.0);
    }

    #[test]
    fn q_planes_are_detected_and_dequantised() {
        // Q planes a factor 2 apart: step ln 2 in ln Q.
        let planes: Vec<f64> = [5.66f64, 11.31, 22.63, 45.25, 11.31, 5.66]
            .iter()
            .map(|q| q.ln())
            .collect();
        let step = quantisation_step(&planes);
        assert!((step - 2f64.ln()).abs() < 1e-3, "step {step}");
        // A continuous column (> 32 distinct values) is left alone.
        let cont: Vec<f64> = (0..100).map(|i| (i as f64 * 0.37).sin()).collect();
        assert_eq!(quantisation_step(&cont), 0.0);
        // Offsets stay within half a step, repeat for the same key, and
        // spread over the cell (mean offset near 0, range near the step).
        let offs: Vec<f64> = (0..2000u32)
            .map(|i| dequantise(1.0, step, &i.to_le_bytes(), 4) - 1.0)
            .collect();
        assert!(offs.iter().all(|o| o.abs() <= 0.5 * step));
        let mean = offs.iter().sum::<f64>() / offs.len() as f64;
        assert!(mean.abs() < 0.02, "mean offset {mean}");
        let (lo, hi) = offs
            .iter()
            .fold((f64::MAX, f64::MIN), |(a, b), &o| (a.min(o), b.max(o)));
        assert!(hi - lo > 0.95 * step);
        assert_eq!(
            dequantise(1.0, step, b"k", 4),
            dequantise(1.0, step, b"k", 4)
        );
        assert_eq!(dequantise(1.0, 0.0, b"k", 4), 1.0);
    }

    #[test]
    fn pooled_maps_do_not_depend_on_loudness() {
        // The same shape at two amplitudes (a peak-normalised blob over a
        // flat background of exactly 1) gives the same pooled map wherever
        // the blob is above the floor.
        let mk = |a: f32| -> Vec<f32> {
            (0..N_SPANS * MAP_LEN)
                .map(|i| {
                    let (t, f) = ((i % MAP_LEN) / N_FREQS, i % N_FREQS);
                    let r2 = ((t as f32 - 7.5).powi(2) + (f as f32 - 7.5).powi(2)) / 4.0;
                    1.0 + a * (-r2).exp()
                })
                .collect()
        };
        let (quiet, loud) = (
            pooled_log_maps(&mk(400.0), true),
            pooled_log_maps(&mk(4000.0), true),
        );
        for (q, l) in quiet.iter().zip(&loud) {
            assert!(*q <= 0.0 && *q >= REL_LN_FLOOR);
            if *q > -2.0 {
                assert!((q - l).abs() < 0.05, "{q} vs {l}");
            }
        }
    }

    #[test]
    fn quantile_interpolates() {
        // NumPy 2.4.6 np.quantile([1, 2, 3, 4], 0.25) = 1.75 (linear method).
        assert!((quantile(&[4.0, 1.0, 3.0, 2.0], 0.25) - 1.75).abs() < 1e-12);
    }
}
