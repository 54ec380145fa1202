//! Families on the invented demo scenario (issue 3): the clustering must
//! recover the scenario's ground-truth families (truth.csv, written by
//! `glitchbook::demo` from its own draws), and keep family ids stable when
//! the run is extended.
//!
//! Checks and their sources:
//! - adjusted Rand index ≥ 0.8 over triggers matched to injected glitches
//!   (Hubert & Arabie 1985; our implementation is checked against
//!   scikit-learn 1.9.1 `adjusted_rand_score` in families_core);
//! - each scenario family's dominant family holds ≥ 85 % of its matched
//!   members (issue 3 acceptance figure);
//! - scanning the first half, clustering, then scanning the second half and
//!   clustering again keeps ≥ 95 % of first-half triggers in the same family
//!   id (issue 3 acceptance figure).

use glitchbook::catalogue::{self, from_ns};
use glitchbook::demo::{self, DemoOptions, TruthGlitch};
use glitchbook::families::{self, metrics::adjusted_rand_index, ClusterParams};
use glitchbook::io::{read_segments_file, Bundle};
use glitchbook::maps::BundleMaps;
use glitchbook::scan::{scan_channel, ScanParams};
use glitchbook::segments::SegmentList;
use rusqlite::Connection;
use std::collections::HashMap;
use std::path::{Path, PathBuf};

const HOURS: f64 = 2.0;
const SEED: u64 = 1;

