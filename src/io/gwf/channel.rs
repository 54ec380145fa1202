//! One channel of one frame file as a series of samples on one time grid,
//! with random access by sample index; a [`SampleSource`] for the scan.
//!
//! Memory: an uncompressed vector is read straight from the file (only the
//! bytes asked for). A compressed vector has no random access (a zlib
//! stream or a zero-suppressed bit stream must be decoded from its start).
//! A gzip or differences + gzip one of at most [`WHOLE_BYTES`]
//! decompressed (a frame of a few seconds to minutes) is decoded whole: its structure read in one piece, checked,
//! and decoded in one call (libdeflate for gzip) into its stored elements
//! (2 bytes a sample for int16), which the channel keeps in its pool, shared
//! by every reader, and converts to f64 as read. Larger vectors, and
//! zero-suppressed ones, are decoded as a stream: the channel keeps a small pool of decoders, each with a window of the
//! last samples it produced (at most [`WINDOW_SAMPLES`] f64): a read that
//! starts inside a window or after it continues that decoder, so reading in
//! order — the scan's single pass, or a survey — decodes each vector about
//! once. The pool holds at
//! most [`POOL_BYTES`] of windows and whole vectors (least recently used
//! dropped first; a few spare buffers are kept for reuse), so memory is
//! bounded by these constants and the caller's buffers, not by the file or
//! vector size. A read that starts before every window restarts a
//! decoder from the vector's start (correct, slower).
//!
//! Checksums: the first read of a vector verifies its structure checksum
//! (one pass over its compressed bytes) before any of its samples are
//! returned.
use super::file::{ChannelKind, Piece};
use super::format::{Compression, ElemType};
use super::vect::{decode_whole, read_raw, samples_from_le, Decoder, Source, VectMeta};
use crate::scan::SampleSource;
use anyhow::{anyhow, bail, Result};
use std::os::unix::fs::FileExt;
use std::path::Path;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};

/// Largest decoded window a decoder keeps \[samples\] (8 MB of f64).
pub const WINDOW_SAMPLES: usize = 1 << 20;

/// Most memory one channel keeps in decoder windows and whole vectors \[bytes\].
pub const POOL_BYTES: usize = 48 << 20;

/// Tolerance for frames on one sample grid \[samples\].
const GRID_TOL: f64 = 1e-3;

/// One channel of one frame file (see the module header).
pub struct GwfChannel {
    src: Arc<Source>,
    name: String,
    kind: ChannelKind,
    rate_hz: f64,
    start_gps: f64,
    start_ns: i64,
    len: usize,
    /// Frames holding the channel, in time order, with their first sample
    /// index in the channel.
    pieces: Vec<(usize, Piece)>,
    verified: Vec<AtomicBool>,
    pool: Mutex<Pool>,
    /// [`WHOLE_BYTES`] (0 in tests that compare with the streaming decoder).
    whole_limit: u64,
}

impl std::fmt::Debug for GwfChannel {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("GwfChannel")
            .field("path", &self.src.path)
            .field("name", &self.name)
            .field("rate_hz", &self.rate_hz)
            .field("start_gps", &self.start_gps)
            .field("len", &self.len)
            .finish()
    }
}

#[derive(Default)]
struct Pool {
    cursors: Vec<Cursor>,
    /// Vectors decoded whole, shared by every reader (see [`WHOLE_BYTES`]).
    whole: Vec<Whole>,
    bytes: usize,
    tick: u64,
    /// Buffers of evicted whole vectors and of compressed input, kept for
    /// the next (at most [`SPARES`]), so decoding frame after frame does not
    /// allocate and fault in fresh memory every time.
    spare: Vec<Vec<u8>>,
}

/// Spare buffers a channel keeps.
const SPARES: usize = 3;

