//! Coincidences of target triggers with one aux channel over a grid of aux
//! SNR thresholds and windows, and the chance probability of each cell.
//!
//! # Definitions
//! All figures are restricted to the *common analysed time* C = target
//! analysed ∩ aux analysed (DESIGN.md, "Coincidence and vetoes").
//! - An aux trigger's **window** at padding `w` is its own extent widened by
//!   `w` on each side, `[t_start − w, t_end + w]` (for imported triggers
//!   without an extent, `t_start = t_end = t_peak`: `±w` around the peak).
//! - Aux triggers **used** at threshold ρ: `snr ≥ ρ` and a window that
//!   reaches into C (a trigger just outside C still vetoes the part of its
//!   window inside C).
//! - A target trigger (peak in C) is **hit** when its peak lies in the window
//!   of a used aux trigger; an aux trigger is hit when its window holds the
//!   peak of a target trigger.
//! - covered time = (∪ windows) ∩ C, overlaps counted once; deadtime =
//!   covered / |C|; efficiency = targets hit / targets; aux hit fraction =
//!   aux hit / aux used; lift = efficiency / deadtime.
//!
//! # Chance probability of a cell
//! Under the hypothesis that the aux channel is unrelated to the target, two
//! conditional counts have exact, cheap distributions:
//! - **targets as units** (`targets_poisson`): given the aux windows, target
//!   triggers that arrive independently fall in them with probability
//!   `deadtime` each, so targets hit ~ Poisson(targets × deadtime) — the
//!   fast figure of the design notes. It is valid only when target triggers
//!   do not come in clumps at the scale of the windows: one window over a
//!   train of five target triggers counts five hits.
//! - **aux triggers as units** (`aux_binomial`): given the target triggers,
//!   an aux trigger placed independently is hit with probability `D(w + ℓ/2)`,
//!   the fraction of C within `w + ℓ/2` of a target trigger (ℓ its extent);
//!   aux hit ~ Binomial(aux used, mean hit probability). By Hoeffding (1956,
//!   Ann. Math. Stat. 27, 713) the binomial with the mean probability bounds
//!   the upper tail of the exact Poisson-binomial sum from above. Valid when
//!   aux triggers do not come in clumps.
//!
//! Which side clumps is measured per cell, as the ratio of the coverage a
//! Poisson process of the same rate would give (`1 − e^{−x}`, Boolean model,
//! x = total window length / |C|) to the observed coverage of the windows:
//! 1 for independent arrivals, above 1 when windows overlap more than chance
//! (trains). For n independent arrivals the ratio scatters by about
//! σ = 0.6 √(x / n) (our simulation: 0.55–0.6 √(x/n) for n = 20–5000,
//! x = 0.004–0.1), so a side counts as clumped when its ratio exceeds
//! [`CLUMP_TOLERANCE`] + 4σ. A cell uses targets as units when they do not
//! clump, else aux triggers when they do not, else neither analytic figure
//! holds and the cell's chance probability comes from the time slides alone
//! (`slides`; see [`super::background`]).

use super::stats::{binomial_ln_sf, poisson_ln_sf};
use super::{AuxChannel, Thresholds};
use crate::segments::{Segment, SegmentList};
use serde::{Deserialize, Serialize};

/// Largest clumping ratio (observed coverage against a Poisson process of
/// the same rate) at which one side still counts as arriving independently,
/// before the allowance for noise (our choice: 5% more overlap than chance
/// changes tail probabilities near 1e-3 by well under a factor 2 for counts
/// of tens).
pub const CLUMP_TOLERANCE: f64 = 1.05;

/// Whether a clumping `ratio` of `n` arrivals whose windows total `x`
/// times the analysed time shows clumping beyond its noise (see the module
/// header).
pub fn clumped(ratio: f64, x: f64, n: u64) -> bool {
    if n == 0 {
        return false;
    }
    ratio > CLUMP_TOLERANCE + 4.0 * 0.6 * (x.max(0.0) / n as f64).sqrt()
}

/// No set (a target belongs to at most two sets: all and its family).
pub(crate) const NO_SET: u16 = u16::MAX;

/// Which count a cell's chance probability is computed on.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum ChanceBasis {
    /// Target triggers hit, Poisson with mean targets × deadtime.
    #[default]
    TargetsPoisson,
    /// Aux triggers hit, binomial over the aux triggers used.
    AuxBinomial,
    /// Both sides clump: the fraction of time slides with as many targets
    /// hit (1 when no slides were run).
    Slides,
}

