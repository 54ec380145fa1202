//! Bayesian blocks against Astropy 8.0.2 and hand-worked properties.
use glitchbook::rates::blocks::{bayesian_blocks, ncp_prior_p0, BlocksInput};
use glitchbook::segments::{Segment, SegmentList};
use serde_json::Value;

fn cases() -> Vec<Value> {
    let text = std::fs::read_to_string("tests/data/rates/bayesian_blocks_events.json").unwrap();
    let v: Value = serde_json::from_str(&text).unwrap();
    v["cases"].as_array().unwrap().clone()
}

fn floats(v: &Value) -> Vec<f64> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .collect()
}

/// Edges equal `astropy.stats.bayesian_blocks(t, fitness='events', p0=p0)`
/// (Astropy 8.0.2; fixture tests/data/rates/bayesian_blocks_events.json made
/// by make_fixtures_rates.py): uniform, rate steps, GPS-sized times, ties.
#[test]
fn edges_equal_astropy() {
    let cases = cases();
    assert!(cases.len() >= 6);
    let mut saw_change = 0;
    for c in &cases {
        let name = c["name"].as_str().unwrap();
        let t = floats(&c["t"]);
        let want = floats(&c["edges"]);
        let p0 = c["p0"].as_f64().unwrap();
        let fit = bayesian_blocks(&BlocksInput {
            t: &t,
            p0,
            span: None,
            live: None,
        })
        .unwrap();
        assert_eq!(
            fit.edges.len(),
            want.len(),
            "{name}: {:?} vs astropy {want:?}",
            fit.edges
        );
        for (g, w) in fit.edges.iter().zip(&want) {
            assert!(
                (g - w).abs() <= 1e-9 * w.abs().max(1.0),
                "{name}: {g} vs astropy {w}"
            );
        }
        // block counts add up to the number of events (ties included)
        let total: u64 = fit.blocks.iter().map(|b| b.count).sum();
        assert_eq!(total as usize, t.len(), "{name}");
        saw_change += usize::from(!fit.change_times().is_empty());
    }
    assert!(
        saw_change >= 4,
        "fixtures should include real change points"
    );
}

/// Live time that is continuous over the events gives the plain answer.
#[test]
fn continuous_live_time_is_plain() {
    for c in cases() {
        let t = floats(&c["t"]);
        let p0 = c["p0"].as_f64().unwrap();
        let (a, b) = (t[0], *t.last().unwrap());
        let live = SegmentList::single(a - 10.0, b + 10.0);
        let plain = bayesian_blocks(&BlocksInput {
            t: &t,
            p0,
            span: None,
            live: None,
        })
        .unwrap();
        let with = bayesian_blocks(&BlocksInput {
            t: &t,
            p0,
            span: None,
            live: Some(&live),
        })
        .unwrap();
        assert_eq!(plain, with);
    }
}

/// Scargle et al. (2013) eq. 21 as in Astropy: 4 − ln(73.53 p0 N^−0.478).
/// Reference values from Astropy 8.0.2
/// `astropy.stats.bayesian_blocks.Events(p0=p0).compute_ncp_prior(N)`.
#[test]
fn prior_formula() {
    assert!((ncp_prior_p0(0.05, 1000) - 5.999945810699321).abs() < 1e-12);
    assert!((ncp_prior_p0(0.01, 37) - 6.033495462023899).abs() < 1e-12);
}

/// Dead time must not look like a rate drop: a steady process observed with
/// a long gap has one block when the exposure is live time, while plain time
/// exposure invents a low-rate block over the gap.
#[test]
fn gap_in_live_time_is_not_a_change() {
    // 1 event/s on [0, 1000) and [3000, 4000); dead in between. Times on a
    // regular grid offset by a fixed jitter pattern (deterministic).
    let mut t = Vec::new();
    for k in 0..1000 {
        let j = ((k * 7919) % 1000) as f64 / 1000.0 * 0.5;
        t.push(k as f64 + 0.25 + j);
        t.push(3000.0 + k as f64 + 0.25 + j);
    }
    let live = SegmentList::from_segments(vec![
        Segment::new(0.0, 1000.0),
        Segment::new(3000.0, 4000.0),
    ]);
    let with = bayesian_blocks(&BlocksInput {
        t: &t,
        p0: 0.05,
        span: Some((0.0, 4000.0)),
        live: Some(&live),
    })
    .unwrap();
    assert_eq!(with.blocks.len(), 1, "{:?}", with.edges);
    assert!((with.blocks[0].exposure_s - 2000.0).abs() < 1e-9);
    let plain = bayesian_blocks(&BlocksInput {
        t: &t,
        p0: 0.05,
        span: Some((0.0, 4000.0)),
        live: None,
    })
    .unwrap();
    assert!(plain.blocks.len() >= 3, "{:?}", plain.edges);
}

/// A family that appears late: with the span as outer edges the first block
/// runs from the span start and a change point sits at the appearance.
#[test]
fn late_appearance_with_span() {
    let t: Vec<f64> = (0..300)
        .map(|k| 5000.0 + k as f64 * 10.0 + ((k * 37) % 10) as f64 * 0.3)
        .collect();
    let fit = bayesian_blocks(&BlocksInput {
        t: &t,
        p0: 0.05,
        span: Some((0.0, 8000.0)),
        live: None,
    })
    .unwrap();
    assert_eq!(fit.edges[0], 0.0);
    assert_eq!(*fit.edges.last().unwrap(), 8000.0);
    let cps = fit.change_times();
    assert!(cps.iter().any(|c| (c - 5000.0).abs() < 30.0), "{cps:?}");
}
