//! Scanning one channel: split into valid stretches (analysis segments minus
//! NaN dropouts), condition and tile each stretch in overlapping blocks, and
//! cluster significant tiles into triggers.
use crate::clusters::{TileCluster, CLUSTER_SIGNIFICANCE, PIXEL_SIGNIFICANCE};
use crate::condition::{highpass_gain, tukey, whiten, Welch, WelchBuffers};
use crate::io::{ChannelSpec, NpyReader};
use crate::segments::{Segment, SegmentList};
use crate::tf::{ClusterSpec, QPlan, Tile, Tiling, Workspace};
use crate::trigger::{attach_clusters, cluster_tiles, energy_from_snr, refine_peaks, Trigger};
use crate::Error;
use anyhow::{anyhow, bail, Context, Result};
use realfft::num_complex::Complex;
use rustfft::FftPlanner;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;
use std::sync::{Arc, Mutex};

mod stream;
pub use stream::STREAM_CHUNK_SAMPLES;

/// Parameters of a scan as given by the user (None = derive per channel).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScanParams {
    /// SNR threshold of a significant tile (default 5.5).
    pub snr_threshold: f64,
    /// Lowest analysed frequency \[Hz\] (default: per channel).
    pub fmin: Option<f64>,
    /// Highest analysed frequency \[Hz\] (default: per channel).
    pub fmax: Option<f64>,
    /// Smallest Q (default 4).
    pub qmin: f64,
    /// Largest Q (default 64).
    pub qmax: f64,
    /// Maximum fractional energy mismatch between neighbouring tiles (default 0.2).
    pub mismatch: f64,
    /// Block length \[s\] (default: derived from the padding, at least 32 s).
    pub block_s: Option<f64>,
    /// Refine each trigger's peak time, frequency, Q and SNR between tiles,
    /// rows and planes ([`crate::tf::QPlan::refine`]; Q then stays within
    /// `qmin..=qmax`). Default true; false reports the loudest tile's
    /// values, on the tiling grid (README, "Trigger parameters").
    #[serde(default)]
    pub refine_peaks: bool,
    /// Cluster connected tiles of each plane and report their equivalent
    /// SNR; a cluster significant enough makes a trigger of its own (see
    /// [`crate::clusters`]). Default true; false for scans made before.
    #[serde(default)]
    pub clusters: bool,
}

impl Default for ScanParams {
    fn default() -> Self {
        ScanParams {
            snr_threshold: 5.5,
            fmin: None,
            fmax: None,
            qmin: 4.0,
            qmax: 64.0,
            mismatch: 0.2,
            block_s: None,
            refine_peaks: true,
            clusters: true,
        }
    }
}

impl ScanParams {
    /// Check the parameters as given (no I/O); [`resolve_params`] checks
    /// what depends on the channel (defaults, Nyquist, block length).
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] naming the field: a threshold, frequency
    /// limit or block length that is not a positive finite number, `fmin ≥
    /// fmax`, `qmin` below 2 (common practice: below Q ≈ 2 a bisquare tile no
    /// longer has a meaningful frequency extent), `qmax < qmin`, or a
    /// mismatch outside (0, 1).
    pub fn check(&self) -> crate::Result<()> {
        let positive = |field: &str, x: f64| {
            if x.is_finite() && x > 0.0 {
                Ok(())
            } else {
                Err(Error::invalid(
                    field,
                    format!("must be a positive number, got {x}"),
                ))
            }
        };
        positive("snr_threshold", self.snr_threshold)?;
        if let Some(f) = self.fmin {
            positive("fmin", f)?;
        }
        if let Some(f) = self.fmax {
            positive("fmax", f)?;
        }
        if let (Some(lo), Some(hi)) = (self.fmin, self.fmax) {
            if lo >= hi {
                return Err(Error::invalid(
                    "fmin",
                    format!("({lo} Hz) must be below {{fmax}} ({hi} Hz)"),
                ));
            }
        }
        if !(self.qmin.is_finite() && self.qmin >= 2.0) {
            return Err(Error::invalid(
                "qmin",
                format!("must be at least 2, got {}", self.qmin),
            ));
        }
        if !(self.qmax.is_finite() && self.qmax >= self.qmin) {
            return Err(Error::invalid(
                "qmax",
                format!("({}) must be at least {{qmin}} ({})", self.qmax, self.qmin),
            ));
        }
        if !(self.mismatch > 0.0 && self.mismatch < 1.0) {
            return Err(Error::invalid(
                "mismatch",
                format!("must be between 0 and 1, got {}", self.mismatch),
            ));
        }
        if let Some(b) = self.block_s {
            positive("block_s", b)?;
        }
        Ok(())
    }
}

