//! Time-slide background and the trials correction over the grid.
//!
//! # Time slides
//! Coincidence searches estimate their background by sliding one stream of
//! triggers against the other by offsets much larger than any coincidence
//! window, so that no true coincidence survives, and counting again (common
//! practice in coincidence searches; e.g. Amaldi et al. 1989, Astron.
//! Astrophys. 216, 325, for bar detectors). Here the aux triggers are
//! slid against the target triggers inside the common analysed time C:
//! times are mapped to *live time* (C's segments laid end to end, gaps
//! removed) and wrapped on that ring, so slid triggers never land in dead
//! time and trains, rates and gaps keep their structure. Offsets are
//! `i × L / (K + 1)`, i = 1..K, for a ring of length L; K shrinks when the
//! spacing would not exceed twice the largest window plus the longest aux
//! extent (then no slid aux trigger can still meet its own partner). All
//! slides are counted in one pass (see `run_slides`).
//!
//! # What comes out
//! For each (set, cell) the count of the cell's basis in every slide, hence
//! - `slide_p`: the fraction of slides whose count reaches the observed one,
//!   `(r + 1) / (K + 1)` (Davison & Hinkley 1997, *Bootstrap Methods*,
//!   eq. 4.11); the chance probability of cells whose both sides clump;
//! - for each slide the smallest chance probability over the grid, whose
//!   distribution is the null distribution of the grid's best cell. A
//!   cell's **false-alarm probability** is the fraction of slides whose best
//!   cell is at least as extreme, `(r + 1) / (K + 1)`, while at least
//!   [`MIN_EXCEEDANCES`] slides are (`slides`); beyond the slides'
//!   resolution it is Šidák's `1 − (1 − p)^m` with `m`, the effective number
//!   of independent cells, measured where the slides still resolve the tail
//!   (`slides_tail`; resampling estimates of an effective number of tests:
//!   e.g. Westfall & Young 1993, *Resampling-Based Multiple Testing*).
//!   Without slides it is Bonferroni's `min(1, cells × p)` (`bonferroni`).

use super::coinc::{ChanceBasis, Prepared, TargetIndex, NO_SET};
use super::stats::{sidak, TailTable};
use serde::{Deserialize, Serialize};

/// Slides at or below the observed best cell needed before the empirical
/// fraction is used as it stands (our choice: ±30% counting error).
pub const MIN_EXCEEDANCES: usize = 10;

/// Default number of time slides.
pub const DEFAULT_SLIDES: usize = 500;

/// How a false-alarm probability was obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum FalseAlarmBasis {
    /// The fraction of time slides whose best cell is as extreme.
    Slides,
    /// Beyond the slides' resolution: Šidák with the effective number of
    /// cells measured by the slides.
    SlidesTail,
    /// No slides: Bonferroni over the cells.
    #[default]
    Bonferroni,
}

impl FalseAlarmBasis {
    /// The name used in tables, JSON, CSV and the catalogue.
    pub fn as_str(self) -> &'static str {
        match self {
            FalseAlarmBasis::Slides => "slides",
            FalseAlarmBasis::SlidesTail => "slides_tail",
            FalseAlarmBasis::Bonferroni => "bonferroni",
        }
    }
}

/// The null distribution of the grid's best chance probability for one
/// (set, channel).
#[derive(Debug, Clone)]
pub struct GridNull {
    /// Best chance probability of each slide, ascending.
    best_sorted: Vec<f64>,
    /// Cells of the grid.
    n_cells: usize,
    /// Effective number of independent cells (`None` without a resolved
    /// tail).
    m_eff: Option<f64>,
}

impl GridNull {
    /// A null without slides: Bonferroni over `n_cells`.
    pub fn bonferroni(n_cells: usize) -> Self {
        GridNull {
            best_sorted: Vec::new(),
            n_cells,
            m_eff: None,
        }
    }