impl ChanceBasis {
    /// The name used in tables, JSON, CSV and the catalogue.
    pub fn as_str(self) -> &'static str {
        match self {
            ChanceBasis::TargetsPoisson => "targets_poisson",
            ChanceBasis::AuxBinomial => "aux_binomial",
            ChanceBasis::Slides => "slides",
        }
    }
}

/// One aux trigger prepared for counting.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct AuxItem {
    /// Extent start \[s\] (GPS, or live-time coordinate in slides).
    pub start: f64,
    /// Extent end \[s\].
    pub end: f64,
    /// Index into the thresholds: the highest threshold it passes.
    pub level: u8,
}

/// One target trigger: peak time and the (up to two) sets it belongs to.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct TargetPoint {
    /// Peak \[s\].
    pub t: f64,
    /// Set indices, [`NO_SET`] when unused.
    pub sets: [u16; 2],
}

/// Per-(set, threshold, window) histograms of one counting pass.
#[derive(Debug, Clone)]
pub(crate) struct Hist {
    pub n_sets: usize,
    pub n_levels: usize,
    pub n_windows: usize,
    /// Targets whose highest hitting level at window `j` is `k`.
    tgt: Vec<u32>,
    /// Aux triggers of level `k` whose smallest hitting window is `j`.
    aux: Vec<u32>,
}

impl Hist {
    pub fn new(n_sets: usize, n_levels: usize, n_windows: usize) -> Self {
        let n = n_sets * n_levels * n_windows;
        Hist {
            n_sets,
            n_levels,
            n_windows,
            tgt: vec![0; n],
            aux: vec![0; n],
        }
    }

    fn idx(&self, s: usize, k: usize, j: usize) -> usize {
        (s * self.n_levels + k) * self.n_windows + j
    }

    fn clear(&mut self) {
        self.tgt.iter_mut().for_each(|x| *x = 0);
        self.aux.iter_mut().for_each(|x| *x = 0);
    }

    /// Targets hit and aux hit for every (set, level, window), laid out as
    /// `[set][level][window]`: a target counted at level `k` is hit for
    /// every threshold at or below `k`; an aux trigger whose smallest
    /// hitting window is `j` is hit for every window from `j` up.
    pub fn cumulative(&self) -> (Vec<u32>, Vec<u32>) {
        let (nl, nw) = (self.n_levels, self.n_windows);
        let mut t_hit = vec![0u32; self.tgt.len()];
        let mut a_hit = vec![0u32; self.aux.len()];
        for s in 0..self.n_sets {
            for j in 0..nw {
                let mut acc = 0;
                for k in (0..nl).rev() {
                    acc += self.tgt[self.idx(s, k, j)];
                    t_hit[self.idx(s, k, j)] = acc;
                }
            }
            for k in (0..nl).rev() {
                let mut acc = 0;
                for j in 0..nw {
                    acc += self.aux[self.idx(s, k, j)];
                    let above = if k + 1 < nl {
                        a_hit[self.idx(s, k + 1, j)]
                    } else {
                        0
                    };
                    // a_hit(k, j) = Σ_{k' ≥ k} Σ_{j' ≤ j} aux(k', j').
                    a_hit[self.idx(s, k, j)] = acc + above;
                }
            }
        }
        (t_hit, a_hit)
    }
}

/// A (target, aux) pair within the largest window: indices into the
/// target and aux arrays and the smallest window index that holds it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct Pair {
    pub t: u32,
    pub a: u32,
    pub j: u8,
}

/// Reusable buffers of [`accumulate`].
#[derive(Debug, Default)]
pub(crate) struct Scratch {
    /// Per target and window: highest level hitting it (−1: none).
    tbest: Vec<i16>,
    touched_t: Vec<u32>,
    /// Per (aux, set): smallest window at which it is hit.
    amin: Vec<u8>,
    touched_a: Vec<u32>,
    /// Pairs of the zero-lag pass.
    pub pairs: Vec<Pair>,
}

/// Target triggers as the counting passes read them.
#[derive(Debug, Clone, Default)]
pub(crate) struct TargetArrays {
    /// Peaks, ascending \[s\].
    pub t: Vec<f64>,
    /// Sets of each target.
    pub sets: Vec<[u16; 2]>,
}

impl TargetArrays {
    pub fn new(points: &[TargetPoint], map: impl Fn(f64) -> f64) -> Self {
        TargetArrays {
            t: points.iter().map(|p| map(p.t)).collect(),
            sets: points.iter().map(|p| p.sets).collect(),
        }
    }
}