/// Parameters resolved for one channel (what was actually run).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ResolvedParams {
    /// SNR threshold.
    pub snr_threshold: f64,
    /// Lowest analysed frequency \[Hz\].
    pub fmin: f64,
    /// Highest analysed frequency \[Hz\].
    pub fmax: f64,
    /// Smallest Q.
    pub qmin: f64,
    /// Largest Q.
    pub qmax: f64,
    /// Maximum mismatch.
    pub mismatch: f64,
    /// Block length \[s\].
    pub block_s: f64,
    /// Padding discarded at each block edge \[s\].
    pub pad_s: f64,
    /// Welch segment length of the PSD estimate \[s\].
    pub welch_s: f64,
    /// Peaks refined between tiles, rows and planes (see
    /// [`ScanParams::refine_peaks`]; false for scans made before).
    #[serde(default)]
    pub refine_peaks: bool,
    /// Tiles clustered (see [`ScanParams::clusters`]; false for scans
    /// made before).
    #[serde(default)]
    pub clusters: bool,
}

/// The result of scanning one channel.
#[derive(Debug, Clone)]
pub struct ChannelScan {
    /// The channel scanned.
    pub channel: ChannelSpec,
    /// Parameters used.
    pub params: ResolvedParams,
    /// Time actually searched (segments ∩ valid data, minus block padding).
    pub analysed: SegmentList,
    /// Triggers sorted by `t_peak`.
    pub triggers: Vec<Trigger>,
    /// Hex checksum of the channel's samples (xxh3-128).
    pub input_checksum: String,
}

/// Where a scan reads samples from: a `.npy` file or memory.
pub trait SampleSource: Sync {
    /// Sample rate \[Hz\].
    fn rate_hz(&self) -> f64;
    /// GPS time of sample 0 \[s\].
    fn start_gps(&self) -> f64;
    /// Number of samples.
    fn len(&self) -> usize;
    /// Whether there are no samples.
    fn is_empty(&self) -> bool {
        self.len() == 0
    }
    /// Read samples `[start, start + out.len())`.
    fn read(&self, start: usize, out: &mut [f64]) -> Result<()>;
    /// A name for messages (file path or channel).
    fn describe(&self) -> String;

    /// Stream the samples once: the time covered by finite samples (NaN and
    /// ±Inf are dropouts; sample i covers `[t0 + i/fs, t0 + (i+1)/fs)`) and
    /// an xxh3-128 checksum of the samples (as little-endian f64).
    ///
    /// Chunks of [`crate::io::npy::STRETCH_CHUNK_SAMPLES`] are read two at
    /// a time, in parallel when the thread pool has a second thread (a
    /// compressed frame file then decodes on two cores; memory: two
    /// chunks), and checked and hashed in order.
    fn survey(&self) -> Result<(SegmentList, String)> {
        self.survey_with(true)
    }

    /// [`SampleSource::survey`], reading the two chunks one after the other
    /// when `parallel` is false: for callers inside a once-only
    /// initialiser, where a worker waiting in `rayon::join` could steal a
    /// task that waits for the very initialiser it is running (a deadlock
    /// on pools of more than two threads).
    fn survey_with(&self, parallel: bool) -> Result<(SegmentList, String)> {
        let (fs, t0, len) = (self.rate_hz(), self.start_gps(), self.len());
        let mut hasher = xxhash_rust::xxh3::Xxh3::new();
        let mut bytes: Vec<u8> = Vec::new();
        let mut runs = crate::io::npy::FiniteRuns::default();
        let chunk = crate::io::npy::STRETCH_CHUNK_SAMPLES.min(len).max(1);
        let (mut buf_a, mut buf_b) = (vec![0.0; chunk], Vec::new());
        let mut first = 0;
        while first < len {
            let na = chunk.min(len - first);
            let nb = chunk.min(len - first - na);
            buf_b.resize(nb, 0.0);
            let (a, b) = (&mut buf_a[..na], &mut buf_b[..nb]);
            let read_b = |b: &mut [f64]| match b.len() {
                0 => Ok(()),
                _ => self.read(first + na, b),
            };
            let (ra, rb) = if parallel {
                rayon::join(|| self.read(first, a), || read_b(b))
            } else {
                (self.read(first, a), read_b(b))
            };
            ra?;
            rb?;
            for (at, c) in [(first, &*a), (first + na, &*b)] {
                hash_samples(&mut hasher, &mut bytes, c);
                runs.feed(at, c);
            }
            first += na + nb;
        }
        let segs = runs
            .finish(len)
            .iter()
            .map(|&(a, b)| Segment::new(t0 + a as f64 / fs, t0 + b as f64 / fs))
            .collect();
        Ok((
            SegmentList::from_segments(segs),
            format!("{:032x}", hasher.digest128()),
        ))
    }
}