/// Largest vector decoded whole \[bytes of its elements, decompressed\]:
/// its FrVect structure is read in one piece (checksum verified on those
/// bytes), then decoded in one call into a buffer of the declared size,
/// kept as the stored elements (2 bytes a sample for int16, 4 for float32)
/// and converted to f64 as read. Larger vectors (and structures of more
/// than twice this) are decoded as a stream with a window.
pub const WHOLE_BYTES: u64 = 8 << 20;

/// A vector decoded whole: its elements, little-endian, differences summed
/// back, not calibrated.
struct Whole {
    piece: usize,
    elems: Arc<Vec<u8>>,
    used: u64,
}

impl Pool {
    /// Return a buffer for reuse.
    fn keep_bytes(&mut self, b: Vec<u8>) {
        if self.spare.len() < SPARES && b.capacity() > 0 {
            self.spare.push(b);
        }
    }

    fn take_bytes(&mut self) -> Vec<u8> {
        self.spare.pop().unwrap_or_default()
    }

    /// Drop the least recently used cursors and whole vectors until the
    /// pool holds at most [`POOL_BYTES`] (keeping at least one).
    fn evict(&mut self) {
        while self.bytes > POOL_BYTES && self.cursors.len() + self.whole.len() > 1 {
            let c = self.cursors.iter().enumerate().min_by_key(|(_, c)| c.used);
            let w = self.whole.iter().enumerate().min_by_key(|(_, w)| w.used);
            match (c, w) {
                (Some((i, c)), Some((_, w))) if c.used < w.used => {
                    let old = self.cursors.swap_remove(i);
                    self.bytes -= old.bytes();
                }
                (Some((i, _)), None) => {
                    let old = self.cursors.swap_remove(i);
                    self.bytes -= old.bytes();
                }
                (_, Some((j, _))) => {
                    let old = self.whole.swap_remove(j);
                    self.bytes -= old.elems.capacity();
                    // Reused when no reader holds it any more.
                    if let Ok(v) = Arc::try_unwrap(old.elems) {
                        self.keep_bytes(v);
                    }
                }
                (None, None) => break,
            }
        }
    }
}

/// A decoder of one vector with a window of its last samples.
struct Cursor {
    piece: usize,
    dec: Option<Decoder>,
    /// Index (in the vector) of `win[0]`.
    win_start: u64,
    win: Vec<f64>,
    cap: usize,
    used: u64,
}

impl Cursor {
    /// Index of the next sample to decode.
    fn pos(&self) -> u64 {
        self.win_start + self.win.len() as u64
    }

    fn bytes(&self) -> usize {
        8 * self.win.capacity() + self.dec.as_ref().map_or(0, Decoder::mem_bytes)
    }

    /// Decode `n` more samples into the window (dropping its oldest part).
    fn advance(&mut self, n: usize) -> Result<()> {
        let dec = self
            .dec
            .as_mut()
            .ok_or_else(|| anyhow!("internal: finished decoder"))?;
        let mut left = n;
        while left > 0 {
            let step = left.min(self.cap.max(1));
            if self.win.len() + step > 2 * self.cap {
                let drop = self.win.len() + step - self.cap;
                let drop = drop.min(self.win.len());
                self.win.drain(..drop);
                self.win_start += drop as u64;
            }
            let at = self.win.len();
            self.win.resize(at + step, 0.0);
            dec.decode(&mut self.win[at..])?;
            left -= step;
        }
        Ok(())
    }
}