    /// From the best chance probability of each slide.
    pub fn from_slides(mut best: Vec<f64>, n_cells: usize) -> Self {
        best.sort_by(f64::total_cmp);
        let k = best.len();
        let m_eff = (k >= 2 * MIN_EXCEEDANCES)
            .then(|| best[MIN_EXCEEDANCES - 1])
            .filter(|&x0| x0 > 0.0 && x0 < 1.0)
            .map(|x0| {
                // F(x0) = (1 − (1 − x0)^m) with F(x0) estimated by R / K.
                let f0 = MIN_EXCEEDANCES as f64 / k as f64;
                ((-f0).ln_1p() / (-x0).ln_1p()).max(1.0)
            });
        GridNull {
            best_sorted: best,
            n_cells,
            m_eff,
        }
    }

    /// Number of slides.
    pub fn slides(&self) -> usize {
        self.best_sorted.len()
    }

    /// Effective number of independent cells, when measured.
    pub fn effective_cells(&self) -> Option<f64> {
        self.m_eff
    }

    /// False-alarm probability of a cell with chance probability `p`.
    pub fn false_alarm(&self, p: f64) -> (f64, FalseAlarmBasis) {
        let k = self.best_sorted.len();
        let Some(m) = self.m_eff else {
            return (
                (p * self.n_cells as f64).min(1.0),
                FalseAlarmBasis::Bonferroni,
            );
        };
        let r = self.best_sorted.partition_point(|&q| q <= p);
        let empirical = (r + 1) as f64 / (k + 1) as f64;
        if r >= MIN_EXCEEDANCES {
            (empirical, FalseAlarmBasis::Slides)
        } else {
            (
                sidak(p, m).min(empirical).max(p),
                FalseAlarmBasis::SlidesTail,
            )
        }
    }
}

/// Live-time coordinates of C: its segments laid end to end.
struct Ring {
    starts: Vec<f64>,
    ends: Vec<f64>,
    before: Vec<f64>,
    length: f64,
}

impl Ring {
    fn new(p: &Prepared) -> Self {
        let segs = p.common.segments();
        let mut before = Vec::with_capacity(segs.len());
        let mut acc = 0.0;
        for s in segs {
            before.push(acc);
            acc += s.end - s.start;
        }
        Ring {
            starts: segs.iter().map(|s| s.start).collect(),
            ends: segs.iter().map(|s| s.end).collect(),
            before,
            length: acc,
        }
    }

    /// Live time before `t` (a time in a gap maps to the gap's edge).
    fn map(&self, t: f64) -> f64 {
        let i = self.starts.partition_point(|&s| s <= t);
        if i == 0 {
            return 0.0;
        }
        let i = i - 1;
        self.before[i] + (t.min(self.ends[i]) - self.starts[i])
    }
}

/// Counts of one (set, cell) in every slide.
#[derive(Debug, Clone)]
pub(crate) struct SlideCounts {
    /// Slides run.
    pub slides: usize,
    n_sets: usize,
    n_cells: usize,
    /// `[slide][set][cell]` targets hit.
    targets_hit: Vec<u32>,
    /// `[slide][set][cell]` aux hit.
    aux_hit: Vec<u32>,
}

impl SlideCounts {
    fn at(&self, slide: usize, set: usize, cell: usize) -> usize {
        (slide * self.n_sets + set) * self.n_cells + cell
    }

    /// The basis count of (set, cell) in every slide.
    pub fn counts(&self, set: usize, cell: usize, basis: ChanceBasis) -> Vec<u32> {
        let src = match basis {
            ChanceBasis::AuxBinomial => &self.aux_hit,
            _ => &self.targets_hit,
        };
        (0..self.slides)
            .map(|s| src[self.at(s, set, cell)])
            .collect()
    }
}

