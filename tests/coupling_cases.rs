//! Coupling on constructed data: hand-worked grids, a planted witness among
//! distractors, the null distribution of unrelated channels, safety, the
//! catalogue round trip and the segment files.

use glitchbook::coupling::coinc::channel_grid;
use glitchbook::coupling::lag::lag_summary;
use glitchbook::coupling::stats::{binomial_ln_sf, poisson_significance};
use glitchbook::coupling::veto::{hierarchical_rounds, veto_report, VetoParams};
use glitchbook::coupling::{
    best_per_set, witness_table, AuxChannel, AuxTrigger, Grid, TargetSet, TargetTrigger,
};
use glitchbook::segments::SegmentList;
use rand::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256Plus;

fn aux_at(times_snr: &[(f64, f64)]) -> Vec<AuxTrigger> {
    times_snr
        .iter()
        .map(|&(t_peak, snr)| AuxTrigger {
            t_peak,
            snr,
            f_peak: 50.0,
        })
        .collect()
}

fn get(
    rows: &[glitchbook::coupling::WitnessStat],
    rho: f64,
    w: f64,
) -> &glitchbook::coupling::WitnessStat {
    rows.iter()
        .find(|r| r.snr_threshold == rho && r.window_s == w)
        .unwrap()
}

// Hand-worked example (worked on paper, see comments): target analysed
// [0,100), aux analysed [10,110) → common [10,100) = 90 s.
#[test]
fn grid_by_hand_with_common_time_and_overlaps() {
    let aux = AuxChannel::new(
        7,
        "X1:HAND-AUX",
        // t = 5 lies outside the common time and is ignored.
        aux_at(&[
            (5.0, 20.0),
            (20.0, 20.0),
            (20.5, 9.0),
            (21.0, 20.0),
            (99.8, 20.0),
        ]),
        SegmentList::single(10.0, 110.0),
    );
    // t = 3 lies outside the common time and is not counted.
    let targets = vec![3.0, 20.3, 21.9, 50.0, 99.9];
    let rows = channel_grid(
        &[(None, targets)],
        &aux,
        &SegmentList::single(0.0, 100.0),
        &[8.0, 10.0],
        &[0.25, 1.0],
    );
    assert_eq!(rows.len(), 4);
    // ρ = 10, w = 1: aux 20, 21, 99.8; windows [19,21] ∪ [20,22] = [19,22]
    // (overlap counted once: 3 s) + [98.8,100.8] ∩ [10,100) = 1.2 s → 4.2 s.
    let r = get(&rows, 10.0, 1.0);
    assert_eq!((r.n_target, r.n_coinc, r.n_aux, r.n_aux_used), (4, 3, 3, 3));
    assert!((r.vetoed_s - 4.2).abs() < 1e-9);
    assert!((r.analysed_s - 90.0).abs() < 1e-9);
    assert!((r.deadtime - 4.2 / 90.0).abs() < 1e-12);
    assert!((r.efficiency - 0.75).abs() < 1e-12);
    assert!((r.use_percentage - 100.0).abs() < 1e-12);
    let mu = 4.0 * 4.2 / 90.0;
    assert!((r.expected - mu).abs() < 1e-12);
    // P(N ≥ 3 | μ) = 1 − e^{−μ}(1 + μ + μ²/2) (Poisson cdf, textbook formula).
    let p = 1.0 - (-mu).exp() * (1.0 + mu + mu * mu / 2.0);
    assert!((r.significance - (-p.log10())).abs() < 1e-9);
    // ρ = 8, w = 0.25: aux 20, 20.5, 21 → [19.75,21.25] = 1.5 s, plus
    // [99.55,100) = 0.45 s → 1.95 s; coincident targets 20.3 (0.2 from 20.5)
    // and 99.9; aux with a target: 20.5 and 99.8 → 2 of 4 = 50%.
    let r = get(&rows, 8.0, 0.25);
    assert_eq!((r.n_target, r.n_coinc, r.n_aux, r.n_aux_used), (4, 2, 4, 2));
    assert!((r.vetoed_s - 1.95).abs() < 1e-9);
    assert!((r.use_percentage - 50.0).abs() < 1e-12);
}

pub(crate) const T0: f64 = 1_000_000_000.0;
pub(crate) const SPAN_S: f64 = 20_000.0;

