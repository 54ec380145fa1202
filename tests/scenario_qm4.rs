//! The second scenario (`glitchbook::scenario`, invented site QM4):
//! determinism, truth consistency (each stored SNR recomputed from the
//! written samples), the clustering metrics against scikit-learn fixtures,
//! and a short end-to-end smoke run. Minutes of data, not hours.

use glitchbook::condition::welch_median;
use glitchbook::io::{Bundle, NpyReader};
use glitchbook::scenario::metrics::{adjusted_rand_index, homogeneity_completeness_v_measure};
use glitchbook::scenario::model::channel_defs;
use glitchbook::scenario::pipeline::{run_stages, StageOptions};
use glitchbook::scenario::truth::{read_aux_truth, read_channels, read_truth};
use glitchbook::scenario::{write_scenario, ScenarioOptions, ScenarioSummary};
use glitchbook::waveforms::matched_filter_snr;
use std::path::{Path, PathBuf};

fn fresh_dir(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join(name);
    let _ = std::fs::remove_dir_all(&dir);
    dir
}

fn opts(seed: u64, hours: f64) -> ScenarioOptions {
    ScenarioOptions {
        seed,
        hours,
        ..ScenarioOptions::default()
    }
}

/// Every file under `dir` (relative path → bytes), sorted.
fn tree(dir: &Path) -> Vec<(PathBuf, Vec<u8>)> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                let rel = p.strip_prefix(dir).unwrap().to_path_buf();
                out.push((rel, std::fs::read(&p).unwrap()));
            }
        }
    }
    out.sort();
    out
}

fn read_all(path: &Path) -> Vec<f64> {
    let r = NpyReader::open(path).unwrap();
    let mut v = vec![0.0; r.len];
    r.read_f64(0, &mut v).unwrap();
    v
}

#[test]
fn same_seed_same_bytes_and_days_split_one_stream() {
    let a = write_scenario(&fresh_dir("qm4_det_a"), &opts(5, 0.06)).unwrap();
    let b = write_scenario(&fresh_dir("qm4_det_b"), &opts(5, 0.06)).unwrap();
    let ta = tree(&a.dir);
    let tb = tree(&b.dir);
    assert!(ta.len() >= 16, "{} files", ta.len());
    assert_eq!(ta.len(), tb.len());
    for ((pa, xa), (pb, xb)) in ta.iter().zip(&tb) {
        assert_eq!(pa, pb);
        assert!(
            xa == xb,
            "{} differs between two runs of seed 5",
            pa.display()
        );
    }
    // Another seed: other samples and other truth.
    let c = write_scenario(&fresh_dir("qm4_det_c"), &opts(6, 0.06)).unwrap();
    let strain = |s: &ScenarioSummary| std::fs::read(s.bundles[0].join("QM4-STRAIN.npy")).unwrap();
    assert_ne!(strain(&a), strain(&c));
    assert_ne!(
        std::fs::read(&a.truth_csv).unwrap(),
        std::fs::read(&c.truth_csv).unwrap()
    );
    // Split into 3 days: the same samples, cut into consecutive bundles.
    let d = write_scenario(
        &fresh_dir("qm4_det_days"),
        &ScenarioOptions {
            days: 3,
            ..opts(5, 0.06)
        },
    )
    .unwrap();
    assert_eq!(d.bundles.len(), 3);
    let whole = Bundle::open(&a.bundles[0]).unwrap();
    let mut t_next = a.start_gps;
    let mut parts: Vec<Vec<f64>> = vec![Vec::new(); whole.channels.len()];
    for dir in &d.bundles {
        let day = Bundle::open(dir).unwrap();
        assert_eq!(day.channels.len(), whole.channels.len());
        assert_eq!(day.channels[0].start, t_next);
        for (i, c) in day.channels.iter().enumerate() {
            parts[i].extend(read_all(&c.file));
        }
        t_next += read_all(&day.channels[0].file).len() as f64 / day.channels[0].rate;
    }
    for (i, c) in whole.channels.iter().enumerate() {
        let w = read_all(&c.file);
        assert_eq!(w.len(), parts[i].len(), "{}", c.name);
        assert!(
            w.iter()
                .zip(&parts[i])
                .all(|(x, y)| x == y || (x.is_nan() && y.is_nan())),
            "{}: days differ from the single bundle",
            c.name
        );
    }
    assert_eq!(
        std::fs::read(&a.truth_csv).unwrap(),
        std::fs::read(&d.truth_csv).unwrap()
    );
}