impl GwfChannel {
    pub(crate) fn new(
        src: Arc<Source>,
        name: &str,
        kind: ChannelKind,
        pieces: Vec<Piece>,
    ) -> Result<GwfChannel> {
        let path = src.path.clone();
        let shown = crate::io::shown(name);
        let first = pieces
            .first()
            .ok_or_else(|| anyhow!("{}: channel {shown} is in no frame", path.display()))?;
        let dx = first.vect.dx;
        let rate_hz = 1.0 / dx;
        let t0_ns = first.frame_ns;
        let off0 = first.time_offset_s + first.vect.start_x;
        let mut placed: Vec<(usize, Piece)> = Vec::with_capacity(pieces.len());
        let mut end = 0usize;
        for p in pieces {
            if (p.vect.dx - dx).abs() > 1e-12 * dx {
                bail!(
                    "{}: channel {shown}: sample spacing changes from {dx} s to {} s in frame {}",
                    path.display(),
                    p.vect.dx,
                    p.frame
                );
            }
            let rel_s =
                (p.frame_ns - t0_ns) as f64 * 1e-9 + (p.time_offset_s + p.vect.start_x - off0);
            let idx_f = rel_s * rate_hz;
            let idx = idx_f.round();
            if !((idx_f - idx).abs() <= GRID_TOL && idx >= 0.0 && idx < usize::MAX as f64) {
                bail!(
                    "{}: channel {shown}: frame {} starts {rel_s} s after the first, off the sample grid of {rate_hz} Hz",
                    path.display(),
                    p.frame
                );
            }
            let idx = idx as usize;
            if idx < end {
                bail!(
                    "{}: channel {shown}: frame {} overlaps the previous frame's samples",
                    path.display(),
                    p.frame
                );
            }
            end = usize::try_from(p.vect.n_data)
                .ok()
                .and_then(|n| idx.checked_add(n))
                .ok_or_else(|| anyhow!("{}: channel {shown}: too many samples", path.display()))?;
            placed.push((idx, p));
        }
        let start_ns = t0_ns.saturating_add((off0 * 1e9).round() as i64);
        let start_gps = t0_ns as f64 * 1e-9 + off0;
        if !(start_gps + end as f64 / rate_hz).is_finite() {
            bail!(
                "{}: channel {shown}: time span is not finite",
                path.display()
            );
        }
        let verified = placed.iter().map(|_| AtomicBool::new(false)).collect();
        Ok(GwfChannel {
            src,
            name: name.to_string(),
            kind,
            rate_hz,
            start_gps,
            start_ns,
            len: end,
            pieces: placed,
            verified,
            pool: Mutex::new(Pool::default()),
            whole_limit: WHOLE_BYTES,
        })
    }

    /// Channel name.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// ADC, processed or simulated.
    pub fn kind(&self) -> ChannelKind {
        self.kind
    }

    /// The file.
    pub fn path(&self) -> &Path {
        &self.src.path
    }

    /// GPS time of sample 0 \[ns\] (rounded to the nanosecond).
    pub fn start_ns(&self) -> i64 {
        self.start_ns
    }

    /// Element type of the first frame's vector.
    pub fn elem(&self) -> ElemType {
        self.pieces[0].1.vect.elem
    }

    /// Compression of the first frame's vector.
    pub fn compression(&self) -> Compression {
        self.pieces[0].1.vect.compression
    }

    /// Unit of the values returned.
    pub fn unit(&self) -> &str {
        &self.pieces[0].1.unit
    }

    /// The stretches that frames hold, as `(first sample, number of
    /// samples)`; everything else reads as NaN. No data are read.
    pub fn spans(&self) -> Vec<(usize, usize)> {
        self.pieces
            .iter()
            .map(|(i, p)| (*i, p.vect.n_data as usize))
            .collect()
    }

    /// Index of the sample at GPS time `t` \[s\] if `t` falls on a sample
    /// (within 10⁻³ of a sample spacing) inside the channel.
    pub fn index_at(&self, t_gps: f64) -> Option<usize> {
        let x = (t_gps - self.start_gps) * self.rate_hz;
        let i = x.round();
        ((x - i).abs() <= GRID_TOL && i >= 0.0 && (i as usize) < self.len).then_some(i as usize)
    }