/// Aux triggers as the counting passes read them (sorted by start).
#[derive(Debug, Clone, Default)]
pub(crate) struct AuxArrays {
    pub start: Vec<f64>,
    pub end: Vec<f64>,
    pub level: Vec<u8>,
}

/// Fill `hist` from the pairs of one pass: per target the highest level
/// hitting it at each window, per (aux, set) the smallest window at which
/// a target of the set hits it.
pub(crate) fn accumulate(
    pairs: &[Pair],
    target_sets: &[[u16; 2]],
    aux_levels: &[u8],
    hist: &mut Hist,
    sc: &mut Scratch,
) {
    hist.clear();
    let (n_sets, nw) = (hist.n_sets, hist.n_windows);
    if sc.tbest.len() < target_sets.len() * nw {
        sc.tbest.resize(target_sets.len() * nw, -1);
    }
    if sc.amin.len() < aux_levels.len() * n_sets {
        sc.amin.resize(aux_levels.len() * n_sets, u8::MAX);
    }
    for pr in pairs {
        let (t, a, j) = (pr.t as usize, pr.a as usize, pr.j as usize);
        let row = t * nw;
        if sc.tbest[row..row + nw].iter().all(|&b| b < 0) {
            sc.touched_t.push(pr.t);
        }
        let b = &mut sc.tbest[row + j];
        *b = (*b).max(i16::from(aux_levels[a]));
        for &set in &target_sets[t] {
            if set == NO_SET {
                continue;
            }
            let slot = a * n_sets + set as usize;
            let m = &mut sc.amin[slot];
            if *m == u8::MAX {
                sc.touched_a.push(slot as u32);
            }
            *m = (*m).min(pr.j);
        }
    }
    for &slot in &sc.touched_a {
        let slot = slot as usize;
        let (a, set) = (slot / n_sets, slot % n_sets);
        let j = std::mem::replace(&mut sc.amin[slot], u8::MAX) as usize;
        let h = hist.idx(set, aux_levels[a] as usize, j);
        hist.aux[h] += 1;
    }
    sc.touched_a.clear();
    for &t in &sc.touched_t {
        let t = t as usize;
        let row = t * nw;
        let mut run = -1i16;
        for j in 0..nw {
            run = run.max(std::mem::replace(&mut sc.tbest[row + j], -1));
            if run >= 0 {
                for &set in &target_sets[t] {
                    if set != NO_SET {
                        let h = hist.idx(set as usize, run as usize, j);
                        hist.tgt[h] += 1;
                    }
                }
            }
        }
    }
    sc.touched_t.clear();
}

/// The zero-lag pass: every (target, aux) pair whose distance (target peak
/// to the aux extent) is within the largest window, found aux by aux with
/// one forward pointer into the targets, then [`accumulate`]d.
pub(crate) fn count_hits(
    targets: &TargetArrays,
    aux: &AuxArrays,
    windows: &[f64],
    hist: &mut Hist,
    sc: &mut Scratch,
) {
    let wmax = windows[windows.len() - 1];
    let tt = &targets.t;
    let mut pairs = std::mem::take(&mut sc.pairs);
    pairs.clear();
    let mut tlo = 0usize;
    for a in 0..aux.start.len() {
        let (s, e) = (aux.start[a], aux.end[a]);
        while tlo < tt.len() && tt[tlo] < s - wmax {
            tlo += 1;
        }
        let mut k = tlo;
        while k < tt.len() && tt[k] <= e + wmax {
            let d = (s - tt[k]).max(tt[k] - e).max(0.0);
            pairs.push(Pair {
                t: k as u32,
                a: a as u32,
                j: windows.partition_point(|&w| w < d) as u8,
            });
            k += 1;
        }
    }
    accumulate(&pairs, &targets.sets, &aux.level, hist, sc);
    sc.pairs = pairs;
}

/// The fraction of C within `h` of a target trigger, `D(h)`, and the
/// Poisson reference for it, for one set of sorted target times, evaluated
/// in O(log N) from sorted gaps and edge distances with prefix sums.
#[derive(Debug, Clone, Default)]
pub(crate) struct Coverage {
    /// Gaps between consecutive targets of one segment, ascending.
    gaps: Vec<f64>,
    /// `gaps_suffix[i] = Σ gaps[i..]`.
    gaps_suffix: Vec<f64>,
    /// Distance from each target to the start / end of its segment
    /// (both lists), ascending, with prefix sums.
    room: Vec<f64>,
    room_prefix: Vec<f64>,
    /// Distances from the first (last) target of each segment to its start
    /// (end), ascending, with prefix sums.
    edges: Vec<f64>,
    edges_prefix: Vec<f64>,
    /// Σ over segments of (last − first target time).
    spans: f64,
    /// Number of targets.
    n: usize,
    /// |C| \[s\].
    total_s: f64,
}

