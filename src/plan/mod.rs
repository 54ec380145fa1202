//! Scale-out: split a scan into shards (channel groups × time spans), run
//! them as a Slurm job array or locally, and merge the shard catalogues.
//!
//! A plan is a work directory:
//! - `plan.json`: the manifest ([`Plan`]): parameters, tool version, inputs
//!   (with file sizes and mtimes) and per-shard channels and spans;
//! - `run-array.sh`: a Slurm batch script using a job array;
//! - `README.txt`: how to submit, check and merge;
//! - `shards/shard-K.db`: one catalogue per finished shard;
//! - `logs/shard-K.log`, `status/shard-K.failed`: logs and failure markers.
//!
//! **Shard edges.** For each channel, the usable time (valid samples ∩ user
//! segments) is partitioned into keep spans, one per time piece, with no
//! overlap and no gap. Each interior edge is snapped to the channel's block
//! grid (the block boundaries a single scan of the whole stretch would use),
//! and a shard scans its keep span widened by the conditioning padding
//! (`ResolvedParams::pad_s`) plus one block step of margin. So each shard
//! tiles exactly the blocks a single scan would, clusters near an edge see
//! the same tiles on both sides, and a trigger belongs to the shard whose
//! keep span holds its `t_peak` (so it appears once). [`merge`] still folds
//! edge twins (a chain of tiles longer than the margin) into one.

mod compare;
mod merge;
mod run;
mod slurm;

pub use compare::{compare_catalogues, ChannelComparison, Comparison};

pub use merge::{merge, MergeReport};
pub use run::{
    clip_to_shard, run_local, run_shard, run_shard_with, shard_db_path, status, status_text,
    write_shard_catalogue, ShardArg, ShardCommand, ShardState, ShardStatus,
};
pub use slurm::{slurm_script, SlurmOptions};

use crate::catalogue::now_utc;
use crate::io::Role;
use crate::scan::{resolve_params, ResolvedParams, SampleSource, ScanParams};
use crate::segments::{Segment, SegmentList};
use anyhow::{bail, Context, Result};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// Version of the `plan.json` layout.
pub const PLAN_FORMAT: u32 = 1;

/// This tool's version, recorded in plans and catalogues.
pub const TOOL_VERSION: &str = env!("CARGO_PKG_VERSION");

/// How to split the work.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PlanOptions {
    /// Number of time pieces (used when `span_s` is None; default 1).
    pub shards: Option<usize>,
    /// Length of a time piece \[s\] (overrides `shards`).
    pub span_s: Option<f64>,
    /// Number of channel groups (≥ 1); shards = time pieces × groups.
    pub channel_groups: usize,
    /// Scan parameters as given by the user.
    pub params: ScanParams,
    /// Optional analysis segments file (`start end` per line).
    pub segments: Option<PathBuf>,
    /// Slurm resources for the batch script.
    pub slurm: SlurmOptions,
}

impl Default for PlanOptions {
    fn default() -> Self {
        PlanOptions {
            shards: Some(1),
            span_s: None,
            channel_groups: 1,
            params: ScanParams::default(),
            segments: None,
            slurm: SlurmOptions::default(),
        }
    }
}

impl PlanOptions {
    /// Check the options (no I/O): the scan parameters, the split and the
    /// Slurm resources.
    ///
    /// # Errors
    /// [`crate::Error::InvalidParameter`] naming the field.
    pub fn check(&self) -> crate::Result<()> {
        use crate::Error;
        self.params.check()?;
        if let Some(s) = self.span_s {
            if !(s.is_finite() && s > 0.0) {
                return Err(Error::invalid(
                    "span_s",
                    format!("must be a positive number of seconds, got {s}"),
                ));
            }
        }
        if self.shards == Some(0) {
            return Err(Error::invalid("shards", "must be at least 1"));
        }
        if self.channel_groups == 0 {
            return Err(Error::invalid("channel_groups", "must be at least 1"));
        }
        self.slurm.check()
    }
}

