//! Scale-out (plan → shards → merge). References: the single-machine scan of
//! the same data (equivalence: same trigger count, same peaks and SNRs) and
//! segment algebra (keep spans partition the usable time, no overlap).

use glitchbook::catalogue::{from_ns, open};
use glitchbook::io::{ChannelSpec, Role};
use glitchbook::plan::{
    self, make_plan_from_channels, merge, plan_channel, run_shard_with, shard_db_path, status,
    PlanOptions, ShardState,
};
use glitchbook::scan::{scan_source, ChannelScan, InMemory, ScanParams};
use glitchbook::segments::{Segment, SegmentList};
use glitchbook::trigger::Trigger;
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use rand_xoshiro::Xoshiro256Plus;
use std::collections::HashMap;
use std::path::Path;

const T0: f64 = 1_000_000_000.0;

struct Chan {
    name: &'static str,
    rate_hz: f64,
    data: Vec<f64>,
}

fn noise(n: usize, seed: u64) -> Vec<f64> {
    let mut rng = Xoshiro256Plus::seed_from_u64(seed);
    (0..n).map(|_| StandardNormal.sample(&mut rng)).collect()
}

/// Add a sine-Gaussian `a·exp(-(t-tc)²/τ²)·sin(2πf(t-tc))` (τ = Q/(√2·πf)).
fn inject(x: &mut [f64], fs: f64, tc: f64, f_hz: f64, q: f64, a: f64) {
    let tau = q / (std::f64::consts::SQRT_2 * std::f64::consts::PI * f_hz);
    for (i, v) in x.iter_mut().enumerate() {
        let t = T0 + i as f64 / fs - tc;
        if t.abs() < 6.0 * tau {
            *v +=
                a * (-(t * t) / (tau * tau)).exp() * (2.0 * std::f64::consts::PI * f_hz * t).sin();
        }
    }
}

/// Time covered by finite samples (the scan's own survey).
fn valid_of(x: &[f64], fs: f64) -> SegmentList {
    use glitchbook::scan::SampleSource;
    let src = InMemory {
        data: x.to_vec(),
        rate_hz: fs,
        start_gps: T0,
    };
    src.survey().unwrap().0
}

fn plan_for(
    chans: &[Chan],
    segments: Option<&SegmentList>,
    opts: &PlanOptions,
    dir: &Path,
) -> plan::Plan {
    let pcs = chans
        .iter()
        .map(|c| {
            plan_channel(
                Path::new("/virtual/bundle"),
                c.name,
                if c.name.ends_with("STRAIN") {
                    Role::Target
                } else {
                    Role::Aux
                },
                c.rate_hz,
                T0,
                c.data.len() as u64,
                (None, None),
                &valid_of(&c.data, c.rate_hz),
                (0, 0),
                &opts.params,
            )
            .unwrap()
        })
        .collect();
    make_plan_from_channels(pcs, segments, opts, dir, &shard_cmd()).unwrap()
}

/// The CLI's shard command line (`cli/common.rs::shard_command`):
/// `--db DIR/shards/shard-K.db scan --shard K --plan DIR`.
fn shard_cmd() -> plan::ShardCommand {
    use plan::ShardArg::{Index, PlanDir, ShardDb, Text};
    let t = |s: &str| Text(s.to_string());
    plan::ShardCommand {
        args: vec![
            t("--db"),
            ShardDb,
            t("scan"),
            t("--shard"),
            Index,
            t("--plan"),
            PlanDir,
        ],
    }
}

fn spec(c: &Chan) -> ChannelSpec {
    ChannelSpec {
        name: c.name.into(),
        file: format!("/virtual/bundle/{}.npy", c.name).into(),
        files: vec![format!("/virtual/bundle/{}.npy", c.name).into()],
        format: glitchbook::io::DataFormat::Npy,
        rate: c.rate_hz,
        start: T0,
        role: if c.name.ends_with("STRAIN") {
            Role::Target
        } else {
            Role::Aux
        },
        fmin: None,
        fmax: None,
    }
}

