//! Catalogue side of families: feature storage, the clustering run with
//! stable ids, assignment of new triggers, labels and listings.

use super::features::{
    blob_to_f32, f32_to_blob, fingerprint, EnergyMapSource, FEATURE_VERSION, F_MAX_HZ, F_MIN_HZ,
    MAP_LEN, N_FREQS, N_SCALARS, N_TIMES, SPANS_S,
};
use super::gmm::{fit_auto_k, seeded_subset, Gmm, GmmParams};
use super::hungarian;
use super::pca::{PcaModel, Scaler};
use crate::catalogue::from_ns;
use crate::catalogue::now_utc;
use crate::trigger::Trigger;
use anyhow::{bail, Context, Result};
use ndarray::{Array2, Axis};
use rayon::prelude::*;
use rusqlite::{params, Connection, OptionalExtension, Transaction};
use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, HashMap};

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
    /// are one family (default 0.5; see [`component_groups`]). Lower
    /// values join neighbouring families whose mixture tails touch.
    pub merge_overlap: f64,
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
            merge_overlap: 0.5,
        }
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
}

fn all_scalars() -> Vec<usize> {
    (0..N_SCALARS).collect()
}

/// Scalars of the clustering vector: log2 peak frequency and ln Q. Loudness
/// (ln SNR) is left out on purpose: one morphology seen at several SNRs is
/// one family. The map-derived scalars (centroid, spread, drift, asymmetry)
/// are left out because below SNR ≈ 15 the exponential noise of the 256
/// map cells outweighs the transient's excess energy in them (on the demo
/// the spectral centroid of 25–50 Hz transients sat at ≈ 230 Hz). Duration
/// and bandwidth follow from Q and frequency for the tiles of a Q-transform
/// (Chatterji et al. 2004), so they add no information.
pub const CLUSTER_SCALARS: [usize; 2] = [3, 4];

/// Scalar column of log2 peak frequency \[log2 Hz\].
const SCALAR_LOG2_F: usize = 3;
/// Scalar column of ln Q.
const SCALAR_LN_Q: usize = 4;

/// Spacing \[log2 Hz\] of the frequency rows of the Q plane `exp(ln_q)` in
/// the default tiling (maximum mismatch 0.2): rows are geometric with ratio
/// `exp(2 s / sqrt(2 + Q²))`, `s` the mismatch step (Chatterji et al. 2004).
/// Peak frequencies sit on these rows, so they are dequantised by it. Trigger
/// Q is estimated between the planes (see [`crate::trigger::cluster_tiles`]),
/// so this is the spacing at that Q, within a factor 2 of the peak plane's.
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
    let h = xxhash_rust::xxh3::xxh3_64_with_seed(key, column as u64);
    let u = ((h >> 11) as f64 + 0.5) / (1u64 << 53) as f64;
    value + (u - 0.5) * step
}

/// Stored fingerprints as (maps, scalars) per trigger.
pub type Fingerprints = Vec<(Vec<f32>, Vec<f32>)>;

/// Pooled map length: each 16 × 16 map averaged over 2 × 2 cells.
const POOLED_LEN: usize = SPANS_S.len() * (N_TIMES / 2) * (N_FREQS / 2);

/// Floor of the peak-normalised log maps: e⁻³ ≈ 5 % of the peak, about
/// the noise level (Z ≈ 1) under the peak of an SNR-7 tile (Z = 25.5).
const REL_LN_FLOOR: f64 = -3.0;

/// ln(Z / Z_peak) of the maps, pooled 2 × 2 (keeps the PCA covariance at
/// 256 × 256), per span, floored at [`REL_LN_FLOOR`]: the shape of the
/// transient, independent of its loudness (raw ln Z maps grow in extent
/// with SNR and split one morphology into loud and quiet families).
/// With `peak_norm` false: plain pooled ln Z (models made before the
/// peak normalisation, kept readable for `assign`).
fn pooled_log_maps(maps: &[f32], peak_norm: bool) -> Vec<f64> {
    let mut out = Vec::with_capacity(POOLED_LEN);
    for s in 0..SPANS_S.len() {
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
                let step = if c == SCALAR_LOG2_F && sc.len() > SCALAR_LN_Q {
                    log2_row_spacing(sc[SCALAR_LN_Q] as f64)
                } else {
                    self.dequant_step.get(j).copied().unwrap_or(0.0)
                };
                dequantise(sc[c] as f64, step, &key, c)
            })
            .collect()
    }
}

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