    /// Read samples `[start, start + out.len())`; samples in no frame (and
    /// in frames whose ADC data are flagged invalid) are NaN.
    ///
    /// # Errors
    /// A range beyond the channel, I/O errors, checksum mismatches and
    /// corrupt compressed data; all name the file and channel.
    pub fn read_samples(&self, start: usize, out: &mut [f64]) -> Result<()> {
        let end = start
            .checked_add(out.len())
            .filter(|&e| e <= self.len)
            .ok_or_else(|| {
                anyhow!(
                    "{}: channel {}: samples [{start}, {}) requested, the channel has {}",
                    self.src.path.display(),
                    crate::io::shown(&self.name),
                    start as u128 + out.len() as u128,
                    self.len
                )
            })?;
        // First piece that ends after `start`.
        let mut k = self
            .pieces
            .partition_point(|(i, p)| i + p.vect.n_data as usize <= start);
        // Samples before `done` are written (NaN where no valid frame).
        let mut done = start;
        while k < self.pieces.len() {
            let (first, p) = &self.pieces[k];
            if *first >= end {
                break;
            }
            let a = start.max(*first);
            let b = end.min(first + p.vect.n_data as usize);
            out[done - start..a - start].fill(f64::NAN);
            let o = &mut out[a - start..b - start];
            if p.valid {
                self.read_piece(k, (a - first) as u64, o).map_err(|e| {
                    anyhow!(
                        "{e} (channel {}, frame {})",
                        crate::io::shown(&self.name),
                        p.frame
                    )
                })?;
            } else {
                o.fill(f64::NAN);
            }
            done = b;
            k += 1;
        }
        out[done - start..].fill(f64::NAN);
        Ok(())
    }

    /// Read samples `[start_gps, start_gps + out.len() / rate)`: as
    /// [`GwfChannel::read_samples`] from the sample at `start_gps`.
    ///
    /// # Errors
    /// A time that is not on the sample grid or outside the channel, and as
    /// [`GwfChannel::read_samples`].
    pub fn read_gps(&self, start_gps: f64, out: &mut [f64]) -> Result<()> {
        let i = self.index_at(start_gps).ok_or_else(|| {
            anyhow!(
                "{}: channel {}: GPS {start_gps} is not a sample time of the channel ({} samples at {} Hz from {})",
                self.src.path.display(),
                crate::io::shown(&self.name),
                self.len,
                self.rate_hz,
                self.start_gps
            )
        })?;
        self.read_samples(i, out)
    }

    fn verify(&self, k: usize) -> Result<()> {
        if self.verified[k].load(Ordering::Acquire) {
            return Ok(());
        }
        let v = &self.pieces[k].1.vect;
        if v.chk_type == 1 {
            let mut c = super::crc::Cksum::new();
            let mut buf = vec![0u8; (v.struct_len as usize).min(1 << 20)];
            let mut pos = v.struct_pos;
            let end = v.struct_pos + v.struct_len - 4;
            while pos < end {
                let n = ((end - pos) as usize).min(buf.len());
                self.read_at(&mut buf[..n], pos)?;
                c.update(&buf[..n]);
                pos += n as u64;
            }
            let mut stored = [0u8; 4];
            self.src.file.read_exact_at(&mut stored, end).map_err(|e| {
                anyhow!("{}: reading FrVect checksum: {e}", self.src.path.display())
            })?;
            self.check_crc(v, u32::from_le_bytes(stored), c.value())?;
        }
        self.verified[k].store(true, Ordering::Release);
        Ok(())
    }

    fn read_at(&self, buf: &mut [u8], pos: u64) -> Result<()> {
        self.src.file.read_exact_at(buf, pos).map_err(|e| {
            anyhow!(
                "{}: reading FrVect at byte {pos}: {e}",
                self.src.path.display()
            )
        })
    }

    fn check_crc(&self, v: &VectMeta, stored: u32, computed: u32) -> Result<()> {
        if stored != computed {
            bail!(
                "{}: FrVect at byte {}: field chkSum: checksum mismatch (stored {stored:#010x}, computed {computed:#010x}): the file is corrupt",
                self.src.path.display(),
                v.struct_pos,
            );
        }
        Ok(())
    }