/// Run up to `k` time slides of `p`'s aux triggers against `index`,
/// counting targets hit when `need_targets` and aux hit when `need_aux`
/// (the other counts stay 0).
///
/// With offsets that are multiples of Δ = L / (K + 1) on a ring of length
/// L = (K + 1) Δ, a target trigger at `u_t` and an aux trigger starting at
/// `u_s` (extent ℓ) meet in slide `i` when `u_t − u_s − iΔ` lies in
/// `[−w_max, ℓ + w_max]` modulo L. That interval is shorter than Δ, so each
/// pair meets in at most one slide, found from the residue of `u_t − u_s`
/// modulo Δ: a merge of targets and aux triggers sorted by their phase
/// modulo Δ lists every pair of every slide at once (about `N M (2 w_max +
/// ℓ) / Δ` pairs instead of K merges of N + M), and the ring's wrap-around
/// needs no special case. Each target's pairs (and each aux trigger's) are
/// grouped by slide as they come and folded into per-slide histograms.
/// Slide 0 (zero lag) is left out.
pub(crate) fn run_slides(
    p: &Prepared,
    index: &TargetIndex,
    k: usize,
    need_targets: bool,
    need_aux: bool,
) -> SlideCounts {
    let (nl, nw, ns) = (p.thresholds.len(), p.windows.len(), index.n_per_set.len());
    let n_cells = nl * nw;
    let ring = Ring::new(p);
    let l = ring.length;
    let wmax = p.windows[nw - 1];
    let reach = wmax + p.max_extent;
    let k = if l > 0.0 {
        k.min(((l / (2.0 * reach)).floor() as usize).saturating_sub(1))
    } else {
        0
    };
    let mut out = SlideCounts {
        slides: k,
        n_sets: ns,
        n_cells,
        targets_hit: vec![0; k * ns * n_cells],
        aux_hit: vec![0; k * ns * n_cells],
    };
    if k == 0 {
        return out;
    }
    let delta = l / (k + 1) as f64;
    let tu: Vec<f64> = index.points.iter().map(|tp| ring.map(tp.t)).collect();
    let tsets: Vec<[u16; 2]> = index.points.iter().map(|tp| tp.sets).collect();
    let us: Vec<f64> = p.arrays.start.iter().map(|&t| ring.map(t)).collect();
    let ue: Vec<f64> = p.arrays.end.iter().map(|&t| ring.map(t)).collect();
    let levels = &p.arrays.level;
    let max_len = us.iter().zip(&ue).map(|(s, e)| e - s).fold(0.0, f64::max);
    // Phases in three copies (−Δ, 0, +Δ): every window of phases is one
    // contiguous stretch.
    let phases = |u: &[f64]| -> Vec<(f64, u32)> {
        let mut v: Vec<(f64, u32)> = u
            .iter()
            .enumerate()
            .map(|(i, &x)| (x.rem_euclid(delta), i as u32))
            .collect();
        v.sort_unstable_by(|a, b| a.0.total_cmp(&b.0));
        [-delta, 0.0, delta]
            .iter()
            .flat_map(|&o| v.iter().map(move |&(ph, i)| (ph + o, i)))
            .collect()
    };
    let (tgt_ph, aux_ph) = (phases(&tu), phases(&us));
    let meeting = Meeting {
        delta,
        wmax,
        ring_k: k as i64 + 1,
        windows: &p.windows,
    };
    let cell = |slide: usize, set: usize, lev: usize, j: usize| {
        ((slide - 1) * ns + set) * n_cells + lev * nw + j
    };
    let mut group_of = vec![u32::MAX; k + 1];
    let mut slides_seen: Vec<usize> = Vec::new();
    if need_targets {
        // Per slide, per (set, level, window): change in the number of
        // targets whose highest hitting level at that window is `level`.
        let mut delta_hist = vec![0i32; k * ns * n_cells];
        let mut best: Vec<i16> = Vec::new();
        let mut lo = 0usize;
        for &(ph, t) in &tgt_ph[tu.len()..2 * tu.len()] {
            let t = t as usize;
            while lo < aux_ph.len() && aux_ph[lo].0 < ph - wmax - max_len {
                lo += 1;
            }
            let mut i = lo;
            while i < aux_ph.len() && aux_ph[i].0 <= ph + wmax {
                let a = aux_ph[i].1 as usize;
                i += 1;
                let Some((slide, j)) = meeting.meet(tu[t], us[a], ue[a]) else {
                    continue;
                };
                let g = match group_of[slide] {
                    u32::MAX => {
                        group_of[slide] = slides_seen.len() as u32;
                        slides_seen.push(slide);
                        best.extend(std::iter::repeat_n(-1, nw));
                        slides_seen.len() - 1
                    }
                    g => g as usize,
                };
                let b = &mut best[g * nw + j as usize];
                *b = (*b).max(i16::from(levels[a]));
            }
            for (g, &slide) in slides_seen.iter().enumerate() {
                group_of[slide] = u32::MAX;
                let mut prev = -1i16;
                for j in 0..nw {
                    let m = prev.max(best[g * nw + j]);
                    if m != prev {
                        for &set in &tsets[t] {
                            if set == NO_SET {
                                continue;
                            }
                            let set = set as usize;
                            delta_hist[cell(slide, set, m as usize, j)] += 1;
                            if prev >= 0 {
                                delta_hist[cell(slide, set, prev as usize, j)] -= 1;
                            }
                        }
                        prev = m;
                    }
                }
            }
            slides_seen.clear();
            best.clear();
        }
        // targets_hit(k, j) = Σ_{k' ≥ k} Σ_{j' ≤ j} Δ(k', j').
        for slide in 1..=k {
            for set in 0..ns {
                let mut upper = vec![0i64; nw];
                for lev in (0..nl).rev() {
                    let mut run = 0i64;
                    for (j, up) in upper.iter_mut().enumerate() {
                        let c = cell(slide, set, lev, j);
                        run += i64::from(delta_hist[c]);
                        *up += run;
                        out.targets_hit[c] = *up as u32;
                    }
                }
            }
        }
    }
    if need_aux {
        let mut amin: Vec<u8> = Vec::new();
        let mut lo = 0usize;
        for &(ph, a) in &aux_ph[us.len()..2 * us.len()] {
            let a = a as usize;
            let len = ue[a] - us[a];
            while lo < tgt_ph.len() && tgt_ph[lo].0 < ph - wmax {
                lo += 1;
            }
            let mut i = lo;
            while i < tgt_ph.len() && tgt_ph[i].0 <= ph + len + wmax {
                let t = tgt_ph[i].1 as usize;
                i += 1;
                let Some((slide, j)) = meeting.meet(tu[t], us[a], ue[a]) else {
                    continue;
                };
                let g = match group_of[slide] {
                    u32::MAX => {
                        group_of[slide] = slides_seen.len() as u32;
                        slides_seen.push(slide);
                        amin.extend(std::iter::repeat_n(u8::MAX, ns));
                        slides_seen.len() - 1
                    }
                    g => g as usize,
                };
                for &set in &tsets[t] {
                    if set != NO_SET {
                        let m = &mut amin[g * ns + set as usize];
                        *m = (*m).min(j);
                    }
                }
            }
            let lev = levels[a] as usize;
            for (g, &slide) in slides_seen.iter().enumerate() {
                group_of[slide] = u32::MAX;
                for set in 0..ns {
                    let j = amin[g * ns + set];
                    if j != u8::MAX {
                        out.aux_hit[cell(slide, set, lev, j as usize)] += 1;
                    }
                }
            }
            slides_seen.clear();
            amin.clear();
        }
        // aux_hit(k, j) = Σ_{k' ≥ k} Σ_{j' ≤ j} hist(k', j').
        for slide in 1..=k {
            for set in 0..ns {
                let mut upper = vec![0u32; nw];
                for lev in (0..nl).rev() {
                    let mut run = 0u32;
                    for (j, up) in upper.iter_mut().enumerate() {
                        let c = cell(slide, set, lev, j);
                        run += out.aux_hit[c];
                        *up += run;
                        out.aux_hit[c] = *up;
                    }
                }
            }
        }
    }
    out
}