/// One input channel as surveyed when planning.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PlanChannel {
    /// Bundle directory the channel belongs to.
    pub bundle: PathBuf,
    /// Channel name.
    pub name: String,
    /// Target or aux.
    pub role: Role,
    /// Sample rate \[Hz\].
    pub rate_hz: f64,
    /// GPS time of sample 0 \[s\].
    pub start_gps: f64,
    /// Number of samples.
    pub n_samples: u64,
    /// Channel's own lowest frequency from the bundle \[Hz\].
    pub fmin: Option<f64>,
    /// Channel's own highest frequency from the bundle \[Hz\].
    pub fmax: Option<f64>,
    /// Time covered by finite samples, `[start, end)` pairs \[GPS s\].
    pub valid: Vec<[f64; 2]>,
    /// Size of the sample file \[bytes\] (cheap change detection).
    pub file_size: u64,
    /// Modification time of the sample file \[Unix s\].
    pub mtime_unix: i64,
    /// Parameters resolved for this channel.
    pub params: ResolvedParams,
}

/// One channel's share of a shard.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ShardChannel {
    /// Index into [`Plan::channels`].
    pub channel: usize,
    /// Channel name (for reading the manifest).
    pub name: String,
    /// Time this shard owns for this channel \[GPS s\]: triggers with
    /// `t_peak` here belong to the shard. Keep spans of all shards partition
    /// the channel's usable time.
    pub keep: Vec<[f64; 2]>,
    /// Time to scan \[GPS s\]: keep widened by the padding plus one block
    /// step (`block_s - 2 pad_s`, so edge clusters are complete) ∩ usable
    /// time, only stretches long enough to analyse. Empty = nothing to scan.
    pub scan: Vec<[f64; 2]>,
}

/// One shard: a channel group over one time piece.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ShardSpec {
    /// Shard index K (Slurm array task id).
    pub index: usize,
    /// Nominal time piece \[GPS s\] (per-channel keep spans are snapped).
    pub span: [f64; 2],
    /// Channel group index.
    pub group: usize,
    /// Channels of this shard.
    pub channels: Vec<ShardChannel>,
}

/// The manifest `plan.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Plan {
    /// Layout version ([`PLAN_FORMAT`]).
    pub format: u32,
    /// Content hash of the plan (xxh3-128 of everything but `created_utc`).
    pub plan_id: String,
    /// Tool version that made the plan.
    pub tool_version: String,
    /// Creation time (UTC, ISO 8601).
    pub created_utc: String,
    /// Scan parameters as given.
    pub params: ScanParams,
    /// Analysis segments, if given \[GPS s\].
    pub segments: Option<Vec<[f64; 2]>>,
    /// Input channels.
    pub channels: Vec<PlanChannel>,
    /// Shards in index order.
    pub shards: Vec<ShardSpec>,
    /// Slurm resources.
    pub slurm: SlurmOptions,
}

/// What one shard run must do (from [`shard_job`]).
#[derive(Debug, Clone)]
pub struct ShardJob {
    /// Shard index.
    pub index: usize,
    /// Per channel: the channel, the segments to scan and the keep span.
    pub channels: Vec<ShardChannelJob>,
    /// The scan parameters.
    pub params: ScanParams,
    /// Plan id (provenance).
    pub plan_id: String,
}

/// One channel of a [`ShardJob`].
#[derive(Debug, Clone)]
pub struct ShardChannelJob {
    /// The channel as planned.
    pub channel: PlanChannel,
    /// Segments to pass to the scan \[GPS s\].
    pub scan: SegmentList,
    /// Time owned by the shard \[GPS s\].
    pub keep: SegmentList,
}

pub(crate) fn to_pairs(s: &SegmentList) -> Vec<[f64; 2]> {
    s.segments().iter().map(|g| [g.start, g.end]).collect()
}

pub(crate) fn from_pairs(p: &[[f64; 2]]) -> SegmentList {
    SegmentList::from_segments(p.iter().map(|x| Segment::new(x[0], x[1])).collect())
}

