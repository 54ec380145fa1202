//! Coupling statistics that stay honest on clumped glitches (issue 13):
//! target triggers in trains, many channels and many grid cells.
//!
//! - The trains case of issue 13, imported into a catalogue through the
//!   library: 1,000 trains of 5 target triggers 0.3–0.7 s apart, one true
//!   witness and 300 purely random aux channels; the true witness must be
//!   the first round and no random channel may be proposed (three seeds).
//! - Calibration: thousands of purely random aux channels against uniform
//!   and against train-like target triggers; the fraction of rows (best cell
//!   per channel and target set) whose false-alarm probability is at most
//!   1e-2 and 1e-3 must lie within a factor 2 of 1e-2 and 1e-3. The
//!   reference is the definition of a false-alarm probability (for
//!   unrelated channels it is uniform: P(FA ≤ α) = α), applied to data
//!   made here with known truth.

use glitchbook::catalogue::{import_triggers, open, ImportRecord};
use glitchbook::coupling::coinc::ChanceBasis;
use glitchbook::coupling::stats::poisson_ln_sf;
use glitchbook::coupling::veto::{ProposalState, VetoParams};
use glitchbook::coupling::{
    run_vetoes, witness_table, AuxChannel, AuxTrigger, Grid, TargetSet, TargetTrigger,
    DEFAULT_SLIDES,
};
use glitchbook::io::text::parse_trigger_csv;
use glitchbook::io::Role;
use glitchbook::segments::{Segment, SegmentList};
use rand::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256Plus;
use std::fmt::Write;

const T0: f64 = 1_300_000_000.0;

/// `n` train start times spread over `[a, b)`, at least 5 s apart.
fn train_starts(rng: &mut Xoshiro256Plus, n: usize, a: f64, b: f64) -> Vec<f64> {
    let slot = (b - a) / n as f64;
    (0..n)
        .map(|i| a + i as f64 * slot + rng.gen_range(0.0..slot - 5.0))
        .collect()
}

/// Trains of 5 members 0.3–0.7 s apart.
fn trains(rng: &mut Xoshiro256Plus, starts: &[f64]) -> Vec<Vec<f64>> {
    starts
        .iter()
        .map(|&s| {
            let mut t = s;
            (0..5)
                .map(|k| {
                    if k > 0 {
                        t += rng.gen_range(0.3..0.7);
                    }
                    t
                })
                .collect()
        })
        .collect()
}

/// A purely random aux channel: uniform times over the span, SNR from a
/// heavy tail above 5.5, extents up to ±0.1 s.
fn random_aux(rng: &mut Xoshiro256Plus, n: usize, a: f64, b: f64) -> Vec<(f64, f64, f64, f64)> {
    (0..n)
        .map(|_| {
            let t = rng.gen_range(a..b);
            let half = rng.gen_range(0.0..0.1);
            let snr = 5.5 * (1.0 - rng.gen::<f64>()).powf(-1.0 / 2.5);
            (t, t - half, t + half, snr)
        })
        .collect()
}

/// CSV text with the columns `import` reads.
fn csv(rows: &[(f64, f64, f64, f64)]) -> String {
    let mut s = String::from("time,frequency,snr,t_start,t_end\n");
    for &(t, ts, te, snr) in rows {
        let _ = writeln!(s, "{t:.6},80,{snr:.4},{ts:.6},{te:.6}");
    }
    s
}

/// Import one channel through the library (as `glitchbook import` does).
fn import(conn: &mut rusqlite::Connection, name: &str, role: Role, text: &str, span: &SegmentList) {
    let triggers = parse_trigger_csv(text.as_bytes(), name).unwrap();
    let tx = conn.transaction().unwrap();
    import_triggers(
        &tx,
        &ImportRecord {
            channel: name.to_string(),
            role,
            source_path: format!("{name}.csv"),
            input_checksum: format!("{:032x}", xxhash(text)),
            analysed: span.clone(),
            segments_source: "file".to_string(),
            triggers,
        },
    )
    .unwrap();
    tx.commit().unwrap();
}

fn xxhash(text: &str) -> u128 {
    // Any stable digest will do for the idempotency key of a test import.
    text.bytes().fold(0xcbf29ce484222325u128, |h, b| {
        (h ^ u128::from(b)).wrapping_mul(0x100000001b3)
    })
}