fn sorted_with_prefix(mut v: Vec<f64>) -> (Vec<f64>, Vec<f64>) {
    v.sort_by(f64::total_cmp);
    let mut prefix = Vec::with_capacity(v.len() + 1);
    prefix.push(0.0);
    let mut acc = 0.0;
    for x in &v {
        acc += x;
        prefix.push(acc);
    }
    (v, prefix)
}

/// `Σ min(h, x)` over sorted `v` with prefix sums.
fn sum_min(v: &[f64], prefix: &[f64], h: f64) -> f64 {
    let i = v.partition_point(|&x| x <= h);
    prefix[i] + h * (v.len() - i) as f64
}

impl Coverage {
    /// From sorted target times that all lie in `common`.
    pub fn new(times: &[f64], common: &SegmentList) -> Self {
        let (mut gaps, mut room, mut edges, mut spans) = (vec![], vec![], vec![], 0.0);
        let mut i = 0;
        for seg in common.segments() {
            while i < times.len() && times[i] < seg.start {
                i += 1;
            }
            let first = i;
            while i < times.len() && times[i] < seg.end {
                room.push(times[i] - seg.start);
                room.push(seg.end - times[i]);
                if i > first {
                    gaps.push(times[i] - times[i - 1]);
                }
                i += 1;
            }
            if i > first {
                edges.push(times[first] - seg.start);
                edges.push(seg.end - times[i - 1]);
                spans += times[i - 1] - times[first];
            }
        }
        gaps.sort_by(f64::total_cmp);
        let mut gaps_suffix = vec![0.0; gaps.len() + 1];
        for k in (0..gaps.len()).rev() {
            gaps_suffix[k] = gaps_suffix[k + 1] + gaps[k];
        }
        let (room, room_prefix) = sorted_with_prefix(room);
        let (edges, edges_prefix) = sorted_with_prefix(edges);
        Coverage {
            gaps,
            gaps_suffix,
            room,
            room_prefix,
            edges,
            edges_prefix,
            spans,
            n: times.len(),
            total_s: common.total(),
        }
    }

    /// `|(∪ [t − h, t + h]) ∩ C| / |C|`.
    pub fn fraction(&self, h: f64) -> f64 {
        if self.n == 0 || self.total_s <= 0.0 {
            return 0.0;
        }
        // Union per segment = [first − h, last + h] ∩ segment, less the
        // part of every gap longer than 2h that no window covers.
        let i = self.gaps.partition_point(|&g| g <= 2.0 * h);
        let uncovered = self.gaps_suffix[i] - 2.0 * h * (self.gaps.len() - i) as f64;
        let covered = self.spans + sum_min(&self.edges, &self.edges_prefix, h) - uncovered.max(0.0);
        (covered / self.total_s).clamp(0.0, 1.0)
    }

    /// `Σ|window ∩ C| / |C|` for windows of half-width `h`.
    pub fn window_exponent(&self, h: f64) -> f64 {
        if self.total_s <= 0.0 {
            return 0.0;
        }
        sum_min(&self.room, &self.room_prefix, h) / self.total_s
    }

    /// The coverage a Poisson process with the same windows (clipped to C)
    /// would give, `1 − exp(−Σ|window ∩ C| / |C|)`.
    pub fn poisson_fraction(&self, h: f64) -> f64 {
        -(-self.window_exponent(h)).exp_m1()
    }

    /// Clumping ratio at half-width `h` (1 for independent arrivals).
    pub fn clumping(&self, h: f64) -> f64 {
        let d = self.fraction(h);
        if d <= 0.0 {
            1.0
        } else {
            self.poisson_fraction(h) / d
        }
    }
}

/// Target triggers of every set, restricted to one common time.
#[derive(Debug, Clone)]
pub(crate) struct TargetIndex {
    pub common: SegmentList,
    pub points: Vec<TargetPoint>,
    pub n_per_set: Vec<u64>,
    pub coverage: Vec<Coverage>,
}