/// Target triggers uniform in time; a witness copying 70% of them 2 ms
/// earlier (t_target − t_aux = +2 ms) plus random extras; distractors with
/// more triggers and no relation. Family 1 = witnessed, family 2 = not.
pub(crate) fn planted(seed: u64) -> (TargetSet, Vec<AuxChannel>) {
    let mut rng = Xoshiro256Plus::seed_from_u64(seed);
    let analysed = SegmentList::single(T0, T0 + SPAN_S);
    let mut targets = Vec::new();
    let mut wit = Vec::new();
    for i in 0..2000 {
        let t = T0 + rng.gen_range(1.0..SPAN_S - 1.0);
        let f = rng.gen_range(40.0..300.0);
        let family = if i % 4 == 3 { 2 } else { 1 };
        targets.push(TargetTrigger {
            t_peak: t,
            snr: rng.gen_range(8.0..30.0),
            f_peak: f,
            family: Some(family),
        });
        if family == 1 && rng.gen_bool(0.7) {
            wit.push(AuxTrigger {
                t_peak: t - 0.002,
                snr: rng.gen_range(10.0..40.0),
                f_peak: f * rng.gen_range(0.97..1.03),
            });
        }
    }
    for _ in 0..300 {
        wit.push(AuxTrigger {
            t_peak: T0 + rng.gen_range(0.0..SPAN_S),
            snr: rng.gen_range(8.0..12.0),
            f_peak: 60.0,
        });
    }
    let mut aux = vec![AuxChannel::new(1, "X1:WIT-PLANTED", wit, analysed.clone())];
    for c in 0..5 {
        let trig = (0..5000)
            .map(|_| AuxTrigger {
                t_peak: T0 + rng.gen_range(0.0..SPAN_S),
                snr: 8.0 + rng.gen::<f64>().powi(3) * 100.0,
                f_peak: rng.gen_range(10.0..500.0),
            })
            .collect();
        aux.push(AuxChannel::new(
            10 + c,
            &format!("X1:DISTRACT-{c}"),
            trig,
            analysed.clone(),
        ));
    }
    (TargetSet::new(targets, analysed), aux)
}

// The task's constructed case: 70% copies with a 2 ms lag among distractors
// must be round 1 with efficiency 0.70 ± 0.05 and a lag peak at 2 ms. Here
// 70% of family 1 = 75% of triggers, i.e. 52.5% of all; so the check on
// 0.70 is made per family (mode `family`, family 1) and on all triggers
// against 0.525 ± 0.05.
#[test]
fn planted_witness_is_round_one_with_lag_peak() {
    let (targets, aux) = planted(11);
    let params = VetoParams::default();
    let fam1 = hierarchical_rounds(&targets, Some(1), &aux, &params, None);
    assert!(!fam1.is_empty());
    assert_eq!(fam1[0].channel, "X1:WIT-PLANTED");
    assert!(
        (fam1[0].efficiency - 0.70).abs() < 0.05,
        "{}",
        fam1[0].efficiency
    );
    assert!(fam1[0].significance > 50.0);
    let all = hierarchical_rounds(&targets, None, &aux, &params, None);
    assert_eq!(all[0].channel, "X1:WIT-PLANTED");
    assert!(
        (all[0].efficiency - 0.525).abs() < 0.05,
        "{}",
        all[0].efficiency
    );
    // Distractors are unrelated: none is ever selected, and the cumulative
    // deadtime stays tiny.
    assert!(all.iter().all(|r| r.channel == "X1:WIT-PLANTED"), "{all:?}");
    assert!(all.last().unwrap().cum_deadtime < 0.01);
    // Family 2 is not witnessed: no round reaches significance 5.
    let fam2 = hierarchical_rounds(&targets, Some(2), &aux, &params, None);
    assert!(fam2.is_empty(), "{:?}", fam2.first().map(|r| &r.channel));

    // Witness ranking and the lag histogram of the best combination.
    let sets = [None, Some(1), Some(2)];
    let rows = witness_table(&targets, &sets, &aux, &Grid::default());
    assert_eq!(rows.len(), 3 * 6 * 8 * 6);
    let best = best_per_set(&rows, &sets);
    assert_eq!(best[1].channel, "X1:WIT-PLANTED");
    let ch = &aux[0];
    let lag = lag_summary(
        &targets,
        Some(1),
        ch,
        best[1].snr_threshold,
        best[1].window_s,
        21,
    );
    let width = 2.0 * lag.window_s / 21.0;
    let peak = lag.peak_lag_s.unwrap();
    assert!((peak - 0.002).abs() <= width, "peak {peak} width {width}");
    assert!((lag.median_lag_s.unwrap() - 0.002).abs() < 1e-6);
    assert_eq!(lag.freq_relation, "same");
    assert_eq!(lag.counts.iter().sum::<u64>(), lag.n_pairs);
}