/// Add samples to an input checksum, as little-endian f64 (`bytes` is
/// scratch space).
fn hash_samples(hasher: &mut xxhash_rust::xxh3::Xxh3, bytes: &mut Vec<u8>, samples: &[f64]) {
    bytes.resize(8 * samples.len(), 0);
    for (o, x) in bytes.chunks_exact_mut(8).zip(samples) {
        o.copy_from_slice(&x.to_le_bytes());
    }
    hasher.update(bytes);
}

/// Samples held in memory (tests, examples, generated data).
pub struct InMemory {
    /// Samples.
    pub data: Vec<f64>,
    /// Sample rate \[Hz\].
    pub rate_hz: f64,
    /// GPS time of sample 0 \[s\].
    pub start_gps: f64,
}

impl SampleSource for InMemory {
    fn rate_hz(&self) -> f64 {
        self.rate_hz
    }
    fn start_gps(&self) -> f64 {
        self.start_gps
    }
    fn len(&self) -> usize {
        self.data.len()
    }
    fn read(&self, start: usize, out: &mut [f64]) -> Result<()> {
        let src = self
            .data
            .get(start..start + out.len())
            .ok_or_else(|| anyhow!("read past the end of the in-memory series"))?;
        out.copy_from_slice(src);
        Ok(())
    }
    fn describe(&self) -> String {
        "in-memory series".into()
    }
}

/// Default lowest analysed frequency \[Hz\] for a sample rate: 16 Hz for
/// rates ≥ 256 Hz (common practice for strain), else `rate / 16`.
pub fn default_fmin(rate_hz: f64) -> f64 {
    if rate_hz >= 256.0 {
        16.0
    } else {
        rate_hz / 16.0
    }
}

/// Default lowest analysed frequency of an aux channel \[Hz\]: `rate / 256`,
/// at least 1 Hz and at most the strain's 16 Hz — a 256 Hz ground-motion
/// sensor is searched from 1 Hz, a 1024 Hz one from 4 Hz, one of 4096 Hz or
/// faster from 16 Hz as strain is (slow channels keep [`default_fmin`]'s
/// rate/16 when that is lower). Sensors
/// witness through their own band, often far below the strain's 16 Hz (a
/// seismometer's burst at a few hertz beside an arch at tens of hertz);
/// the floor keeps the Welch segment (16/fmin s) and padding of a few tens
/// of seconds. Common practice is to search each sensor in its own band;
/// the numbers are ours.
pub fn default_aux_fmin(rate_hz: f64) -> f64 {
    (rate_hz / 256.0)
        .clamp(1.0, 16.0)
        .min(default_fmin(rate_hz))
}

/// The lowest frequency a channel brings to [`resolve_params`]: its
/// bundle's `fmin` when given, else for an aux channel
/// [`default_aux_fmin`] (a target channel takes [`default_fmin`] there).
/// A `--fmin` on the command line overrides both.
pub fn channel_fmin(role: crate::io::Role, rate_hz: f64, bundle_fmin: Option<f64>) -> Option<f64> {
    match role {
        crate::io::Role::Aux => bundle_fmin.or(Some(default_aux_fmin(rate_hz))),
        crate::io::Role::Target => bundle_fmin,
    }
}

/// Default highest analysed frequency \[Hz\]: half the Nyquist frequency, a
/// safe margin for the widest (lowest-Q) windows.
pub fn default_fmax(rate_hz: f64) -> f64 {
    rate_hz / 4.0
}

