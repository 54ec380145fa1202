//! A supervised classifier that learns the scientists' labels: multinomial
//! logistic regression (linfa-logistic 0.8.1, L2 penalty) on the
//! trigger-relative morphology of the fingerprint, trained on the members
//! of labelled families, with a stratified k-fold cross-validated confusion
//! matrix and per-label precision and recall. Pure: no catalogue access
//! (that is [`super::classifier_db`]).
//!
//! Classes are the distinct labels, plus [`UNLABELLED`] for the members of
//! active families nobody has labelled yet, so a trigger that looks like an
//! unlabelled family is not forced into a label. A prediction is a label
//! only when its probability is at least [`ClassifierParams::min_probability`]
//! (a reject option, Chow 1970, IEEE Trans. Inf. Theory 16, 41); otherwise
//! the trigger stays unclassified (`uncertain`, or `unlabelled`).
//!
//! Why logistic regression: it gives class probabilities (needed for the
//! reject option; linfa-trees 0.8.1 decision trees give only a class), it
//! is convex (the same fit every run, no seed) and it can be checked
//! against scikit-learn's `LogisticRegression` (same objective:
//! `Σ −ln p(y_i|x_i) + α/2 ‖W‖²`, i.e. scikit-learn's `C = 1/α`).
//! Features: the clustering scalars ([`super::model::CLUSTER_SCALARS`]),
//! z-scored on the training rows, with their squares and pairwise products
//! ([`ClassifierParams::quadratic`], default on: the families come from a
//! full-covariance Gaussian mixture, whose boundaries are quadratic).

use super::model::CLUSTER_SCALARS;
use anyhow::{anyhow, bail, Result};
use linfa::prelude::*;
use linfa::Dataset;
use linfa_logistic::MultiLogisticRegression;
use ndarray::{Array1, Array2};
use serde::{Deserialize, Serialize};

/// Class of the members of families without a label.
pub const UNLABELLED: &str = "(unlabelled)";

/// Options of the classifier.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ClassifierParams {
    /// L2 penalty weight α (default 1, scikit-learn's default `C = 1`).
    pub alpha: f64,
    /// Add squares and pairwise products of the z-scored scalars (default true).
    pub quadratic: bool,
    /// A label is given only with at least this probability (default 0.8;
    /// chosen, not tuned).
    pub min_probability: f64,
    /// Folds of the cross-validation (default 5, common practice).
    pub folds: usize,
    /// Seed of the fold assignment.
    pub seed: u64,
    /// Iteration limit of the optimiser (L-BFGS in argmin; default 500).
    pub max_iterations: u64,
}

impl Default for ClassifierParams {
    fn default() -> Self {
        ClassifierParams {
            alpha: 1.0,
            quadratic: true,
            min_probability: 0.8,
            folds: 5,
            seed: 0,
            max_iterations: 500,
        }
    }
}

impl ClassifierParams {
    /// Check the parameters.
    ///
    /// # Errors
    /// [`crate::Error::InvalidParameter`] naming the field.
    pub fn check(&self) -> crate::Result<()> {
        use crate::Error;
        if !(self.alpha.is_finite() && self.alpha > 0.0) {
            return Err(Error::invalid(
                "alpha",
                format!("must be > 0 (got {})", self.alpha),
            ));
        }
        if !(0.0..=1.0).contains(&self.min_probability) {
            return Err(Error::invalid(
                "min_probability",
                format!("must be in [0, 1] (got {})", self.min_probability),
            ));
        }
        if self.folds < 2 {
            return Err(Error::invalid(
                "folds",
                format!("must be ≥ 2 (got {})", self.folds),
            ));
        }
        Ok(())
    }
}

/// A fitted classifier (stored as JSON in `classifiers.model_json`).
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Classifier {
    /// Fingerprint scalar columns used ([`super::features::SCALAR_NAMES`]).
    pub scalar_cols: Vec<usize>,
    /// Mean of each scalar over the training rows.
    pub mean: Vec<f64>,
    /// Standard deviation of each scalar over the training rows (≥ 1e-9).
    pub scale: Vec<f64>,
    /// Squares and pairwise products added.
    pub quadratic: bool,
    /// Class names, in column order of `weights` (may include [`UNLABELLED`]).
    pub labels: Vec<String>,
    /// Weights, one row per feature, one column per class.
    pub weights: Vec<Vec<f64>>,
    /// Intercept per class.
    pub intercept: Vec<f64>,
    /// Reject threshold on the largest probability.
    pub min_probability: f64,
}