fn scan_mem(
    c: &Chan,
    params: &ScanParams,
    segs: Option<&SegmentList>,
) -> anyhow::Result<ChannelScan> {
    let src = InMemory {
        data: c.data.clone(),
        rate_hz: c.rate_hz,
        start_gps: T0,
    };
    // The band a bundle scan gives the channel (aux channels reach lower).
    let fmin = glitchbook::scan::channel_fmin(spec(c).role, c.rate_hz, None);
    let (params, analysed, triggers, input_checksum) =
        scan_source(&src, params, (fmin, None), segs, &|_| {})?;
    Ok(ChannelScan {
        channel: spec(c),
        params,
        analysed,
        triggers,
        input_checksum,
    })
}

fn run_all_shards(dir: &Path, chans: &[Chan], n: usize) {
    let by_name: HashMap<&str, &Chan> = chans.iter().map(|c| (c.name, c)).collect();
    for k in 0..n {
        run_shard_with(dir, k, &|job, params| {
            scan_mem(by_name[job.channel.name.as_str()], params, Some(&job.scan))
        })
        .unwrap();
    }
}

/// Triggers per channel name, sorted by peak time, from a catalogue.
fn read_triggers(db: &Path) -> HashMap<String, Vec<Trigger>> {
    let conn = open(db).unwrap();
    let mut st = conn
        .prepare(
            "SELECT c.name, t_peak_ns, t_start_ns, t_end_ns, f_peak_hz, f_low_hz, f_high_hz, snr, \
             q, energy FROM triggers t JOIN channels c ON c.id = t.channel_id ORDER BY t_peak_ns",
        )
        .unwrap();
    let mut out: HashMap<String, Vec<Trigger>> = HashMap::new();
    let rows = st
        .query_map([], |r| {
            Ok((
                r.get::<_, String>(0)?,
                Trigger {
                    t_peak: from_ns(r.get(1)?),
                    t_start: from_ns(r.get(2)?),
                    t_end: from_ns(r.get(3)?),
                    f_peak: r.get(4)?,
                    f_low: r.get(5)?,
                    f_high: r.get(6)?,
                    snr: r.get(7)?,
                    q: r.get(8)?,
                    energy: r.get(9)?,
                    snr_eq: r.get(7)?,
                },
            ))
        })
        .unwrap();
    for r in rows {
        let (n, t) = r.unwrap();
        out.entry(n).or_default().push(t);
    }
    out
}

fn analysed_union(db: &Path, name: &str) -> SegmentList {
    let conn = open(db).unwrap();
    let mut st = conn
        .prepare(
            "SELECT a.start_ns, a.end_ns FROM analysed_segments a JOIN scans s ON s.id = a.scan_id \
             JOIN channels c ON c.id = s.channel_id WHERE c.name = ?1",
        )
        .unwrap();
    let segs: Vec<Segment> = st
        .query_map([name], |r| {
            Ok(Segment::new(from_ns(r.get(0)?), from_ns(r.get(1)?)))
        })
        .unwrap()
        .map(Result::unwrap)
        .collect();
    SegmentList::from_segments(segs)
}

/// Compare sharded+merged triggers with the one-go scan: same count, same
/// peak time (within one sample; the tiles are identical by construction,
/// so this is far tighter than one tile) and SNR.
fn assert_same(one_go: &[Trigger], merged: &[Trigger], fs: f64, what: &str) {
    if one_go.len() != merged.len() {
        for t in one_go {
            eprintln!(
                "one-go {:.4} [{:.4},{:.4}] snr {:.3} f {:.1}",
                t.t_peak - T0,
                t.t_start - T0,
                t.t_end - T0,
                t.snr,
                t.f_peak
            );
        }
        for t in merged {
            eprintln!(
                "merged {:.4} [{:.4},{:.4}] snr {:.3} f {:.1}",
                t.t_peak - T0,
                t.t_start - T0,
                t.t_end - T0,
                t.snr,
                t.f_peak
            );
        }
    }
    assert_eq!(
        one_go.len(),
        merged.len(),
        "{what}: trigger count one-go {} vs sharded {}",
        one_go.len(),
        merged.len()
    );
    for (a, b) in one_go.iter().zip(merged) {
        assert!(
            (a.t_peak - b.t_peak).abs() <= 1.0 / fs,
            "{what}: t_peak {} vs {}",
            a.t_peak,
            b.t_peak
        );
        assert!(
            (a.snr - b.snr).abs() <= 1e-6 * a.snr,
            "{what}: snr {} vs {} at {}",
            a.snr,
            b.snr,
            a.t_peak
        );
        assert_eq!(a.f_peak, b.f_peak, "{what}: f_peak at {}", a.t_peak);
        assert_eq!(a.q, b.q, "{what}: q at {}", a.t_peak);
    }
}