    /// Piece `k`'s vector decoded whole, from the pool or decoded now:
    /// `None` when it is too large for that (see [`WHOLE_BYTES`]) or the
    /// one-call decoder refuses its data (then the streaming decoder reads
    /// it, and reports any error exactly as it always did). The structure
    /// is read once, its checksum verified on those bytes (first use only),
    /// and its data decoded from them.
    fn whole_vector(&self, k: usize) -> Result<Option<Arc<Vec<u8>>>> {
        let v = &self.pieces[k].1.vect;
        let elems_bytes = v.n_data.saturating_mul(v.elem.size() as u64);
        // Zero suppression reads faster through the stream, which decodes
        // straight to f64 (f32 noise: 284-317 against 232-270 MB/s whole).
        if elems_bytes > self.whole_limit
            || v.struct_len > 2 * self.whole_limit
            || v.compression == Compression::ZeroSuppress
        {
            return Ok(None);
        }
        let (mut bytes, mut elems) = {
            let mut pool = self
                .pool
                .lock()
                .map_err(|_| anyhow!("cursor pool poisoned"))?;
            pool.tick += 1;
            let tick = pool.tick;
            if let Some(w) = pool.whole.iter_mut().find(|w| w.piece == k) {
                w.used = tick;
                return Ok(Some(w.elems.clone()));
            }
            (pool.take_bytes(), pool.take_bytes())
        };
        let len = v.struct_len as usize;
        bytes.clear();
        bytes.resize(len, 0);
        self.read_at(&mut bytes, v.struct_pos)?;
        if v.chk_type == 1 && !self.verified[k].load(Ordering::Acquire) {
            let stored = u32::from_le_bytes(bytes[len - 4..].try_into().expect("4 bytes"));
            self.check_crc(v, stored, super::crc::cksum(&bytes[..len - 4]))?;
        }
        self.verified[k].store(true, Ordering::Release);
        let at = (v.data_pos - v.struct_pos) as usize;
        let (bytes, ok) = decode_whole(&self.src, v, bytes, at, &mut elems);
        let mut pool = self
            .pool
            .lock()
            .map_err(|_| anyhow!("cursor pool poisoned"))?;
        pool.keep_bytes(bytes);
        if !ok {
            pool.keep_bytes(elems);
            return Ok(None);
        }
        // Another reader may have decoded it meanwhile: keep one.
        if let Some(w) = pool.whole.iter().find(|w| w.piece == k) {
            let w = w.elems.clone();
            pool.keep_bytes(elems);
            return Ok(Some(w));
        }
        let elems = Arc::new(elems);
        pool.tick += 1;
        let used = pool.tick;
        pool.bytes += elems.capacity();
        pool.whole.push(Whole {
            piece: k,
            elems: elems.clone(),
            used,
        });
        pool.evict();
        Ok(Some(elems))
    }

    /// Samples `[a, a + out.len())` of piece `k`'s vector.
    fn read_piece(&self, k: usize, a: u64, out: &mut [f64]) -> Result<()> {
        let p = &self.pieces[k].1;
        if p.vect.compression == Compression::Raw {
            self.verify(k)?;
            return read_raw(&self.src, &p.vect, p.scale, a, out);
        }
        if let Some(w) = self.whole_vector(k)? {
            let size = p.vect.elem.size();
            let a = a as usize * size;
            samples_from_le(p.vect.elem, p.scale, &w[a..a + out.len() * size], out);
            return Ok(());
        }
        self.verify(k)?;
        let mut cur = self.take_cursor(k, a)?;
        // Pieces of at most half a window: after decoding up to a piece's
        // end the window still holds the whole piece.
        let step = (cur.cap / 2).max(1);
        let result = (|| -> Result<()> {
            for (j, o) in out.chunks_mut(step).enumerate() {
                let a = a + (j * step) as u64;
                let b = a + o.len() as u64;
                if cur.pos() < b {
                    if cur.pos() < a {
                        cur.advance((a - cur.pos()) as usize)?;
                    }
                    cur.advance((b - cur.pos()) as usize)?;
                }
                let lo = (a - cur.win_start) as usize;
                o.copy_from_slice(&cur.win[lo..lo + o.len()]);
            }
            Ok(())
        })();
        if cur.pos() == p.vect.n_data {
            cur.dec = None;
        }
        if result.is_ok() {
            self.put_cursor(cur);
        }
        result
    }