/// Where a (target, aux) pair meets on the ring of slides.
struct Meeting<'a> {
    delta: f64,
    wmax: f64,
    ring_k: i64,
    windows: &'a [f64],
}

impl Meeting<'_> {
    /// The slide (1..K) and window index at which a target at `t` meets an
    /// aux trigger spanning `[s, e]` (live-time coordinates), if any.
    #[inline(always)]
    fn meet(&self, t: f64, s: f64, e: f64) -> Option<(usize, u8)> {
        let len = e - s;
        let r = t - s;
        let q = (r + self.wmax) / self.delta;
        // floor(q) without a libm call.
        let mut kr = q as i64;
        if (kr as f64) > q {
            kr -= 1;
        }
        let x = r - kr as f64 * self.delta;
        if x > len + self.wmax || x < -self.wmax {
            return None;
        }
        // kr lies within a few rings of 0: fold it without a division.
        let mut slide = kr;
        while slide < 0 {
            slide += self.ring_k;
        }
        while slide >= self.ring_k {
            slide -= self.ring_k;
        }
        if slide == 0 {
            return None;
        }
        let d = (-x).max(x - len).max(0.0);
        Some((
            slide as usize,
            self.windows.partition_point(|&w| w < d) as u8,
        ))
    }
}

/// Chance probability of each slide's count of one cell: the analytic tail
/// of the cell's model, or for `slides` cells the fraction of slides with a
/// count at least as high.
pub(crate) fn slide_probabilities(
    counts: &[u32],
    model: Option<super::stats::CountModel>,
) -> Vec<f64> {
    if counts.is_empty() {
        return Vec::new();
    }
    match model {
        Some(m) => {
            let lo = u64::from(*counts.iter().min().expect("non-empty"));
            let hi = u64::from(*counts.iter().max().expect("non-empty"));
            let table = TailTable::new(m, lo, hi);
            counts.iter().map(|&c| table.p(u64::from(c))).collect()
        }
        None => {
            let mut sorted = counts.to_vec();
            sorted.sort_unstable();
            let k = counts.len() as f64;
            counts
                .iter()
                .map(|&c| {
                    let r = sorted.len() - sorted.partition_point(|&x| x < c);
                    (r as f64 + 1.0) / (k + 1.0)
                })
                .collect()
        }
    }
}