/// The answer for one trigger.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Prediction {
    /// The label, or None when unclassified.
    pub label: Option<String>,
    /// Probability of the most probable class.
    pub probability: f64,
    /// Why unclassified: `unlabelled` (looks like an unlabelled family) or
    /// `uncertain` (below the reject threshold).
    pub reason: Option<&'static str>,
}

/// Feature vector of one fingerprint's scalars for a classifier with this
/// standardisation.
fn expand(sc: &[f32], cols: &[usize], mean: &[f64], scale: &[f64], quadratic: bool) -> Vec<f64> {
    let z: Vec<f64> = cols
        .iter()
        .enumerate()
        .map(|(j, &c)| {
            let v = (sc[c] as f64 - mean[j]) / scale[j];
            if v.is_finite() {
                v
            } else {
                0.0
            }
        })
        .collect();
    let mut out = z.clone();
    if quadratic {
        for a in 0..z.len() {
            for b in a..z.len() {
                out.push(z[a] * z[b]);
            }
        }
    }
    out
}

fn softmax(h: &mut [f64]) {
    let m = h.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let mut s = 0.0;
    for v in h.iter_mut() {
        *v = (*v - m).exp();
        s += *v;
    }
    for v in h.iter_mut() {
        *v /= s;
    }
}

impl Classifier {
    /// Class probabilities of one fingerprint's scalars (column order of
    /// [`Classifier::labels`]).
    pub fn probabilities(&self, scalars: &[f32]) -> Vec<f64> {
        let x = expand(
            scalars,
            &self.scalar_cols,
            &self.mean,
            &self.scale,
            self.quadratic,
        );
        let mut h = self.intercept.clone();
        for (xi, w) in x.iter().zip(&self.weights) {
            for (hc, wc) in h.iter_mut().zip(w) {
                *hc += xi * wc;
            }
        }
        softmax(&mut h);
        h
    }

    /// Index of the most probable class and its probability.
    pub fn best(&self, scalars: &[f32]) -> (usize, f64) {
        let p = self.probabilities(scalars);
        let c = super::model::argmax(&p);
        (c, p[c])
    }

    /// Label one fingerprint's scalars, or leave it unclassified.
    pub fn classify(&self, scalars: &[f32]) -> Prediction {
        let (c, p) = self.best(scalars);
        let label = &self.labels[c];
        let reason = if label == UNLABELLED {
            Some("unlabelled")
        } else if p < self.min_probability {
            Some("uncertain")
        } else {
            None
        };
        Prediction {
            label: reason.is_none().then(|| label.clone()),
            probability: p,
            reason,
        }
    }
}

/// Fit multinomial logistic regression on rows `x` (n × d) with classes
/// `y` in `0..n_classes`: linfa-logistic 0.8.1
/// `MultiLogisticRegression::default().alpha(α).max_iterations(m).fit(..)`.
/// Returns (weights d × n_classes, intercept); a class absent from `y`
/// gets weight 0 and intercept −∞ (probability 0).
pub fn fit_logistic(
    x: Array2<f64>,
    y: &[usize],
    n_classes: usize,
    alpha: f64,
    max_iterations: u64,
) -> Result<(Vec<Vec<f64>>, Vec<f64>)> {
    let d = x.ncols();
    let ds = Dataset::new(x, Array1::from(y.to_vec()));
    let fit = MultiLogisticRegression::default()
        .alpha(alpha)
        .max_iterations(max_iterations)
        .fit(&ds)
        .map_err(|e| anyhow!("logistic regression: {e}"))?;
    let mut w = vec![vec![0.0; n_classes]; d];
    let mut b = vec![f64::NEG_INFINITY; n_classes];
    for (j, &c) in fit.classes().iter().enumerate() {
        b[c] = fit.intercept()[j];
        for (f, row) in w.iter_mut().enumerate() {
            row[c] = fit.params()[[f, j]];
        }
    }
    Ok((w, b))
}