/// An identity change recorded by a clustering run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FamilyEvent {
    /// 'kept', 'new', 'split', 'merge' or 'retired'.
    pub kind: String,
    /// The family concerned.
    pub family_id: i64,
    /// For 'split': the family it split from; for 'merge': the family it
    /// merged into.
    pub other_family_id: Option<i64>,
    /// Triggers shared with the previous/other family.
    pub n_shared: usize,
}

/// Result of [`cluster_catalogue`].
#[derive(Debug, Clone, Serialize)]
pub struct ClusterReport {
    /// Catalogue id of the run.
    pub run_id: i64,
    /// Triggers clustered.
    pub n_clustered: usize,
    /// Fingerprints computed in this run (others were stored already).
    pub n_features_computed: usize,
    /// `(k, BIC)` for every number of families tried.
    pub bic: Vec<(usize, f64)>,
    /// Identity changes.
    pub events: Vec<FamilyEvent>,
    /// The active families after the run.
    pub families: Vec<FamilySummary>,
}

/// Result of [`assign_new`].
#[derive(Debug, Clone, Serialize)]
pub struct AssignReport {
    /// Triggers placed in a family.
    pub n_assigned: usize,
    /// Triggers marked novel.
    pub n_novel: usize,
}

/// Author for label history: `$USER`, or "unknown".
pub fn default_author() -> String {
    std::env::var("USER")
        .ok()
        .filter(|s| !s.is_empty())
        .unwrap_or_else(|| "unknown".into())
}

/// A target trigger as read from the catalogue.
#[derive(Debug, Clone)]
struct Row {
    id: i64,
    channel: String,
    trig: Trigger,
}

impl Row {
    /// The catalogue's trigger row mapping (`catalogue::TriggerRow`), for
    /// `SELECT t.id, c.name, t.t_peak_ns, ... t.energy`.
    fn from_sql(r: &rusqlite::Row) -> rusqlite::Result<Row> {
        let t = crate::catalogue::TriggerRow::from_row(r)?;
        Ok(Row {
            id: t.id,
            trig: t.to_trigger(),
            channel: t.channel,
        })
    }
}

fn target_triggers(conn: &Connection, min_snr: f64, only_unassigned: bool) -> Result<Vec<Row>> {
    let sql = format!(
        "SELECT t.id, c.name, t.t_peak_ns, t.t_start_ns, t.t_end_ns, t.f_peak_hz, t.f_low_hz, \
         t.f_high_hz, t.snr, t.q, t.energy FROM triggers t JOIN channels c ON c.id = t.channel_id \
         WHERE c.role = 'target' AND t.snr >= ?1 {} ORDER BY t.id",
        if only_unassigned {
            "AND NOT EXISTS (SELECT 1 FROM family_members m WHERE m.trigger_id = t.id)"
        } else {
            ""
        }
    );
    let mut st = conn.prepare(&sql)?;
    let rows = st.query_map([min_snr], Row::from_sql)?;
    Ok(rows.collect::<rusqlite::Result<_>>()?)
}

/// Fingerprints of `rows`, computing (in parallel) and storing those missing
/// or of another feature version. Returns (maps, scalars) per row and the
/// number computed.
fn ensure_features(
    tx: &Transaction,
    rows: &[Row],
    src: &dyn EnergyMapSource,
) -> Result<(Fingerprints, usize)> {
    let mut have: Vec<Option<(Vec<f32>, Vec<f32>)>> = Vec::with_capacity(rows.len());
    {
        let mut st =
            tx.prepare("SELECT version, maps, scalars FROM features WHERE trigger_id = ?1")?;
        for r in rows {
            let got: Option<(i64, Vec<u8>, Vec<u8>)> = st
                .query_row([r.id], |row| Ok((row.get(0)?, row.get(1)?, row.get(2)?)))
                .optional()?;
            have.push(match got {
                Some((v, m, s)) if v == FEATURE_VERSION => {
                    let m =
                        blob_to_f32(&m).with_context(|| format!("features of trigger {}", r.id))?;
                    let s =
                        blob_to_f32(&s).with_context(|| format!("features of trigger {}", r.id))?;
                    (m.len() == SPANS_S.len() * MAP_LEN && s.len() == N_SCALARS).then_some((m, s))
                }
                _ => None,
            });
        }
    }
    let todo: Vec<usize> = (0..rows.len()).filter(|&i| have[i].is_none()).collect();
    type Computed = Result<(usize, Vec<f32>, Vec<f32>)>;
    let computed: Vec<Computed> = todo
        .par_iter()
        .map(|&i| {
            let fp = fingerprint(&rows[i].trig, &rows[i].channel, src)
                .with_context(|| format!("fingerprint of trigger {}", rows[i].id))?;
            Ok((i, fp.maps, fp.scalars))
        })
        .collect();
    let mut st = tx.prepare(
        "INSERT OR REPLACE INTO features (trigger_id, version, maps, scalars) VALUES (?1, ?2, ?3, ?4)",
    )?;
    for c in computed {
        let (i, m, s) = c?;
        st.execute(params![
            rows[i].id,
            FEATURE_VERSION,
            f32_to_blob(&m),
            f32_to_blob(&s)
        ])?;
        have[i] = Some((m, s));
    }
    Ok((
        have.into_iter().map(|h| h.expect("filled")).collect(),
        todo.len(),
    ))
}