/// Resolve and validate the parameters for a channel. Frequency limits come
/// from the command line, else the channel's `fmin`/`fmax` in the bundle,
/// else the defaults for its rate.
///
/// # Errors
/// [`Error::InvalidParameter`] naming the field: anything
/// [`ScanParams::check`] refuses; resolved frequency limits that are not
/// positive, `fmin ≥ fmax`, `fmax` above Nyquist; a block shorter than 4 ×
/// the padding.
pub fn resolve_params(
    params: &ScanParams,
    rate_hz: f64,
    chan_fmin: Option<f64>,
    chan_fmax: Option<f64>,
) -> crate::Result<ResolvedParams> {
    let p = params;
    p.check()?;
    let fmin = p
        .fmin
        .or(chan_fmin)
        .unwrap_or_else(|| default_fmin(rate_hz));
    let fmax = p
        .fmax
        .or(chan_fmax)
        .unwrap_or_else(|| default_fmax(rate_hz));
    for (field, v) in [("fmin", fmin), ("fmax", fmax)] {
        if !(v.is_finite() && v > 0.0) {
            return Err(Error::invalid(
                field,
                format!("must be a positive number (got {v})"),
            ));
        }
    }
    if fmin >= fmax {
        return Err(Error::invalid(
            "fmin",
            format!("({fmin} Hz) must be below {{fmax}} ({fmax} Hz)"),
        ));
    }
    if fmax > rate_hz / 2.0 {
        return Err(Error::invalid(
            "fmax",
            format!(
                "({fmax} Hz) is above the Nyquist frequency ({} Hz)",
                rate_hz / 2.0
            ),
        ));
    }
    // Welch segments resolve fmin with a few bins: 16/fmin s, at least 1 s.
    let welch_s = (16.0 / fmin).max(1.0).log2().ceil().exp2().min(64.0);
    let q_top = *crate::tf::q_planes(p.qmin, p.qmax, p.mismatch)
        .last()
        .expect("≥ 1 plane");
    // The whitening filter spans about one Welch segment; the longest tile
    // reaches ±3σ_t. Padding covers both so block edges make no triggers.
    let pad_s = (0.5 * welch_s + 3.0 * crate::tf::sigma_t(q_top, fmin)).ceil();
    let block_s = p.block_s.unwrap_or((8.0 * pad_s).max(32.0));
    if !(block_s.is_finite() && block_s >= 4.0 * pad_s) {
        return Err(Error::invalid(
            "block_s",
            format!("({block_s} s) must be at least 4 × the padding ({pad_s} s)"),
        ));
    }
    let tiles = tiles_per_block_estimate(p.qmin, p.qmax, p.mismatch, fmin, fmax, rate_hz, block_s);
    if tiles > MAX_TILES_PER_BLOCK as f64 {
        return Err(Error::invalid(
            "mismatch",
            format!(
                "({}) with Q {}–{}, {fmin}–{fmax} Hz and {block_s} s blocks makes about {:.1e} \
                 tiles per block; at most {MAX_TILES_PER_BLOCK} are allowed (raise the \
                 mismatch, narrow the Q or frequency range, or shorten the blocks)",
                p.mismatch, p.qmin, p.qmax, tiles
            ),
        ));
    }
    Ok(ResolvedParams {
        snr_threshold: p.snr_threshold,
        fmin,
        fmax,
        qmin: p.qmin,
        qmax: p.qmax,
        mismatch: p.mismatch,
        block_s,
        pad_s,
        welch_s,
        refine_peaks: p.refine_peaks,
        clusters: p.clusters,
    })
}

/// The most tiles one block may hold (all planes and rows): 2³⁰, about
/// 170× the default tiling of a 16384 Hz channel (6.3e6 tiles in its 64-s
/// blocks), so only parameters that imply absurd work are refused, before
/// any is done (a mismatch of 1e-4 makes ~5e11; the work grows as
/// mismatch^-1.5).
pub const MAX_TILES_PER_BLOCK: u64 = 1 << 30;

/// Tiles per block of the tiling these parameters make, counted from the
/// plane and row layout without planning FFTs (a row at `f` of quality `q`
/// has about `block_s / dτ` tiles, `dτ = step Q / (2π f)`; the plan rounds
/// each up to a power of two, so this is within a factor 2 of
/// [`crate::tf::QPlan::tiles_per_block`]).
pub fn tiles_per_block_estimate(
    qmin: f64,
    qmax: f64,
    mismatch: f64,
    fmin: f64,
    fmax: f64,
    rate_hz: f64,
    block_s: f64,
) -> f64 {
    let step = crate::tf::mismatch_step(mismatch);
    let mut total = 0.0;
    for q in crate::tf::q_planes(qmin, qmax, mismatch) {
        let top = fmax.min(crate::tf::plane_fmax_limit(q, rate_hz));
        let n_rows = ((top / fmin).ln() * (2.0 + q * q).sqrt() / 2.0 / step).ceil();
        if n_rows.is_nan() || n_rows < 1.0 {
            continue;
        }
        // Σ_rows f over log-spaced rows = n × mean f (exact for the layout
        // of `row_freqs`, up to the half-step offset).
        let mean_f = (top - fmin) / (top / fmin).ln();
        total += block_s * 2.0 * std::f64::consts::PI * n_rows * mean_f / (step * q);
        if total > 1e15 {
            break;
        }
    }
    total
}

/// A block to process: samples `[i0, i0 + n)`, keeping tiles whose centres
/// lie in `[keep_lo, keep_hi)` (sample indices).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
struct Block {
    i0: usize,
    n: usize,
    keep_lo: usize,
    keep_hi: usize,
}

/// Lay blocks over a stretch `[a, b)` (sample indices): blocks of `n`
/// samples overlapping by `2 pad`; the last block is aligned to the end and
/// keeps only what the previous one did not. A stretch shorter than a block
/// is one block of its own length.
fn lay_blocks(a: usize, b: usize, n: usize, pad: usize) -> Vec<Block> {
    let len = b - a;
    if len <= n {
        return vec![Block {
            i0: a,
            n: len,
            keep_lo: a + pad,
            keep_hi: b - pad,
        }];
    }
    let step = n - 2 * pad;
    let mut out = Vec::new();
    let mut s = a;
    loop {
        if s + n >= b {
            let start = b - n;
            let keep_lo = out.last().map_or(start + pad, |p: &Block| p.keep_hi);
            out.push(Block {
                i0: start,
                n,
                keep_lo,
                keep_hi: b - pad,
            });
            break;
        }
        out.push(Block {
            i0: s,
            n,
            keep_lo: s + pad,
            keep_hi: s + n - pad,
        });
        s += step;
    }
    out
}