/// The interior keep edges of a channel in a plan (shard edges) \[GPS s\].
fn interior_edges(p: &plan::Plan, name: &str) -> Vec<f64> {
    let mut ends: Vec<f64> = p
        .shards
        .iter()
        .flat_map(|s| s.channels.iter().filter(|c| c.name == name))
        .flat_map(|c| c.keep.iter().map(|k| k[1]))
        .collect();
    ends.sort_by(f64::total_cmp);
    ends.pop(); // the last end is the end of the data
    ends
}

fn opts(shards: usize) -> PlanOptions {
    PlanOptions {
        shards: Some(shards),
        ..PlanOptions::default()
    }
}

#[test]
fn plan_keep_spans_partition_usable_time() {
    // Two rates (two block grids), a NaN dropout and user segments.
    let mut a = noise(1024 * 600, 1);
    for v in &mut a[1024 * 200..1024 * 203] {
        *v = f64::NAN;
    }
    let chans = vec![
        Chan {
            name: "AV1:STRAIN",
            rate_hz: 1024.0,
            data: a,
        },
        Chan {
            name: "AV1:ACC_AUX",
            rate_hz: 256.0,
            data: noise(256 * 600, 2),
        },
    ];
    let user = SegmentList::from_segments(vec![
        Segment::new(T0 + 10.0, T0 + 400.0),
        Segment::new(T0 + 420.5, T0 + 600.0),
    ]);
    for (o, groups) in [(opts(5), 1), (opts(3), 2)] {
        let dir = tempfile::tempdir().unwrap();
        let o = PlanOptions {
            channel_groups: groups,
            ..o
        };
        let p = plan_for(&chans, Some(&user), &o, dir.path());
        assert_eq!(p.shards.len(), o.shards.unwrap() * groups);
        for (i, c) in chans.iter().enumerate() {
            let usable = valid_of(&c.data, c.rate_hz).intersection(&user);
            let keeps: Vec<SegmentList> = p
                .shards
                .iter()
                .flat_map(|s| s.channels.iter().filter(|sc| sc.channel == i))
                .map(|sc| {
                    SegmentList::from_segments(
                        sc.keep.iter().map(|k| Segment::new(k[0], k[1])).collect(),
                    )
                })
                .collect();
            let union = keeps.iter().fold(SegmentList::new(), |u, k| u.union(k));
            // Segment algebra: union = usable (sample-aligned here), no overlap.
            assert!(
                union.difference(&usable).total() < 1e-9
                    && usable.difference(&union).total() < 1e-9,
                "{}: union of keep spans {:?} vs usable {:?}",
                c.name,
                union,
                usable
            );
            let sum: f64 = keeps.iter().map(SegmentList::total).sum();
            assert!(
                (sum - union.total()).abs() < 1e-6,
                "{}: keep spans overlap",
                c.name
            );
            // Every channel belongs to exactly one group.
            let n_groups = p
                .shards
                .iter()
                .filter(|s| s.channels.iter().any(|sc| sc.channel == i))
                .map(|s| s.group)
                .collect::<std::collections::BTreeSet<_>>();
            assert_eq!(n_groups.len(), 1);
            // Scan span = keep widened by the padding and one block step
            // (block_s - 2 pad_s), inside usable time.
            let pad = p.channels[i].params.block_s - p.channels[i].params.pad_s;
            for s in &p.shards {
                for sc in s.channels.iter().filter(|sc| sc.channel == i) {
                    let keep = SegmentList::from_segments(
                        sc.keep.iter().map(|k| Segment::new(k[0], k[1])).collect(),
                    );
                    let scan = SegmentList::from_segments(
                        sc.scan.iter().map(|k| Segment::new(k[0], k[1])).collect(),
                    );
                    // Widening stays inside the stretches of valid data the keep span touches.
                    let touched = SegmentList::from_segments(
                        usable
                            .segments()
                            .iter()
                            .filter(|g| keep.overlap_with(g.start, g.end) > 0.0)
                            .copied()
                            .collect(),
                    );
                    let want = keep.widened(pad, pad).intersection(&touched);
                    let q = 0.25 / c.rate_hz;
                    assert!(scan.difference(&want.widened(q, q)).total() < 1e-9);
                    assert!(
                        want.difference(&scan).total() < 1e-9,
                        "{}: scan {:?} want {:?} keep {:?}",
                        c.name,
                        scan,
                        want,
                        keep
                    );
                }
            }
        }
    }
}