    /// A cursor of piece `k` whose window starts at or before `a` (the one
    /// furthest along), taken out of the pool, or a new one.
    fn take_cursor(&self, k: usize, a: u64) -> Result<Cursor> {
        {
            let mut pool = self
                .pool
                .lock()
                .map_err(|_| anyhow!("cursor pool poisoned"))?;
            let best = pool
                .cursors
                .iter()
                .enumerate()
                .filter(|(_, c)| {
                    c.piece == k && c.win_start <= a && (c.dec.is_some() || a < c.pos())
                })
                .max_by_key(|(_, c)| c.pos())
                .map(|(i, _)| i);
            if let Some(i) = best {
                let c = pool.cursors.swap_remove(i);
                pool.bytes -= c.bytes();
                return Ok(c);
            }
        }
        let p = &self.pieces[k].1;
        let n = p.vect.n_data as usize;
        Ok(Cursor {
            piece: k,
            dec: Some(Decoder::new(self.src.clone(), &p.vect, p.scale)?),
            win_start: 0,
            win: Vec::new(),
            cap: n.min(WINDOW_SAMPLES),
            used: 0,
        })
    }

    fn put_cursor(&self, mut c: Cursor) {
        let Ok(mut pool) = self.pool.lock() else {
            return;
        };
        pool.tick += 1;
        c.used = pool.tick;
        pool.bytes += c.bytes();
        pool.cursors.push(c);
        pool.evict();
    }
}

impl SampleSource for GwfChannel {
    fn rate_hz(&self) -> f64 {
        self.rate_hz
    }
    fn start_gps(&self) -> f64 {
        self.start_gps
    }
    fn len(&self) -> usize {
        self.len
    }
    fn read(&self, start: usize, out: &mut [f64]) -> Result<()> {
        self.read_samples(start, out)
    }
    fn describe(&self) -> String {
        format!(
            "{} (channel {})",
            self.src.path.display(),
            crate::io::shown(&self.name)
        )
    }
}

#[cfg(test)]
mod tests {
    use super::super::GwfFile;
    use std::path::PathBuf;

    /// Every channel of the gwframe codec fixtures (every element type and
    /// compression, `tests/data/gwf/README.md`) reads bit for bit the same
    /// through the whole-vector decoders as through the streaming ones,
    /// whole and in ranges that cross frames, from two threads at once.
    #[test]
    fn whole_vector_and_streaming_decoders_agree() {
        let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/data/gwf");
        let mut compared = 0;
        for codec in ["raw", "gzip", "diffgzip", "zs2", "zs4", "zs8", "zsgz"] {
            let f = GwfFile::open(&dir.join(format!("codecs_{codec}.gwf"))).unwrap();
            let names: Vec<String> = f.channel_names().map(|(n, _)| n.to_string()).collect();
            for name in names {
                let whole = f.channel(&name).unwrap();
                let mut stream = f.channel(&name).unwrap();
                stream.whole_limit = 0;
                let n = whole.len;
                let (mut a, mut b) = (vec![0.0; n], vec![0.0; n]);
                rayon::join(
                    || whole.read_samples(0, &mut a).unwrap(),
                    || stream.read_samples(0, &mut b).unwrap(),
                );
                let bits = |x: &[f64]| x.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
                assert_eq!(bits(&a), bits(&b), "{codec} {name}");
                for (lo, hi) in [(n / 3 + 1, n - 2), (1, n / 2 + 3), (0, n)] {
                    let mut part = vec![0.0; hi - lo];
                    whole.read_samples(lo, &mut part).unwrap();
                    assert_eq!(bits(&part), bits(&a[lo..hi]), "{codec} {name} [{lo}, {hi})");
                }
                compared += 1;
            }
        }
        assert!(compared > 100, "{compared} channels compared");
    }
}