/// Scan one channel.
///
/// `segments` restricts the search to analysis segments (None = all valid
/// data). The samples are read once, in order: the reader finds the
/// dropouts and the checksum as [`SampleSource::survey`] does and hands
/// each block to the thread pool as soon as its place is certain, so a
/// compressed file is decoded once and memory stays bounded by the block
/// length (see the `stream` module). `progress` is called with the
/// fraction of the series up to the furthest block done, and 1 at the end.
///
/// # Errors
/// Unreadable data, bad parameters, or no stretch of valid data long enough
/// for one block.
pub fn scan_source(
    src: &dyn SampleSource,
    params: &ScanParams,
    chan_limits: (Option<f64>, Option<f64>),
    segments: Option<&SegmentList>,
    progress: &(dyn Fn(f64) + Sync),
) -> Result<(ResolvedParams, SegmentList, Vec<Trigger>, String)> {
    let fs = src.rate_hz();
    let t0 = src.start_gps();
    let rp = resolve_params(params, fs, chan_limits.0, chan_limits.1)?;
    let pad = (rp.pad_s * fs).round() as usize;
    let block_n = (rp.block_s * fs).round() as usize;
    let welch_n = (rp.welch_s * fs).round() as usize;
    let grid = stream::Grid {
        t0,
        fs,
        block_n,
        pad,
        min_len: (4 * pad).max(2 * welch_n),
    };
    let tiling = Tiling {
        fmin: rp.fmin,
        fmax: rp.fmax,
        qmin: rp.qmin,
        qmax: rp.qmax,
        mismatch: rp.mismatch,
    };
    let highpass = (0.5 * rp.fmin, 0.9 * rp.fmin);
    // Plans by block length, made when a block of that length first comes;
    // buffers for one worker each, reused block after block.
    type Planned = Arc<(QPlan, Conditioner)>;
    let plans: Mutex<(FftPlanner<f32>, HashMap<usize, Planned>)> =
        Mutex::new((FftPlanner::new(), HashMap::new()));
    let plan_for = |n: usize| -> Result<Planned> {
        let mut guard = plans.lock().expect("plan lock");
        let (planner, made) = &mut *guard;
        if let Some(p) = made.get(&n) {
            return Ok(p.clone());
        }
        let plan = QPlan::new(fs, n, &tiling, highpass, planner)?;
        let top = plan.top_hz();
        let conditioner = Conditioner::new(n, fs, pad, welch_n, highpass)?.with_top(top);
        let p = Arc::new((plan, conditioner));
        made.insert(n, p.clone());
        Ok(p)
    };
    type Buffers = HashMap<usize, (Workspace, CondBuffers)>;
    let spare_buffers: Mutex<Vec<Buffers>> = Mutex::default();
    let z_thr = energy_from_snr(rp.snr_threshold);
    let work = |b: &Block, x: &[f64]| -> Result<(Vec<Tile>, Vec<TileCluster>)> {
        let planned = plan_for(b.n)?;
        let (plan, conditioner) = &*planned;
        let mut buffers = spare_buffers
            .lock()
            .expect("buffer lock")
            .pop()
            .unwrap_or_default();
        let (ws, cb) = buffers
            .entry(b.n)
            .or_insert_with(|| (plan.workspace(), conditioner.buffers()));
        let keep = (t0 + b.keep_lo as f64 / fs, t0 + b.keep_hi as f64 / fs);
        let (mut tiles, mut clusters) = (Vec::new(), Vec::new());
        conditioner.whiten_samples(x, fs, cb)?;
        let t0_block = t0 + b.i0 as f64 / fs;
        if rp.clusters {
            // Clusters may grow into the untapered half of the padding.
            let spec = ClusterSpec {
                pixel_s: PIXEL_SIGNIFICANCE,
                min_significance: CLUSTER_SIGNIFICANCE,
                grow: (
                    t0 + (b.i0 + pad / 2) as f64 / fs,
                    t0 + (b.i0 + b.n - pad / 2) as f64 / fs,
                ),
            };
            plan.transform_clustered(
                &cb.whitened,
                t0_block,
                keep,
                z_thr,
                spec,
                ws,
                &mut tiles,
                &mut clusters,
            );
        } else {
            plan.transform(&cb.whitened, t0_block, keep, z_thr, ws, &mut tiles);
        }
        // Locate the candidate peaks between tiles, rows and planes
        // while this block's whitened data are at hand.
        let tiles = if rp.refine_peaks {
            refine_peaks(tiles, |tile, q_hat| {
                plan.refine(&cb.whitened, t0_block, ws, tile, q_hat)
            })
        } else {
            tiles
        };
        spare_buffers.lock().expect("buffer lock").push(buffers);
        Ok((tiles, clusters))
    };
    let streamed = stream::stream_blocks(src, &grid, segments, &work, progress)?;
    if !streamed.any_finite {
        bail!("{}: no finite samples (all NaN or Inf)", src.describe());
    }
    if streamed.blocks.is_empty() {
        bail!(
            "{}: no stretch of valid, in-segment data is long enough to analyse \
             (need {:.1} s for the padding and PSD at fmin = {} Hz; longest is {:.1} s)",
            src.describe(),
            grid.min_len as f64 / fs,
            rp.fmin,
            streamed.longest
        );
    }
    let checksum = streamed.checksum;
    let (mut tiles, mut clusters) = (Vec::new(), Vec::new());
    let mut blocks = Vec::with_capacity(streamed.blocks.len());
    for (b, (t, c)) in streamed.blocks {
        blocks.push(b);
        tiles.extend(t);
        clusters.extend(c);
    }
    let analysed: SegmentList = blocks
        .iter()
        .map(|b| Segment::new(t0 + b.keep_lo as f64 / fs, t0 + b.keep_hi as f64 / fs))
        .collect();
    // Refined peaks already keep Q within the searched range; the
    // between-plane estimate of grid peaks can leave it, so it is held at
    // the edge it passed (a Q equal to qmin or qmax reads "at or beyond").
    let mut triggers = cluster_tiles(tiles);
    for t in &mut triggers {
        t.q = t.q.clamp(rp.qmin, rp.qmax);
    }
    attach_clusters(&mut triggers, clusters, CLUSTER_SIGNIFICANCE);
    Ok((rp, analysed, triggers, checksum))
}