#[test]
fn bad_options_are_refused_with_the_field_named() {
    let dir = fresh_dir("qm4_bad");
    for (o, word) in [
        (opts(1, 0.01), "hours"),
        (opts(1, 30.0), "hours"),
        (
            ScenarioOptions {
                days: 0,
                ..opts(1, 1.0)
            },
            "days",
        ),
        (
            ScenarioOptions {
                start_gps: 0.5,
                ..opts(1, 1.0)
            },
            "start_gps",
        ),
    ] {
        let e = write_scenario(&dir, &o).unwrap_err().to_string();
        assert!(e.contains(word), "{e}");
    }
    assert!(!dir.exists(), "nothing is written for bad options");
}

/// `with − without` isolates each injected waveform; its matched-filter SNR
/// is recomputed (a) against the model PSD × gain² — the stored SNR to
/// 0.1% — and (b) against a Welch PSD measured from the written noise
/// around it (median-averaged Welch, checked against SciPy in
/// scan_reference) — within 25% for each glitch and 6% in the median, so
/// the noise written really has the level (with its drift) the truth
/// assumes. (Against a measured PSD the SNR reads a few percent high: the
/// Hann window of Welch smears the lines and the low-frequency wall, and
/// 1/S is convex; 1.03 in the median when written.)
#[test]
fn stored_snrs_are_recomputed_from_the_written_samples() {
    let with = write_scenario(&fresh_dir("qm4_truth_with"), &opts(11, 0.1)).unwrap();
    let without = write_scenario(
        &fresh_dir("qm4_truth_without"),
        &ScenarioOptions {
            inject: false,
            ..opts(11, 0.1)
        },
    )
    .unwrap();
    let truth = read_truth(&with.truth_csv).unwrap();
    let aux = read_aux_truth(&with.aux_truth_csv).unwrap();
    let channels = read_channels(&with.channels_csv).unwrap();
    assert_eq!(truth, read_truth(&without.truth_csv).unwrap());
    let defs = channel_defs();
    let start = with.start_gps;

    // (channel, t_ref, half-width of the support, snr, gain) for every row.
    let hw = |json: &str| {
        serde_json::from_str::<glitchbook::waveforms::Waveform>(json)
            .unwrap()
            .half_width_s()
    };
    let mut rows: Vec<(String, f64, f64, f64, f64)> = truth
        .iter()
        .map(|r| {
            let w = hw(&r.waveform);
            (
                "QM4:STRAIN".to_string(),
                r.t_ref_gps,
                w,
                r.snr,
                r.noise_gain,
            )
        })
        .collect();
    rows.extend(aux.iter().map(|r| {
        let w = hw(&r.waveform);
        (r.channel.clone(), r.t_ref_gps, w, r.snr, r.noise_gain)
    }));
    let mut checked = 0;
    let mut ratios: Vec<(f64, String)> = Vec::new();
    for def in &defs {
        let file =
            |s: &ScenarioSummary| s.bundles[0].join(format!("{}.npy", def.name.replace(':', "-")));
        let (x, n) = (read_all(&file(&with)), read_all(&file(&without)));
        let fs = def.rate_hz;
        assert!(channels.iter().any(|c| c.name == def.name));
        // Rows of this channel clear of others and of NaN (own waveform only).
        let mine: Vec<_> = rows.iter().filter(|r| r.0 == def.name).collect();
        for r in &mine {
            let (_, t_ref, half, snr, gain) = **r;
            let (t_a, t_b) = (t_ref - half - 0.25, t_ref + half + 0.25);
            let clear = mine
                .iter()
                .all(|o| o.1 == t_ref || o.1 + o.2 < t_a || o.1 - o.2 > t_b);
            let i0 = ((t_a - start) * fs).floor();
            let i1 = ((t_b - start) * fs).ceil();
            if !clear || i0 < 0.0 || i1 as usize > x.len() {
                continue;
            }
            let (i0, i1) = (i0 as usize, i1 as usize);
            if x[i0..i1].iter().any(|v| v.is_nan()) {
                continue;
            }
            let mut h: Vec<f64> = (i0..i1).map(|i| x[i] - n[i]).collect();
            // On the truth's 16-s frequency grid (see scenario's SNR_GRID_S).
            h.resize(h.len().max((16.0 * fs) as usize), 0.0);
            // (a) model PSD at that time.
            let model = |f: f64| def.psd(f) * gain * gain;
            let got = matched_filter_snr(&h, fs, &model);
            assert!(
                (got / snr - 1.0).abs() < 1e-3,
                "{} at {t_ref}: SNR {got} from the samples vs {snr} stored",
                def.name
            );
            checked += 1;
            // (b) Welch PSD of the written noise over ±60 s (clipped, finite).
            // 8-s segments resolve the ground sensor's 1–10 Hz bursts.
            let seg = (8.0 * fs) as usize;
            let w0 = ((t_ref - 60.0 - start) * fs).max(0.0) as usize;
            let w1 = (((t_ref + 60.0 - start) * fs) as usize).min(n.len());
            let win = &n[w0..w1];
            if win.iter().any(|v| v.is_nan()) || win.len() < 8 * seg {
                continue;
            }
            let psd = welch_median(win, fs, seg, seg / 2).unwrap();
            let measured = matched_filter_snr(&h, fs, &|f| psd.at(f));
            let ratio = measured / snr;
            assert!(
                (ratio - 1.0).abs() < 0.25,
                "{} at {t_ref}: SNR {measured} against the measured PSD vs {snr}",
                def.name
            );
            ratios.push((ratio, def.name.to_string()));
        }
    }
    assert!(
        checked >= 100,
        "only {checked} rows checked against the model"
    );
    assert!(
        ratios.len() >= 30,
        "only {} rows checked against the measured PSD",
        ratios.len()
    );
    let mut r: Vec<f64> = ratios.iter().map(|x| x.0).collect();
    r.sort_by(f64::total_cmp);
    let med = r[r.len() / 2];
    assert!(
        (med - 1.0).abs() < 0.06,
        "median ratio {med} over {}",
        r.len()
    );
    // Every channel with rows in the check, the ground sensor (gain G) included.
    let chans: std::collections::BTreeSet<&str> = ratios.iter().map(|x| x.1.as_str()).collect();
    println!(
        "{checked} rows against the model PSD; {} against measured PSDs ({} channels), median ratio {med:.3}, range {:.3}-{:.3}",
        r.len(),
        chans.len(),
        r[0],
        r[r.len() - 1]
    );
}