impl TargetIndex {
    /// `triggers`: (peak, family) sorted by peak; `sets`: `None` = all
    /// triggers, `Some(f)` = family f.
    pub fn new(
        triggers: &[(f64, Option<i64>)],
        sets: &[Option<i64>],
        common: &SegmentList,
    ) -> Self {
        let all = sets.iter().position(Option::is_none);
        let mut points = Vec::new();
        let mut per_set: Vec<Vec<f64>> = vec![Vec::new(); sets.len()];
        for &(t, fam) in triggers {
            if !common.contains(t) {
                continue;
            }
            let mut ids = [NO_SET; 2];
            if let Some(a) = all {
                ids[0] = a as u16;
            }
            if let Some(f) = fam {
                if let Some(k) = sets.iter().position(|s| *s == Some(f)) {
                    ids[1] = k as u16;
                }
            }
            if ids == [NO_SET; 2] {
                continue;
            }
            for &s in &ids {
                if s != NO_SET {
                    per_set[s as usize].push(t);
                }
            }
            points.push(TargetPoint { t, sets: ids });
        }
        TargetIndex {
            common: common.clone(),
            n_per_set: per_set.iter().map(|v| v.len() as u64).collect(),
            coverage: per_set.iter().map(|v| Coverage::new(v, common)).collect(),
            points,
        }
    }
}

/// One aux channel prepared against one target analysed time.
#[derive(Debug, Clone)]
pub(crate) struct Prepared {
    pub common: SegmentList,
    pub analysed_s: f64,
    /// Thresholds of this channel, ascending.
    pub thresholds: Vec<f64>,
    /// Windows, ascending.
    pub windows: Vec<f64>,
    /// Used aux triggers (level ≥ 0, window reaching C), sorted by start.
    pub items: Vec<AuxItem>,
    /// The same as arrays for the counting pass.
    pub arrays: AuxArrays,
    /// Largest `end − start` of the items.
    pub max_extent: f64,
    /// Per item: distance from its extent to C (0 when they touch).
    pub dist_to_common: Vec<f64>,
    /// Per item: whether its padded window can reach past an edge of C
    /// (then its clipped length is computed exactly).
    pub near_edge: Vec<bool>,
}

/// Thresholds for one channel: the grid's fixed list, or quantiles of the
/// SNRs of the aux triggers that can reach C (see [`Thresholds`]).
pub fn channel_thresholds(thresholds: &Thresholds, snrs: &mut [f64]) -> Vec<f64> {
    match thresholds {
        Thresholds::Fixed(v) => v.clone(),
        Thresholds::Quantiles { steps, min_kept } => {
            if snrs.is_empty() || *steps == 0 {
                return Vec::new();
            }
            snrs.sort_by(|a, b| b.total_cmp(a));
            let m = snrs.len() as f64;
            let floor = (*min_kept).clamp(1, snrs.len()) as f64;
            let mut out: Vec<f64> = (0..*steps)
                .map(|k| {
                    let frac = if *steps > 1 {
                        k as f64 / (*steps - 1) as f64
                    } else {
                        0.0
                    };
                    // Kept counts geometric from all triggers down to `floor`.
                    let kept = (m.powf(1.0 - frac) * floor.powf(frac)).round().max(1.0);
                    snrs[kept as usize - 1]
                })
                .collect();
            out.sort_by(f64::total_cmp);
            out.dedup();
            out
        }
    }
}