/// Conditioning of blocks of one length: Welch estimator, taper, high-pass
/// gains and FFT plan made once and shared by all workers.
pub struct Conditioner {
    n: usize,
    welch: Welch,
    taper: Vec<f64>,
    taper_ms: f64,
    fft: Arc<dyn realfft::RealToComplex<f64>>,
    /// High-pass gain of each block bin.
    hp_gain: Vec<f64>,
    /// Highest frequency whitened \[Hz\] (bins above are left at 0).
    f_top_hz: f64,
}

/// Per-worker buffers of a [`Conditioner`]: nothing is allocated per block.
pub struct CondBuffers {
    x: Vec<f64>,
    spec: Vec<Complex<f64>>,
    scratch: Vec<Complex<f64>>,
    welch: WelchBuffers,
    inv_amp: Vec<f64>,
    /// The last whitened block (`n/2 + 1` bins).
    pub whitened: Vec<Complex<f32>>,
}

impl CondBuffers {
    /// First sample of the last block whitened with
    /// [`Conditioner::whiten_block_reusing`] (None after any other use).
    pub fn reuse_origin(&self) -> Option<usize> {
        self.welch.rows_at().map(|r| r.0)
    }
}

impl Conditioner {
    /// Plan for blocks of `n` samples at `fs_hz` with `pad` samples of
    /// padding (half of it tapered), Welch segments of `welch_n` samples (50%
    /// overlap) and the high-pass `(stop, pass)` edges \[Hz\].
    ///
    /// # Errors
    /// A Welch segment shorter than 2 samples.
    pub fn new(
        n: usize,
        fs_hz: f64,
        pad: usize,
        welch_n: usize,
        highpass: (f64, f64),
    ) -> Result<Conditioner> {
        let taper = tukey(n, pad / 2);
        let taper_ms = taper.iter().map(|w| w * w).sum::<f64>() / n as f64;
        let df = fs_hz / n as f64;
        Ok(Conditioner {
            n,
            welch: Welch::new(welch_n, welch_n / 2)?,
            taper,
            taper_ms,
            fft: realfft::RealFftPlanner::<f64>::new().plan_fft_forward(n),
            hp_gain: (0..n / 2 + 1)
                .map(|k| highpass_gain(k as f64 * df, highpass.0, highpass.1))
                .collect(),
            f_top_hz: f64::INFINITY,
        })
    }

    /// Whiten only up to `f_top_hz` (the highest frequency any row of the
    /// plan reads): the PSD medians and whitening above are skipped and
    /// those bins left at 0.
    pub fn with_top(mut self, f_top_hz: f64) -> Conditioner {
        self.f_top_hz = f_top_hz;
        self
    }