/// Survey the channels of `bundles` (reads every sample once for dropouts)
/// and write a plan to `out_dir` (see [`make_plan_from_channels`]); the
/// batch script runs `shard_command` for each shard.
///
/// # Errors
/// Unreadable bundles, segment files or sample files; bad options.
pub fn make_plan(
    bundles: &[PathBuf],
    opts: &PlanOptions,
    out_dir: &Path,
    shard_command: &ShardCommand,
) -> Result<Plan> {
    opts.check()?;
    let mut channels = Vec::new();
    for dir in bundles {
        let bundle = crate::io::Bundle::open(dir)?;
        // Absolute, so shards can run from any working directory.
        let dir = &std::fs::canonicalize(dir).unwrap_or_else(|_| dir.clone());
        for spec in &bundle.channels {
            let src = crate::io::ChannelSource::open(spec)?;
            let (valid, _) = src.survey()?;
            let meta = std::fs::metadata(&spec.file)
                .with_context(|| format!("{}: cannot stat", spec.file.display()))?;
            let mtime_unix = meta
                .modified()
                .ok()
                .and_then(|t| t.duration_since(std::time::UNIX_EPOCH).ok())
                .map_or(0, |d| d.as_secs() as i64);
            channels.push(plan_channel(
                dir,
                &spec.name,
                spec.role,
                spec.rate,
                spec.start,
                src.len() as u64,
                (spec.fmin, spec.fmax),
                &valid,
                (meta.len(), mtime_unix),
                &opts.params,
            )?);
        }
    }
    let segments = match &opts.segments {
        Some(p) => Some(crate::io::read_segments_file(p)?.0),
        None => None,
    };
    make_plan_from_channels(channels, segments.as_ref(), opts, out_dir, shard_command)
}

/// Build a [`PlanChannel`] (resolving the parameters for its rate).
///
/// # Errors
/// Parameters that do not resolve for this channel (named in the message).
#[allow(clippy::too_many_arguments)]
pub fn plan_channel(
    bundle: &Path,
    name: &str,
    role: Role,
    rate_hz: f64,
    start_gps: f64,
    n_samples: u64,
    limits: (Option<f64>, Option<f64>),
    valid: &SegmentList,
    file: (u64, i64),
    params: &ScanParams,
) -> Result<PlanChannel> {
    let fmin = crate::scan::channel_fmin(role, rate_hz, limits.0);
    let rp = resolve_params(params, rate_hz, fmin, limits.1)
        .with_context(|| format!("{}: channel {name}", bundle.display()))?;
    Ok(PlanChannel {
        bundle: bundle.to_path_buf(),
        name: name.to_string(),
        role,
        rate_hz,
        start_gps,
        n_samples,
        fmin: limits.0,
        fmax: limits.1,
        valid: to_pairs(valid),
        file_size: file.0,
        mtime_unix: file.1,
        params: rp,
    })
}

/// Nominal time-piece boundaries over `[t0, t1)`.
fn piece_bounds(t0: f64, t1: f64, opts: &PlanOptions) -> Vec<f64> {
    // Options are checked by `PlanOptions::check`.
    let n = match (opts.span_s, opts.shards) {
        (Some(s), _) => ((t1 - t0) / s).ceil().max(1.0) as usize,
        (None, Some(n)) => n.max(1),
        (None, None) => 1,
    };
    let width = opts.span_s.unwrap_or((t1 - t0) / n as f64);
    let mut b: Vec<f64> = (0..n).map(|i| t0 + i as f64 * width).collect();
    b.push(t1);
    b
}

