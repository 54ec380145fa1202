//! The classifier by label (issue 12 item 4): checked against
//! scikit-learn 1.9.1 `LogisticRegression` on a fixture
//! (tests/data/families/classifier/), and end to end in a catalogue:
//! `classify` after labelling, the cross-validation, `assign` classifying
//! new triggers, unlabelled families not forced into a label.

use glitchbook::families::classifier::{train, ClassifierParams};
use glitchbook::families::classifier_db::{latest_classifier, train_and_classify, trigger_class};
use glitchbook::families::features::N_SCALARS;
use glitchbook::families::model::CLUSTER_SCALARS;
use glitchbook::families::*;
use std::path::Path;

/// The fixture's 5-d rows placed in the classifier's scalar columns.
fn as_scalars(x: &[Vec<f64>]) -> Vec<Vec<f32>> {
    x.iter()
        .map(|r| {
            let mut s = vec![0.0f32; N_SCALARS];
            for (j, &c) in CLUSTER_SCALARS.iter().enumerate() {
                s[c] = r[j] as f32;
            }
            s
        })
        .collect()
}

#[test]
fn logistic_matches_sklearn() {
    // scikit-learn 1.9.1: LogisticRegression(C=1.0, tol=1e-10,
    // max_iter=10000) on StandardScaler-ed features, with
    // PolynomialFeatures(degree=2, include_bias=False) for the quadratic
    // model (tests/data/families/classifier/make_fixture_classifier.py).
    let text = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("tests/data/families/classifier/fixture_classifier.json"),
    )
    .unwrap();
    let f: serde_json::Value = serde_json::from_str(&text).unwrap();
    let x: Vec<Vec<f64>> = serde_json::from_value(f["X"].clone()).unwrap();
    let y: Vec<usize> = serde_json::from_value(f["y"].clone()).unwrap();
    let n_train = f["n_train"].as_u64().unwrap() as usize;
    let sc = as_scalars(&x);
    let refs: Vec<&[f32]> = sc.iter().map(|v| v.as_slice()).collect();
    let labels: Vec<String> = (0..4).map(|c| format!("class-{c}")).collect();
    for (name, quadratic) in [("linear", false), ("quadratic", true)] {
        let p = ClassifierParams {
            alpha: 1.0 / f["C"].as_f64().unwrap(),
            quadratic,
            ..Default::default()
        };
        let m = train(&refs[..n_train], &y[..n_train], &labels, &p).unwrap();
        let want = &f["models"][name];
        let want_p: Vec<Vec<f64>> = serde_json::from_value(want["test_proba"].clone()).unwrap();
        let (mut right, mut dp, mut dmax) = (0usize, 0.0f64, 0.0f64);
        for (i, wp) in (n_train..x.len()).zip(&want_p) {
            let got = m.probabilities(refs[i]);
            let c = (0..4).max_by(|&a, &b| got[a].total_cmp(&got[b])).unwrap();
            right += usize::from(c == y[i]);
            for (g, w) in got.iter().zip(wp) {
                dp += (g - w).abs();
                dmax = dmax.max((g - w).abs());
            }
        }
        let n_test = x.len() - n_train;
        let acc = right as f64 / n_test as f64;
        let want_acc = want["test_accuracy"].as_f64().unwrap();
        let mean_dp = dp / (4 * n_test) as f64;
        println!("{name}: accuracy {acc:.3} vs scikit-learn {want_acc:.3}; |Δp| mean {mean_dp:.2e}, max {dmax:.2e}");
        assert!(
            (acc - want_acc).abs() <= 0.02 + 1e-12,
            "{name}: accuracy {acc} vs scikit-learn {want_acc}"
        );
        assert!(mean_dp < 0.02, "{name}: mean |Δp| {mean_dp}");
        // Same convex objective, both optimisers converged: measured max
        // |Δp| 5e-6, checked at 1e-3.
        assert!(dmax < 1e-3, "{name}: max |Δp| {dmax}");
    }
}

#[test]
fn classify_labels_and_assign_uses_it() {
    let dir = tempfile::tempdir().unwrap();
    let mut conn = glitchbook::catalogue::open(&dir.path().join("c.db")).unwrap();
    let mut w = crate::families_store::World::new();
    crate::families_store::setup(&conn);
    crate::families_store::add(&conn, &mut w, 150, 11);
    let p = ClusterParams {
        seed: 3,
        k_max: 7,
        n_init: 1,
        ..Default::default()
    };
    cluster_catalogue(&mut conn, &p, &w.src).unwrap();
    // No label yet: `classify` refuses with a clear message.
    let e = train_and_classify(&mut conn, &ClassifierParams::default()).unwrap_err();
    assert!(e.to_string().contains("no labelled family"), "{e}");
    // Label every family by the true kind of most of its members, except
    // the family of kind 3, left unlabelled.
    let m = crate::families_store::memberships(&conn);
    let names = ["low-pulse", "tone-400", "chirp", "high-pulse"];
    let mut fam_kind = std::collections::HashMap::new();
    for (t, k) in &w.truth {
        if let Some(f) = m[t].0 {
            *fam_kind
                .entry(f)
                .or_insert_with(std::collections::HashMap::new)
                .entry(*k)
                .or_insert(0usize) += 1;
        }
    }
    let mut unlabelled_fam = None;
    for (f, counts) in &fam_kind {
        let (&k, _) = counts.iter().max_by_key(|x| (*x.1, *x.0)).unwrap();
        if k == 3 {
            unlabelled_fam = Some(*f);
        } else {
            label(&mut conn, *f, names[k], None, "tester").unwrap();
        }
    }
    let rep = train_and_classify(&mut conn, &ClassifierParams::default()).unwrap();
    let cv = &rep.cross_validation;
    println!("{cv:?}");
    assert!(cv.labels.contains(&"(unlabelled)".to_string()));
    assert!(
        cv.accuracy >= 0.95,
        "cross-validated accuracy {}",
        cv.accuracy
    );
    assert_eq!(cv.n, rep.n_train);
    assert_eq!(
        cv.confusion.iter().flatten().sum::<usize>(),
        rep.n_train,
        "every training row counted once"
    );
    for l in &cv.per_label {
        assert!(l.recall >= 0.9 && l.precision >= 0.9, "{l:?}");
    }
    // Members of the unlabelled family are not given a label.
    let uf = unlabelled_fam.expect("kind 3 has a family");
    let member = m.iter().find(|(_, v)| v.0 == Some(uf)).unwrap().0;
    let (lab, _, why) = trigger_class(&conn, *member).unwrap().unwrap();
    assert_eq!((lab, why.as_deref()), (None, Some("unlabelled")));
    // New triggers: `assign` places and classifies them.
    crate::families_store::add(&conn, &mut w, 20, 12);
    let a = assign_new(&mut conn, &w.src).unwrap();
    assert_eq!(
        a.n_class_labelled + a.n_class_unclassified,
        a.n_assigned + a.n_novel + a.n_quiet
    );
    let (mut right, mut n) = (0, 0);
    for (t, k) in &w.truth {
        if *k == 3 {
            continue;
        }
        if let Some((Some(l), _, _)) = trigger_class(&conn, *t).unwrap() {
            n += 1;
            right += usize::from(l == names[*k]);
        }
    }
    assert!(n > 0 && right as f64 >= 0.95 * n as f64, "{right}/{n}");
    assert!(latest_classifier(&conn).unwrap().is_some());
}