    /// Buffers for one worker.
    pub fn buffers(&self) -> CondBuffers {
        CondBuffers {
            x: vec![0.0; self.n],
            spec: self.fft.make_output_vec(),
            scratch: self.fft.make_scratch_vec(),
            welch: self.welch.buffers(),
            inv_amp: Vec::new(),
            whitened: vec![Complex::new(0.0, 0.0); self.n / 2 + 1],
        }
    }

    /// Read a block from sample `i0`, estimate its PSD (Welch, median), taper
    /// the padding, FFT and whiten with the high-pass. Returns `n/2 + 1`
    /// whitened bins.
    ///
    /// # Errors
    /// Read errors of the source.
    pub fn whiten_block(&self, src: &dyn SampleSource, i0: usize) -> Result<Vec<Complex<f32>>> {
        let mut b = self.buffers();
        self.whiten_block_with(src, i0, &mut b)?;
        Ok(b.whitened)
    }

    /// As [`Conditioner::whiten_block`], into `b.whitened`.
    ///
    /// # Errors
    /// Read errors of the source.
    pub fn whiten_block_with(
        &self,
        src: &dyn SampleSource,
        i0: usize,
        b: &mut CondBuffers,
    ) -> Result<()> {
        self.whiten_block_from(src, i0, None, b)
    }

    /// As [`Conditioner::whiten_block_with`], keeping the Welch segments
    /// this block shares with the previous one whitened with `b` (see
    /// [`crate::condition::Welch::estimate_band_at`]): the same result, bit
    /// for bit. The caller must use `b` with one source only.
    ///
    /// # Errors
    /// Read errors of the source.
    pub fn whiten_block_reusing(
        &self,
        src: &dyn SampleSource,
        i0: usize,
        b: &mut CondBuffers,
    ) -> Result<()> {
        self.whiten_block_from(src, i0, Some(i0), b)
    }

    /// As [`Conditioner::whiten_block_with`], from the block's `n`
    /// samples, taken at `fs_hz`, instead of a source.
    ///
    /// # Errors
    /// A number of samples other than the block length.
    pub fn whiten_samples(&self, samples: &[f64], fs_hz: f64, b: &mut CondBuffers) -> Result<()> {
        if samples.len() != self.n {
            bail!(
                "{} samples given to whiten a block of {}",
                samples.len(),
                self.n
            );
        }
        b.x.copy_from_slice(samples);
        self.whiten_x(fs_hz, None, b)
    }

    fn whiten_block_from(
        &self,
        src: &dyn SampleSource,
        i0: usize,
        origin: Option<usize>,
        b: &mut CondBuffers,
    ) -> Result<()> {
        src.read(i0, &mut b.x)?;
        self.whiten_x(src.rate_hz(), origin, b)
    }

    /// Whiten the block in `b.x` (see [`Conditioner::whiten_block`]).
    fn whiten_x(&self, fs: f64, origin: Option<usize>, b: &mut CondBuffers) -> Result<()> {
        let n = self.n;
        let df_psd = self
            .welch
            .estimate_band_at(&b.x, origin, fs, self.f_top_hz, &mut b.welch)?;
        let mean = crate::condition::sum(&b.x) / n as f64;
        for (v, w) in b.x.iter_mut().zip(&self.taper) {
            *v = (*v - mean) * w;
        }
        self.fft
            .process_with_scratch(&mut b.x, &mut b.spec, &mut b.scratch)
            .map_err(|e| anyhow!("FFT: {e}"))?;
        // Bins above the top are not read by the plan: leave them at 0.
        let top = if self.f_top_hz.is_finite() {
            ((self.f_top_hz * n as f64 / fs).ceil() as usize + 1).min(n / 2 + 1)
        } else {
            n / 2 + 1
        };
        whiten(
            &b.spec[..top],
            n,
            fs,
            self.taper_ms,
            df_psd,
            &b.welch.density,
            &self.hp_gain[..top],
            &mut b.inv_amp,
            &mut b.whitened[..top],
        );
        b.whitened[top..].fill(Complex::new(0.0, 0.0));
        Ok(())
    }
}

/// Read and whiten one block (see [`Conditioner::whiten_block`]); plans
/// afresh, so loops should build a [`Conditioner`] once instead.
///
/// # Errors
/// Read errors of the source.
pub fn read_and_whiten(
    src: &dyn SampleSource,
    i0: usize,
    n: usize,
    pad: usize,
    welch_n: usize,
    highpass: (f64, f64),
) -> Result<Vec<Complex<f32>>> {
    Conditioner::new(n, src.rate_hz(), pad, welch_n, highpass)?.whiten_block(src, i0)
}

/// A bundle channel's `.npy` file as a [`SampleSource`].
pub struct NpyChannel {
    reader: NpyReader,
    rate_hz: f64,
    start_gps: f64,
}