/// Train a classifier on fingerprint scalars `scalars` with class indices
/// `y` into `labels`.
///
/// # Errors
/// Fewer than 2 classes present, mismatched lengths, a failed fit.
pub fn train(
    scalars: &[&[f32]],
    y: &[usize],
    labels: &[String],
    p: &ClassifierParams,
) -> Result<Classifier> {
    if scalars.len() != y.len() {
        bail!("{} fingerprints but {} labels", scalars.len(), y.len());
    }
    let mut present: Vec<usize> = y.to_vec();
    present.sort_unstable();
    present.dedup();
    if present.len() < 2 {
        bail!(
            "a classifier needs members of at least 2 classes (labelled families, or labelled and \
             unlabelled ones), found {}",
            present.len()
        );
    }
    let cols = CLUSTER_SCALARS.to_vec();
    let n = scalars.len() as f64;
    let mut mean = vec![0.0; cols.len()];
    let mut scale = vec![0.0; cols.len()];
    for (j, &c) in cols.iter().enumerate() {
        let v: Vec<f64> = scalars.iter().map(|s| s[c] as f64).collect();
        mean[j] = v.iter().sum::<f64>() / n;
        let var = v.iter().map(|x| (x - mean[j]).powi(2)).sum::<f64>() / n;
        scale[j] = var.sqrt().max(1e-9);
    }
    let rows: Vec<Vec<f64>> = scalars
        .iter()
        .map(|s| expand(s, &cols, &mean, &scale, p.quadratic))
        .collect();
    let d = rows[0].len();
    let x = Array2::from_shape_vec((rows.len(), d), rows.concat())?;
    let (weights, intercept) = fit_logistic(x, y, labels.len(), p.alpha, p.max_iterations)?;
    Ok(Classifier {
        scalar_cols: cols,
        mean,
        scale,
        quadratic: p.quadratic,
        labels: labels.to_vec(),
        weights,
        intercept,
        min_probability: p.min_probability,
    })
}

/// Precision and recall of one class over the cross-validation.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LabelScore {
    /// The class.
    pub label: String,
    /// Training members of the class.
    pub support: usize,
    /// Of the rows predicted as this class, the share that are (NaN when
    /// none was predicted).
    pub precision: f64,
    /// Of the rows of this class, the share predicted as it.
    pub recall: f64,
}

/// Result of [`cross_validate`] (stored in `classifiers.cv_json`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CrossValidation {
    /// Folds.
    pub folds: usize,
    /// Rows.
    pub n: usize,
    /// Classes, in the order of the confusion matrix.
    pub labels: Vec<String>,
    /// `confusion[true][predicted]`: rows counted by their most probable
    /// class (the reject option aside, so every row is counted once).
    pub confusion: Vec<Vec<usize>>,
    /// Share of rows on the diagonal.
    pub accuracy: f64,
    /// Per class.
    pub per_label: Vec<LabelScore>,
    /// Rows whose most probable class had probability below the reject
    /// threshold (they would stay unclassified).
    pub n_uncertain: usize,
}

/// Fold of every row: stratified (each class dealt round-robin over the
/// folds in a seeded order), so every fold holds every class in proportion.
pub fn stratified_folds(y: &[usize], folds: usize, seed: u64) -> Vec<usize> {
    let mut order: Vec<usize> = (0..y.len()).collect();
    let key = |i: usize| xxhash_rust::xxh3::xxh3_64_with_seed(&(i as u64).to_le_bytes(), seed);
    order.sort_by_key(|&i| (y[i], key(i)));
    let mut out = vec![0; y.len()];
    for (k, i) in order.into_iter().enumerate() {
        out[i] = k % folds;
    }
    out
}