// Issue 13's trains case at a size that runs in seconds: 6 h, 250 trains of
// 5 target triggers 0.3–0.7 s apart (the 1,000 trains in 24 h, same
// density), one true witness (fires on half the members of every train,
// 10 ms before them, plus 75 unrelated triggers), 300 purely random aux
// channels; `vetoes --no-families`. Before: rounds 2–6 were random
// channels. Now the true witness is the first round and no random channel
// is proposed, for three seeds.
#[test]
fn trains_propose_the_true_witness_and_no_random_channel() {
    for seed in [1u64, 2, 3] {
        let mut rng = Xoshiro256Plus::seed_from_u64(seed);
        let (a, b) = (T0, T0 + 21_600.0);
        let span = SegmentList::single(a, b);
        let dir = tempfile::tempdir().unwrap();
        let mut conn = open(&dir.path().join("trains.db")).unwrap();
        let starts = train_starts(&mut rng, 250, a + 10.0, b - 10.0);
        let members: Vec<f64> = trains(&mut rng, &starts).into_iter().flatten().collect();
        let target: Vec<(f64, f64, f64, f64)> = members
            .iter()
            .map(|&t| (t, t, t, rng.gen_range(6.0..30.0)))
            .collect();
        import(
            &mut conn,
            "AV1:TRAIN_STRAIN",
            Role::Target,
            &csv(&target),
            &span,
        );
        let mut wit: Vec<(f64, f64, f64, f64)> = Vec::new();
        for &t in &members {
            if rng.gen_bool(0.5) {
                let p = t - 0.010 + rng.gen_range(-0.002..0.002);
                let half = rng.gen_range(0.0..0.02);
                wit.push((p, p - half, p + half, rng.gen_range(8.0..40.0)));
            }
        }
        wit.extend(random_aux(&mut rng, 75, a, b));
        import(&mut conn, "AV1:TRUE_WITNESS", Role::Aux, &csv(&wit), &span);
        for c in 0..300 {
            let n = rng.gen_range(125..750);
            let rows = random_aux(&mut rng, n, a, b);
            import(
                &mut conn,
                &format!("AV1:RANDOM_{c:03}"),
                Role::Aux,
                &csv(&rows),
                &span,
            );
        }
        let params = VetoParams {
            per_family: false,
            ..VetoParams::default()
        };
        let report = run_vetoes(&mut conn, &params, None).unwrap();
        eprintln!(
            "seed {seed}: rounds {:?}",
            report
                .rounds
                .iter()
                .map(|r| (r.aux_channel.as_str(), r.false_alarm, r.efficiency))
                .collect::<Vec<_>>()
        );
        assert_eq!(
            report.rounds[0].aux_channel, "AV1:TRUE_WITNESS",
            "seed {seed}"
        );
        assert!(report.rounds[0].efficiency > 0.4, "seed {seed}");
        for r in &report.rounds {
            assert_eq!(
                r.aux_channel, "AV1:TRUE_WITNESS",
                "seed {seed}: a random channel was picked: {r:?}"
            );
        }
        assert_eq!(report.proposals.len(), 1);
        assert_eq!(report.proposals[0].aux_channel, "AV1:TRUE_WITNESS");
        assert_eq!(report.proposals[0].state, ProposalState::Unchecked);
    }
}

/// Fraction of (channel, set) rows whose best cell has a false-alarm
/// probability at most 1e-2 and 1e-3, over `n_channels` random channels.
fn false_alarm_fractions(
    targets: &TargetSet,
    analysed: &SegmentList,
    n_channels: usize,
    seed: u64,
) -> (f64, f64, usize) {
    let mut rng = Xoshiro256Plus::seed_from_u64(seed);
    let sets = [None, Some(1), Some(2), Some(3), Some(4)];
    let (mut at2, mut at3, mut rows_total) = (0usize, 0usize, 0usize);
    let segs = analysed.segments().to_vec();
    for chunk in 0..n_channels.div_ceil(500) {
        let aux: Vec<AuxChannel> = (0..500.min(n_channels - chunk * 500))
            .map(|c| {
                let n = rng.gen_range(100..600);
                let trig: Vec<AuxTrigger> =
                    random_aux(&mut rng, n, segs[0].start, segs[segs.len() - 1].end)
                        .into_iter()
                        .map(|(t, ts, te, snr)| AuxTrigger {
                            t_peak: t,
                            t_start: ts,
                            t_end: te,
                            snr,
                            f_peak: 50.0,
                        })
                        .collect();
                AuxChannel::new(
                    (chunk * 500 + c) as i64,
                    &format!("AV1:NULL_{c}"),
                    trig,
                    analysed.clone(),
                )
            })
            .collect();
        let rows = witness_table(targets, &sets, &aux, &Grid::default(), DEFAULT_SLIDES, 0.01);
        let mut best: std::collections::HashMap<(Option<i64>, i64), f64> = Default::default();
        for r in &rows {
            let e = best.entry((r.family_id, r.aux_channel_id)).or_insert(1.0);
            *e = e.min(r.false_alarm);
        }
        rows_total += best.len();
        at2 += best.values().filter(|&&f| f <= 1e-2).count();
        at3 += best.values().filter(|&&f| f <= 1e-3).count();
    }
    (
        at2 as f64 / rows_total as f64,
        at3 as f64 / rows_total as f64,
        rows_total,
    )
}

