//! Bayesian blocks for event data (Scargle et al. 2013, ApJ 764, 167).
//!
//! The optimal partition of an ordered event list into blocks of constant
//! rate is found by dynamic programming over "cells" (one cell per distinct
//! event time; cell edges are the midpoints between consecutive distinct
//! times, plus the two outer edges). The fitness of a block holding `N_k`
//! events over exposure `T_k` is `N_k ln(N_k / T_k)` (Scargle 2013 eq. 19)
//! and each block costs `ncp_prior = 4 − ln(73.53 p0 N^−0.478)` (eq. 21 with
//! the logarithm restored), N = number of cells.
//!
//! With plain time exposure and the outer edges at the first and last event
//! this is the same computation as
//! `astropy.stats.bayesian_blocks(t, fitness='events', p0=p0)` (checked in
//! tests against Astropy 8.0.2). Two extensions:
//! - **live-time exposure**: `T_k` is the live time inside the block
//!   (analysed time), not its length; equal to the plain case when live time
//!   is continuous;
//! - **outer edges** may be set to an analysis span, so a family that appears
//!   late gets a first, low-rate block from the span start.
//!
//! Candidates are pruned as in PELT (Killick et al. 2012, JASA 107, 1590),
//! which is exact here because splitting a block never lowers the summed
//! fitness (log-sum inequality): a start that trails the best total by more
//! than `ncp_prior` can never win again.

use crate::segments::SegmentList;

/// The block-count prior of Scargle et al. (2013) eq. 21 (as corrected in
/// arXiv:1304.2818 and used by Astropy): `4 − ln(73.53 p0 N^−0.478)`.
pub fn ncp_prior_p0(p0: f64, n_cells: usize) -> f64 {
    4.0 - (73.53 * p0 * (n_cells as f64).powf(-0.478)).ln()
}

/// Input of a Bayesian-blocks fit on events.
#[derive(Debug, Clone, Copy)]
pub struct BlocksInput<'a> {
    /// Event times \[GPS s\], any order; ties allowed.
    pub t: &'a [f64],
    /// False-positive probability for the prior (default 0.05).
    pub p0: f64,
    /// Outer edges \[GPS s\]; `None` = first and last event (Astropy's choice).
    /// Must enclose every event.
    pub span: Option<(f64, f64)>,
    /// Live time; `None` = continuous exposure.
    pub live: Option<&'a SegmentList>,
}

/// One block of constant rate.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Block {
    /// Start \[GPS s\].
    pub start: f64,
    /// End \[GPS s\].
    pub end: f64,
    /// Events in the block.
    pub count: u64,
    /// Exposure (live time) in the block \[s\].
    pub exposure_s: f64,
}

impl Block {
    /// Rate \[events / s\] (0 when there is no exposure).
    pub fn rate_per_s(&self) -> f64 {
        if self.exposure_s > 0.0 {
            self.count as f64 / self.exposure_s
        } else {
            0.0
        }
    }
}

/// Result of a fit: the `M + 1` edges of `M` blocks and the blocks.
#[derive(Debug, Clone, PartialEq)]
pub struct BlocksFit {
    /// Block edges \[GPS s\], ascending (Astropy's return value).
    pub edges: Vec<f64>,
    /// The blocks between consecutive edges, with counts and exposure.
    pub blocks: Vec<Block>,
    /// The prior used.
    pub ncp_prior: f64,
}

impl BlocksFit {
    /// Change times \[GPS s\]: the inner edges.
    pub fn change_times(&self) -> &[f64] {
        if self.edges.len() <= 2 {
            &[]
        } else {
            &self.edges[1..self.edges.len() - 1]
        }
    }
}

/// Distinct sorted times and their multiplicities (NaNs dropped).
fn cells(t: &[f64]) -> (Vec<f64>, Vec<f64>) {
    let mut s: Vec<f64> = t.iter().copied().filter(|x| !x.is_nan()).collect();
    s.sort_by(f64::total_cmp);
    let mut ut: Vec<f64> = Vec::with_capacity(s.len());
    let mut x: Vec<f64> = Vec::with_capacity(s.len());
    for v in s {
        if ut.last() == Some(&v) {
            *x.last_mut().unwrap() += 1.0;
        } else {
            ut.push(v);
            x.push(1.0);
        }
    }
    (ut, x)
}

