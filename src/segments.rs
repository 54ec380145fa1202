//! Time segments and segment lists.
//!
//! A [`Segment`] is a half-open interval `[start, end)` in GPS seconds. A
//! [`SegmentList`] is always sorted and coalesced: no two of its segments
//! overlap or touch, and none is empty. Every operation returns a list in that
//! normal form, so totals never count overlapping time twice.

use serde::{Deserialize, Serialize};

/// A half-open time interval `[start, end)` \[GPS s\].
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Segment {
    /// Start \[GPS s\], inclusive.
    pub start: f64,
    /// End \[GPS s\], exclusive.
    pub end: f64,
}

impl Segment {
    /// A segment from `start` to `end` \[GPS s\].
    pub fn new(start: f64, end: f64) -> Self {
        Segment { start, end }
    }

    /// Duration \[s\]; zero for an empty or reversed segment.
    pub fn duration(&self) -> f64 {
        (self.end - self.start).max(0.0)
    }

    /// Whether `t` \[GPS s\] lies in `[start, end)`.
    pub fn contains(&self, t: f64) -> bool {
        t >= self.start && t < self.end
    }
}

/// A sorted, coalesced list of disjoint non-empty segments.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct SegmentList {
    segs: Vec<Segment>,
}

impl SegmentList {
    /// The empty list.
    pub fn new() -> Self {
        SegmentList { segs: Vec::new() }
    }

    /// Normalise arbitrary segments: drop empty ones, sort, and merge
    /// overlapping or touching ones.
    pub fn from_segments(mut segs: Vec<Segment>) -> Self {
        segs.retain(|s| s.end > s.start);
        segs.sort_by(|a, b| a.start.total_cmp(&b.start));
        let mut out: Vec<Segment> = Vec::with_capacity(segs.len());
        for s in segs {
            match out.last_mut() {
                Some(last) if s.start <= last.end => last.end = last.end.max(s.end),
                _ => out.push(s),
            }
        }
        SegmentList { segs: out }
    }

    /// A list holding one segment (or nothing when it is empty).
    pub fn single(start: f64, end: f64) -> Self {
        Self::from_segments(vec![Segment::new(start, end)])
    }

    /// The segments, sorted and disjoint.
    pub fn segments(&self) -> &[Segment] {
        &self.segs
    }

    /// Whether the list holds no time.
    pub fn is_empty(&self) -> bool {
        self.segs.is_empty()
    }

    /// Total duration \[s\].
    pub fn total(&self) -> f64 {
        self.segs.iter().map(Segment::duration).sum()
    }

    /// Earliest start and latest end, if any.
    pub fn extent(&self) -> Option<Segment> {
        Some(Segment::new(
            self.segs.first()?.start,
            self.segs.last()?.end,
        ))
    }

    /// Union of two lists.
    pub fn union(&self, other: &SegmentList) -> SegmentList {
        let mut all = self.segs.clone();
        all.extend_from_slice(&other.segs);
        Self::from_segments(all)
    }

    /// Intersection of two lists (a linear two-pointer sweep).
    pub fn intersection(&self, other: &SegmentList) -> SegmentList {
        let (a, b) = (&self.segs, &other.segs);
        let (mut i, mut j) = (0, 0);
        let mut out = Vec::new();
        while i < a.len() && j < b.len() {
            let start = a[i].start.max(b[j].start);
            let end = a[i].end.min(b[j].end);
            if end > start {
                out.push(Segment::new(start, end));
            }
            if a[i].end < b[j].end {
                i += 1;
            } else {
                j += 1;
            }
        }
        SegmentList { segs: out }
    }

    /// The time in `self` that is not in `other`.
    pub fn difference(&self, other: &SegmentList) -> SegmentList {
        let mut out = Vec::new();
        let b = &other.segs;
        let mut j = 0;
        for s in &self.segs {
            let mut cur = s.start;
            while j < b.len() && b[j].end <= cur {
                j += 1;
            }
            let mut k = j;
            while k < b.len() && b[k].start < s.end {
                if b[k].start > cur {
                    out.push(Segment::new(cur, b[k].start));
                }
                cur = cur.max(b[k].end);
                k += 1;
            }
            if cur < s.end {
                out.push(Segment::new(cur, s.end));
            }
        }
        SegmentList { segs: out }
    }