// Per-row false-alarm fraction within a factor 2 of nominal at 1e-2 and
// 1e-3, for uniform and for train-like target triggers (4 h with a gap,
// 600 target triggers in 4 families, 5,000 random channels each).
#[test]
fn random_channels_false_alarm_is_calibrated() {
    let analysed = SegmentList::from_segments(vec![
        Segment::new(T0, T0 + 7000.0),
        Segment::new(T0 + 7300.0, T0 + 14_400.0),
    ]);
    let mut rng = Xoshiro256Plus::seed_from_u64(42);
    let family = |i: usize| Some(1 + (i % 4) as i64);
    let uniform: Vec<TargetTrigger> = (0..600)
        .map(|i| {
            let mut t = rng.gen_range(T0..T0 + 14_100.0);
            if t >= T0 + 7000.0 {
                t += 300.0;
            }
            TargetTrigger {
                t_peak: t,
                snr: 8.0,
                f_peak: 100.0,
                family: family(i),
            }
        })
        .collect();
    let starts: Vec<f64> = train_starts(&mut rng, 120, T0, T0 + 14_100.0)
        .into_iter()
        .map(|s| if s >= T0 + 6995.0 { s + 310.0 } else { s })
        .collect();
    let trained: Vec<TargetTrigger> = trains(&mut rng, &starts)
        .into_iter()
        .enumerate()
        .flat_map(|(i, tr)| {
            tr.into_iter().map(move |t| TargetTrigger {
                t_peak: t,
                snr: 8.0,
                f_peak: 100.0,
                family: family(i),
            })
        })
        .collect();
    for (name, trig, seed) in [("uniform", uniform, 7u64), ("trains", trained, 8)] {
        let targets = TargetSet::new(trig, analysed.clone());
        let (f2, f3, n) = false_alarm_fractions(&targets, &analysed, 5000, seed);
        eprintln!("{name}: {n} rows; FA ≤ 1e-2: {f2:.5}, FA ≤ 1e-3: {f3:.6}");
        assert!((0.5e-2..=2e-2).contains(&f2), "{name}: {f2} at 1e-2");
        assert!((0.5e-3..=2e-3).contains(&f3), "{name}: {f3} at 1e-3");
    }
}

/// Brute-force time slides, written here independently of the library: the
/// aux triggers (SNR ≥ `min_snr`, extents padded by `window_s`) shifted by
/// `i × L / (K + 1)`, i = 1..K, on the ring `[a, a + L)`; returns the
/// unslid count and the number of slides reaching it, for the count of
/// target triggers hit (`count_aux = false`) or of aux triggers hit.
fn brute_force_slides(
    targets: &[f64],
    aux: &[(f64, f64, f64, f64)],
    (a, len): (f64, f64),
    min_snr: f64,
    window_s: f64,
    slides: usize,
    count_aux: bool,
) -> (usize, usize) {
    let used: Vec<(f64, f64)> = aux
        .iter()
        .filter(|x| x.3 >= min_snr)
        .map(|x| (x.1 - window_s - x.0, x.2 + window_s - x.0))
        .collect();
    let peaks: Vec<f64> = aux.iter().filter(|x| x.3 >= min_snr).map(|x| x.0).collect();
    let count = |shift: f64| -> usize {
        let ring = |t: f64| a + (t - a + shift).rem_euclid(len);
        // Windows after the shift, with a copy across the ring's end.
        let mut win: Vec<(f64, f64)> = Vec::new();
        for (p, (lo, hi)) in peaks.iter().zip(&used) {
            let c = ring(*p);
            win.push((c + lo, c + hi));
            win.push((c + lo - len, c + hi - len));
            win.push((c + lo + len, c + hi + len));
        }
        if count_aux {
            (0..peaks.len())
                .filter(|&k| {
                    (0..3).any(|j| {
                        let (lo, hi) = win[3 * k + j];
                        let i = targets.partition_point(|&t| t < lo);
                        targets.get(i).is_some_and(|&t| t <= hi)
                    })
                })
                .count()
        } else {
            win.sort_by(|x, y| x.0.total_cmp(&y.0));
            targets
                .iter()
                .filter(|&&t| {
                    let i = win.partition_point(|w| w.0 <= t);
                    win[..i].iter().rev().take(64).any(|w| w.1 >= t)
                })
                .count()
        }
    };
    let observed = count(0.0);
    let reached = (1..=slides)
        .filter(|&i| count(i as f64 * len / (slides + 1) as f64) >= observed)
        .count();
    (observed, reached)
}

