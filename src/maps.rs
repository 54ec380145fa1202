//! Normalised-energy maps around a time, from the raw data the catalogue's
//! scans were made from: the [`EnergyMapSource`] behind fingerprints and
//! spectrogram images.
//!
//! A map uses the scan's conditioning (Welch median PSD of a block around
//! the time, whitening, high-pass) and its bisquare rows, at one Q on a
//! caller's frequency grid:
//! 1. The block holding the time is whitened once and kept, as a time
//!    series, in a cache: many triggers in one block cost one whitening.
//!    The series has unit spectral level in band, so the FFT of `m` of its
//!    samples under a taper `u` has `E|Y_k|² = Σ u²` per in-band bin.
//! 2. Per map, a short window around the time (the longest span, plus three
//!    tile durations at the lowest row and a taper each side, rounded up to
//!    a power of two) is tapered, FFT'd, scaled to unit power per bin, and
//!    each row is transformed over the window only.
//! 3. Z is `|y|²` over the row's expected mean `Σ W² g²` (exact for the
//!    whitened data up to the PSD estimate's error). The scan instead
//!    estimates each row's scale over a whole block; a map's window is too
//!    short to do so without the transient itself biasing it.
//!
//! Rows that do not fit the channel (above its usable band) are returned as
//! zero energy.

use crate::families::features::{EnergyMapSource, RowEnergies, ScanBand};
use crate::io::{Bundle, ChannelSource, ChannelSpec, FileStamp};
use crate::scan::{CondBuffers, Conditioner, ResolvedParams, SampleSource};
use crate::segments::SegmentList;
use crate::tf::{mismatch_step, sigma_t, QPlan, Workspace};
use anyhow::{anyhow, bail, Context, Result};
use realfft::{ComplexToReal, RealFftPlanner, RealToComplex};
use rusqlite::{Connection, OptionalExtension};
use rustfft::num_complex::Complex;
use std::cell::RefCell;
use std::collections::HashMap;
use std::path::PathBuf;
use std::sync::{Arc, Mutex, OnceLock};

/// Extra padding beyond the scan's, so the longest map window (16 s) fits
/// inside a block's kept part \[s\].
const MAP_MARGIN_S: f64 = 8.0;
/// Raised-cosine taper at each end of a map window: four tile σ_t of the
/// lowest row, within these bounds \[s\].
const MIN_TAPER_S: f64 = 1.0 / 32.0;
/// See [`MIN_TAPER_S`].
const MAX_TAPER_S: f64 = 0.5;
/// Whitened blocks kept in memory.
const CACHE_BLOCKS: usize = 48;
/// Planned windows (one per channel, Q and window length), and block
/// conditioners (one per channel and block length), kept in memory.
const CACHE_PLANS: usize = 64;

/// Where a scan's samples are, before they are opened.
enum DataRef {
    /// Recorded with the scan (migration 0008): the channel's files and
    /// their stamps.
    Recorded {
        spec: ChannelSpec,
        stamps: Vec<FileStamp>,
    },
    /// Older scans: the bundle directory, reopened.
    Bundle(PathBuf),
}

/// A scan's data, opened and checked.
struct Opened {
    src: ChannelSource,
    valid: SegmentList,
}

/// One scan of a channel: its time, parameters and data (opened on first
/// use and checked against what the scan recorded).
struct ScanData {
    scan_id: i64,
    analysed: SegmentList,
    /// Data span of the scan \[GPS s\].
    span: (f64, f64),
    params: ResolvedParams,
    input_checksum: String,
    data: DataRef,
    opened: OnceLock<std::result::Result<Arc<Opened>, String>>,
}

/// One channel's scans, latest first.
struct ChannelData {
    scans: Vec<ScanData>,
}

impl ScanData {
    /// What this scan is, for messages.
    fn what(&self, channel: &str) -> String {
        format!("scan {} of channel {channel}", self.scan_id)
    }

    /// Open (once) and check the data: every recorded file as stamped, and
    /// the samples' checksum as the scan computed it.
    fn open(&self, channel: &str) -> Result<Arc<Opened>> {
        let r = self.opened.get_or_init(|| {
            self.open_uncached(channel)
                .map(Arc::new)
                .map_err(|e| format!("{e:#}"))
        });
        r.clone().map_err(|e| anyhow!(e))
    }