impl Prepared {
    /// Prepare `aux` against the target analysed time `analysed`; `None`
    /// when they share no time or no aux trigger passes a threshold.
    pub fn new(
        aux: &AuxChannel,
        analysed: &SegmentList,
        thresholds: &Thresholds,
        windows: &[f64],
    ) -> Option<Self> {
        let common = analysed.intersection(&aux.analysed);
        let analysed_s = common.total();
        if analysed_s <= 0.0 || windows.is_empty() {
            return None;
        }
        let mut windows = windows.to_vec();
        windows.sort_by(f64::total_cmp);
        windows.dedup();
        let wmax = windows[windows.len() - 1];
        let reach: Vec<(usize, f64)> = aux
            .triggers
            .iter()
            .enumerate()
            .filter_map(|(i, a)| {
                let d = distance_to(&common, a.t_start.min(a.t_peak), a.t_end.max(a.t_peak));
                (d < wmax).then_some((i, d))
            })
            .collect();
        let mut snrs: Vec<f64> = reach.iter().map(|&(i, _)| aux.triggers[i].snr).collect();
        let thresholds = channel_thresholds(thresholds, &mut snrs);
        if thresholds.is_empty() {
            return None;
        }
        let mut rows: Vec<(AuxItem, f64, bool)> = reach
            .iter()
            .filter_map(|&(i, d)| {
                let a = &aux.triggers[i];
                let level = thresholds.partition_point(|&th| th <= a.snr);
                if level == 0 {
                    return None;
                }
                let (start, end) = (a.t_start.min(a.t_peak), a.t_end.max(a.t_peak));
                let edge = d > 0.0
                    || common.overlap_with(start - wmax, end + wmax) < end - start + 2.0 * wmax;
                Some((
                    AuxItem {
                        start,
                        end,
                        level: (level - 1).min(u8::MAX as usize - 1) as u8,
                    },
                    d,
                    edge,
                ))
            })
            .collect();
        if rows.is_empty() {
            return None;
        }
        rows.sort_by(|a, b| a.0.start.total_cmp(&b.0.start));
        let max_extent = rows.iter().map(|r| r.0.end - r.0.start).fold(0.0, f64::max);
        Some(Prepared {
            analysed_s,
            thresholds,
            windows,
            arrays: AuxArrays {
                start: rows.iter().map(|r| r.0.start).collect(),
                end: rows.iter().map(|r| r.0.end).collect(),
                level: rows.iter().map(|r| r.0.level).collect(),
            },
            dist_to_common: rows.iter().map(|r| r.1).collect(),
            near_edge: rows.iter().map(|r| r.2).collect(),
            items: rows.into_iter().map(|r| r.0).collect(),
            max_extent,
            common,
        })
    }

    /// Number of cells (thresholds × windows).
    pub fn n_cells(&self) -> usize {
        self.thresholds.len() * self.windows.len()
    }

    /// Covered time of level ≥ `k` windows at padding `w` \[s\].
    pub fn covered_s(&self, k: usize, w: f64) -> f64 {
        covered_seconds(
            self.items
                .iter()
                .filter(|a| a.level as usize >= k)
                .map(|a| (a.start - w, a.end + w)),
            &self.common,
        )
    }

    /// Veto segments of level ≥ `k` at padding `w`: (∪ windows) ∩ C.
    pub fn segments(&self, k: usize, w: f64) -> SegmentList {
        SegmentList::from_segments(
            self.items
                .iter()
                .filter(|a| a.level as usize >= k)
                .map(|a| Segment::new(a.start - w, a.end + w))
                .collect(),
        )
        .intersection(&self.common)
    }
}

/// Distance from `[start, end]` to the nearest time of `list` (0 when they
/// overlap or touch; `+inf` for an empty list).
pub(crate) fn distance_to(list: &SegmentList, start: f64, end: f64) -> f64 {
    let segs = list.segments();
    let i = segs.partition_point(|s| s.end < start);
    let mut d = f64::INFINITY;
    if let Some(s) = segs.get(i) {
        d = d.min((s.start - end).max(0.0));
    }
    if i > 0 {
        d = d.min((start - segs[i - 1].end).max(0.0));
    }
    d
}

/// `|(∪ intervals) ∩ C|` for intervals sorted by start, in one sweep.
pub(crate) fn covered_seconds(
    intervals: impl Iterator<Item = (f64, f64)>,
    common: &SegmentList,
) -> f64 {
    let segs = common.segments();
    let mut total = 0.0;
    let mut j = 0;
    let mut clip = |start: f64, end: f64, j: &mut usize| {
        while *j < segs.len() && segs[*j].end <= start {
            *j += 1;
        }
        let mut k = *j;
        while k < segs.len() && segs[k].start < end {
            total += segs[k].end.min(end) - segs[k].start.max(start);
            k += 1;
        }
    };
    let mut cur: Option<(f64, f64)> = None;
    for (s, e) in intervals {
        match cur {
            Some((cs, ce)) if s <= ce => cur = Some((cs, ce.max(e))),
            Some((cs, ce)) => {
                clip(cs, ce, &mut j);
                cur = Some((s, e));
            }
            None => cur = Some((s, e)),
        }
    }
    if let Some((s, e)) = cur {
        clip(s, e, &mut j);
    }
    total
}

/// Zero-lag figures of one cell for one set, before any background.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub(crate) struct CellFigures {
    pub k: usize,
    pub j: usize,
    pub targets: u64,
    pub targets_hit: u64,
    pub aux_used: u64,
    pub aux_hit: u64,
    pub covered_s: f64,
    pub deadtime: f64,
    /// Mean probability that an independent aux trigger is hit.
    pub aux_hit_prob: f64,
    pub target_clumping: f64,
    pub aux_clumping: f64,
    pub basis: ChanceBasis,
}

