//! Stable family ids across clustering runs, without the catalogue.
//!
//! A clustering run sorts triggers into groups numbered 0..k in whatever
//! order the mixture fit produced. [`link`] matches those groups to the
//! families of the previous run by the triggers they share, so a family keeps
//! its id (and its human label) when the catalogue grows:
//! - **kept**: group ↔ old family by a maximum-overlap assignment (Hungarian
//!   method; Kuhn 1955, Munkres 1957), accepted when the shared triggers are
//!   at least a quarter of the smaller of the two (and at least one);
//! - **split**: a group left without an old family that took at least half of
//!   its previously clustered members from one old family;
//! - **new**: any other group left without an old family;
//! - **merge**: an old family not kept whose members went, at least half of
//!   them, to one group (it is merged into that group's family);
//! - **retired**: any other old family not kept.
//!
//! Scientists' edits (merge, split, move; [`super::db`]) pin triggers to
//! families. [`link_pinned`] applies the pins first: a group whose
//! previously clustered members are at least half pinned to one family
//! continues that family (so a merge survives a new fit that splits the
//! merged family again: both parts keep the merged id), and a family holding
//! pinned triggers stays active even when no group continues it (so a split
//! survives a fit that joins the parts again: the pinned triggers stay where
//! the scientist put them).
//!
//! New families have no id yet: they are [`FamilyRef::New`] (numbered in the
//! order they are to be created, group order), and [`Lineage::resolve`]
//! substitutes the ids the catalogue gave them ([`super::db`] creates them).

use super::hungarian;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;

/// What a clustering run did to a family's identity (column
/// `family_events.kind`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum EventKind {
    /// The family continues under its id.
    Kept,
    /// A family with no predecessor.
    New,
    /// A new family made mostly of members of another (`other_family_id`).
    Split,
    /// The family was merged into another (`other_family_id`).
    Merge,
    /// The family ended without a successor.
    Retired,
}

impl EventKind {
    /// Every kind, in declaration order.
    pub const ALL: [EventKind; 5] = [
        EventKind::Kept,
        EventKind::New,
        EventKind::Split,
        EventKind::Merge,
        EventKind::Retired,
    ];

    /// The stored (and JSON) name.
    pub fn as_str(self) -> &'static str {
        match self {
            EventKind::Kept => "kept",
            EventKind::New => "new",
            EventKind::Split => "split",
            EventKind::Merge => "merge",
            EventKind::Retired => "retired",
        }
    }

    /// The kind with stored name `s`, if any.
    pub fn parse(s: &str) -> Option<EventKind> {
        EventKind::ALL.into_iter().find(|k| k.as_str() == s)
    }
}

impl std::fmt::Display for EventKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// State of a family (column `families.status`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum FamilyStatus {
    /// A family of the latest clustering run.
    Active,
    /// Merged into another family (`families.merged_into`).
    Merged,
    /// Ended without a successor.
    Retired,
}

impl FamilyStatus {
    /// Every status, in declaration order.
    pub const ALL: [FamilyStatus; 3] = [
        FamilyStatus::Active,
        FamilyStatus::Merged,
        FamilyStatus::Retired,
    ];

    /// The stored (and JSON) name.
    pub fn as_str(self) -> &'static str {
        match self {
            FamilyStatus::Active => "active",
            FamilyStatus::Merged => "merged",
            FamilyStatus::Retired => "retired",
        }
    }

    /// The status with stored name `s`, if any.
    pub fn parse(s: &str) -> Option<FamilyStatus> {
        FamilyStatus::ALL.into_iter().find(|k| k.as_str() == s)
    }
}

impl std::fmt::Display for FamilyStatus {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A family named by a run before new families have ids.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FamilyRef {
    /// A family of an earlier run (catalogue id).
    Existing(i64),
    /// The j-th family this run creates (creation order).
    New(usize),
}

/// An identity event before new families have ids (see [`super::FamilyEvent`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Event {
    /// What happened.
    pub kind: EventKind,
    /// The family concerned.
    pub family: FamilyRef,
    /// For [`EventKind::Split`] the family it split from; for
    /// [`EventKind::Merge`] the family it merged into.
    pub other: Option<FamilyRef>,
    /// Triggers shared with the previous/other family.
    pub n_shared: usize,
}