/// Partition one channel's usable time into keep spans, one per time piece
/// (boundaries `bounds`, increasing), snapping interior edges to the
/// channel's block grid; returns `(keep, scan)` per piece.
pub fn channel_pieces(
    ch: &PlanChannel,
    usable: &SegmentList,
    bounds: &[f64],
) -> Vec<(SegmentList, SegmentList)> {
    let fs = ch.rate_hz;
    let t0 = ch.start_gps;
    let rp = &ch.params;
    let pad = (rp.pad_s * fs).round() as i64;
    let block_n = (rp.block_s * fs).round() as i64;
    let welch_n = (rp.welch_s * fs).round() as i64;
    let min_len = (4 * pad).max(2 * welch_n);
    let step = block_n - 2 * pad;
    let t_of = |i: i64| t0 + i as f64 / fs;
    let n_pieces = bounds.len() - 1;
    let mut keep: Vec<Vec<Segment>> = vec![Vec::new(); n_pieces];
    let mut scan: Vec<Vec<Segment>> = vec![Vec::new(); n_pieces];
    for seg in usable.segments() {
        // Same sample conversion as scan::scan_source.
        let a = ((seg.start - t0) * fs - 1e-6).ceil().max(0.0) as i64;
        let b = (((seg.end - t0) * fs + 1e-6).floor() as i64).min(ch.n_samples as i64);
        if b <= a {
            continue;
        }
        // Interior cuts at block keep boundaries a + pad + j·step, j = 1..=j_max,
        // where the rest [a + j·step, b) still holds a full block.
        let j_max = if b - a >= block_n && step > 0 {
            (b - a - block_n) / step
        } else {
            0
        };
        let (ta, tb) = (t_of(a), t_of(b));
        let snap = |t: f64| -> i64 {
            if t <= ta {
                a
            } else if t >= tb {
                b
            } else if j_max >= 1 {
                let j = (((t - ta) * fs - pad as f64) / step as f64).round() as i64;
                a + pad + j.clamp(1, j_max) * step
            } else if t < 0.5 * (ta + tb) {
                a
            } else {
                b
            }
        };
        let cuts: Vec<i64> = bounds.iter().map(|&t| snap(t)).collect();
        for p in 0..n_pieces {
            let (lo, hi) = (cuts[p], cuts[p + 1]);
            if hi <= lo {
                continue;
            }
            keep[p].push(Segment::new(t_of(lo), t_of(hi)));
            if b - a >= min_len {
                // A quarter sample outwards so the scan's ceil/floor recovers
                // exactly these sample indices.
                // Scan one block step beyond the padding on each side, so
                // clusters of tiles near an edge are complete in both shards
                // (the owner is then decided by t_peak alone). Still on the grid.
                let (s_lo, s_hi) = ((lo - pad - step).max(a), (hi + pad + step).min(b));
                scan[p].push(Segment::new(t_of(s_lo) - 0.25 / fs, t_of(s_hi) + 0.25 / fs));
            }
        }
    }
    keep.into_iter()
        .zip(scan)
        .map(|(k, s)| (SegmentList::from_segments(k), SegmentList::from_segments(s)))
        .collect()
}

/// Usable time of a channel: valid samples ∩ user segments.
pub fn usable_time(ch: &PlanChannel, segments: Option<&SegmentList>) -> SegmentList {
    let valid = from_pairs(&ch.valid);
    match segments {
        Some(s) => valid.intersection(s),
        None => valid,
    }
}

/// Lay out the shards for surveyed channels and write the work directory
/// (`plan.json`, `run-array.sh` running `shard_command` per shard,
/// `README.txt`, `shards/`, `logs/`, `status/`).
///
/// # Errors
/// No channels, bad options, or an unwritable `out_dir`.
pub fn make_plan_from_channels(
    channels: Vec<PlanChannel>,
    segments: Option<&SegmentList>,
    opts: &PlanOptions,
    out_dir: &Path,
    shard_command: &ShardCommand,
) -> Result<Plan> {
    opts.check()?;
    if channels.is_empty() {
        bail!("plan: no channels in the given bundles");
    }
    let usable: Vec<SegmentList> = channels.iter().map(|c| usable_time(c, segments)).collect();
    let all = usable
        .iter()
        .fold(SegmentList::new(), |acc, u| acc.union(u));
    let Some(extent) = all.extent() else {
        bail!("plan: no valid data inside the analysis segments");
    };
    let bounds = piece_bounds(extent.start, extent.end, opts);
    let n_pieces = bounds.len() - 1;
    let groups = opts.channel_groups.min(channels.len());
    let pieces: Vec<Vec<(SegmentList, SegmentList)>> = channels
        .iter()
        .zip(&usable)
        .map(|(c, u)| channel_pieces(c, u, &bounds))
        .collect();
    let mut shards = Vec::new();
    for p in 0..n_pieces {
        for g in 0..groups {
            let chans: Vec<ShardChannel> = (0..channels.len())
                .filter(|i| i % groups == g)
                .map(|i| ShardChannel {
                    channel: i,
                    name: channels[i].name.clone(),
                    keep: to_pairs(&pieces[i][p].0),
                    scan: to_pairs(&pieces[i][p].1),
                })
                .collect();
            shards.push(ShardSpec {
                index: shards.len(),
                span: [bounds[p], bounds[p + 1]],
                group: g,
                channels: chans,
            });
        }
    }
    let mut plan = Plan {
        format: PLAN_FORMAT,
        plan_id: String::new(),
        tool_version: TOOL_VERSION.to_string(),
        created_utc: String::new(),
        params: opts.params.clone(),
        segments: segments.map(to_pairs),
        channels,
        shards,
        slurm: opts.slurm.clone(),
    };
    let body = serde_json::to_vec(&plan)?;
    plan.plan_id = format!("{:032x}", xxhash_rust::xxh3::xxh3_128(&body));
    plan.created_utc = now_utc();
    write_plan_dir(&plan, out_dir, shard_command)?;
    Ok(plan)
}