    fn open_uncached(&self, channel: &str) -> Result<Opened> {
        let what = self.what(channel);
        let src = match &self.data {
            DataRef::Recorded { spec, stamps } => {
                for st in stamps {
                    st.verify(&what)?;
                }
                ChannelSource::open(spec)?
            }
            DataRef::Bundle(path) => {
                let b = Bundle::open(path).with_context(|| {
                    format!("opening bundle {} recorded by {what}", path.display())
                })?;
                let spec = b
                    .channels
                    .iter()
                    .find(|c| c.name == channel)
                    .ok_or_else(|| {
                        anyhow!("bundle {} no longer has channel {channel}", path.display())
                    })?;
                ChannelSource::open(spec)?
            }
        };
        // Serial: this runs inside a `OnceLock` initialiser (see
        // `SampleSource::survey_with`).
        let (valid, checksum) = src.survey_with(false)?;
        if checksum != self.input_checksum {
            bail!(
                "{}: the samples changed since {what} (checksum {checksum}, recorded {}); \
                 restore the data or re-scan",
                src.describe(),
                self.input_checksum
            );
        }
        Ok(Opened { src, valid })
    }
}

/// A whitened block as a time series with unit spectral level in band.
struct WhiteBlock {
    /// First sample (index in the channel).
    i0: usize,
    x: Vec<f32>,
}

/// The plans of a map window: taper and forward FFT (the rows, at the
/// caller's Q and frequencies, are planned per call).
struct WindowPlan {
    taper: Vec<f32>,
    /// `1 / sqrt(Σ u²)`: scales the window's FFT to unit power per bin.
    unit: f32,
    fft: Arc<dyn RealToComplex<f32>>,
}

type BlockKey = (String, usize, usize);
type BlockSlot = OnceLock<std::result::Result<Arc<WhiteBlock>, String>>;

/// Whitened blocks by key, each with the serial number of its last use.
#[derive(Default)]
struct BlockCache {
    slots: HashMap<BlockKey, (u64, Arc<BlockSlot>)>,
    /// Uses so far.
    serial: u64,
}
/// A block conditioner and the inverse FFT back to a time series.
struct BlockPlan {
    conditioner: Conditioner,
    inverse: Arc<dyn ComplexToReal<f32>>,
    /// Buffers of finished blocks (conditioning and inverse-FFT scratch),
    /// taken by the next: a block's buffers are several MB, and allocating
    /// them afresh cost a page fault per 4 KiB (about one per thread).
    spare: Mutex<Vec<(CondBuffers, Vec<Complex<f32>>)>>,
}
type PlanKey = (String, usize, usize);

/// Energy maps from the bundles recorded in a catalogue's scans.
pub struct BundleMaps {
    channels: HashMap<String, ChannelData>,
    /// Whitened blocks (a slot is filled once, by the first thread to need
    /// the block; an error is not kept).
    blocks: Mutex<BlockCache>,
    /// Block conditioners and inverse FFTs per block length.
    conditioners: Mutex<HashMap<(String, usize), Arc<BlockPlan>>>,
    plans: Mutex<HashMap<PlanKey, Arc<WindowPlan>>>,
    /// Inverse FFTs of the rows (the planner keeps one per length).
    planner: Mutex<rustfft::FftPlanner<f32>>,
    /// Forward FFTs of the map windows (one per length, kept by the
    /// planner: a planner made per window recomputed the twiddles of a
    /// 2^13–2^17-point FFT for nearly every trigger, about an eighth of the
    /// fingerprint time, measured with perf).
    window_ffts: Mutex<RealFftPlanner<f32>>,
}