/// How the groups of a run continue the families of the previous run.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Lineage {
    /// Family of each group of this run, in group order.
    pub group_family: Vec<FamilyRef>,
    /// Number of families to create ([`FamilyRef::New`] 0..n_new, created in
    /// group order).
    pub n_new: usize,
    /// Events in the order they are recorded: kept (pinned groups, then the
    /// others, group order), kept by pins alone (ascending id), new and
    /// split (group order), then merge and retired (ascending old id).
    pub events: Vec<Event>,
    /// Families kept active by pinned triggers alone (no group continues
    /// them), ascending.
    pub pinned_only: Vec<i64>,
}

impl Lineage {
    /// The family ids of the groups and the events, given the ids of the
    /// created families (`new_ids[j]` for [`FamilyRef::New`]`(j)`).
    ///
    /// # Panics
    /// When `new_ids` holds fewer than [`Lineage::n_new`] ids.
    pub fn resolve(&self, new_ids: &[i64]) -> (Vec<i64>, Vec<super::FamilyEvent>) {
        assert!(new_ids.len() >= self.n_new, "an id for every new family");
        let id = |f: FamilyRef| match f {
            FamilyRef::Existing(i) => i,
            FamilyRef::New(j) => new_ids[j],
        };
        let groups = self.group_family.iter().map(|&f| id(f)).collect();
        let events = self
            .events
            .iter()
            .map(|e| super::FamilyEvent {
                kind: e.kind,
                family_id: id(e.family),
                other_family_id: e.other.map(id),
                n_shared: e.n_shared,
            })
            .collect();
        (groups, events)
    }
}

/// Link the groups of a new run to the families of the previous one.
///
/// `previous` maps trigger id → family id of the previous run (active
/// families only); `members` holds (trigger id, group) for every trigger of
/// the new run, groups numbered `0..k`. Pure: no catalogue access, same
/// input → same output.
pub fn link(previous: &HashMap<i64, i64>, members: &[(i64, usize)], k: usize) -> Lineage {
    link_pinned(previous, members, k, &HashMap::new())
}