/// Compute and store fingerprints of every target trigger with SNR ≥
/// `min_snr` that lacks a current-version one (one transaction). Returns
/// the number computed.
pub fn compute_features(
    conn: &mut Connection,
    min_snr: f64,
    src: &dyn EnergyMapSource,
) -> Result<usize> {
    let tx = conn.transaction()?;
    let rows = target_triggers(&tx, min_snr, false)?;
    let (_, n) = ensure_features(&tx, &rows, src)?;
    tx.commit()?;
    Ok(n)
}

fn quantile(v: &[f64], q: f64) -> f64 {
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
fn group_resp(resp: &[f64], k: usize, groups: &[usize]) -> (Vec<f64>, usize) {
    let g = groups.iter().max().map_or(0, |m| m + 1);
    let mut out = vec![0.0; resp.len() / k * g];
    for (i, r) in resp.chunks(k).enumerate() {
        for c in 0..k {
            out[i * g + groups[c]] += r[c];
        }
    }
    (out, g)
}

fn argmax(r: &[f64]) -> usize {
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
    let scalar_cols = CLUSTER_SCALARS.to_vec();
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
    };
    let sc = Array2::from_shape_fn((n, model.scalar_cols.len()), |(i, j)| {
        model.raw_scalars(&fps[i].1)[j]
    });
    model.scalar_scaler = Scaler::fit(sc.view());
    let x = model.vectors(fps);
    let base = GmmParams {
        n_init: p.n_init.max(1),
        ..GmmParams::new(1, p.seed)
    };
    let auto = fit_auto_k(
        x.view(),
        p.k_max.max(1),
        &base,
        p.select_rows,
        p.select_diagonal,
    )?;
    let ll = auto.best.score_samples(x.view());
    model.novelty_loglik = quantile(&ll, p.novelty_quantile);
    model.gmm = auto.best;
    Ok((model, auto.bic))
}