#[test]
fn metrics_match_sklearn() {
    // scikit-learn 1.9.1: homogeneity_completeness_v_measure(t, p, beta=1.0)
    // and adjusted_rand_score(t, p) (tests/data/scenario/make_fixtures_scenario.py).
    let text = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/scenario/fixtures_scenario.json"),
    )
    .unwrap();
    let f: serde_json::Value = serde_json::from_str(&text).unwrap();
    let cases = f["cases"].as_array().unwrap();
    assert!(cases.len() >= 10);
    for c in cases {
        let t: Vec<i64> = serde_json::from_value(c["labels_true"].clone()).unwrap();
        let p: Vec<i64> = serde_json::from_value(c["labels_pred"].clone()).unwrap();
        let r = homogeneity_completeness_v_measure(&t, &p, 1.0);
        for (got, key) in [
            (r.homogeneity, "homogeneity"),
            (r.completeness, "completeness"),
            (r.v_measure, "v_measure"),
            (adjusted_rand_index(&t, &p), "ari"),
        ] {
            let want = c[key].as_f64().unwrap();
            assert!(
                (got - want).abs() < 1e-12,
                "{key}: {got} vs {want} (n = {})",
                t.len()
            );
        }
    }
}

/// A few minutes of the scenario through scan, families, witnesses and
/// vetoes: the loud glitches (true SNR ≥ 12) are found, noise triggers
/// are few, and the channel recording the injections is not proposed.
#[test]
fn smoke_loud_glitches_are_found() {
    let dir = fresh_dir("qm4_smoke");
    let sc = write_scenario(&dir, &opts(3, 0.15)).unwrap();
    let run = run_stages(&sc, &dir.join("glitchbook.db"), &StageOptions::default()).unwrap();
    let s = &run.score;
    print!("{}", s.render());
    let (mut n, mut found) = (0, 0);
    for m in &s.triggers.mechanisms {
        for b in m.bins.iter().filter(|b| b.snr_lo >= 12.0) {
            n += b.n;
            found += b.n_found;
        }
    }
    assert!(n >= 10, "only {n} loud rows in the smoke span");
    assert!(
        found as f64 >= 0.9 * n as f64,
        "{found}/{n} glitches with true SNR >= 12 found"
    );
    // Gaussian noise: a few far noise triggers per hour, none loud.
    assert!(s.triggers.noise.far_per_hour < 60.0);
    assert!(run.n_families.unwrap_or(0) >= 1);
    let v = s.vetoes.as_ref().unwrap();
    assert!(
        !v.unsafe_proposed,
        "the injection-recording channel was proposed"
    );
    // The report's images: every family's members, and each witness beside
    // a member its data cover (the 256 Hz ground sensor is analysed from
    // later than the strain: its 1 Hz band needs a longer padding).
    let mut conn = glitchbook::catalogue::open(&dir.join("glitchbook.db")).unwrap();
    let data =
        glitchbook::report::gather(&conn, &glitchbook::report::ReportParams::default()).unwrap();
    let (thumbs, missing) = glitchbook::families::report_thumbnails(
        &conn,
        &dir.join("report"),
        &data.family_ids(),
        &data.witnessed_families(),
    )
    .unwrap();
    assert!(missing.is_none(), "{missing:?}");
    assert!(thumbs.iter().any(|t| t.witness), "no witness image");
    // A witness whose data the catalogue does not hold (triggers imported
    // from elsewhere) gets no image; the report still has its images.
    import_aux_without_data(&mut conn, "QM4:ELSEWHERE");
    let all: Vec<(i64, String, f64)> = data
        .family_ids()
        .into_iter()
        .map(|f| (f, "QM4:ELSEWHERE".to_string(), 0.1))
        .collect();
    let (thumbs, _) = glitchbook::families::report_thumbnails(
        &conn,
        &dir.join("report2"),
        &data.family_ids(),
        &all,
    )
    .unwrap();
    assert!(!thumbs.is_empty() && thumbs.iter().all(|t| !t.witness));
}