/// [`link`] keeping the scientists' edits: `pins` maps trigger id → the
/// family a scientist put it in (every pinned family must be among
/// `previous`'s). A group whose previously clustered members are at least
/// half pinned to one family continues it; the other groups are linked as
/// in [`link`] (the Hungarian assignment may give a pinned group's family
/// to one more group); a family holding pinned members of this run that no
/// group continues stays active ([`Lineage::pinned_only`], event `kept`
/// with the pinned count). Pure.
pub fn link_pinned(
    previous: &HashMap<i64, i64>,
    members: &[(i64, usize)],
    k: usize,
    pins: &HashMap<i64, i64>,
) -> Lineage {
    let mut old_fams: Vec<i64> = previous.values().copied().collect();
    old_fams.sort_unstable();
    old_fams.dedup();
    let mut old_size: HashMap<i64, usize> = HashMap::new();
    for f in previous.values() {
        *old_size.entry(*f).or_default() += 1;
    }
    // overlap[c][j]: triggers of group c previously in old family old_fams[j].
    let mut overlap = vec![vec![0usize; old_fams.len()]; k];
    let mut group_old = vec![0usize; k]; // members of c that had an old family
    let fidx: HashMap<i64, usize> = old_fams.iter().enumerate().map(|(i, f)| (*f, i)).collect();
    for &(t, c) in members {
        if let Some(f) = previous.get(&t) {
            overlap[c][fidx[f]] += 1;
            group_old[c] += 1;
        }
    }

    // Pins first: a group mostly pinned to one family continues it.
    let mut group_family: Vec<Option<FamilyRef>> = vec![None; k];
    let mut events = Vec::new();
    let mut pinned_in: Vec<HashMap<i64, usize>> = vec![HashMap::new(); k];
    let mut pinned_fams: Vec<i64> = Vec::new();
    for &(t, c) in members {
        if let Some(&f) = pins.get(&t) {
            *pinned_in[c].entry(f).or_default() += 1;
            pinned_fams.push(f);
        }
    }
    pinned_fams.sort_unstable();
    pinned_fams.dedup();
    for c in 0..k {
        let best = pinned_in[c]
            .iter()
            .max_by_key(|(f, n)| (**n, std::cmp::Reverse(**f)))
            .map(|(f, n)| (*f, *n));
        if let Some((f, n)) = best {
            if n as f64 >= 0.5 * group_old[c] as f64 {
                group_family[c] = Some(FamilyRef::Existing(f));
                events.push(Event {
                    kind: EventKind::Kept,
                    family: FamilyRef::Existing(f),
                    other: None,
                    n_shared: n,
                });
            }
        }
    }
    // Hungarian assignment maximising overlap, over the groups left.
    let free: Vec<usize> = (0..k).filter(|&c| group_family[c].is_none()).collect();
    if !old_fams.is_empty() && !free.is_empty() {
        let cost: Vec<Vec<f64>> = free
            .iter()
            .map(|&c| overlap[c].iter().map(|&o| -(o as f64)).collect())
            .collect();
        for (i, a) in hungarian::assign(&cost).into_iter().enumerate() {
            let c = free[i];
            if let Some(j) = a {
                let o = overlap[c][j];
                let f = old_fams[j];
                // Accept when the shared triggers are a real part of either group.
                let need = (0.25 * group_old[c].min(old_size[&f]) as f64).max(1.0);
                if o as f64 >= need {
                    group_family[c] = Some(FamilyRef::Existing(f));
                    events.push(Event {
                        kind: EventKind::Kept,
                        family: FamilyRef::Existing(f),
                        other: None,
                        n_shared: o,
                    });
                }
            }
        }
    }
    // Families holding pinned members that no group continues stay active.
    let pinned_only: Vec<i64> = pinned_fams
        .iter()
        .copied()
        .filter(|&f| !group_family.contains(&Some(FamilyRef::Existing(f))))
        .collect();
    for &f in &pinned_only {
        events.push(Event {
            kind: EventKind::Kept,
            family: FamilyRef::Existing(f),
            other: None,
            n_shared: pinned_in.iter().filter_map(|m| m.get(&f)).sum(),
        });
    }
    let mut n_new = 0;
    for c in 0..k {
        if group_family[c].is_some() {
            continue;
        }
        let fam = FamilyRef::New(n_new);
        n_new += 1;
        group_family[c] = Some(fam);
        // A split when a substantial part of it came from one old family.
        let best = (0..old_fams.len()).max_by_key(|&j| overlap[c][j]);
        events.push(match best {
            Some(j) if group_old[c] > 0 && overlap[c][j] as f64 >= 0.5 * group_old[c] as f64 => {
                Event {
                    kind: EventKind::Split,
                    family: fam,
                    other: Some(FamilyRef::Existing(old_fams[j])),
                    n_shared: overlap[c][j],
                }
            }
            _ => Event {
                kind: EventKind::New,
                family: fam,
                other: None,
                n_shared: 0,
            },
        });
    }
    let group_family: Vec<FamilyRef> = group_family.into_iter().map(|f| f.expect("set")).collect();
    // Old families not kept: merged (most members went to one group) or retired.
    for (j, &f) in old_fams.iter().enumerate() {
        if group_family.contains(&FamilyRef::Existing(f)) || pinned_only.contains(&f) {
            continue;
        }
        let (c, o) = (0..k)
            .map(|c| (c, overlap[c][j]))
            .max_by_key(|x| x.1)
            .unwrap_or((0, 0));
        events.push(if o as f64 >= 0.5 * old_size[&f] as f64 {
            Event {
                kind: EventKind::Merge,
                family: FamilyRef::Existing(f),
                other: Some(group_family[c]),
                n_shared: o,
            }
        } else {
            Event {
                kind: EventKind::Retired,
                family: FamilyRef::Existing(f),
                other: None,
                n_shared: o,
            }
        });
    }
    Lineage {
        group_family,
        n_new,
        events,
        pinned_only,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use FamilyRef::{Existing, New};

    /// `previous` from (family, trigger ids) and `members` from (group,
    /// trigger ids).
    fn setup(
        old: &[(i64, std::ops::Range<i64>)],
        new: &[(usize, std::ops::Range<i64>)],
    ) -> (HashMap<i64, i64>, Vec<(i64, usize)>) {
        let prev = old
            .iter()
            .flat_map(|(f, r)| r.clone().map(move |t| (t, *f)))
            .collect();
        let members = new
            .iter()
            .flat_map(|(c, r)| r.clone().map(move |t| (t, *c)))
            .collect();
        (prev, members)
    }

    fn kinds(l: &Lineage) -> Vec<(EventKind, FamilyRef, Option<FamilyRef>, usize)> {
        l.events
            .iter()
            .map(|e| (e.kind, e.family, e.other, e.n_shared))
            .collect()
    }

    #[test]
    fn first_run_makes_new_families_in_group_order() {
        let (prev, m) = setup(&[], &[(1, 0..5), (0, 5..9)]);
        let l = link(&prev, &m, 2);
        assert_eq!(l.group_family, vec![New(0), New(1)]);
        assert_eq!(l.n_new, 2);
        assert_eq!(
            kinds(&l),
            vec![
                (EventKind::New, New(0), None, 0),
                (EventKind::New, New(1), None, 0)
            ]
        );
        let (ids, ev) = l.resolve(&[7, 8]);
        assert_eq!(ids, vec![7, 8]);
        assert_eq!(ev[1].family_id, 8);
        assert_eq!(ev[1].kind, EventKind::New);
    }

    #[test]
    fn ids_follow_members_not_group_numbers() {
        // The mixture numbered the groups the other way round this time, and
        // 10 new triggers joined: ids follow the shared members.
        let (prev, m) = setup(&[(3, 0..20), (4, 20..30)], &[(0, 20..35), (1, 0..20)]);
        let l = link(&prev, &m, 2);
        assert_eq!(l.group_family, vec![Existing(4), Existing(3)]);
        assert_eq!(l.n_new, 0);
        assert_eq!(
            kinds(&l),
            vec![
                (EventKind::Kept, Existing(4), None, 10),
                (EventKind::Kept, Existing(3), None, 20)
            ]
        );
    }

    #[test]
    fn a_family_split_in_two_keeps_its_id_on_the_larger_part() {
        // Family 5 (40 members) becomes groups of 25 and 15.
        let (prev, m) = setup(&[(5, 0..40)], &[(0, 0..15), (1, 15..40)]);
        let l = link(&prev, &m, 2);
        assert_eq!(l.group_family, vec![New(0), Existing(5)]);
        assert_eq!(
            kinds(&l),
            vec![
                (EventKind::Kept, Existing(5), None, 25),
                (EventKind::Split, New(0), Some(Existing(5)), 15)
            ]
        );
        let (ids, ev) = l.resolve(&[9]);
        assert_eq!(ids, vec![9, 5]);
        assert_eq!((ev[1].family_id, ev[1].other_family_id), (9, Some(5)));
    }

    #[test]
    fn two_families_merged_into_one() {
        // Families 1 (30) and 2 (10) become one group: 1 is kept, 2 merges into it.
        let (prev, m) = setup(&[(1, 0..30), (2, 30..40)], &[(0, 0..40)]);
        let l = link(&prev, &m, 1);
        assert_eq!(l.group_family, vec![Existing(1)]);
        assert_eq!(
            kinds(&l),
            vec![
                (EventKind::Kept, Existing(1), None, 30),
                (EventKind::Merge, Existing(2), Some(Existing(1)), 10)
            ]
        );
    }

    #[test]
    fn a_family_scattered_over_others_is_retired() {
        // Family 3's 12 members spread over two groups kept by families 1
        // and 2, at most 4 in one: less than half, so retired, not merged.
        let (prev, m) = setup(
            &[(1, 0..30), (2, 30..60), (3, 60..72)],
            &[
                (0, 0..30),
                (0, 60..64),
                (1, 30..60),
                (1, 64..68),
                (2, 68..72),
            ],
        );
        let l = link(&prev, &m, 3);
        assert_eq!(l.group_family, vec![Existing(1), Existing(2), Existing(3)]);
        // Group 2 holds 4 of family 3's 12: the Hungarian assignment gives it
        // family 3 (4 ≥ a quarter of min(4, 12) = 1), so 3 is kept.
        assert_eq!(kinds(&l)[2], (EventKind::Kept, Existing(3), None, 4));

        // Without that group, family 3 is retired (4 < half of 12).
        let m2: Vec<(i64, usize)> = m.iter().copied().filter(|x| x.1 != 2).collect();
        let l2 = link(&prev, &m2, 2);
        assert_eq!(
            kinds(&l2).last().copied(),
            Some((EventKind::Retired, Existing(3), None, 4))
        );
    }

    #[test]
    fn an_assignment_without_shared_triggers_keeps_no_id() {
        // Families 8 (40) and 9 (30) now form one group; a second group holds
        // only triggers never clustered before. The assignment pairs that
        // group with family 9 (overlap 0), which is not accepted: the group
        // is new and family 9 merges into family 8.
        let (prev, m) = setup(&[(8, 0..40), (9, 40..70)], &[(0, 0..70), (1, 70..80)]);
        let l = link(&prev, &m, 2);
        assert_eq!(l.group_family, vec![Existing(8), New(0)]);
        assert_eq!(
            kinds(&l),
            vec![
                (EventKind::Kept, Existing(8), None, 40),
                (EventKind::New, New(0), None, 0),
                (EventKind::Merge, Existing(9), Some(Existing(8)), 30)
            ]
        );
    }

    #[test]
    fn a_merge_by_hand_survives_a_fit_that_splits_it_again() {
        // A scientist merged family 2 (10 members) into 1 (30): all of 2's
        // members are pinned to 1. A new fit separates them again: the
        // pinned group continues family 1, the other group keeps 1 by
        // overlap, and no new family appears.
        let (prev, m) = setup(&[(1, 0..40)], &[(0, 0..30), (1, 30..45)]);
        let pins: HashMap<i64, i64> = (30..40).map(|t| (t, 1)).collect();
        let l = link_pinned(&prev, &m, 2, &pins);
        assert_eq!(l.group_family, vec![Existing(1), Existing(1)]);
        assert_eq!(l.n_new, 0);
        assert!(l.pinned_only.is_empty());
        assert_eq!(
            kinds(&l),
            vec![
                (EventKind::Kept, Existing(1), None, 10),
                (EventKind::Kept, Existing(1), None, 30)
            ]
        );
        // Without the pins the second group would be a split of family 1.
        let l0 = link(&prev, &m, 2);
        assert_eq!(l0.group_family, vec![Existing(1), New(0)]);
    }

    #[test]
    fn a_split_by_hand_survives_a_fit_that_joins_it_again() {
        // A scientist split 12 triggers of family 5 into family 6, pinning
        // both parts. A new fit makes one group of all of them: it continues
        // family 5 (most pinned members) and family 6 stays active by its pins.
        let (prev, m) = setup(&[(5, 0..40), (6, 40..52)], &[(0, 0..60)]);
        let mut pins: HashMap<i64, i64> = (0..40).map(|t| (t, 5)).collect();
        pins.extend((40..52).map(|t| (t, 6)));
        let l = link_pinned(&prev, &m, 1, &pins);
        assert_eq!(l.group_family, vec![Existing(5)]);
        assert_eq!(l.pinned_only, vec![6]);
        assert_eq!(
            kinds(&l),
            vec![
                (EventKind::Kept, Existing(5), None, 40),
                (EventKind::Kept, Existing(6), None, 12)
            ]
        );
        // Without the pins family 6 would merge into 5.
        let l0 = link(&prev, &m, 1);
        assert_eq!(
            kinds(&l0)[1],
            (EventKind::Merge, Existing(6), Some(Existing(5)), 12)
        );
    }

    #[test]
    fn stored_names_round_trip() {
        for k in EventKind::ALL {
            assert_eq!(EventKind::parse(k.as_str()), Some(k));
            assert_eq!(serde_json::to_string(&k).unwrap(), format!("\"{k}\""));
        }
        for s in FamilyStatus::ALL {
            assert_eq!(FamilyStatus::parse(s.as_str()), Some(s));
        }
        assert_eq!(EventKind::parse("moved"), None);
    }
}