/// Stratified k-fold cross-validation of [`train`]: the confusion matrix,
/// accuracy and per-class precision/recall.
///
/// # Errors
/// As [`train`] on a fold.
pub fn cross_validate(
    scalars: &[&[f32]],
    y: &[usize],
    labels: &[String],
    p: &ClassifierParams,
) -> Result<CrossValidation> {
    p.check()?;
    let fold = stratified_folds(y, p.folds, p.seed);
    let nc = labels.len();
    let mut confusion = vec![vec![0usize; nc]; nc];
    let mut n_uncertain = 0;
    for f in 0..p.folds {
        let (tr, te): (Vec<usize>, Vec<usize>) = (0..y.len()).partition(|&i| fold[i] != f);
        if te.is_empty() {
            continue;
        }
        let xs: Vec<&[f32]> = tr.iter().map(|&i| scalars[i]).collect();
        let ys: Vec<usize> = tr.iter().map(|&i| y[i]).collect();
        let m = train(&xs, &ys, labels, p)?;
        for &i in &te {
            let (c, prob) = m.best(scalars[i]);
            confusion[y[i]][c] += 1;
            if prob < p.min_probability {
                n_uncertain += 1;
            }
        }
    }
    let n: usize = confusion.iter().flatten().sum();
    let diag: usize = (0..nc).map(|c| confusion[c][c]).sum();
    let per_label = (0..nc)
        .map(|c| {
            let support: usize = confusion[c].iter().sum();
            let predicted: usize = (0..nc).map(|t| confusion[t][c]).sum();
            LabelScore {
                label: labels[c].clone(),
                support,
                precision: confusion[c][c] as f64 / predicted as f64,
                recall: confusion[c][c] as f64 / support.max(1) as f64,
            }
        })
        .collect();
    Ok(CrossValidation {
        folds: p.folds,
        n,
        labels: labels.to_vec(),
        confusion,
        accuracy: diag as f64 / n.max(1) as f64,
        per_label,
        n_uncertain,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Three well-separated classes in the clustering scalars.
    fn blobs() -> (Vec<Vec<f32>>, Vec<usize>) {
        let mut xs = Vec::new();
        let mut ys = Vec::new();
        for i in 0..90usize {
            let c = i % 3;
            let mut s = vec![0.0f32; super::super::features::N_SCALARS];
            let jitter = ((i * 7919) % 97) as f32 / 97.0 - 0.5;
            for (j, &col) in CLUSTER_SCALARS.iter().enumerate() {
                s[col] = (c as f32) * 3.0 + jitter * (1.0 + j as f32 * 0.1);
            }
            xs.push(s);
            ys.push(c);
        }
        (xs, ys)
    }

    #[test]
    fn separated_classes_are_learned_and_cross_validated() {
        let (xs, ys) = blobs();
        let refs: Vec<&[f32]> = xs.iter().map(|v| v.as_slice()).collect();
        let labels: Vec<String> = ["a", "b", UNLABELLED].map(String::from).to_vec();
        let p = ClassifierParams::default();
        let m = train(&refs, &ys, &labels, &p).unwrap();
        let pr = m.classify(&xs[0]);
        assert_eq!(pr.label.as_deref(), Some("a"));
        assert!(pr.probability > 0.8);
        // Looks like the unlabelled class: not forced into a label.
        let pr = m.classify(&xs[2]);
        assert_eq!((pr.label, pr.reason), (None, Some("unlabelled")));
        let cv = cross_validate(&refs, &ys, &labels, &p).unwrap();
        assert_eq!(cv.n, 90);
        assert_eq!(cv.accuracy, 1.0);
        assert_eq!(cv.confusion[1], vec![0, 30, 0]);
        assert!(cv
            .per_label
            .iter()
            .all(|l| l.precision == 1.0 && l.recall == 1.0));
    }

    #[test]
    fn folds_are_stratified_and_seeded() {
        let y: Vec<usize> = (0..50).map(|i| usize::from(i >= 40)).collect();
        let f = stratified_folds(&y, 5, 3);
        for k in 0..5 {
            let in_k: Vec<usize> = (0..50).filter(|&i| f[i] == k).collect();
            assert_eq!(in_k.len(), 10);
            assert_eq!(in_k.iter().filter(|&&i| y[i] == 1).count(), 2);
        }
        assert_eq!(f, stratified_folds(&y, 5, 3));
        assert_ne!(f, stratified_folds(&y, 5, 4));
    }

    #[test]
    fn one_class_is_refused() {
        let (xs, _) = blobs();
        let refs: Vec<&[f32]> = xs.iter().map(|v| v.as_slice()).collect();
        let y = vec![0; refs.len()];
        let e = train(&refs, &y, &["a".to_string()], &ClassifierParams::default());
        assert!(e.unwrap_err().to_string().contains("at least 2 classes"));
    }
}