/// Cluster every target trigger with SNR ≥ `p.min_snr` (computing missing
/// fingerprints from `src`), keep family ids stable against the previous
/// run, and store memberships and the model — all in one transaction.
pub fn cluster_catalogue(
    conn: &mut Connection,
    p: &ClusterParams,
    src: &dyn EnergyMapSource,
) -> Result<ClusterReport> {
    if !(0.0..1.0).contains(&p.novelty_quantile) {
        bail!(
            "novelty quantile must be in [0, 1), got {}",
            p.novelty_quantile
        );
    }
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    let rows = target_triggers(&tx, p.min_snr, false)?;
    let (fps, n_computed) = ensure_features(&tx, &rows, src)?;
    let (mut model, bic) = fit_model(&fps, p)?;
    let x = model.vectors(&fps);
    let (cresp, ll) = model.gmm.predict_proba(x.view());
    let groups = component_groups(&cresp, model.gmm.k(), p.merge_overlap);
    let (resp, k) = group_resp(&cresp, model.gmm.k(), &groups);
    let labels: Vec<usize> = resp.chunks(k).map(argmax).collect();

    // Previous memberships (family ids of active families).
    let mut old: HashMap<i64, i64> = HashMap::new();
    {
        let mut st = tx.prepare(
            "SELECT m.trigger_id, m.family_id FROM family_members m JOIN families f ON f.id = m.family_id \
             WHERE f.status = 'active'",
        )?;
        for r in st.query_map([], |r| Ok((r.get::<_, i64>(0)?, r.get::<_, i64>(1)?)))? {
            let (t, f) = r?;
            old.insert(t, f);
        }
    }
    let mut old_fams: Vec<i64> = old.values().copied().collect();
    old_fams.sort_unstable();
    old_fams.dedup();
    let mut old_size: HashMap<i64, usize> = HashMap::new();
    for f in old.values() {
        *old_size.entry(*f).or_default() += 1;
    }
    // overlap[c][f]: triggers of new component c previously in old family f.
    let mut overlap = vec![vec![0usize; old_fams.len()]; k];
    let mut comp_old = vec![0usize; k]; // members of c that had an old family
    let fidx: HashMap<i64, usize> = old_fams.iter().enumerate().map(|(i, f)| (*f, i)).collect();
    for (r, &c) in rows.iter().zip(&labels) {
        if let Some(f) = old.get(&r.id) {
            overlap[c][fidx[f]] += 1;
            comp_old[c] += 1;
        }
    }

    // Run row first (families reference it).
    let params_json = serde_json::to_string(p)?;
    let bic_json = serde_json::to_string(&bic)?;
    tx.execute(
        "INSERT INTO cluster_runs (created_utc, params_json, tool_version, feature_version, \
         n_clustered, n_families, bic_json, model_json) VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, '{}')",
        params![
            now_utc(),
            params_json,
            env!("CARGO_PKG_VERSION"),
            FEATURE_VERSION,
            rows.len() as i64,
            k as i64,
            bic_json
        ],
    )?;
    let run_id = tx.last_insert_rowid();

    // Hungarian assignment maximising overlap.
    let mut comp_family: Vec<Option<i64>> = vec![None; k];
    let mut events = Vec::new();
    if !old_fams.is_empty() {
        let cost: Vec<Vec<f64>> = overlap
            .iter()
            .map(|r| r.iter().map(|&o| -(o as f64)).collect())
            .collect();
        for (c, a) in hungarian::assign(&cost).into_iter().enumerate() {
            if let Some(j) = a {
                let o = overlap[c][j];
                let f = old_fams[j];
                // Accept when the shared triggers are a real part of either group.
                let need = (0.25 * comp_old[c].min(old_size[&f]) as f64).max(1.0);
                if o as f64 >= need {
                    comp_family[c] = Some(f);
                    events.push(FamilyEvent {
                        kind: "kept".into(),
                        family_id: f,
                        other_family_id: None,
                        n_shared: o,
                    });
                }
            }
        }
    }
    for c in 0..k {
        if comp_family[c].is_some() {
            continue;
        }
        tx.execute(
            "INSERT INTO families (status, created_run, last_run) VALUES ('active', ?1, ?1)",
            [run_id],
        )?;
        let id = tx.last_insert_rowid();
        comp_family[c] = Some(id);
        // A split when a substantial part of it came from one old family.
        let best = (0..old_fams.len()).max_by_key(|&j| overlap[c][j]);
        match best {
            Some(j) if comp_old[c] > 0 && overlap[c][j] as f64 >= 0.5 * comp_old[c] as f64 => {
                events.push(FamilyEvent {
                    kind: "split".into(),
                    family_id: id,
                    other_family_id: Some(old_fams[j]),
                    n_shared: overlap[c][j],
                })
            }
            _ => events.push(FamilyEvent {
                kind: "new".into(),
                family_id: id,
                other_family_id: None,
                n_shared: 0,
            }),
        }
    }
    let comp_family: Vec<i64> = comp_family.into_iter().map(|f| f.expect("set")).collect();
    // Old families not kept: merged (most members went to one kept family) or retired.
    for (j, &f) in old_fams.iter().enumerate() {
        if comp_family.contains(&f) {
            continue;
        }
        let (c, o) = (0..k)
            .map(|c| (c, overlap[c][j]))
            .max_by_key(|x| x.1)
            .unwrap_or((0, 0));
        if o as f64 >= 0.5 * old_size[&f] as f64 {
            let into = comp_family[c];
            tx.execute(
                "UPDATE families SET status = 'merged', merged_into = ?2, component = NULL, last_run = ?3 WHERE id = ?1",
                params![f, into, run_id],
            )?;
            events.push(FamilyEvent {
                kind: "merge".into(),
                family_id: f,
                other_family_id: Some(into),
                n_shared: o,
            });
        } else {
            tx.execute(
                "UPDATE families SET status = 'retired', component = NULL, last_run = ?2 WHERE id = ?1",
                params![f, run_id],
            )?;
            events.push(FamilyEvent {
                kind: "retired".into(),
                family_id: f,
                other_family_id: None,
                n_shared: o,
            });
        }
    }
    // Active families that had no members in this run (all members gone).
    tx.execute(
        "UPDATE families SET status = 'retired', component = NULL WHERE status = 'active' AND last_run < ?1 \
         AND id NOT IN (SELECT value FROM json_each(?2))",
        params![run_id, serde_json::to_string(&comp_family)?],
    )?;
    for (c, f) in comp_family.iter().enumerate() {
        tx.execute(
            "UPDATE families SET status = 'active', component = ?2, last_run = ?3 WHERE id = ?1",
            params![f, c as i64, run_id],
        )?;
    }
    for e in &events {
        tx.execute(
            "INSERT INTO family_events (run_id, kind, family_id, other_family_id, n_shared) VALUES (?1, ?2, ?3, ?4, ?5)",
            params![run_id, e.kind, e.family_id, e.other_family_id, e.n_shared as i64],
        )?;
    }
    // Memberships: replace all.
    tx.execute("DELETE FROM family_members", [])?;
    {
        let mut st = tx.prepare(
            "INSERT INTO family_members (trigger_id, family_id, probability, novel, run_id, source, loglik) \
             VALUES (?1, ?2, ?3, 0, ?4, 'cluster', ?5)",
        )?;
        for (i, r) in rows.iter().enumerate() {
            let c = labels[i];
            st.execute(params![
                r.id,
                comp_family[c],
                resp[i * k + c],
                run_id,
                ll[i]
            ])?;
        }
    }
    model.component_family = groups.iter().map(|&g| comp_family[g]).collect();
    tx.execute(
        "UPDATE cluster_runs SET model_json = ?2 WHERE id = ?1",
        params![run_id, serde_json::to_string(&model)?],
    )?;
    let families = list_families_tx(&tx)?;
    tx.commit()?;
    Ok(ClusterReport {
        run_id,
        n_clustered: rows.len(),
        n_features_computed: n_computed,
        bic,
        events,
        families,
    })
}