    /// Duration of the overlap with `[start, end)` \[s\].
    pub fn overlap_with(&self, start: f64, end: f64) -> f64 {
        let first = self.segs.partition_point(|s| s.end <= start);
        self.segs[first..]
            .iter()
            .take_while(|s| s.start < end)
            .map(|s| s.end.min(end) - s.start.max(start))
            .filter(|d| *d > 0.0)
            .sum()
    }

    /// Whether `t` \[GPS s\] lies in one of the segments (binary search).
    pub fn contains(&self, t: f64) -> bool {
        let i = self.segs.partition_point(|s| s.end <= t);
        i < self.segs.len() && self.segs[i].contains(t)
    }

    /// Every segment widened by `before` at its start and `after` at its
    /// end (negative values shrink; segments that vanish are dropped).
    pub fn widened(&self, before: f64, after: f64) -> SegmentList {
        Self::from_segments(
            self.segs
                .iter()
                .map(|s| Segment::new(s.start - before, s.end + after))
                .collect(),
        )
    }
}

impl FromIterator<Segment> for SegmentList {
    fn from_iter<I: IntoIterator<Item = Segment>>(iter: I) -> Self {
        Self::from_segments(iter.into_iter().collect())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn list(v: &[(f64, f64)]) -> SegmentList {
        v.iter().map(|&(a, b)| Segment::new(a, b)).collect()
    }

    fn pairs(l: &SegmentList) -> Vec<(f64, f64)> {
        l.segments().iter().map(|s| (s.start, s.end)).collect()
    }

    // Hand-worked examples: [0,10) ∪ [10,20) touch and merge; [30,40) holds
    // nested [32,35); [50,55) is empty after reversal and dropped.
    #[test]
    fn normal_form_merges_touching_and_nested() {
        let l = list(&[
            (30.0, 40.0),
            (10.0, 20.0),
            (0.0, 10.0),
            (32.0, 35.0),
            (55.0, 50.0),
        ]);
        assert_eq!(pairs(&l), vec![(0.0, 20.0), (30.0, 40.0)]);
        assert_eq!(l.total(), 30.0);
    }

    #[test]
    fn union_intersection_difference_by_hand() {
        let a = list(&[(0.0, 10.0), (20.0, 30.0)]);
        let b = list(&[(5.0, 25.0), (30.0, 35.0)]);
        // union: [0,10)+[5,25)+[20,30)+[30,35) -> [0,35)
        assert_eq!(pairs(&a.union(&b)), vec![(0.0, 35.0)]);
        // intersection: [5,10) and [20,25); [30,35) only touches [20,30)
        assert_eq!(pairs(&a.intersection(&b)), vec![(5.0, 10.0), (20.0, 25.0)]);
        // a - b: [0,5) and [25,30)
        assert_eq!(pairs(&a.difference(&b)), vec![(0.0, 5.0), (25.0, 30.0)]);
        // b - a: [10,20) and [30,35)
        assert_eq!(pairs(&b.difference(&a)), vec![(10.0, 20.0), (30.0, 35.0)]);
        assert_eq!(a.intersection(&b).total(), 10.0);
    }

    #[test]
    fn nested_difference_splits() {
        let a = list(&[(0.0, 100.0)]);
        let b = list(&[(10.0, 20.0), (30.0, 40.0), (90.0, 120.0)]);
        assert_eq!(
            pairs(&a.difference(&b)),
            vec![(0.0, 10.0), (20.0, 30.0), (40.0, 90.0)]
        );
        assert_eq!(a.overlap_with(15.0, 35.0), 20.0);
        assert!(a.contains(0.0) && !a.contains(100.0));
        assert_eq!(
            pairs(&b.widened(-4.0, -4.0)),
            vec![(14.0, 16.0), (34.0, 36.0), (94.0, 116.0)]
        );
    }

    #[test]
    fn identities_hold_on_random_lists() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(7);
        for _ in 0..200 {
            let mut mk = || -> SegmentList {
                (0..rng.gen_range(0..8))
                    .map(|_| {
                        let s = rng.gen_range(0..50) as f64;
                        Segment::new(s, s + rng.gen_range(0..10) as f64)
                    })
                    .collect()
            };
            let (a, b) = (mk(), mk());
            let inter = a.intersection(&b).total();
            assert!((a.union(&b).total() - (a.total() + b.total() - inter)).abs() < 1e-9);
            assert!((a.difference(&b).total() - (a.total() - inter)).abs() < 1e-9);
        }
    }
}