#[test]
fn plan_sharded_scan_equals_one_go_with_triggers_on_edges() {
    let fs = 1024.0;
    let n = (fs as usize) * 400;
    let mut chans = vec![
        Chan {
            name: "AV1:STRAIN",
            rate_hz: fs,
            data: noise(n, 11),
        },
        Chan {
            name: "AV1:MAG_AUX",
            rate_hz: 512.0,
            data: noise(n / 2, 12),
        },
    ];
    let n_shards = 5;
    let dir = tempfile::tempdir().unwrap();
    let p = plan_for(&chans, None, &opts(n_shards), dir.path());
    // Loud sine-Gaussians exactly on every shard edge (and one sample
    // either side), plus a few away from edges.
    for c in &mut chans {
        let edges = interior_edges(&p, c.name);
        assert_eq!(edges.len(), n_shards - 1, "{}", c.name);
        let fs = c.rate_hz;
        for (j, &e) in edges.iter().enumerate() {
            let dt = [0.0, 1.0 / fs, -1.0 / fs][j % 3];
            inject(&mut c.data, fs, e + dt, 60.0, 9.0, 6.0);
        }
        for tc in [T0 + 37.3, T0 + 151.1, T0 + 333.7] {
            inject(&mut c.data, fs, tc, 90.0, 20.0, 5.0);
        }
    }
    run_all_shards(dir.path(), &chans, n_shards);
    assert!(status(dir.path())
        .unwrap()
        .iter()
        .all(|s| s.state == ShardState::Done));
    let db = dir.path().join("merged.db");
    let rep = merge(dir.path(), &db, false).unwrap();
    assert_eq!(rep.merged.len(), n_shards);
    let merged = read_triggers(&db);
    for c in &chans {
        let one = scan_mem(c, &ScanParams::default(), None).unwrap();
        // Every loud injection on an edge is found once.
        for e in interior_edges(&p, c.name) {
            let near: Vec<&Trigger> = merged[c.name]
                .iter()
                .filter(|t| (t.t_peak - e).abs() < 0.05 && t.snr > 15.0)
                .collect();
            assert_eq!(near.len(), 1, "{}: edge {e}: {near:?}", c.name);
        }
        assert_same(&one.triggers, &merged[c.name], c.rate_hz, c.name);
        let an = analysed_union(&db, c.name);
        assert!(
            an.difference(&one.analysed).total() < 1e-6
                && one.analysed.difference(&an).total() < 1e-6,
            "{}: analysed {:?} vs {:?}",
            c.name,
            an,
            one.analysed
        );
    }
    // Merging twice changes nothing.
    let rep2 = merge(dir.path(), &db, false).unwrap();
    assert!(rep2.merged.is_empty() && rep2.already.len() == n_shards);
    let again = read_triggers(&db);
    for c in &chans {
        assert_eq!(again[c.name].len(), merged[c.name].len());
    }
    // Re-running a shard is safe: same triggers, still done.
    let before = read_triggers(&shard_db_path(dir.path(), 2));
    let by_name: HashMap<&str, &Chan> = chans.iter().map(|c| (c.name, c)).collect();
    run_shard_with(dir.path(), 2, &|job, params| {
        scan_mem(by_name[job.channel.name.as_str()], params, Some(&job.scan))
    })
    .unwrap();
    let after = read_triggers(&shard_db_path(dir.path(), 2));
    for (k, v) in &before {
        assert_eq!(v.len(), after[k].len());
    }
}