fn write_plan_dir(plan: &Plan, out_dir: &Path, shard_command: &ShardCommand) -> Result<()> {
    slurm::check_batch_dir(&std::path::absolute(out_dir)?)?;
    for sub in ["", "shards", "logs", "status"] {
        let d = out_dir.join(sub);
        std::fs::create_dir_all(&d).with_context(|| format!("creating {}", d.display()))?;
    }
    let dir = std::fs::canonicalize(out_dir)?;
    slurm::check_batch_dir(&dir)?;
    let write = |name: &str, text: &str| -> Result<()> {
        let p = dir.join(name);
        std::fs::write(&p, text).with_context(|| format!("writing {}", p.display()))
    };
    write("plan.json", &serde_json::to_string_pretty(plan)?)?;
    write("run-array.sh", &slurm_script(plan, &dir, shard_command))?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::set_permissions(
            dir.join("run-array.sh"),
            std::fs::Permissions::from_mode(0o755),
        )?;
    }
    write("README.txt", &slurm::readme(plan, &dir))?;
    Ok(())
}

/// Read `DIR/plan.json`.
///
/// # Errors
/// A missing or malformed manifest (named with the JSON line and column).
pub fn load_plan(dir: &Path) -> Result<Plan> {
    let p = dir.join("plan.json");
    let text = std::fs::read_to_string(&p).with_context(|| format!("reading {}", p.display()))?;
    let plan: Plan =
        serde_json::from_str(&text).with_context(|| format!("{}: malformed plan", p.display()))?;
    if plan.format != PLAN_FORMAT {
        bail!(
            "{}: plan format {} is not supported (expected {PLAN_FORMAT})",
            p.display(),
            plan.format
        );
    }
    Ok(plan)
}

/// What shard `k` of the plan in `plan_dir` must scan.
///
/// # Errors
/// An unreadable plan or `k` out of range.
pub fn shard_job(plan_dir: &Path, k: usize) -> Result<ShardJob> {
    let plan = load_plan(plan_dir)?;
    shard_job_of(&plan, k).with_context(|| format!("{}", plan_dir.join("plan.json").display()))
}

/// [`shard_job`] for a loaded plan.
///
/// # Errors
/// `k` out of range.
pub fn shard_job_of(plan: &Plan, k: usize) -> Result<ShardJob> {
    let Some(shard) = plan.shards.get(k) else {
        bail!(
            "shard {k} does not exist (the plan has {} shards, 0..={})",
            plan.shards.len(),
            plan.shards.len().saturating_sub(1)
        );
    };
    Ok(ShardJob {
        index: k,
        channels: shard
            .channels
            .iter()
            .map(|c| ShardChannelJob {
                channel: plan.channels[c.channel].clone(),
                scan: from_pairs(&c.scan),
                keep: from_pairs(&c.keep),
            })
            .collect(),
        params: plan.params.clone(),
        plan_id: plan.plan_id.clone(),
    })
}