impl BundleMaps {
    /// Know the data of every scan (kind `scan`) of every channel: the
    /// files recorded with it (or, for scans older than that record, its
    /// bundle directory), parameters and analysed time. Nothing is opened
    /// here: a scan's data are opened, and checked against the stamps and
    /// sample checksum the scan recorded, when a map first needs them. A map
    /// at time t of a channel comes from the latest scan whose analysed time
    /// holds t (the scan whose triggers are listed there), else the latest
    /// whose data span holds it. Channels known only from imports have no
    /// data.
    ///
    /// # Errors
    /// Database errors, or a scan record that cannot be read.
    pub fn from_catalogue(conn: &Connection) -> Result<BundleMaps> {
        let has_files = conn.prepare("SELECT data_json FROM scans LIMIT 0").is_ok();
        let sql = if has_files {
            "SELECT s.id, c.name, s.source_path, s.params_json, s.input_checksum, \
             s.span_start_ns, s.span_end_ns, s.data_json FROM scans s \
             JOIN channels c ON c.id = s.channel_id WHERE s.kind = 'scan' ORDER BY s.id DESC"
        } else {
            "SELECT s.id, c.name, s.source_path, s.params_json, s.input_checksum, \
             s.span_start_ns, s.span_end_ns, NULL FROM scans s \
             JOIN channels c ON c.id = s.channel_id WHERE s.kind = 'scan' ORDER BY s.id DESC"
        };
        type Row = (
            i64,
            String,
            String,
            String,
            String,
            i64,
            i64,
            Option<String>,
        );
        let rows: Vec<Row> = conn
            .prepare(sql)?
            .query_map([], |r| {
                Ok((
                    r.get(0)?,
                    r.get(1)?,
                    r.get(2)?,
                    r.get(3)?,
                    r.get(4)?,
                    r.get(5)?,
                    r.get(6)?,
                    r.get(7)?,
                ))
            })?
            .collect::<rusqlite::Result<_>>()?;
        let mut channels: HashMap<String, ChannelData> = HashMap::new();
        for (id, name, path, params_json, checksum, a_ns, b_ns, data_json) in rows {
            let params: ResolvedParams = serde_json::from_str(&params_json)
                .with_context(|| format!("parameters of scan {id} of {name}"))?;
            let data = match data_json {
                Some(j) => {
                    let spec = crate::io::source::spec_from_json(&name, &j)?;
                    let stamps = conn
                        .prepare_cached(
                            "SELECT path, bytes, mtime_ns, checksum FROM scan_files \
                             WHERE scan_id = ?1 ORDER BY path",
                        )?
                        .query_map([id], |r| {
                            Ok(FileStamp {
                                path: PathBuf::from(r.get::<_, String>(0)?),
                                bytes: r.get::<_, i64>(1)? as u64,
                                mtime_ns: r.get(2)?,
                                checksum: r.get(3)?,
                            })
                        })?
                        .collect::<rusqlite::Result<_>>()?;
                    DataRef::Recorded { spec, stamps }
                }
                None => DataRef::Bundle(PathBuf::from(path)),
            };
            let analysed = crate::catalogue::scan_segments(conn, id)?;
            channels
                .entry(name)
                .or_insert_with(|| ChannelData { scans: Vec::new() })
                .scans
                .push(ScanData {
                    scan_id: id,
                    analysed,
                    span: (
                        crate::catalogue::from_ns(a_ns),
                        crate::catalogue::from_ns(b_ns),
                    ),
                    params,
                    input_checksum: checksum,
                    data,
                    opened: OnceLock::new(),
                });
        }
        Ok(BundleMaps {
            channels,
            blocks: Mutex::new(BlockCache::default()),
            conditioners: Mutex::new(HashMap::new()),
            plans: Mutex::new(HashMap::new()),
            planner: Mutex::new(rustfft::FftPlanner::new()),
            window_ffts: Mutex::new(RealFftPlanner::new()),
        })
    }

    /// The scan whose data serve a map of `channel` at GPS `t`.
    fn scan_at(&self, channel: &str, t: f64) -> Result<&ScanData> {
        let cd = self.channels.get(channel).ok_or_else(|| {
            anyhow!("no scanned data for channel {channel} (imported triggers have no data)")
        })?;
        cd.scans
            .iter()
            .find(|s| s.analysed.contains(t))
            .or_else(|| cd.scans.iter().find(|s| s.span.0 <= t && t < s.span.1))
            .ok_or_else(|| anyhow!("{channel}: GPS {t} is in no scan of this channel"))
    }

    /// Paths of the bundles in use (for messages).
    pub fn channel_names(&self) -> Vec<String> {
        let mut v: Vec<String> = self.channels.keys().cloned().collect();
        v.sort();
        v
    }