/// Fit Bayesian blocks to events. Returns `None` for an empty event list.
///
/// # Panics
/// If `p0` is not in (0, 1) or the span does not enclose the events.
pub fn bayesian_blocks(input: &BlocksInput) -> Option<BlocksFit> {
    assert!(
        input.p0 > 0.0 && input.p0 < 1.0,
        "p0 {} not in (0, 1)",
        input.p0
    );
    let (t, x) = cells(input.t);
    let n = t.len();
    if n == 0 {
        return None;
    }
    cells_blocks(&t, &x, input.p0, input.span, input.live)
}

/// Bayesian blocks on cells: distinct ascending times `t` with event counts
/// `x` (Astropy's `x` argument for binned events). See [`bayesian_blocks`].
///
/// # Panics
/// If `t` is empty, `t` and `x` differ in length, or the span does not
/// enclose the times.
pub fn cells_blocks(
    t: &[f64],
    x: &[f64],
    p0: f64,
    span: Option<(f64, f64)>,
    live: Option<&SegmentList>,
) -> Option<BlocksFit> {
    let n = t.len();
    assert_eq!(n, x.len(), "times and counts differ in length");
    if n == 0 {
        return None;
    }
    let (first, last) = span.unwrap_or((t[0], t[n - 1]));
    assert!(
        first <= t[0] && last >= t[n - 1],
        "span must enclose events"
    );
    let mut edges = Vec::with_capacity(n + 1);
    edges.push(first);
    for w in t.windows(2) {
        edges.push(0.5 * (w[1] + w[0]));
    }
    edges.push(last);
    // block_length[i] = exposure from edge i to the last edge.
    let gappy = live.is_some_and(|l| l.overlap_with(first, last) < last - first);
    let block_length: Vec<f64> = match live {
        Some(l) if gappy => edges.iter().map(|&e| l.overlap_with(e, last)).collect(),
        _ => edges.iter().map(|&e| last - e).collect(),
    };
    // cum[i] = events in cells 0..i.
    let mut cum = vec![0.0; n + 1];
    for i in 0..n {
        cum[i + 1] = cum[i] + x[i];
    }
    let ncp_prior = ncp_prior_p0(p0, n);
    let mut best = vec![0.0_f64; n];
    let mut last_start = vec![0_usize; n];
    let mut candidates: Vec<usize> = Vec::new();
    let mut a_r: Vec<f64> = Vec::new();
    for r in 0..n {
        candidates.push(r);
        a_r.clear();
        let mut i_max = candidates[0];
        let mut a_max = f64::NEG_INFINITY;
        for (idx, &i) in candidates.iter().enumerate() {
            let n_k = cum[r + 1] - cum[i];
            let t_k = block_length[i] - block_length[r + 1];
            // Astropy: N_k * log(N_k / T_k), 0 when N_k = 0.
            let fit = if n_k > 0.0 {
                n_k * (n_k / t_k).ln()
            } else {
                0.0
            };
            let mut a = fit - ncp_prior;
            if i > 0 {
                a += best[i - 1];
            }
            a_r.push(a);
            // first maximum wins (numpy argmax); candidates are ascending.
            if idx == 0 || a > a_max {
                a_max = a;
                i_max = i;
            }
        }
        best[r] = a_max;
        last_start[r] = i_max;
        // PELT pruning (exact: see module docs). Keep NaN-free starts only.
        let threshold = a_max - ncp_prior;
        let mut k = 0;
        candidates.retain(|_| {
            // keep unless strictly behind (NaN compares false and is kept)
            let keep = a_r[k].partial_cmp(&threshold) != Some(std::cmp::Ordering::Less);
            k += 1;
            keep
        });
    }
    // Peel off blocks from the end.
    let mut cps = vec![n];
    let mut ind = n;
    while ind > 0 {
        ind = last_start[ind - 1];
        cps.push(ind);
    }
    cps.reverse();
    let edges_out: Vec<f64> = cps.iter().map(|&c| edges[c]).collect();
    let blocks = cps
        .windows(2)
        .map(|w| Block {
            start: edges[w[0]],
            end: edges[w[1]],
            count: (cum[w[1]] - cum[w[0]]) as u64,
            exposure_s: block_length[w[0]] - block_length[w[1]],
        })
        .collect();
    Some(BlocksFit {
        edges: edges_out,
        blocks,
        ncp_prior,
    })
}