// Null distribution. For an unrelated channel and target triggers uniform in
// the analysed time, the count n is Binomial(N, deadtime) given the aux
// triggers (≈ Poisson(μ)). The significance is discrete, so
// P(significance ≥ s) is not 10^−s but P(n ≥ n*) with n* the smallest count
// whose significance reaches s: at most 10^−s, often well below. We compare
// the observed fraction with Σ_i P(n ≥ n*_i | Binomial(N, d_i)) over the
// realisations i (binomial tail checked against SciPy in coupling_stats).
#[test]
fn unrelated_channels_follow_the_null() {
    let mut rng = Xoshiro256Plus::seed_from_u64(2024);
    let analysed = SegmentList::single(0.0, 1000.0);
    let n_real = 20_000;
    let n_target = 100u64;
    let levels = [1.0, 2.0, 3.0];
    let mut observed = [0u64; 3];
    let mut expected = [0.0f64; 3];
    let mut variance = [0.0f64; 3];
    for _ in 0..n_real {
        let mut t: Vec<f64> = (0..n_target).map(|_| rng.gen_range(0.0..1000.0)).collect();
        t.sort_by(f64::total_cmp);
        let n_aux = rng.gen_range(20..200);
        let aux = AuxChannel::new(
            1,
            "X1:NULL",
            (0..n_aux)
                .map(|_| AuxTrigger {
                    t_peak: rng.gen_range(0.0..1000.0),
                    snr: 20.0,
                    f_peak: 10.0,
                })
                .collect(),
            analysed.clone(),
        );
        let r = &channel_grid(&[(None, t)], &aux, &analysed, &[10.0], &[0.5])[0];
        for (k, &s) in levels.iter().enumerate() {
            if r.significance >= s {
                observed[k] += 1;
            }
            let n_star = (0..=n_target + 1)
                .find(|&n| poisson_significance(n, r.expected) >= s)
                .unwrap();
            let p = binomial_ln_sf(n_star, n_target, r.deadtime).exp();
            expected[k] += p;
            variance[k] += p * (1.0 - p);
        }
    }
    for k in 0..3 {
        let sigma = variance[k].sqrt();
        eprintln!(
            "level {}: observed {} expected {:.1} ± {:.1} (nominal 10^-s would give {:.1})",
            levels[k],
            observed[k],
            expected[k],
            sigma,
            n_real as f64 * 10f64.powf(-levels[k])
        );
        assert!(
            (observed[k] as f64 - expected[k]).abs() <= 4.0 * sigma + 1.0,
            "level {}: observed {} expected {}",
            levels[k],
            observed[k],
            expected[k]
        );
        // Discreteness makes the test conservative: below the nominal rate.
        assert!(expected[k] <= n_real as f64 * 10f64.powf(-levels[k]));
    }
}

// Safety: a channel that fires on every injection (and on the signal-like
// target triggers those injections make) is significant but unsafe: it is
// reported, not proposed, and the true witness is still proposed.
#[test]
fn injection_witness_is_unsafe_and_not_proposed() {
    let (mut targets, mut aux) = planted(5);
    let mut rng = Xoshiro256Plus::seed_from_u64(99);
    let injections: Vec<f64> = (0..300)
        .map(|_| T0 + rng.gen_range(1.0..SPAN_S - 1.0))
        .collect();
    let mut inj_mon = Vec::new();
    for &t in &injections {
        targets.triggers.push(TargetTrigger {
            t_peak: t + 0.001,
            snr: 12.0,
            f_peak: 150.0,
            family: Some(3),
        });
        inj_mon.push(AuxTrigger {
            t_peak: t,
            snr: 50.0,
            f_peak: 150.0,
        });
    }
    targets = TargetSet::new(targets.triggers, targets.analysed);
    aux.push(AuxChannel::new(
        99,
        "X1:INJ-MONITOR",
        inj_mon,
        targets.analysed.clone(),
    ));
    let mut outside = injections.clone();
    outside.push(T0 - 50.0);
    let report = veto_report(&targets, &aux, &VetoParams::default(), Some(&outside));
    assert_eq!(report.warnings.len(), 1, "{:?}", report.warnings);
    assert!(report.warnings[0].contains("outside the target analysed time"));
    let all: Vec<_> = report.rounds.iter().filter(|r| r.mode == "all").collect();
    let mon = all
        .iter()
        .find(|r| r.channel == "X1:INJ-MONITOR")
        .expect("monitor round");
    assert!(!mon.safe && !mon.proposed);
    assert_eq!(mon.n_inj_vetoed, Some(300));
    assert!(mon.safety_p.unwrap() < 1e-5);
    let wit = all
        .iter()
        .find(|r| r.channel == "X1:WIT-PLANTED")
        .expect("witness round");
    assert!(wit.safe && wit.proposed);
    assert!(wit.safety_p.unwrap() > 1e-3);
    // Family 3 (signal-like) gets no proposed veto.
    assert!(report
        .rounds
        .iter()
        .filter(|r| r.family_id == Some(3))
        .all(|r| !r.proposed));
    assert!(report.caution.contains("instrument team"));
}