impl NpyChannel {
    /// Open the channel's file (header checked, nothing else read).
    ///
    /// # Errors
    /// As [`NpyReader::open`].
    pub fn open(spec: &ChannelSpec) -> Result<NpyChannel> {
        Ok(NpyChannel {
            reader: NpyReader::open(&spec.file)?,
            rate_hz: spec.rate,
            start_gps: spec.start,
        })
    }
}

impl SampleSource for NpyChannel {
    fn rate_hz(&self) -> f64 {
        self.rate_hz
    }
    fn start_gps(&self) -> f64 {
        self.start_gps
    }
    fn len(&self) -> usize {
        self.reader.len
    }
    fn read(&self, start: usize, out: &mut [f64]) -> Result<()> {
        self.reader.read_f64(start, out)
    }
    fn describe(&self) -> String {
        self.reader.path().display().to_string()
    }
}

/// Scan one channel of a bundle (see [`scan_source`]); the file is read in
/// blocks, never whole.
///
/// # Errors
/// As [`scan_source`], plus unreadable `.npy` files; messages name the
/// channel.
pub fn scan_channel(
    spec: &ChannelSpec,
    params: &ScanParams,
    segments: Option<&SegmentList>,
    progress: &(dyn Fn(f64) + Sync),
) -> Result<ChannelScan> {
    let src = crate::io::ChannelSource::open(spec)?;
    let fmin = channel_fmin(spec.role, src.rate_hz(), spec.fmin);
    let (params, analysed, triggers, input_checksum) =
        scan_source(&src, params, (fmin, spec.fmax), segments, progress)
            .with_context(|| format!("channel {}", spec.name))?;
    Ok(ChannelScan {
        channel: spec.clone(),
        params,
        analysed,
        triggers,
        input_checksum,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn aux_channels_are_searched_in_their_own_band() {
        // rate/256 between 1 Hz and the strain's 16 Hz (a fast sensor is not
        // searched from above the strain band), never above rate/16.
        use crate::io::Role;
        for (rate, want) in [
            (256.0, 1.0),
            (512.0, 2.0),
            (1024.0, 4.0),
            (4096.0, 16.0),
            (16384.0, 16.0),
            (8.0, 0.5),
        ] {
            assert_eq!(channel_fmin(Role::Aux, rate, None), Some(want), "{rate} Hz");
        }
        assert_eq!(channel_fmin(Role::Aux, 256.0, Some(4.0)), Some(4.0));
        assert_eq!(channel_fmin(Role::Target, 256.0, None), None);
    }

    /// The tile-count estimate behind [`MAX_TILES_PER_BLOCK`] follows the
    /// planned tiling within its stated factor 2, and the defaults are far
    /// below the cap at every common rate.
    #[test]
    fn tile_estimate_tracks_the_plan() {
        for (fs, mismatch, qmax) in [
            (4096.0, 0.2, 64.0),
            (1024.0, 0.05, 100.0),
            (256.0, 0.2, 64.0),
        ] {
            let p = ScanParams {
                mismatch,
                qmax,
                ..ScanParams::default()
            };
            let r = resolve_params(&p, fs, None, None).unwrap();
            let n = (r.block_s * fs) as usize;
            let tiling = crate::tf::Tiling {
                fmin: r.fmin,
                fmax: r.fmax,
                qmin: r.qmin,
                qmax: r.qmax,
                mismatch: r.mismatch,
            };
            let mut planner = rustfft::FftPlanner::new();
            let plan = crate::tf::QPlan::new(fs, n, &tiling, (0.0, 0.0), &mut planner).unwrap();
            let planned = plan.tiles_per_block() as f64;
            let est =
                tiles_per_block_estimate(r.qmin, r.qmax, r.mismatch, r.fmin, r.fmax, fs, r.block_s);
            assert!(
                est <= planned * 1.05 && est >= planned / 2.5,
                "{fs} Hz: estimate {est} vs planned {planned}"
            );
        }
        let d = ScanParams::default();
        let r = resolve_params(&d, 16384.0, None, None).unwrap();
        let est = tiles_per_block_estimate(
            r.qmin, r.qmax, r.mismatch, r.fmin, r.fmax, 16384.0, r.block_s,
        );
        assert!(est * 100.0 < MAX_TILES_PER_BLOCK as f64, "default: {est}");
        // Mismatch 0.02 (10× finer than the default) still runs.
        let fine = ScanParams {
            mismatch: 0.02,
            ..ScanParams::default()
        };
        resolve_params(&fine, 16384.0, None, None).unwrap();
        // The case: --mismatch 0.0001 is refused, naming the flag's field.
        let tiny = ScanParams {
            mismatch: 1e-4,
            ..ScanParams::default()
        };
        let e = resolve_params(&tiny, 4096.0, None, None).unwrap_err();
        assert!(
            matches!(&e, Error::InvalidParameter { field, .. } if field == "mismatch"),
            "{e}"
        );
    }
}