/// Issue 12's family targets on three seeds of the full two-hour scenario
/// (one test per seed, so they run in parallel): over matched target
/// triggers with SNR ≥ 8, ARI ≥ 0.85 and completeness ≥ 0.85 against the
/// true mechanisms (metrics checked against scikit-learn 1.9 in
/// `metrics_match_sklearn`), ≥ 95% of all target triggers either in a
/// family or unclassified with a reason, and the classifier trained on the
/// families' labels cross-validates at ≥ 0.95. Target channel only, no
/// witnesses.
#[test]
fn families_hold_one_mechanism_each_seed_1() {
    families_hold_one_mechanism_each(1);
}

/// As seed 1, on seed 2.
#[test]
fn families_hold_one_mechanism_each_seed_2() {
    families_hold_one_mechanism_each(2);
}

/// As seed 1, on seed 3.
#[test]
fn families_hold_one_mechanism_each_seed_3() {
    families_hold_one_mechanism_each(3);
}

fn families_hold_one_mechanism_each(seed: u64) {
    let dir = fresh_dir(&format!("qm4_families_{seed}"));
    let sc = write_scenario(&dir, &opts(seed, 2.0)).unwrap();
    let o = StageOptions {
        channels: Some(vec![glitchbook::scenario::model::TARGET_CHANNEL.to_string()]),
        coupling: false,
        ..StageOptions::default()
    };
    let run = run_stages(&sc, &dir.join("glitchbook.db"), &o).unwrap();
    let f = run.score.families.as_ref().expect("families scored");
    print!("seed {seed}\n{}", run.score.render());
    assert!(f.ari_all >= 0.85, "seed {seed}: ARI {:.3}", f.ari_all);
    assert!(
        f.hcv_all.completeness >= 0.85,
        "seed {seed}: completeness {:.3}",
        f.hcv_all.completeness
    );
    assert!(
        f.answered_fraction >= 0.95,
        "seed {seed}: answered {:.3}",
        f.answered_fraction
    );
    // Issue 12 item 5: label each family by the true mechanism of most of
    // its scored members (as a scientist would after looking at them) and
    // train the classifier by label: its 5-fold cross-validated accuracy
    // on the labelled families' members ≥ 0.95 (model checked against
    // scikit-learn 1.9.1 in families_classify::logistic_matches_sklearn).
    let mut conn = glitchbook::catalogue::open(&dir.join("glitchbook.db")).unwrap();
    for c in &f.families {
        glitchbook::families::label(&mut conn, c.family_id, &c.majority_mechanism, None, "truth")
            .unwrap();
    }
    use glitchbook::families::classifier::ClassifierParams;
    use glitchbook::families::classifier_db::train_and_classify;
    // Linear features, for the record (README: quadratic chosen by this).
    let lin = ClassifierParams {
        quadratic: false,
        ..Default::default()
    };
    let cv_lin = train_and_classify(&mut conn, &lin)
        .unwrap()
        .cross_validation;
    let rep = train_and_classify(&mut conn, &ClassifierParams::default()).unwrap();
    let cv = &rep.cross_validation;
    println!(
        "seed {seed} classifier: {} training rows, {} classes; 5-fold accuracy {:.3} (linear {:.3}); {} \
         below the reject threshold",
        rep.n_train,
        cv.labels.len(),
        cv.accuracy,
        cv_lin.accuracy,
        cv.n_uncertain
    );
    for l in &cv.per_label {
        println!(
            "  {:<24} support {:>4} precision {:.3} recall {:.3}",
            l.label, l.support, l.precision, l.recall
        );
    }
    assert!(
        cv.accuracy >= 0.95,
        "seed {seed}: cross-validated accuracy {:.3}",
        cv.accuracy
    );
    // The families must not hang on the clustering seed: re-cluster with
    // seeds 1–5 (each a medoid of 5 seeded starts). With single fits,
    // scenario seed 1 fell to ARI 0.46 at clustering seed 2 and scenario
    // seed 3 to 0.60 at clustering seed 1 (README, "families").
    let src = glitchbook::maps::BundleMaps::from_catalogue(&conn).unwrap();
    for cs in 1..=5 {
        let p = glitchbook::families::ClusterParams {
            seed: cs,
            ..Default::default()
        };
        glitchbook::families::cluster_catalogue(&mut conn, &p, &src).unwrap();
        let sc = glitchbook::scenario::score::score_catalogue(
            &conn,
            &dir,
            None,
            None,
            &Default::default(),
        )
        .unwrap();
        let ari = sc.families.expect("families scored").ari_all;
        assert!(
            ari >= 0.85,
            "seed {seed}, clustering seed {cs}: ARI {ari:.3}"
        );
    }
    drop(conn);
    let _ = std::fs::remove_dir_all(&dir);
}

/// Import, as channel `name` (aux), one trigger at each target trigger's
/// time: a channel with triggers and no data.
fn import_aux_without_data(conn: &mut rusqlite::Connection, name: &str) {
    let q = glitchbook::catalogue::TriggerQuery::default();
    let triggers: Vec<glitchbook::trigger::Trigger> =
        glitchbook::catalogue::query_triggers(conn, &q)
            .unwrap()
            .into_iter()
            .map(|t| t.to_trigger())
            .collect();
    let (lo, hi) = triggers
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), t| {
            (a.min(t.t_start), b.max(t.t_end))
        });
    let tx = conn.transaction().unwrap();
    glitchbook::catalogue::import_triggers(
        &tx,
        &glitchbook::catalogue::ImportRecord {
            channel: name.to_string(),
            role: glitchbook::io::Role::Aux,
            source_path: "elsewhere.csv".into(),
            input_checksum: "0".into(),
            analysed: glitchbook::segments::SegmentList::from_segments(vec![
                glitchbook::segments::Segment::new(lo, hi),
            ]),
            segments_source: "trigger_span".into(),
            triggers,
        },
    )
    .unwrap();
    tx.commit().unwrap();
}
