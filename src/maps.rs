//! Normalised-energy maps around a time, from the raw data the catalogue's
//! scans were made from: the [`EnergyMapSource`] behind fingerprints and
//! spectrogram images.
//!
//! A map is computed exactly as the scan computes tiles (same conditioning,
//! same bisquare rows, same median normalisation over a block's kept part),
//! but at one Q and on a caller's frequency grid. Whitened blocks and their
//! rows are cached, so many triggers in one block cost one whitening.
//! Rows that do not fit the channel (above its usable band) are returned as
//! zero energy.

use crate::families::EnergyMapSource;
use crate::io::Bundle;
use crate::scan::{Conditioner, NpyChannel, ResolvedParams, SampleSource};
use crate::segments::SegmentList;
use crate::tf::{mismatch_step, QPlan};
use anyhow::{anyhow, bail, Context, Result};
use rusqlite::{Connection, OptionalExtension};
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex, OnceLock};

/// Extra padding beyond the scan's, so the longest map span (4 s) fits
/// inside a block's kept part \[s\].
const MAP_MARGIN_S: f64 = 2.0;
/// Whitened blocks kept in memory.
const CACHE_BLOCKS: usize = 48;

/// One channel's data and scan parameters.
struct ChannelData {
    src: NpyChannel,
    params: ResolvedParams,
    valid: OnceLock<SegmentList>,
}

/// Rows of one block at one Q: `(Z_i, dt)` per requested frequency (None
/// where the row does not fit), tile `i` at `t0 + i dt`.
struct BlockRows {
    t0: f64,
    rows: Vec<Option<(Vec<f32>, f64)>>,
}

type CacheKey = (String, usize, usize, u64);

/// Energy maps from the bundles recorded in a catalogue's scans.
pub struct BundleMaps {
    channels: HashMap<String, ChannelData>,
    cache: Mutex<HashMap<CacheKey, Arc<BlockRows>>>,
}

impl BundleMaps {
    /// Open the data of every channel that has a scan (kind `scan`): the
    /// bundle directory and parameters of its latest scan. Channels known
    /// only from imports have no data and are skipped.
    ///
    /// # Errors
    /// A recorded bundle that can no longer be opened (moved or changed).
    pub fn from_catalogue(conn: &Connection) -> Result<BundleMaps> {
        let mut st = conn.prepare(
            "SELECT c.name, s.source_path, s.params_json FROM scans s
             JOIN channels c ON c.id = s.channel_id
             WHERE s.kind = 'scan' ORDER BY s.id",
        )?;
        let mut latest: HashMap<String, (String, String)> = HashMap::new();
        let rows = st.query_map([], |r| Ok((r.get::<_, String>(0)?, r.get(1)?, r.get(2)?)))?;
        for row in rows {
            let (name, path, params) = row?;
            latest.insert(name, (path, params));
        }
        let mut bundles: HashMap<String, Bundle> = HashMap::new();
        let mut channels = HashMap::new();
        for (name, (path, params_json)) in latest {
            if !bundles.contains_key(&path) {
                let b = Bundle::open(Path::new(&path)).with_context(|| {
                    format!("opening bundle {path} recorded by the scan of channel {name}")
                })?;
                bundles.insert(path.clone(), b);
            }
            let spec = bundles[&path]
                .channels
                .iter()
                .find(|c| c.name == name)
                .ok_or_else(|| anyhow!("bundle {path} no longer has channel {name}"))?;
            let params: ResolvedParams = serde_json::from_str(&params_json)
                .with_context(|| format!("parameters of the scan of {name}"))?;
            channels.insert(
                name,
                ChannelData {
                    src: NpyChannel::open(spec)?,
                    params,
                    valid: OnceLock::new(),
                },
            );
        }
        Ok(BundleMaps {
            channels,
            cache: Mutex::new(HashMap::new()),
        })
    }

    /// Paths of the bundles in use (for messages).
    pub fn channel_names(&self) -> Vec<String> {
        let mut v: Vec<String> = self.channels.keys().cloned().collect();
        v.sort();
        v
    }