#[test]
fn plan_merge_refuses_other_parameters_unless_forced() {
    let fs = 512.0;
    let chans = vec![Chan {
        name: "AV1:STRAIN",
        rate_hz: fs,
        data: noise(512 * 200, 5),
    }];
    let dir = tempfile::tempdir().unwrap();
    plan_for(&chans, None, &opts(2), dir.path());
    run_all_shards(dir.path(), &chans, 2);
    // Tamper with shard 1: another SNR threshold.
    let conn = rusqlite::Connection::open(shard_db_path(dir.path(), 1)).unwrap();
    conn.execute(
        "UPDATE scans SET params_json = replace(params_json, '\"snr_threshold\":5.5', '\"snr_threshold\":6.0')",
        [],
    )
    .unwrap();
    drop(conn);
    let db = dir.path().join("m.db");
    let err = format!("{:#}", merge(dir.path(), &db, false).unwrap_err());
    assert!(
        err.contains("shard-1.db") && err.contains("refusing"),
        "{err}"
    );
    // Shard 0 went in before the refusal; a forced merge adds shard 1 and records why.
    let rep = merge(dir.path(), &db, true).unwrap();
    assert_eq!(rep.merged, vec![1]);
    assert_eq!(rep.already, vec![0]);
    assert!(rep.forced[0].contains("snr_threshold"), "{:?}", rep.forced);
    let forced: i64 = open(&db)
        .unwrap()
        .query_row("SELECT forced FROM merges WHERE shard = 1", [], |r| {
            r.get(0)
        })
        .unwrap();
    assert_eq!(forced, 1);
    // Another tool version is refused too.
    let conn = rusqlite::Connection::open(shard_db_path(dir.path(), 0)).unwrap();
    conn.execute("UPDATE shard_runs SET tool_version = '0.0.1'", [])
        .unwrap();
    drop(conn);
    let err = format!(
        "{:#}",
        merge(dir.path(), &dir.path().join("m2.db"), false).unwrap_err()
    );
    assert!(
        err.contains("shard-0.db") && err.contains("tool version 0.0.1"),
        "{err}"
    );
}

#[test]
fn plan_status_and_local_runner_report_failures_with_logs() {
    let chans = vec![Chan {
        name: "AV1:STRAIN",
        rate_hz: 256.0,
        data: noise(256 * 400, 7),
    }];
    let dir = tempfile::tempdir().unwrap();
    let p = plan_for(&chans, None, &opts(4), dir.path());
    let script = std::fs::read_to_string(dir.path().join("run-array.sh")).unwrap();
    assert!(script.contains("#SBATCH --array=0-3\n"), "{script}");
    assert!(script.contains("logs/shard-%a.log"));
    assert!(script.contains(&format!("plan {}", p.plan_id)));
    assert!(std::fs::read_to_string(dir.path().join("README.txt"))
        .unwrap()
        .contains("sbatch"));
    assert!(status(dir.path())
        .unwrap()
        .iter()
        .all(|s| s.state == ShardState::Missing));
    // A stand-in executable: writes the shard db for K != 2, fails for K = 2.
    let exe = dir.path().join("fake-glitchbook.sh");
    std::fs::write(
        &exe,
        "#!/bin/sh\n# args: --db DB scan --shard K --plan DIR\n\
         echo \"running shard $5\"\n\
         if [ \"$5\" = 2 ]; then echo 'boom' >&2; exit 3; fi\n: > \"$2\"\n",
    )
    .unwrap();
    use std::os::unix::fs::PermissionsExt;
    std::fs::set_permissions(&exe, std::fs::Permissions::from_mode(0o755)).unwrap();
    let err = plan::run_local(dir.path(), 2, &exe, &shard_cmd())
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("shard 2 failed") && err.contains("shard-2.log"),
        "{err}"
    );
    let st = status(dir.path()).unwrap();
    let states: Vec<ShardState> = st.iter().map(|s| s.state).collect();
    use ShardState::*;
    assert_eq!(states, vec![Done, Done, Failed, Done]);
    assert!(std::fs::read_to_string(&st[2].log)
        .unwrap()
        .contains("boom"));
    let text = plan::status_text(&st);
    assert!(
        text.starts_with("4 shards: 3 done, 1 failed, 0 missing"),
        "{text}"
    );
    assert!(
        text.contains("shard 2: failed") && text.contains("shard-2.log"),
        "{text}"
    );
    // Bad shard index names the plan and the range.
    let e = plan::shard_job(dir.path(), 9).unwrap_err();
    assert!(format!("{e:#}").contains("0..=3"), "{e:#}");
}

