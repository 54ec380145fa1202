//! Scale-out figures: one-go scan vs the same data as N shards (scanned one
//! after another in this process) + merge, on Gaussian noise.
//! `cargo bench --bench plan_throughput [-- SECONDS RATE_HZ SHARDS]`
//! (defaults 512 s, 4096 Hz, 8 shards). Prints wall times, the shard
//! overhead (margin scanned twice) and peak memory.
use glitchbook::io::{ChannelSpec, Role};
use glitchbook::plan::{self, PlanOptions};
use glitchbook::scan::{scan_source, ChannelScan, InMemory, SampleSource, ScanParams};
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use rand_xoshiro::Xoshiro256Plus;
use std::path::Path;
use std::time::Instant;

fn vm_hwm_mb() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("VmHWM:"))
                .and_then(|l| l.split_whitespace().nth(1)?.parse::<f64>().ok())
        })
        .map_or(f64::NAN, |kb| kb / 1024.0)
}

fn main() {
    let args: Vec<f64> = std::env::args()
        .skip(1)
        .filter_map(|a| a.parse().ok())
        .collect();
    let dur_s = args.first().copied().unwrap_or(512.0);
    let fs = args.get(1).copied().unwrap_or(4096.0);
    let n_shards = args.get(2).copied().unwrap_or(8.0) as usize;
    let t0 = 1_000_000_000.0;
    let mut rng = Xoshiro256Plus::seed_from_u64(1);
    let data: Vec<f64> = (0..(dur_s * fs) as usize)
        .map(|_| StandardNormal.sample(&mut rng))
        .collect();
    let src = InMemory {
        data,
        rate_hz: fs,
        start_gps: t0,
    };
    let params = ScanParams::default();
    let spec = ChannelSpec {
        name: "AV1:STRAIN".into(),
        file: "/virtual/x.npy".into(),
        files: vec!["/virtual/x.npy".into()],
        format: glitchbook::io::DataFormat::Npy,
        rate: fs,
        start: t0,
        role: Role::Target,
        fmin: None,
        fmax: None,
    };
    let t = Instant::now();
    let (_, _, one, _) = scan_source(&src, &params, (None, None), None, &|_| {}).unwrap();
    let one_s = t.elapsed().as_secs_f64();
    println!(
        "one-go: {dur_s} s at {fs} Hz in {one_s:.2} s ({:.0}x real time, {:.2} Msample/s), {} triggers, peak RSS {:.0} MB",
        dur_s / one_s,
        dur_s * fs / one_s / 1e6,
        one.len(),
        vm_hwm_mb()
    );

    let dir = tempfile::tempdir().unwrap();
    let (valid, _) = src.survey().unwrap();
    let pc = plan::plan_channel(
        Path::new("/virtual"),
        "AV1:STRAIN",
        Role::Target,
        fs,
        t0,
        src.data.len() as u64,
        (None, None),
        &valid,
        (0, 0),
        &params,
    )
    .unwrap();
    let t = Instant::now();
    let opts = PlanOptions {
        shards: Some(n_shards),
        ..PlanOptions::default()
    };
    // The batch script is not run here: any command line will do.
    let cmd = plan::ShardCommand { args: vec![] };
    let p = plan::make_plan_from_channels(vec![pc], None, &opts, dir.path(), &cmd).unwrap();
    let plan_s = t.elapsed().as_secs_f64();
    let scanned: f64 = p
        .shards
        .iter()
        .flat_map(|s| s.channels.iter())
        .flat_map(|c| c.scan.iter())
        .map(|g| g[1] - g[0])
        .sum();
    let t = Instant::now();
    let mut per_shard = Vec::new();
    for k in 0..p.shards.len() {
        let ts = Instant::now();
        plan::run_shard_with(dir.path(), k, &|job, params| {
            let (rp, analysed, triggers, input_checksum) =
                scan_source(&src, params, (None, None), Some(&job.scan), &|_| {})?;
            Ok(ChannelScan {
                channel: spec.clone(),
                params: rp,
                analysed,
                triggers,
                input_checksum,
            })
        })
        .unwrap();
        per_shard.push(ts.elapsed().as_secs_f64());
    }
    let shards_s = t.elapsed().as_secs_f64();
    let t = Instant::now();
    let db = dir.path().join("merged.db");
    let rep = plan::merge(dir.path(), &db, false).unwrap();
    let merge_s = t.elapsed().as_secs_f64();
    let n_merged: i64 = glitchbook::catalogue::open(&db)
        .unwrap()
        .query_row("SELECT COUNT(*) FROM triggers", [], |r| r.get(0))
        .unwrap();
    println!(
        "plan: {} shards in {plan_s:.3} s; scanned {scanned:.0} s of data for {dur_s} s ({:.1} % margin overhead)",
        p.shards.len(),
        100.0 * (scanned / dur_s - 1.0)
    );
    println!(
        "shards one after another: {shards_s:.2} s (per shard {:.2}..{:.2} s); merge {merge_s:.3} s; \
         {} triggers in, {n_merged} merged vs {} one-go",
        per_shard.iter().copied().fold(f64::INFINITY, f64::min),
        per_shard.iter().copied().fold(0.0, f64::max),
        rep.n_triggers_in,
        one.len()
    );
    println!(
        "peak RSS {:.0} MB (includes the in-memory series, {:.0} MB)",
        vm_hwm_mb(),
        dur_s * fs * 8.0 / 1e6
    );
}