/// The fraction of slides whose count reaches `observed`, `(r + 1)/(K + 1)`.
pub(crate) fn slide_fraction(counts: &[u32], observed: u64) -> f64 {
    let r = counts.iter().filter(|&&c| u64::from(c) >= observed).count();
    (r as f64 + 1.0) / (counts.len() as f64 + 1.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn false_alarm_empirical_then_tail() {
        // 1000 slides whose best cell is uniform on (0, 1) after 10 cells:
        // best = 1 − (1 − u)^(1/10)... here simply p_i = i / 1000 scaled so
        // that F(x) = 10 x for small x (10 independent cells).
        let best: Vec<f64> = (1..=1000)
            .map(|i| 1.0 - (1.0 - i as f64 / 1001.0).powf(0.1))
            .collect();
        let null = GridNull::from_slides(best, 48);
        let m = null.effective_cells().unwrap();
        assert!((m - 10.0).abs() < 0.5, "{m}");
        // Resolved: ~20% of slides at or below p.
        let p = 1.0 - (0.8f64).powf(0.1);
        let (f, basis) = null.false_alarm(p);
        assert_eq!(basis, FalseAlarmBasis::Slides);
        assert!((f - 0.2).abs() < 0.01, "{f}");
        // Far tail: Šidák with m.
        let (f, basis) = null.false_alarm(1e-8);
        assert_eq!(basis, FalseAlarmBasis::SlidesTail);
        assert!((f / (m * 1e-8) - 1.0).abs() < 1e-6, "{f}");
        // No slides: Bonferroni, capped at 1.
        let b = GridNull::bonferroni(48);
        assert_eq!(b.false_alarm(1e-3), (0.048, FalseAlarmBasis::Bonferroni));
        assert_eq!(b.false_alarm(0.5).0, 1.0);
    }

    // The slides' counts against a brute force over all pairs on the ring
    // (every image of every slid aux trigger), with two analysed segments,
    // aux extents, a trigger in the gap and windows wrapping past the end.
    #[test]
    fn slides_match_brute_force_on_the_ring() {
        use super::super::coinc::{Prepared, TargetIndex};
        use super::super::{AuxChannel, AuxTrigger, Thresholds};
        use crate::segments::{Segment, SegmentList};
        use rand::{Rng, SeedableRng};
        let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(7);
        let analysed =
            SegmentList::from_segments(vec![Segment::new(0.0, 300.0), Segment::new(340.0, 500.0)]);
        let mut aux: Vec<AuxTrigger> = (0..120)
            .map(|_| {
                let t = rng.gen_range(0.0..500.0);
                let h = rng.gen_range(0.0..0.3);
                AuxTrigger {
                    t_peak: t,
                    t_start: t - h,
                    t_end: t + h,
                    snr: rng.gen_range(5.0..30.0),
                    f_peak: 10.0,
                }
            })
            .collect();
        aux.push(AuxTrigger::at(499.9, 29.0, 10.0)); // window wraps past L
        aux.push(AuxTrigger::at(0.05, 29.0, 10.0));
        let ch = AuxChannel::new(1, "a", aux, SegmentList::single(-10.0, 600.0));
        let targets: Vec<(f64, Option<i64>)> = {
            let mut t: Vec<f64> = (0..200).map(|_| rng.gen_range(0.0..500.0)).collect();
            t.extend([0.01, 499.99]);
            t.sort_by(f64::total_cmp);
            t.into_iter()
                .map(|x| (x, Some(1 + (x as i64 % 2))))
                .collect()
        };
        let windows = [0.05, 0.5, 1.5];
        let p = Prepared::new(
            &ch,
            &analysed,
            &Thresholds::Fixed(vec![5.0, 12.0, 25.0]),
            &windows,
        )
        .unwrap();
        let sets = [None, Some(1), Some(2)];
        let index = TargetIndex::new(&targets, &sets, &p.common);
        let sc = run_slides(&p, &index, 40, true, true);
        assert_eq!(sc.slides, 40);
        let ring = Ring::new(&p);
        let l = ring.length;
        assert_eq!(l, 460.0);
        let nw = windows.len();
        for s in 0..sc.slides {
            let delta = (s + 1) as f64 * l / 41.0;
            for (set_i, set) in sets.iter().enumerate() {
                for k in 0..3 {
                    for (j, &w) in windows.iter().enumerate() {
                        let mut hit_t = 0;
                        let mut hit_a = vec![false; p.items.len()];
                        for tp in index
                            .points
                            .iter()
                            .filter(|tp| set.is_none() || tp.sets[1] == set_i as u16)
                        {
                            let u = ring.map(tp.t);
                            let mut any = false;
                            for (i, a) in p.items.iter().enumerate() {
                                if (a.level as usize) < k {
                                    continue;
                                }
                                let (us, ue) = (ring.map(a.start) + delta, ring.map(a.end) + delta);
                                let d = [-l, 0.0, l, -2.0 * l]
                                    .iter()
                                    .map(|o| (us + o - u).max(u - ue - o).max(0.0))
                                    .fold(f64::INFINITY, f64::min);
                                if d <= w {
                                    any = true;
                                    hit_a[i] = true;
                                }
                            }
                            hit_t += usize::from(any);
                        }
                        let cell = k * nw + j;
                        let a_hit = hit_a.iter().filter(|&&h| h).count();
                        assert_eq!(
                            sc.counts(set_i, cell, ChanceBasis::TargetsPoisson)[s] as usize,
                            hit_t,
                            "slide {s} set {set_i} k {k} w {w}"
                        );
                        assert_eq!(
                            sc.counts(set_i, cell, ChanceBasis::AuxBinomial)[s] as usize,
                            a_hit,
                            "aux: slide {s} set {set_i} k {k} w {w}"
                        );
                    }
                }
            }
        }
    }

    #[test]
    fn empirical_probabilities_by_hand() {
        let c = [3, 1, 4, 1, 5];
        assert_eq!(slide_fraction(&c, 4), 3.0 / 6.0);
        let p = slide_probabilities(&c, None);
        // Count 1 is reached by all five slides: (5 + 1) / 6.
        assert_eq!(p, vec![4.0 / 6.0, 1.0, 3.0 / 6.0, 1.0, 2.0 / 6.0]);
    }
}