fn dir(name: &str) -> PathBuf {
    let d = Path::new(env!("CARGO_TARGET_TMPDIR")).join(name);
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// Scan the target channel inside `segments` and store it in `conn`.
fn scan_into(conn: &mut Connection, bundle_dir: &Path, segments: &SegmentList) {
    let bundle = Bundle::open(bundle_dir).unwrap();
    let spec = bundle
        .channels
        .iter()
        .find(|c| c.name == demo::TARGET_CHANNEL)
        .unwrap();
    let scan = scan_channel(spec, &ScanParams::default(), Some(segments), &|_| {}).unwrap();
    let abs = std::fs::canonicalize(bundle_dir).unwrap();
    let tx = conn.transaction().unwrap();
    catalogue::insert_channel_scan(&tx, &scan, &abs).unwrap();
    tx.commit().unwrap();
}

fn cluster(conn: &mut Connection) {
    let src = BundleMaps::from_catalogue(conn).unwrap();
    let p = ClusterParams {
        seed: SEED,
        ..ClusterParams::default()
    };
    families::cluster_catalogue(conn, &p, &src).unwrap();
}

/// (trigger id, t_peak, family id) of every clustered trigger, by time.
fn members(conn: &Connection) -> Vec<(i64, f64, i64)> {
    let mut st = conn
        .prepare(
            "SELECT t.id, t.t_peak_ns, m.family_id FROM family_members m \
             JOIN triggers t ON t.id = m.trigger_id WHERE m.family_id IS NOT NULL \
             ORDER BY t.t_peak_ns",
        )
        .unwrap();
    st.query_map([], |r| Ok((r.get(0)?, from_ns(r.get(1)?), r.get(2)?)))
        .unwrap()
        .collect::<rusqlite::Result<_>>()
        .unwrap()
}

/// ARI over matched truth glitches and the dominant share of each scenario
/// family, as `glitchbook demo` reports them.
fn truth_check(conn: &Connection, truth: &[TruthGlitch]) -> (f64, Vec<(String, f64, usize)>) {
    let m = members(conn);
    let mut names: Vec<&str> = truth.iter().map(|g| g.family.as_str()).collect();
    names.sort();
    names.dedup();
    let (mut a, mut b) = (Vec::new(), Vec::new());
    let mut tally: HashMap<(usize, i64), usize> = HashMap::new();
    for g in truth {
        let i = m.partition_point(|x| x.1 < g.t_peak_gps - 0.1);
        if let Some(&(_, t, fam)) = m.get(i) {
            if t <= g.t_peak_gps + 0.1 {
                let n = names.iter().position(|n| *n == g.family).unwrap();
                a.push(n as i64);
                b.push(fam);
                *tally.entry((n, fam)).or_default() += 1;
            }
        }
    }
    let shares = names
        .iter()
        .enumerate()
        .map(|(n, name)| {
            let total: usize = tally.iter().filter(|(k, _)| k.0 == n).map(|x| x.1).sum();
            let top = tally
                .iter()
                .filter(|(k, _)| k.0 == n)
                .map(|x| *x.1)
                .max()
                .unwrap_or(0);
            (name.to_string(), top as f64 / total.max(1) as f64, total)
        })
        .collect();
    (adjusted_rand_index(&a, &b), shares)
}

/// The demo scenario (seed [`SEED`], [`HOURS`] h) and its ground truth.
fn scenario(
    name: &str,
) -> (
    PathBuf,
    demo::ScenarioSummary,
    Vec<TruthGlitch>,
    SegmentList,
) {
    let d = dir(name);
    let sc = demo::write_scenario(
        &d,
        &DemoOptions {
            seed: SEED,
            hours: HOURS,
        },
    )
    .unwrap();
    let truth = demo::read_truth(&sc.truth_csv).unwrap();
    let (segments, _) = read_segments_file(&sc.segments_txt).unwrap();
    (d, sc, truth, segments)
}

/// Issue 3 acceptance on the demo scenario as `demo` makes it (2 h, seed 1):
/// ARI ≥ 0.8 against the ground truth over matched triggers and dominant
/// share ≥ 85 % per scenario family. Pebble (100–300 Hz, Q 3–6) and moth
/// (60–120 Hz, Q 6–10) overlap in peak frequency and Q and form one
/// elongated cloud in (log f, ln Q): BIC prefers 3 families to 4 by 8 units
/// and merges moth into pebble (ARI 0.82, shares 98–100 %); an earlier scan
/// whose triggers differed by a few tiles found 4 (ARI 0.94).
#[test]
fn demo_families_match_ground_truth() {
    let (d, _sc, truth, segments) = scenario("families_demo_truth");
    let mut conn = catalogue::open(&d.join("whole.db")).unwrap();
    scan_into(&mut conn, &d, &segments);
    cluster(&mut conn);
    let (ari, shares) = truth_check(&conn, &truth);
    println!("demo {HOURS} h seed {SEED}: adjusted Rand index {ari:.3}");
    for (name, share, n) in &shares {
        println!(
            "  {name}: {:.0}% of {n} in its dominant family",
            100.0 * share
        );
    }
    assert!(ari >= 0.8, "adjusted Rand index {ari:.3} < 0.8");
    for (name, share, _) in &shares {
        assert!(*share >= 0.85, "{name}: dominant share {share:.2} < 0.85");
    }
}

/// Issue 3 acceptance: scan the first half, cluster; scan the second half,
/// cluster again: ≥ 95 % of first-half triggers keep their family id. Also
/// requires the clustering to find more than one family (else the check is
/// trivially met).
#[test]
fn demo_family_ids_stay_stable_across_halves() {
    let (d, sc, _truth, segments) = scenario("families_demo_halves");
    let mid = 0.5 * (sc.start_gps + sc.end_gps);
    let mut conn = catalogue::open(&d.join("halves.db")).unwrap();
    let first = segments.intersection(&SegmentList::single(sc.start_gps, mid));
    let second = segments.intersection(&SegmentList::single(mid, sc.end_gps));
    scan_into(&mut conn, &d, &first);
    cluster(&mut conn);
    let before: HashMap<i64, i64> = members(&conn).iter().map(|m| (m.0, m.2)).collect();
    let n_fams = {
        let mut f: Vec<i64> = before.values().copied().collect();
        f.sort_unstable();
        f.dedup();
        f.len()
    };
    scan_into(&mut conn, &d, &second);
    cluster(&mut conn);
    let after: HashMap<i64, i64> = members(&conn).iter().map(|m| (m.0, m.2)).collect();
    let kept = before
        .iter()
        .filter(|(t, f)| after.get(t) == Some(f))
        .count();
    let stable = kept as f64 / before.len().max(1) as f64;
    println!(
        "demo {HOURS} h seed {SEED}: {n_fams} families in the first half; \
         {kept}/{} first-half triggers keep their family id = {:.1}%",
        before.len(),
        100.0 * stable
    );
    assert!(n_fams >= 2, "first half clustered into {n_fams} family");
    assert!(
        before.len() >= 30,
        "only {} first-half triggers",
        before.len()
    );
    assert!(stable >= 0.95, "stable ids {stable:.3} < 0.95");
}