    /// The whitened block whose kept part holds GPS `t_center` (cached).
    fn white_block(
        &self,
        channel: &str,
        cd: &ScanData,
        data: &Opened,
        t_center: f64,
    ) -> Result<Arc<WhiteBlock>> {
        let src = &data.src;
        let fs = src.rate_hz();
        let t0 = src.start_gps();
        let p = &cd.params;
        let valid = &data.valid;
        // Caches are per scan: two scans of a channel may read other files.
        let key_name = format!("{channel}#{}", cd.scan_id);
        let channel_key = key_name.as_str();
        let Some(seg) = valid.segments().iter().find(|s| s.contains(t_center)) else {
            bail!("{channel}: GPS {t_center} is not in valid data");
        };
        let pad = ((p.pad_s + MAP_MARGIN_S) * fs).round() as usize;
        let a = ((seg.start - t0) * fs).ceil().max(0.0) as usize;
        let b = (((seg.end - t0) * fs).floor() as usize).min(src.len());
        let mut n = ((p.block_s + 2.0 * MAP_MARGIN_S) * fs).round() as usize;
        if b - a < n {
            n = b - a;
        }
        let welch_n = (p.welch_s * fs).round() as usize;
        if n < 2 * welch_n || n <= 2 * pad {
            bail!("{channel}: the valid stretch around GPS {t_center} is too short for a map");
        }
        // Blocks on a grid from the stretch start stepping by the kept length.
        let step = n - 2 * pad;
        let ic = ((t_center - t0) * fs) as usize;
        let k = ic.saturating_sub(a + pad) / step;
        let i0 = (a + k * step).min(b - n);
        let key = (channel_key.to_string(), i0, n);
        // One slot per block: a thread that needs a block another is
        // whitening waits for it rather than whitening it again.
        let slot = {
            let mut cache = self.blocks.lock().expect("cache lock");
            cache.serial += 1;
            let serial = cache.serial;
            if let Some((used, hit)) = cache.slots.get_mut(&key) {
                *used = serial;
                hit.clone()
            } else {
                if cache.slots.len() >= CACHE_BLOCKS {
                    // Drop the least recently used block (clearing them all
                    // dropped the blocks the threads were working in, and
                    // they were whitened again).
                    let oldest = cache
                        .slots
                        .iter()
                        .min_by_key(|(_, (used, _))| *used)
                        .map(|(k, _)| k.clone());
                    if let Some(k) = oldest {
                        cache.slots.remove(&k);
                    }
                }
                let slot = Arc::new(OnceLock::new());
                cache.slots.insert(key.clone(), (serial, slot.clone()));
                slot
            }
        };
        let made = slot.get_or_init(|| {
            self.whiten_block(channel, cd, data, channel_key, i0, n, welch_n)
                .map(Arc::new)
                .map_err(|e| format!("{e:#}"))
        });
        match made {
            Ok(block) => Ok(block.clone()),
            Err(e) => {
                // Not kept: a later map may try again.
                let mut cache = self.blocks.lock().expect("cache lock");
                if cache
                    .slots
                    .get(&key)
                    .is_some_and(|(_, s)| Arc::ptr_eq(s, &slot))
                {
                    cache.slots.remove(&key);
                }
                Err(anyhow!("{e}"))
            }
        }
    }

    /// Whiten the block of `n` samples from sample `i0` (see
    /// [`BundleMaps::white_block`]).
    #[allow(clippy::too_many_arguments)]
    fn whiten_block(
        &self,
        channel: &str,
        cd: &ScanData,
        data: &Opened,
        channel_key: &str,
        i0: usize,
        n: usize,
        welch_n: usize,
    ) -> Result<WhiteBlock> {
        let src = &data.src;
        let fs = src.rate_hz();
        let p = &cd.params;
        let cond = {
            let mut c = self.conditioners.lock().expect("cache lock");
            match c.get(&(channel_key.to_string(), n)) {
                Some(hit) => hit.clone(),
                None => {
                    let hp = (0.5 * p.fmin, 0.9 * p.fmin);
                    let made = Arc::new(BlockPlan {
                        // Taper the scan's padding (the conditioner tapers half its `pad`).
                        conditioner: Conditioner::new(
                            n,
                            fs,
                            (2.0 * p.pad_s * fs).round() as usize,
                            welch_n,
                            hp,
                        )?,
                        inverse: RealFftPlanner::<f32>::new().plan_fft_inverse(n),
                        spare: Mutex::new(Vec::new()),
                    });
                    // Short stretches each have their own length: bounded.
                    if c.len() >= CACHE_PLANS {
                        c.clear();
                    }
                    c.insert((channel_key.to_string(), n), made.clone());
                    made
                }
            }
        };
        let (conditioner, inverse) = (&cond.conditioner, &cond.inverse);
        let spare = {
            let mut pool = cond.spare.lock().expect("cache lock");
            // Buffers whose last block overlaps this one from below hold
            // Welch segments of this one (blocks step by 28 s of 48 s).
            let overlapping = pool
                .iter()
                .enumerate()
                .filter_map(|(j, (b, _))| {
                    let o = b.reuse_origin()?;
                    (o <= i0 && i0 - o < n).then_some((j, o))
                })
                .max_by_key(|&(_, o)| o);
            match overlapping {
                Some((j, _)) => Some(pool.swap_remove(j)),
                None => pool.pop(),
            }
        };
        let (mut b, mut scratch) =
            spare.unwrap_or_else(|| (conditioner.buffers(), inverse.make_scratch_vec()));
        // One source per block plan (its key names the channel and scan), so
        // the buffers' Welch segments may be kept.
        conditioner.whiten_block_reusing(src, i0, &mut b)?;
        let spec = &mut b.whitened;
        // A real series has real DC and Nyquist bins.
        spec[0].im = 0.0;
        if let Some(last) = spec.last_mut() {
            last.im = 0.0;
        }
        let mut x = inverse.make_output_vec();
        inverse
            .process_with_scratch(spec, &mut x, &mut scratch)
            .map_err(|e| anyhow!("{channel}: inverse FFT: {e}"))?;
        cond.spare.lock().expect("cache lock").push((b, scratch));
        // Unnormalised inverse of unit-power bins: spectral level n; scale to 1.
        let scale = 1.0 / (n as f32).sqrt();
        x.iter_mut().for_each(|v| *v *= scale);
        Ok(WhiteBlock { i0, x })
    }