// (End to end through a real Slurm: .ci/slurm/e2e.sh with the real binary.)

#[test]
fn plan_merge_folds_edge_twins_into_the_louder() {
    // Hand-made shard catalogues around one shard edge: a trigger split in
    // two by the edge (peak tiles overlap in time and frequency: one
    // transient, keep the louder) and a neighbour at another frequency whose
    // extent overlaps but whose peak tile does not (two transients, keep both).
    let chans = vec![Chan {
        name: "AV1:STRAIN",
        rate_hz: 256.0,
        data: noise(256 * 400, 9),
    }];
    let dir = tempfile::tempdir().unwrap();
    let p = plan_for(&chans, None, &opts(2), dir.path());
    let e = interior_edges(&p, "AV1:STRAIN")[0];
    let trig = |t: f64, f: f64, q: f64, snr: f64, half: f64| Trigger {
        t_peak: t,
        t_start: t - half,
        t_end: t + half,
        f_peak: f,
        f_low: f * 0.8,
        f_high: f * 1.2,
        snr,
        q,
        energy: glitchbook::trigger::energy_from_snr(snr),
        snr_eq: snr,
    };
    let scan = |k: usize, triggers: Vec<Trigger>| ChannelScan {
        channel: spec(&chans[0]),
        params: p.channels[0].params.clone(),
        analysed: SegmentList::from_segments(
            p.shards[k].channels[0]
                .keep
                .iter()
                .map(|g| Segment::new(g[0], g[1]))
                .collect(),
        ),
        triggers,
        input_checksum: "00".into(),
    };
    // Q = 8 at 50 Hz: tile half-duration 2σ_t ≈ 0.036 s, half-bandwidth 12.5 Hz.
    // Twice: the louder half merged first, then merged second.
    for (snr_l, snr_r) in [(12.0, 9.0), (9.0, 12.0)] {
        let left = vec![trig(e - 0.01, 50.0, 8.0, snr_l, 0.05)];
        let right = vec![
            trig(e + 0.01, 52.0, 8.0, snr_r, 0.05), // twin of `left`
            trig(e + 0.04, 110.0, 8.0, 7.0, 0.03),  // other frequency: its own transient
            trig(e + 30.0, 50.0, 8.0, 20.0, 0.05),  // far from the edge
        ];
        let bundle = || std::path::PathBuf::from("bundle");
        plan::write_shard_catalogue(dir.path(), &p.plan_id, 0, &[(scan(0, left), bundle())])
            .unwrap();
        plan::write_shard_catalogue(dir.path(), &p.plan_id, 1, &[(scan(1, right), bundle())])
            .unwrap();
        let db = dir.path().join(format!("m{snr_l}.db"));
        let rep = merge(dir.path(), &db, false).unwrap();
        assert_eq!(rep.n_triggers_in, 4);
        assert_eq!(rep.n_edge_duplicates, 1, "{rep:?}");
        let got = &read_triggers(&db)["AV1:STRAIN"];
        let snrs: Vec<f64> = got.iter().map(|t| t.snr).collect();
        assert_eq!(snrs, vec![12.0, 7.0, 20.0], "{got:?}");
    }
}