/// The model of the latest clustering run, if any.
pub fn latest_model(conn: &Connection) -> Result<Option<(i64, FamilyModel)>> {
    let got: Option<(i64, String)> = conn
        .query_row(
            "SELECT id, model_json FROM cluster_runs ORDER BY id DESC LIMIT 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?;
    match got {
        None => Ok(None),
        Some((id, js)) => {
            let m: FamilyModel = serde_json::from_str(&js).with_context(|| {
                format!("catalogue cluster_runs id {id}: model_json unreadable")
            })?;
            Ok(Some((id, m)))
        }
    }
}

/// Place every target trigger (SNR ≥ the model's `min_snr`) that has no
/// membership yet into a family of the latest model, without refitting;
/// triggers whose log-likelihood is below the model's novelty threshold are
/// stored as novel (no family). One transaction.
pub fn assign_new(conn: &mut Connection, src: &dyn EnergyMapSource) -> Result<AssignReport> {
    let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
    let Some((run_id, model)) = latest_model(&tx)? else {
        bail!("no families yet: run `cluster` before `assign`");
    };
    let rows = target_triggers(&tx, model.params.min_snr, true)?;
    let (fps, _) = ensure_features(&tx, &rows, src)?;
    let mut rep = AssignReport {
        n_assigned: 0,
        n_novel: 0,
    };
    if !rows.is_empty() {
        let x = model.vectors(&fps);
        let (cresp, ll) = model.gmm.predict_proba(x.view());
        // Family index of every component (components of one family summed).
        let mut fams: Vec<i64> = model.component_family.clone();
        fams.sort_unstable();
        fams.dedup();
        let groups: Vec<usize> = model
            .component_family
            .iter()
            .map(|f| fams.binary_search(f).expect("present"))
            .collect();
        let (resp, k) = group_resp(&cresp, model.gmm.k(), &groups);
        let mut st = tx.prepare(
            "INSERT INTO family_members (trigger_id, family_id, probability, novel, run_id, source, loglik) \
             VALUES (?1, ?2, ?3, ?4, ?5, 'assign', ?6)",
        )?;
        for (i, r) in rows.iter().enumerate() {
            let c = argmax(&resp[i * k..(i + 1) * k]);
            let novel = ll[i] < model.novelty_loglik;
            let fam = (!novel).then(|| fams[c]);
            st.execute(params![
                r.id,
                fam,
                resp[i * k + c],
                novel as i64,
                run_id,
                ll[i]
            ])?;
            if novel {
                rep.n_novel += 1;
            } else {
                rep.n_assigned += 1;
            }
        }
    }
    tx.commit()?;
    Ok(rep)
}

/// Set a family's human label (and note, if given), recording the change
/// with `author` and the time in `label_history`. One transaction.
///
/// # Errors
/// Unknown family id, or an empty name.
pub fn label(
    conn: &mut Connection,
    family: i64,
    name: &str,
    note: Option<&str>,
    author: &str,
) -> Result<()> {
    let name = name.trim();
    if name.is_empty() {
        bail!("label: the family name must not be empty");
    }
    let tx = conn.transaction()?;
    let cur: Option<(Option<String>, Option<String>)> = tx
        .query_row(
            "SELECT label, note FROM families WHERE id = ?1",
            [family],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?;
    let Some((old_label, old_note)) = cur else {
        bail!("label: no family with id {family}");
    };
    let new_note = note.map(str::to_owned).or(old_note.clone());
    tx.execute(
        "UPDATE families SET label = ?2, note = ?3 WHERE id = ?1",
        params![family, name, new_note],
    )?;
    tx.execute(
        "INSERT INTO label_history (family_id, changed_utc, author, old_label, new_label, old_note, new_note) \
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7)",
        params![family, now_utc(), author, old_label, name, old_note, new_note],
    )?;
    tx.commit()?;
    Ok(())
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

/// Label history of a family, oldest first.
pub fn label_history(conn: &Connection, family: i64) -> Result<Vec<LabelChange>> {
    let mut st = conn.prepare(
        "SELECT changed_utc, author, old_label, new_label, old_note, new_note FROM label_history \
         WHERE family_id = ?1 ORDER BY id",
    )?;
    let v = st
        .query_map([family], |r| {
            Ok(LabelChange {
                changed_utc: r.get(0)?,
                author: r.get(1)?,
                old_label: r.get(2)?,
                new_label: r.get(3)?,
                old_note: r.get(4)?,
                new_note: r.get(5)?,
            })
        })?
        .collect::<rusqlite::Result<_>>()?;
    Ok(v)
}

/// Identity events of every run, oldest first: (run id, event).
pub fn family_events(conn: &Connection) -> Result<Vec<(i64, FamilyEvent)>> {
    let mut st = conn.prepare(
        "SELECT run_id, kind, family_id, other_family_id, n_shared FROM family_events ORDER BY id",
    )?;
    let v = st
        .query_map([], |r| {
            Ok((
                r.get(0)?,
                FamilyEvent {
                    kind: r.get(1)?,
                    family_id: r.get(2)?,
                    other_family_id: r.get(3)?,
                    n_shared: r.get::<_, i64>(4)? as usize,
                },
            ))
        })?
        .collect::<rusqlite::Result<_>>()?;
    Ok(v)
}

/// [`crate::condition::median`], NaN for no values.
fn median(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        f64::NAN
    } else {
        crate::condition::median(v)
    }
}

fn list_families_tx(conn: &Connection) -> Result<Vec<FamilySummary>> {
    struct Acc {
        snr: Vec<f64>,
        fpk: Vec<f64>,
        dur: Vec<f64>,
        t: Vec<i64>,
        prob: Vec<f64>,
        ex: Vec<(f64, f64, i64)>,
    }
    let mut acc: BTreeMap<i64, Acc> = BTreeMap::new();
    let mut st = conn.prepare(
        "SELECT COALESCE(m.family_id, 0), m.novel, m.probability, t.id, t.snr, t.f_peak_hz, t.t_start_ns, t.t_end_ns, t.t_peak_ns \
         FROM family_members m JOIN triggers t ON t.id = m.trigger_id \
         LEFT JOIN families f ON f.id = m.family_id \
         WHERE (m.novel = 1 AND m.family_id IS NULL) OR f.status = 'active'",
    )?;
    let mut rows = st.query([])?;
    while let Some(r) = rows.next()? {
        let fam: i64 = r.get(0)?;
        let prob: Option<f64> = r.get(2)?;
        let a = acc.entry(fam).or_insert_with(|| Acc {
            snr: vec![],
            fpk: vec![],
            dur: vec![],
            t: vec![],
            prob: vec![],
            ex: vec![],
        });
        let snr: f64 = r.get(4)?;
        a.snr.push(snr);
        a.fpk.push(r.get(5)?);
        let (s, e): (i64, i64) = (r.get(6)?, r.get(7)?);
        a.dur.push((e - s) as f64 * 1e-9);
        a.t.push(r.get(8)?);
        a.prob.push(prob.unwrap_or(f64::NAN));
        a.ex.push((prob.unwrap_or(0.0), snr, r.get(3)?));
    }
    let mut meta = conn.prepare("SELECT label, note FROM families WHERE id = ?1")?;
    let mut out = Vec::new();
    for (id, mut a) in acc {
        let (label, note) = if id == 0 {
            (None, None)
        } else {
            meta.query_row([id], |r| Ok((r.get(0)?, r.get(1)?)))?
        };
        let min = |v: &[f64]| v.iter().cloned().fold(f64::INFINITY, f64::min);
        let max = |v: &[f64]| v.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
        a.ex.sort_by(|x, y| {
            y.0.total_cmp(&x.0)
                .then(y.1.total_cmp(&x.1))
                .then(x.2.cmp(&y.2))
        });
        out.push(FamilySummary {
            id,
            label,
            note,
            count: a.snr.len(),
            median_snr: median(&mut a.snr),
            f_peak_min_hz: min(&a.fpk),
            f_peak_max_hz: max(&a.fpk),
            duration_min_s: min(&a.dur),
            duration_max_s: max(&a.dur),
            first_gps: from_ns(*a.t.iter().min().expect("non-empty")),
            last_gps: from_ns(*a.t.iter().max().expect("non-empty")),
            cohesion: if id == 0 {
                f64::NAN
            } else {
                a.prob.iter().sum::<f64>() / a.prob.len() as f64
            },
            example_trigger_ids: a.ex.iter().take(5).map(|x| x.2).collect(),
            novel: id == 0,
        });
    }
    // Families first by id; the novel candidate group last.
    out.sort_by_key(|f| if f.novel { i64::MAX } else { f.id });
    Ok(out)
}

/// Active families with members, by id, then (if any) the candidate group
/// of novel triggers (`id` 0, `novel` true).
pub fn list_families(conn: &Connection) -> Result<Vec<FamilySummary>> {
    list_families_tx(conn)
}

/// Trigger ids of a family's members, most probable first (for thumbnails).
pub fn family_member_ids(conn: &Connection, family: i64, limit: usize) -> Result<Vec<i64>> {
    let mut st = conn.prepare(
        "SELECT m.trigger_id FROM family_members m JOIN triggers t ON t.id = m.trigger_id \
         WHERE m.family_id = ?1 ORDER BY m.probability DESC, t.snr DESC, t.id LIMIT ?2",
    )?;
    let v = st
        .query_map(params![family, limit as i64], |r| r.get(0))?
        .collect::<rusqlite::Result<_>>()?;
    Ok(v)
}

/// The trigger with `id` and its channel name, if any.
fn trigger_row(conn: &Connection, trigger_id: i64) -> Result<Option<Row>> {
    let mut st = conn.prepare(
        "SELECT t.id, c.name, t.t_peak_ns, t.t_start_ns, t.t_end_ns, t.f_peak_hz, t.f_low_hz, \
         t.f_high_hz, t.snr, t.q, t.energy FROM triggers t JOIN channels c ON c.id = t.channel_id \
         WHERE t.id = ?1",
    )?;
    st.query_row([trigger_id], Row::from_sql)
        .optional()
        .map_err(Into::into)
}

/// Spectrogram image of one trigger: a 2 s normalised-energy map at the
/// trigger's Q, 128 times × 64 log-frequencies (16–2048 Hz), 4 × 4 px cells.
pub const IMAGE_SPAN_S: f64 = 2.0;
const IMAGE_TIMES: usize = 128;
const IMAGE_FREQS: usize = 64;

/// What a spectrogram image shows: time `t_peak ± span_s/2` left to right,
/// frequency bottom to top on a log scale between the outer edges of its
/// first and last rows.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ImageExtent {
    /// Time span \[s\], centred on the trigger's peak.
    pub span_s: f64,
    /// Frequency at the bottom and top edges of the image \[Hz\].
    pub f_edges_hz: (f64, f64),
}

impl ImageExtent {
    /// Extent of `n` log-spaced rows centred on `f_lo..=f_hi`: each row is
    /// one log step tall, so the edges lie half a step outside.
    fn log_rows(span_s: f64, f_lo: f64, f_hi: f64, n: usize) -> ImageExtent {
        let half = 0.5 * (f_hi / f_lo).ln() / (n.max(2) - 1) as f64;
        ImageExtent {
            span_s,
            f_edges_hz: (f_lo * (-half).exp(), f_hi * half.exp()),
        }
    }
}

/// Write a PNG spectrogram image of one target trigger to `path`: a fresh
/// high-resolution map from `src` (see [`IMAGE_SPAN_S`]), or, when the data
/// cannot be read any more, the stored 1 s fingerprint map. Returns what
/// the image shows.
///
/// # Errors
/// Unknown trigger id, or no map can be computed or written.
pub fn render_trigger_thumbnail(
    conn: &Connection,
    trigger_id: i64,
    src: &dyn EnergyMapSource,
    path: &std::path::Path,
) -> Result<ImageExtent> {
    if let Ok(Some(row)) = trigger_row(conn, trigger_id) {
        let freqs = super::features::log_grid(F_MIN_HZ, F_MAX_HZ, IMAGE_FREQS);
        let q = super::features::map_q(&row.trig);
        if let Ok(map) = src.energy_map(
            &row.channel,
            row.trig.t_peak,
            IMAGE_SPAN_S,
            q,
            &freqs,
            IMAGE_TIMES,
        ) {
            super::thumbnail::render_map(&map, IMAGE_TIMES, IMAGE_FREQS, (4, 4), path)?;
            let (lo, hi) = (freqs[0], freqs[IMAGE_FREQS - 1]);
            return Ok(ImageExtent::log_rows(IMAGE_SPAN_S, lo, hi, IMAGE_FREQS));
        }
    }
    let stored: Option<(i64, Vec<u8>)> = conn
        .query_row(
            "SELECT version, maps FROM features WHERE trigger_id = ?1",
            [trigger_id],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?;
    let maps = match stored {
        Some((v, m)) if v == FEATURE_VERSION => blob_to_f32(&m)?,
        _ => {
            let row = trigger_row(conn, trigger_id)?;
            let Some(row) = row else {
                bail!("thumbnail: no trigger with id {trigger_id}");
            };
            fingerprint(&row.trig, &row.channel, src)
                .with_context(|| format!("fingerprint of trigger {}", row.id))?
                .maps
        }
    };
    if maps.len() != SPANS_S.len() * MAP_LEN {
        bail!(
            "thumbnail: stored maps of trigger {trigger_id} have {} values",
            maps.len()
        );
    }
    super::thumbnail::render_thumbnail(&maps[MAP_LEN..2 * MAP_LEN], N_TIMES, N_FREQS, path)?;
    let freqs = super::features::map_freqs_hz();
    Ok(ImageExtent::log_rows(
        SPANS_S[1],
        freqs[0],
        freqs[N_FREQS - 1],
        N_FREQS,
    ))
}

/// A spectrogram image of one family member, with what it shows.
#[derive(Debug, Clone, PartialEq)]
pub struct Thumbnail {
    /// Family of the trigger.
    pub family_id: i64,
    /// Trigger id.
    pub trigger_id: i64,
    /// The PNG.
    pub path: std::path::PathBuf,
    /// The trigger's peak time \[GPS s\].
    pub t_peak_gps: f64,
    /// Peak frequency \[Hz\].
    pub f_peak_hz: f64,
    /// Signal-to-noise ratio.
    pub snr: f64,
    /// Quality factor of the map (the trigger's Q, see `map_q`).
    pub q: f64,
    /// Axes of the image.
    pub extent: ImageExtent,
}

/// Thumbnails of up to `per_family` representative members (most probable
/// first) of every active family, written as
/// `dir/family_<id>_trigger_<trigger id>.png`.
///
/// # Errors
/// The directory cannot be made, or an image cannot be computed or written.
pub fn render_family_thumbnails(
    conn: &Connection,
    src: &dyn EnergyMapSource,
    dir: &std::path::Path,
    per_family: usize,
) -> Result<Vec<Thumbnail>> {
    std::fs::create_dir_all(dir).with_context(|| format!("creating {}", dir.display()))?;
    let mut out = Vec::new();
    for f in list_families(conn)?.iter().filter(|f| !f.novel) {
        for t in family_member_ids(conn, f.id, per_family)? {
            let p = dir.join(format!("family_{}_trigger_{t}.png", f.id));
            let extent = render_trigger_thumbnail(conn, t, src, &p)?;
            let row = trigger_row(conn, t)?
                .ok_or_else(|| anyhow::anyhow!("thumbnail: no trigger with id {t}"))?;
            out.push(Thumbnail {
                family_id: f.id,
                trigger_id: t,
                path: p,
                t_peak_gps: row.trig.t_peak,
                f_peak_hz: row.trig.f_peak,
                snr: row.trig.snr,
                q: super::features::map_q(&row.trig),
                extent,
            });
        }
    }
    Ok(out)
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
            (0..SPANS_S.len() * MAP_LEN)
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

    #[test]
    fn utc_format() {
        let s = now_utc();
        assert_eq!(s.len(), 20);
        assert!(s.starts_with("20") && s.ends_with('Z'));
    }
}