    /// The taper and forward FFT of windows of `m` samples with `taper`
    /// samples of raised cosine at each end (cached per channel and sizes).
    fn window_plan(&self, channel: &str, m: usize, taper: usize) -> Arc<WindowPlan> {
        let key = (channel.to_string(), m, taper);
        if let Some(hit) = self.plans.lock().expect("cache lock").get(&key) {
            return hit.clone();
        }
        let taper: Vec<f32> = crate::condition::tukey(m, taper)
            .into_iter()
            .map(|v| v as f32)
            .collect();
        let unit = 1.0 / taper.iter().map(|u| u * u).sum::<f32>().sqrt();
        let plan = Arc::new(WindowPlan {
            taper,
            unit,
            fft: self
                .window_ffts
                .lock()
                .expect("planner lock")
                .plan_fft_forward(m),
        });
        let mut cache = self.plans.lock().expect("cache lock");
        if cache.len() >= CACHE_PLANS {
            cache.clear();
        }
        cache.insert(key, plan.clone());
        plan
    }
}

impl EnergyMapSource for BundleMaps {
    fn has_data(&self, channel: &str) -> bool {
        self.channels.contains_key(channel)
    }

    fn has_data_at(&self, channel: &str, t_gps: f64) -> bool {
        self.scan_at(channel, t_gps).is_ok()
    }

    fn analysed_at(&self, channel: &str, t_gps: f64) -> bool {
        self.channels
            .get(channel)
            .is_some_and(|cd| cd.scans.iter().any(|s| s.analysed.contains(t_gps)))
    }

    fn scan_band(&self, channel: &str, t_gps: f64) -> Option<ScanBand> {
        // The band of the scan whose data holds the time (the one its map is
        // made from), else the latest scan's (scans are kept latest first).
        let p = match self.scan_at(channel, t_gps) {
            Ok(s) => &s.params,
            Err(_) => &self.channels.get(channel)?.scans.first()?.params,
        };
        Some(ScanBand {
            f_lo_hz: p.fmin,
            f_hi_hz: p.fmax,
            z_threshold: crate::trigger::energy_from_snr(p.snr_threshold),
        })
    }