    fn block_rows(
        &self,
        channel: &str,
        cd: &ChannelData,
        t_center: f64,
        q: f64,
        freqs: &[f64],
    ) -> Result<Arc<BlockRows>> {
        let src = &cd.src;
        let fs = src.rate_hz();
        let t0 = src.start_gps();
        let p = &cd.params;
        let valid = match cd.valid.get() {
            Some(v) => v,
            None => {
                let (v, _) = src.survey()?;
                cd.valid.get_or_init(|| v)
            }
        };
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
        if n < 2 * pad + welch_n {
            bail!("{channel}: the valid stretch around GPS {t_center} is too short for a map");
        }
        // Blocks on a grid from the stretch start stepping by the kept length.
        let step = n - 2 * pad;
        let ic = ((t_center - t0) * fs) as usize;
        let k = ic.saturating_sub(a + pad) / step;
        let i0 = (a + k * step).min(b - n);
        let key = (
            channel.to_string(),
            i0,
            n,
            q.to_bits() ^ (freqs.len() as u64).rotate_left(32),
        );
        if let Some(hit) = self.cache.lock().expect("cache lock").get(&key) {
            return Ok(hit.clone());
        }
        let hp = (0.5 * p.fmin, 0.9 * p.fmin);
        let cond = Conditioner::new(n, fs, pad, welch_n, hp)?;
        let whitened = cond.whiten_block(src, i0)?;
        let plan = QPlan::single_plane(
            fs,
            n,
            q,
            freqs,
            mismatch_step(p.mismatch),
            hp,
            &mut rustfft::FftPlanner::new(),
        );
        let mut ws = plan.workspace();
        let tb0 = t0 + i0 as f64 / fs;
        let keep = (tb0 + pad as f64 / fs, tb0 + (n - pad) as f64 / fs);
        let plane_rows = &plan.planes[0].rows;
        let mut rows: Vec<Option<(Vec<f32>, f64)>> = vec![None; freqs.len()];
        for (r, row) in plane_rows.iter().enumerate() {
            if let Some(j) = freqs.iter().position(|&f| f == row.f_hz) {
                rows[j] = Some(plan.row_energies(0, r, &whitened, tb0, keep, &mut ws));
            }
        }
        let out = Arc::new(BlockRows { t0: tb0, rows });
        let mut cache = self.cache.lock().expect("cache lock");
        if cache.len() >= CACHE_BLOCKS {
            cache.clear();
        }
        cache.insert(key, out.clone());
        Ok(out)
    }
}

impl EnergyMapSource for BundleMaps {
    fn energy_map(
        &self,
        channel: &str,
        t_center_gps: f64,
        span_s: f64,
        q: f64,
        freqs_hz: &[f64],
        n_times: usize,
    ) -> Result<Vec<f32>> {
        let cd = self.channels.get(channel).ok_or_else(|| {
            anyhow!("no scanned data for channel {channel} (imported triggers have no data)")
        })?;
        // Q below 2 loses its meaning as a tile shape (common practice).
        let q = q.clamp(2.0, 128.0);
        let block = self.block_rows(channel, cd, t_center_gps, q, freqs_hz)?;
        let mut out = vec![0.0f32; n_times * freqs_hz.len()];
        let w = span_s / n_times as f64;
        let start = t_center_gps - 0.5 * span_s;
        for (j, row) in block.rows.iter().enumerate() {
            let Some((z, dt)) = row else { continue };
            for b in 0..n_times {
                let (lo, hi) = (start + b as f64 * w, start + (b + 1) as f64 * w);
                let i_lo = ((lo - block.t0) / dt).ceil().max(0.0) as usize;
                let i_hi = (((hi - block.t0) / dt).ceil().max(0.0) as usize).min(z.len());
                // Max over the tiles centred in the bin; the nearest tile when
                // the bin is narrower than the tile spacing.
                let v = if i_hi > i_lo {
                    z[i_lo..i_hi].iter().copied().fold(0.0f32, f32::max)
                } else {
                    let i = (((lo + hi) * 0.5 - block.t0) / dt).round().max(0.0) as usize;
                    z.get(i).copied().unwrap_or(0.0)
                };
                out[b * freqs_hz.len() + j] = v;
            }
        }
        Ok(out)
    }
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