/// Events binned into cells of width `cell_s` \[s\] starting at `origin`
/// (each cell's events placed at the cell centre), for long event lists where
/// the O(N²) fit over single events would be too slow. Returns (times, counts).
pub fn bin_cells(t_sorted: &[f64], origin: f64, cell_s: f64) -> (Vec<f64>, Vec<f64>) {
    let mut ut: Vec<f64> = Vec::new();
    let mut x: Vec<f64> = Vec::new();
    let mut cur: Option<i64> = None;
    for &v in t_sorted {
        let k = ((v - origin) / cell_s).floor() as i64;
        if cur == Some(k) {
            *x.last_mut().unwrap() += 1.0;
        } else {
            cur = Some(k);
            ut.push(origin + (k as f64 + 0.5) * cell_s);
            x.push(1.0);
        }
    }
    (ut, x)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::segments::Segment;
    use rand::{Rng, SeedableRng};

    /// Astropy's O(N²) recursion without pruning (the oracle for the PELT
    /// pruning), with exposure given as `block_length`.
    fn naive(x: &[f64], block_length: &[f64], ncp_prior: f64) -> Vec<usize> {
        let n = x.len();
        let (mut best, mut last) = (vec![0.0; n], vec![0usize; n]);
        for r in 0..n {
            let (mut a_max, mut i_max) = (f64::NEG_INFINITY, 0);
            for i in 0..=r {
                let n_k: f64 = x[i..=r].iter().sum();
                let t_k = block_length[i] - block_length[r + 1];
                let mut a = n_k * (n_k / t_k).ln() - ncp_prior;
                if i > 0 {
                    a += best[i - 1];
                }
                if i == 0 || a > a_max {
                    a_max = a;
                    i_max = i;
                }
            }
            best[r] = a_max;
            last[r] = i_max;
        }
        let mut cps = vec![n];
        let mut ind = n;
        while ind > 0 {
            ind = last[ind - 1];
            cps.push(ind);
        }
        cps.reverse();
        cps
    }

    #[test]
    fn pruning_matches_unpruned_recursion_with_gaps() {
        let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(3);
        for case in 0..40 {
            // piecewise rates with a dead gap
            let mut t: Vec<f64> = Vec::new();
            let n1 = rng.gen_range(5..80);
            let n2 = rng.gen_range(5..80);
            t.extend((0..n1).map(|_| rng.gen::<f64>() * 400.0));
            t.extend(
                (0..n2).map(|_| 600.0 + rng.gen::<f64>() * (50.0 + 300.0 * (case % 3) as f64)),
            );
            let live = SegmentList::from_segments(vec![
                Segment::new(0.0, 400.0),
                Segment::new(600.0, 2000.0),
            ]);
            let (ut, x) = cells(&t);
            let fit = cells_blocks(&ut, &x, 0.05, Some((0.0, 2000.0)), Some(&live)).unwrap();
            let mut edges = vec![0.0];
            edges.extend(ut.windows(2).map(|w| 0.5 * (w[0] + w[1])));
            edges.push(2000.0);
            let bl: Vec<f64> = edges
                .iter()
                .map(|&e| live.overlap_with(e, 2000.0))
                .collect();
            let cps = naive(&x, &bl, ncp_prior_p0(0.05, ut.len()));
            let want: Vec<f64> = cps.iter().map(|&c| edges[c]).collect();
            assert_eq!(fit.edges, want, "case {case}");
        }
    }
}