    fn energy_rows(
        &self,
        channel: &str,
        t_center_gps: f64,
        span_s: f64,
        q: f64,
        freqs_hz: &[f64],
    ) -> Result<Vec<Option<RowEnergies>>> {
        let cd = self.scan_at(channel, t_center_gps)?;
        let data = cd.open(channel)?;
        // Q below 2 loses its meaning as a tile shape (common practice).
        let q = q.clamp(2.0, 128.0);
        let fs = data.src.rate_hz();
        let block = self.white_block(channel, cd, &data, t_center_gps)?;
        // Window: the span, three tile durations at the lowest row analysed
        // and a taper of four, each side; a power of two of samples.
        let f_low = freqs_hz
            .iter()
            .copied()
            .fold(f64::INFINITY, f64::min)
            .max(cd.params.fmin);
        let reach_s = sigma_t(q, f_low);
        let taper_s = (4.0 * reach_s).clamp(MIN_TAPER_S, MAX_TAPER_S);
        let half_s = 0.5 * span_s + 3.0 * reach_s + taper_s;
        let m = (((2.0 * half_s * fs).ceil() as usize).next_power_of_two()).min(block.x.len());
        let win = self.window_plan(channel, m, (taper_s * fs).round() as usize);
        MAP_SCRATCH.with(|cell| {
            let mut guard = cell.borrow_mut();
            let sc = &mut *guard;
            let rows = QPlan::single_plane_with(
                fs,
                m,
                q,
                freqs_hz,
                mismatch_step(cd.params.mismatch),
                (0.5 * cd.params.fmin, 0.9 * cd.params.fmin),
                &mut |n_t| {
                    sc.iffts
                        .entry(n_t)
                        .or_insert_with(|| {
                            self.planner
                                .lock()
                                .expect("planner lock")
                                .plan_fft_inverse(n_t)
                        })
                        .clone()
                },
            );
            let t0 = data.src.start_gps();
            let ic = ((t_center_gps - t0) * fs).round() as usize;
            let w0 = ic
                .saturating_sub(m / 2)
                .clamp(block.i0, block.i0 + block.x.len() - m);
            let xs = &block.x[w0 - block.i0..w0 - block.i0 + m];
            sc.input.clear();
            sc.input
                .extend(xs.iter().zip(&win.taper).map(|(x, u)| x * u));
            sc.spec
                .resize(win.fft.complex_len(), Complex::new(0.0, 0.0));
            sc.fft_scratch
                .resize(win.fft.get_scratch_len(), Complex::new(0.0, 0.0));
            win.fft
                .process_with_scratch(&mut sc.input, &mut sc.spec, &mut sc.fft_scratch)
                .map_err(|e| anyhow!("{channel}: FFT: {e}"))?;
            let spec = &mut sc.spec[..win.fft.complex_len()];
            spec.iter_mut().for_each(|c| *c *= win.unit);
            let tw0 = t0 + w0 as f64 / fs;
            let ws = sc.ws.get_or_insert_with(|| rows.workspace());
            rows.fit_workspace(ws);
            let plane_rows = &rows.planes[0].rows;
            let mut out: Vec<Option<RowEnergies>> = vec![None; freqs_hz.len()];
            // single_plane keeps the rows that fit, in the order given.
            let mut r = 0;
            for (j, &f) in freqs_hz.iter().enumerate() {
                if r < plane_rows.len() && plane_rows[r].f_hz == f {
                    let (z, dt) = rows.row_energies_expected(0, r, spec, ws);
                    out[j] = Some(RowEnergies {
                        t0_gps: tw0,
                        dt_s: dt,
                        z,
                    });
                    r += 1;
                }
            }
            Ok(out)
        })
    }
}

/// Buffers and inverse-FFT plans of one thread's energy maps, reused from
/// trigger to trigger: a map's window length and rows change with nearly
/// every trigger, and allocating (and zeroing) them per map, and locking
/// one shared planner for every row, cost about a tenth of the fingerprint
/// time (perf, `cargo bench --bench families`). Kept for the thread's life
/// (a few MB at the longest windows).
#[derive(Default)]
struct MapScratch {
    /// Tapered window samples.
    input: Vec<f32>,
    /// Window spectrum.
    spec: Vec<Complex<f32>>,
    /// Scratch of the window FFT.
    fft_scratch: Vec<Complex<f32>>,
    /// Row buffers.
    ws: Option<Workspace>,
    /// Inverse FFTs of the rows by length (plans depend on the length only).
    iffts: HashMap<usize, Arc<dyn rustfft::Fft<f32>>>,
}

thread_local! {
    static MAP_SCRATCH: RefCell<MapScratch> = RefCell::new(MapScratch::default());
}

/// The bundle directory a channel's latest scan read (absolute when the
/// scan recorded it so), if any.
///
/// # Errors
/// Database errors.
pub fn scan_source_path(conn: &Connection, channel: &str) -> Result<Option<PathBuf>> {
    Ok(conn
        .query_row(
            "SELECT s.source_path FROM scans s JOIN channels c ON c.id = s.channel_id
             WHERE c.name = ?1 AND s.kind = 'scan' ORDER BY s.id DESC LIMIT 1",
            [channel],
            |r| r.get::<_, String>(0),
        )
        .optional()?
        .map(PathBuf::from))
}