// Issue 13: "round 1 claimed p = 4e-9 where time slides give 4e-4". Target
// triggers in trains (120 trains of 5 in 4 h), a weak witness (10 ms before
// one member of 8% of the trains, plus 400 unrelated triggers) and 40
// random channels. For every channel's best cell, the chance probability
// the table prints must not claim more than time slides support: with
// `r` of K = 500 brute-force slides (written in this test, independent of
// the library; the method of e.g. Amaldi et al. 1989, from memory) reaching
// the observed count, the slide p-value is (r + 1) / (K + 1), and where
// r ≥ 10 (resolved) the printed chance probability must lie within a
// factor 3 of it (measured: within a factor 1.3). The naive Poisson on
// target triggers (the statistic before) is printed beside it; for at least
// one resolved channel it over-claims by more than 10× (the check has
// teeth: with seed 11, AV1:RANDOM_38, naive 1.9e-3 against slides 6.2e-2).
#[test]
fn trains_chance_probability_agrees_with_time_slides() {
    let mut rng = Xoshiro256Plus::seed_from_u64(11);
    let (a, b) = (T0, T0 + 14_400.0);
    let analysed = SegmentList::single(a, b);
    let starts = train_starts(&mut rng, 120, a + 10.0, b - 10.0);
    let trains = trains(&mut rng, &starts);
    let mut targets: Vec<f64> = trains.iter().flatten().copied().collect();
    targets.sort_by(f64::total_cmp);
    let mut witness: Vec<(f64, f64, f64, f64)> = Vec::new();
    for tr in &trains {
        if rng.gen_bool(0.08) {
            let t = tr[rng.gen_range(0..5)];
            let p = t - 0.010;
            witness.push((p, p - 0.005, p + 0.005, rng.gen_range(8.0..40.0)));
        }
    }
    witness.extend(random_aux(&mut rng, 400, a, b));
    let mut channels = vec![("AV1:WEAK_WITNESS".to_string(), witness)];
    for c in 0..40 {
        let n = rng.gen_range(200..800);
        channels.push((format!("AV1:RANDOM_{c:02}"), random_aux(&mut rng, n, a, b)));
    }
    let target_set = TargetSet::new(
        targets
            .iter()
            .map(|&t| TargetTrigger {
                t_peak: t,
                snr: 8.0,
                f_peak: 100.0,
                family: None,
            })
            .collect(),
        analysed.clone(),
    );
    let aux: Vec<AuxChannel> = channels
        .iter()
        .enumerate()
        .map(|(i, (name, rows))| {
            let trig = rows
                .iter()
                .map(|&(t, ts, te, snr)| AuxTrigger {
                    t_peak: t,
                    t_start: ts,
                    t_end: te,
                    snr,
                    f_peak: 50.0,
                })
                .collect();
            AuxChannel::new(i as i64, name, trig, analysed.clone())
        })
        .collect();
    let slides = 500;
    let rows = witness_table(&target_set, &[None], &aux, &Grid::default(), slides, 0.01);
    let (mut resolved, mut naive_overclaims) = (0, 0);
    for (i, (name, data)) in channels.iter().enumerate() {
        let best = rows
            .iter()
            .filter(|r| r.aux_channel_id == i as i64)
            .min_by(|x, y| x.chance_p_log10.total_cmp(&y.chance_p_log10))
            .unwrap();
        let count_aux = best.chance_basis == ChanceBasis::AuxBinomial;
        let (observed, r) = brute_force_slides(
            &targets,
            data,
            (a, b - a),
            best.aux_min_snr,
            best.window_s,
            slides,
            count_aux,
        );
        let want = if count_aux {
            best.aux_hit
        } else {
            best.targets_hit
        };
        assert_eq!(observed as u64, want, "{name}: brute-force count");
        let slide_p = (r + 1) as f64 / (slides + 1) as f64;
        let naive = poisson_ln_sf(best.targets_hit, best.targets_hit_chance).exp();
        eprintln!(
            "{name}: basis {} chance_p {:.2e} slides {slide_p:.2e} (r = {r}) naive Poisson {naive:.2e}",
            best.chance_basis.as_str(),
            best.chance_p
        );
        if r >= 10 {
            resolved += 1;
            assert!(
                best.chance_p >= slide_p / 3.0 && best.chance_p <= 3.0 * slide_p,
                "{name}: chance_p {:.2e} against the slides' {slide_p:.2e}",
                best.chance_p
            );
            if naive < slide_p / 10.0 {
                naive_overclaims += 1;
            }
        }
    }
    assert!(
        resolved >= 20,
        "only {resolved} channels resolved by the slides"
    );
    assert!(
        naive_overclaims >= 1,
        "the naive Poisson never over-claims here"
    );
}