const LN_10: f64 = std::f64::consts::LN_10;

impl CellFigures {
    /// Targets hit expected by chance, `targets × deadtime`.
    pub fn targets_hit_chance(&self) -> f64 {
        self.targets as f64 * self.deadtime
    }

    /// Aux hit expected by chance, `aux used × mean hit probability`.
    pub fn aux_hit_chance(&self) -> f64 {
        self.aux_used as f64 * self.aux_hit_prob
    }

    /// The count the chance probability is computed on.
    pub fn basis_count(&self) -> u64 {
        match self.basis {
            ChanceBasis::AuxBinomial => self.aux_hit,
            _ => self.targets_hit,
        }
    }

    /// The analytic model of the basis count (None for `slides`).
    pub fn model(&self) -> Option<super::stats::CountModel> {
        use super::stats::CountModel;
        match self.basis {
            ChanceBasis::TargetsPoisson => Some(CountModel::Poisson(self.targets_hit_chance())),
            ChanceBasis::AuxBinomial => {
                Some(CountModel::Binomial(self.aux_used, self.aux_hit_prob))
            }
            ChanceBasis::Slides => None,
        }
    }

    /// log10 of the analytic chance probability `P(count ≥ observed)` (0,
    /// i.e. P = 1, for `slides`, which the background fills in). Kept in
    /// logs so that strong witnesses, whose probabilities underflow, still
    /// rank.
    pub fn analytic_log10_p(&self) -> f64 {
        let n = self.basis_count();
        let ln = match self.basis {
            ChanceBasis::TargetsPoisson => poisson_ln_sf(n, self.targets_hit_chance()),
            ChanceBasis::AuxBinomial => binomial_ln_sf(n, self.aux_used, self.aux_hit_prob),
            ChanceBasis::Slides => 0.0,
        };
        ln / LN_10
    }
}

/// Up to this many quantiles of the aux extents stand for the whole
/// distribution when averaging hit probabilities.
const EXTENT_QUANTILES: usize = 16;

/// The zero-lag grid of one prepared channel for every set of `index`:
/// `out[set][k * n_windows + j]`.
pub(crate) fn zero_lag(p: &Prepared, index: &TargetIndex) -> Vec<Vec<CellFigures>> {
    let (nl, nw, ns) = (p.thresholds.len(), p.windows.len(), index.n_per_set.len());
    let mut hist = Hist::new(ns, nl, nw);
    let mut scratch = Scratch::default();
    count_hits(
        &TargetArrays::new(&index.points, |t| t),
        &p.arrays,
        &p.windows,
        &mut hist,
        &mut scratch,
    );
    let (t_hit, a_hit) = hist.cumulative();
    let c_s = p.analysed_s;
    // Per cell: aux used, Σ clipped window lengths, covered time; per
    // level: extent quantiles and mean extent.
    let mut per_cell = Vec::with_capacity(nl * nw);
    let mut extent_q: Vec<Vec<f64>> = Vec::with_capacity(nl);
    for k in 0..nl {
        let mut ext: Vec<f64> = p
            .items
            .iter()
            .filter(|a| a.level as usize >= k)
            .map(|a| a.end - a.start)
            .collect();
        ext.sort_by(f64::total_cmp);
        let q = if ext.iter().all(|&e| e == 0.0) {
            vec![0.0]
        } else {
            let m = EXTENT_QUANTILES.min(ext.len());
            (0..m)
                .map(|i| ext[((i as f64 + 0.5) / m as f64 * ext.len() as f64) as usize])
                .collect()
        };
        extent_q.push(q);
        for &w in &p.windows {
            let (mut used, mut len) = (0u64, 0.0);
            for (i, a) in p.items.iter().enumerate() {
                if (a.level as usize) < k || p.dist_to_common[i] >= w {
                    continue;
                }
                used += 1;
                len += if p.near_edge[i] {
                    p.common.overlap_with(a.start - w, a.end + w)
                } else {
                    a.end - a.start + 2.0 * w
                };
            }
            per_cell.push((used, len, p.covered_s(k, w)));
        }
    }
    (0..ns)
        .map(|s| {
            let cov = &index.coverage[s];
            let mut cells = Vec::with_capacity(nl * nw);
            for k in 0..nl {
                let q = &extent_q[k];
                let mean_ext = q.iter().sum::<f64>() / q.len() as f64;
                for (j, &w) in p.windows.iter().enumerate() {
                    let (used, len, covered) = per_cell[k * nw + j];
                    let hist_i = (s * nl + k) * nw + j;
                    let deadtime = covered / c_s;
                    let aux_hit_prob =
                        q.iter().map(|&e| cov.fraction(w + 0.5 * e)).sum::<f64>() / q.len() as f64;
                    let h = w + 0.5 * mean_ext;
                    let target_clumping = cov.clumping(h);
                    let target_x = cov.window_exponent(h);
                    let aux_clumping = if covered > 0.0 {
                        -(-len / c_s).exp_m1() / deadtime
                    } else {
                        1.0
                    };
                    let basis = if !clumped(target_clumping, target_x, index.n_per_set[s]) {
                        ChanceBasis::TargetsPoisson
                    } else if !clumped(aux_clumping, len / c_s, used) {
                        ChanceBasis::AuxBinomial
                    } else {
                        ChanceBasis::Slides
                    };
                    cells.push(CellFigures {
                        k,
                        j,
                        targets: index.n_per_set[s],
                        targets_hit: u64::from(t_hit[hist_i]),
                        aux_used: used,
                        aux_hit: u64::from(a_hit[hist_i]),
                        covered_s: covered,
                        deadtime,
                        aux_hit_prob,
                        target_clumping,
                        aux_clumping,
                        basis,
                    });
                }
            }
            cells
        })
        .collect()
}

/// For each target time (sorted), whether it lies in a window of a level
/// ≥ `k` aux trigger at padding `w`.
pub(crate) fn hit_mask(p: &Prepared, times: &[f64], k: usize, w: f64) -> Vec<bool> {
    let mut out = vec![false; times.len()];
    let mut lo = 0;
    for (t, hit) in times.iter().zip(out.iter_mut()) {
        while lo < p.items.len() && p.items[lo].start < t - w - p.max_extent {
            lo += 1;
        }
        for a in &p.items[lo..] {
            if a.start > t + w {
                break;
            }
            if (a.level as usize) >= k && a.start - w <= *t && *t <= a.end + w {
                *hit = true;
                break;
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn coverage_by_hand() {
        // Targets 1, 1.5, 5 in [0, 10): h = 0.5 → [0.5,2] ∪ [4.5,5.5] = 2.5 s.
        let c = Coverage::new(&[1.0, 1.5, 5.0], &SegmentList::single(0.0, 10.0));
        assert!((c.fraction(0.5) - 0.25).abs() < 1e-12);
        // h = 2 → [0,3.5] ∪ [3,7] = [0,7] = 7 s (clipped at 0).
        assert!((c.fraction(2.0) - 0.7).abs() < 1e-12);
        // Poisson reference: clipped lengths 1 + 1 + 1 = 3 s at h = 0.5.
        assert!((c.poisson_fraction(0.5) - (1.0 - (-0.3f64).exp())).abs() < 1e-12);
        // Two segments: the windows stop at their edges.
        let two = SegmentList::from_segments(vec![Segment::new(0.0, 2.0), Segment::new(3.0, 4.0)]);
        let c = Coverage::new(&[1.9, 3.1], &two);
        assert!((c.fraction(0.5) - (0.6 + 0.6) / 3.0).abs() < 1e-12);
    }

    #[test]
    fn covered_and_distance_by_hand() {
        let c = SegmentList::from_segments(vec![Segment::new(0.5, 1.5), Segment::new(1.8, 10.0)]);
        // [0,2] ∪ [2,4] = [0,4] → 1.0 + 2.2.
        let v = covered_seconds([(0.0, 2.0), (2.0, 4.0)].into_iter(), &c);
        assert!((v - 3.2).abs() < 1e-12);
        // [1.6, 1.7] sits in the gap (1.5, 1.8): 0.1 s from either side.
        assert!((distance_to(&c, 1.6, 1.7) - 0.1).abs() < 1e-12);
        assert_eq!(distance_to(&c, 1.0, 1.2), 0.0);
        assert_eq!(distance_to(&c, 11.0, 12.0), 1.0);
    }

    #[test]
    fn quantile_thresholds_keep_geometric_counts() {
        let mut snr: Vec<f64> = (1..=1000).map(f64::from).collect();
        let th = channel_thresholds(
            &Thresholds::Quantiles {
                steps: 4,
                min_kept: 10,
            },
            &mut snr,
        );
        // Kept 1000, 215, 46, 10 → thresholds 1, 786, 955, 991.
        assert_eq!(th, vec![1.0, 786.0, 955.0, 991.0]);
    }
}
