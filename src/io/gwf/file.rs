//! An open frame file: file header, FrEndOfFile, the table of contents
//! (FrTOC), channel structures and the dictionary (FrSH/FrSE).
use super::channel::GwfChannel;
use super::crc::Cksum;
use super::format::{
    compression_of, parse_file_header, Compression, ElemType, FileHeader, Ptr, StructReader,
    COMMON_LEN, END_OF_FILE_LEN, FILE_HEADER_LEN,
};
use super::vect::{Scale, Source, VectMeta};
use anyhow::{anyhow, bail, Result};
use std::collections::HashMap;
use std::fs::File;
use std::os::unix::fs::FileExt;
use std::path::Path;
use std::sync::Arc;

/// Which structure holds a channel.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum ChannelKind {
    /// FrAdcData: raw ADC samples, with a slope and bias.
    Adc,
    /// FrProcData: processed data (time series only are read).
    Proc,
    /// FrSimData: simulated data.
    Sim,
}

impl ChannelKind {
    /// `adc`, `proc` or `sim`.
    pub fn name(self) -> &'static str {
        match self {
            ChannelKind::Adc => "adc",
            ChannelKind::Proc => "proc",
            ChannelKind::Sim => "sim",
        }
    }

    /// The structure's class name.
    pub fn class_name(self) -> &'static str {
        match self {
            ChannelKind::Adc => "FrAdcData",
            ChannelKind::Proc => "FrProcData",
            ChannelKind::Sim => "FrSimData",
        }
    }
}

/// One frame, from the table of contents.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FrameInfo {
    /// GPS start time \[ns\] (`GTimeS × 10⁹ + GTimeN`).
    pub gps_start_ns: i64,
    /// Duration \[s\] (`dt`).
    pub duration_s: f64,
    /// Run number.
    pub run: i32,
    /// Frame number.
    pub frame: u32,
    /// Data-quality word.
    pub data_quality: u32,
    /// Byte offset of the frame header (FrameH).
    pub position: u64,
}

impl FrameInfo {
    /// GPS start time \[s\].
    pub fn start_gps(&self) -> f64 {
        self.gps_start_ns as f64 * 1e-9
    }

    /// GPS end time \[s\].
    pub fn end_gps(&self) -> f64 {
        self.start_gps() + self.duration_s
    }
}

/// What a listing needs to know about a channel (from its first frame).
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelInfo {
    /// Channel name.
    pub name: String,
    /// ADC, processed or simulated.
    pub kind: ChannelKind,
    /// Sample rate \[Hz\] (`1 / dx` of the data vector).
    pub rate_hz: f64,
    /// Element type of the stored samples.
    pub elem: ElemType,
    /// Compression of the first frame's vector.
    pub compression: Compression,
    /// Unit of the values returned: an ADC channel's calibrated unit
    /// (`units`) when its slope or bias is not the identity, else the
    /// vector's `unitY`.
    pub unit: String,
    /// ADC slope \[unit/count\] (1 for other kinds).
    pub slope: f64,
    /// ADC bias \[unit\] (0 for other kinds).
    pub bias: f64,
    /// Number of frames of the file that hold the channel.
    pub frames: usize,
}

/// A class described by the file's dictionary (one FrSH and its FrSE).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ClassDef {
    /// Class name (`FrVect`, ...).
    pub name: String,
    /// Class id used in this file's structure headers.
    pub id: u16,
    /// Comment.
    pub comment: String,
    /// Fields in order: (name, type as written, comment).
    pub fields: Vec<(String, String, String)>,
}

/// A channel's entry in the table of contents.
#[derive(Debug, Clone)]
struct TocChannel {
    name: String,
    kind: ChannelKind,
    /// File offset of its `nFrame` structure positions (INT_8U each).
    positions_at: u64,
}

/// An open frame file (format version 8). Opening reads the file header,
/// FrEndOfFile and the table of contents only; channel data are read on
/// demand through [`GwfFile::channel`].
///
/// A file without a table of contents is refused with a clear error: random
/// access by channel needs it, and every writer of the format used here
/// (the reference library, and [`super::GwfWriter`]) writes one.
#[derive(Debug)]
pub struct GwfFile {
    src: Arc<Source>,
    header: FileHeader,
    frames: Vec<FrameInfo>,
    channels: Vec<TocChannel>,
    by_name: HashMap<String, usize>,
    class_ids: HashMap<String, u16>,
    leap_s: i16,
    stored_file_checksum: u32,
}

/// Largest number of structures walked from a channel structure to its data
/// vector (the vector follows its owner, after at most a few dictionary
/// entries and auxiliary vectors).
const MAX_WALK: usize = 64;

/// Largest ratio of decompressed to compressed bytes accepted for a vector
/// (zlib cannot exceed about 1032; zero suppression of constant data with
/// the reference library's block sizes stays below 100).
const MAX_EXPANSION: f64 = 4096.0;

impl GwfFile {
    /// Open a frame file: validate the file header (checksum included),
    /// FrEndOfFile and the table of contents (checksum verified).
    ///
    /// # Errors
    /// One line naming the file and the structure/field: not a frame file,
    /// another format version, a big-endian file, no table of contents,
    /// checksum mismatches, truncation, impossible counts or positions.
    pub fn open(path: &Path) -> Result<GwfFile> {
        let file = File::open(path).map_err(|e| anyhow!("{}: cannot open: {e}", path.display()))?;
        let meta = file
            .metadata()
            .map_err(|e| anyhow!("{}: cannot stat: {e}", path.display()))?;
        if !meta.is_file() {
            bail!("{}: not a regular file", path.display());
        }
        let len = meta.len();
        let mut head = [0u8; FILE_HEADER_LEN];
        let n = read_up_to(&file, &mut head, 0)
            .map_err(|e| anyhow!("{}: cannot read the file header: {e}", path.display()))?;
        let header =
            parse_file_header(&head[..n]).map_err(|e| anyhow!("{}: {e}", path.display()))?;
        if len < FILE_HEADER_LEN as u64 + END_OF_FILE_LEN {
            bail!(
                "{}: truncated: {len} bytes cannot hold a file header and FrEndOfFile",
                path.display()
            );
        }
        let src = Arc::new(Source {
            file,
            path: path.to_path_buf(),
            len,
        });

        // FrEndOfFile: nFrames, nBytes, seekTOC, chkSumFrHeader, chkSum, chkSumFile.
        let eof_pos = len - END_OF_FILE_LEN;
        let mut r = StructReader::open(&src.file, path, len, eof_pos, "FrEndOfFile", 64)?;
        if r.len != END_OF_FILE_LEN {
            bail!(
                "{}: the last {END_OF_FILE_LEN} bytes are not a FrEndOfFile structure (length field {}): truncated or not a version 8 file",
                path.display(),
                r.len
            );
        }
        let n_frames_eof = r.u32("nFrames")?;
        let n_bytes = r.u64("nBytes")?;
        let seek_toc = r.u64("seekTOC")?;
        let chk_header = r.u32("chkSumFrHeader")?;
        // The structure checksum precedes chkSumFile: read it as the last
        // checked field of a 42-byte structure.
        r.len = END_OF_FILE_LEN - 4;
        r.finish()?;
        let mut tail = [0u8; 4];
        src.file
            .read_exact_at(&mut tail, len - 4)
            .map_err(|e| anyhow!("{}: reading chkSumFile: {e}", path.display()))?;
        let stored_file_checksum = u32::from_le_bytes(tail);
        if n_bytes != 0 && n_bytes != len {
            bail!(
                "{}: FrEndOfFile says the file has {n_bytes} bytes but it has {len}: truncated or appended to",
                path.display()
            );
        }
        if header.checksum_type == 1 && chk_header != 0 && chk_header != super::crc::cksum(&head) {
            bail!(
                "{}: file header checksum mismatch (FrEndOfFile chkSumFrHeader): the file is corrupt",
                path.display()
            );
        }
        if seek_toc == 0 {
            bail!(
                "{}: no table of contents (FrTOC): files without one are not supported; \
                 rewrite the file with a table of contents",
                path.display()
            );
        }
        if seek_toc > eof_pos || len - seek_toc < FILE_HEADER_LEN as u64 {
            bail!(
                "{}: FrEndOfFile field seekTOC: {seek_toc} bytes back from the end is outside the file",
                path.display()
            );
        }
        let toc_pos = len - seek_toc;
        let mut f = GwfFile {
            src: src.clone(),
            header,
            frames: Vec::new(),
            channels: Vec::new(),
            by_name: HashMap::new(),
            class_ids: HashMap::new(),
            leap_s: 0,
            stored_file_checksum,
        };
        f.read_toc(toc_pos, eof_pos)?;
        if f.frames.len() != n_frames_eof as usize {
            bail!(
                "{}: FrTOC lists {} frames but FrEndOfFile says {n_frames_eof}",
                path.display(),
                f.frames.len()
            );
        }
        Ok(f)
    }

    fn read_toc(&mut self, pos: u64, eof_pos: u64) -> Result<()> {
        let src = self.src.clone();
        let path = src.path.as_path();
        let mut r = StructReader::open(&src.file, path, eof_pos, pos, "FrTOC", 1 << 16)?;
        self.leap_s = r.i16("ULeapS")?;
        let nf = r.count("nFrame", 4 + 4 + 4 + 8 + 4 + 4 + 8 * 5)?;
        let dq = r.u32s("dataQuality", nf)?;
        let gs = r.u32s("GTimeS", nf)?;
        let gn = r.u32s("GTimeN", nf)?;
        let dt = r.f64s("dt", nf)?;
        let runs = r.u32s("runs", nf)?;
        let frame = r.u32s("frame", nf)?;
        let pos_h = r.u64s("positionH", nf)?;
        for field in ["nFirstADC", "nFirstSer", "nFirstTable", "nFirstMsg"] {
            r.skip(8 * nf, field)?;
        }
        for k in 0..nf as usize {
            if gn[k] >= 1_000_000_000 {
                return Err(r.err(
                    "GTimeN",
                    format!("frame {k}: {} ns is not below 1 s", gn[k]),
                ));
            }
            if !(dt[k].is_finite() && dt[k] > 0.0) {
                return Err(r.err("dt", format!("frame {k}: duration {} s", dt[k])));
            }
            if pos_h[k] >= pos {
                return Err(r.err(
                    "positionH",
                    format!("frame {k}: byte {} is not before the FrTOC", pos_h[k]),
                ));
            }
            self.frames.push(FrameInfo {
                gps_start_ns: gs[k] as i64 * 1_000_000_000 + gn[k] as i64,
                duration_s: dt[k],
                run: runs[k] as i32,
                frame: frame[k],
                data_quality: dq[k],
                position: pos_h[k],
            });
        }
        let nsh = r.count("nSH", 2 + 2)?;
        let ids: Vec<u16> = (0..nsh).map(|_| r.u16("SHid")).collect::<Result<_>>()?;
        let names = r.strings("SHname", nsh)?;
        for (id, name) in ids.into_iter().zip(names) {
            self.class_ids.insert(name, id);
        }
        let ndet = r.count("nDetector", 2 + 8)?;
        r.strings("nameDetector", ndet)?;
        r.skip(8 * ndet, "positionDetector")?;
        let nstat = r.count("nStatType", 2 + 2 + 4)?;
        r.strings("nameStat", nstat)?;
        r.strings("detector", nstat)?;
        r.skip(4 * nstat, "nStatInstance")?;
        let ntot = r.count("nTotalStat", 4 + 4 + 4 + 8)?;
        r.skip(20 * ntot, "tStart/tEnd/version/positionStat")?;
        let nadc = r.count("nADC", 2 + 4 + 4 + 8 * nf)?;
        let adc_names = r.strings("name", nadc)?;
        r.skip(8 * nadc, "channelID/groupID")?;
        let at = r.pos();
        r.skip(8 * nadc * nf, "positionADC")?;
        self.add_channels(adc_names, ChannelKind::Adc, at, nf, &r)?;
        let nproc = r.count("nProc", 2 + 8 * nf)?;
        let proc_names = r.strings("nameProc", nproc)?;
        let at = r.pos();
        r.skip(8 * nproc * nf, "positionProc")?;
        self.add_channels(proc_names, ChannelKind::Proc, at, nf, &r)?;
        let nsim = r.count("nSim", 2 + 8 * nf)?;
        let sim_names = r.strings("nameSim", nsim)?;
        let at = r.pos();
        r.skip(8 * nsim * nf, "positionSim")?;
        self.add_channels(sim_names, ChannelKind::Sim, at, nf, &r)?;
        // Serial, summary, event and simulated-event lists follow; `finish`
        // reads through them for the checksum.
        r.finish()
    }

    fn add_channels(
        &mut self,
        names: Vec<String>,
        kind: ChannelKind,
        at: u64,
        nf: u64,
        r: &StructReader,
    ) -> Result<()> {
        for (i, name) in names.into_iter().enumerate() {
            if self.by_name.contains_key(&name) {
                return Err(r.err(
                    kind.class_name(),
                    format!("channel {} is listed twice", crate::io::shown(&name)),
                ));
            }
            self.by_name.insert(name.clone(), self.channels.len());
            self.channels.push(TocChannel {
                name,
                kind,
                positions_at: at + 8 * nf * i as u64,
            });
        }
        Ok(())
    }

    /// The file's path.
    pub fn path(&self) -> &Path {
        &self.src.path
    }

    /// File length \[bytes\].
    pub fn len_bytes(&self) -> u64 {
        self.src.len
    }

    /// The validated file header.
    pub fn header(&self) -> FileHeader {
        self.header
    }

    /// Leap seconds (GPS − UTC) recorded in the table of contents.
    pub fn leap_seconds(&self) -> i16 {
        self.leap_s
    }

    /// The frames, in file order.
    pub fn frames(&self) -> &[FrameInfo] {
        &self.frames
    }

    /// Channel names and kinds from the table of contents (no I/O).
    pub fn channel_names(&self) -> impl Iterator<Item = (&str, ChannelKind)> {
        self.channels.iter().map(|c| (c.name.as_str(), c.kind))
    }

    /// Whether the file holds a channel of that name.
    pub fn has_channel(&self, name: &str) -> bool {
        self.by_name.contains_key(name)
    }

    /// Details of every channel (reads each channel's structure and vector
    /// header in the first frame that holds it: a few small reads each).
    ///
    /// # Errors
    /// As [`GwfFile::channel_info`].
    pub fn channels(&self) -> Result<Vec<ChannelInfo>> {
        self.channels
            .iter()
            .map(|c| self.channel_info(&c.name))
            .collect()
    }

    /// Details of one channel, from the first frame that holds it.
    ///
    /// # Errors
    /// Unknown channel, corrupt structures, or a channel whose samples the
    /// reader does not convert (complex or string vectors, frequency series,
    /// unsupported compression), naming file and channel.
    pub fn channel_info(&self, name: &str) -> Result<ChannelInfo> {
        let i = self.index_of(name)?;
        let positions = self.positions(i)?;
        let mut frames = 0;
        let mut first = None;
        for (k, &p) in positions.iter().enumerate() {
            if present(p) {
                frames += 1;
                if first.is_none() {
                    first = Some((k, p));
                }
            }
        }
        let (k, p) = first.ok_or_else(|| {
            anyhow!(
                "{}: channel {} is in the table of contents but in no frame",
                self.path().display(),
                crate::io::shown(name)
            )
        })?;
        let piece = self.read_piece(i, k, p)?;
        Ok(ChannelInfo {
            name: name.to_string(),
            kind: self.channels[i].kind,
            rate_hz: 1.0 / piece.vect.dx,
            elem: piece.vect.elem,
            compression: piece.vect.compression,
            unit: piece.unit,
            slope: piece.scale.slope,
            bias: piece.scale.bias,
            frames,
        })
    }

    /// Open one channel for reading samples: reads its structure and vector
    /// header in every frame (two small reads per frame) and checks that the
    /// frames lie on one sample grid. Frames without the channel, and time
    /// between frames, read as NaN (dropouts).
    ///
    /// # Errors
    /// As [`GwfFile::channel_info`], plus frames whose sample spacing
    /// differs or whose samples overlap or fall off one grid.
    pub fn channel(&self, name: &str) -> Result<GwfChannel> {
        let i = self.index_of(name)?;
        let positions = self.positions(i)?;
        let mut pieces = Vec::new();
        for (k, &p) in positions.iter().enumerate() {
            if present(p) {
                pieces.push(self.read_piece(i, k, p)?);
            }
        }
        GwfChannel::new(self.src.clone(), name, self.channels[i].kind, pieces)
    }

    fn index_of(&self, name: &str) -> Result<usize> {
        self.by_name.get(name).copied().ok_or_else(|| {
            anyhow!(
                "{}: no channel {} in this file ({} channels; `channels()` lists them)",
                self.path().display(),
                crate::io::shown(name),
                self.channels.len()
            )
        })
    }

    /// The channel's structure position in each frame (0 = absent).
    fn positions(&self, i: usize) -> Result<Vec<u64>> {
        let nf = self.frames.len();
        let mut b = vec![0u8; 8 * nf];
        self.src
            .file
            .read_exact_at(&mut b, self.channels[i].positions_at)
            .map_err(|e| anyhow!("{}: reading FrTOC positions: {e}", self.path().display()))?;
        Ok(b.chunks_exact(8)
            .map(|c| u64::from_le_bytes(c.try_into().expect("8 bytes")))
            .collect())
    }

    fn class_id(&self, name: &str) -> Result<u16> {
        self.class_ids.get(name).copied().ok_or_else(|| {
            anyhow!(
                "{}: FrTOC field SHname: the file defines no {name} structure",
                self.path().display()
            )
        })
    }

    /// Read channel `i`'s structure in frame `k` (at byte `pos`) and find
    /// its data vector.
    fn read_piece(&self, i: usize, k: usize, pos: u64) -> Result<Piece> {
        let ch = &self.channels[i];
        let path = self.path();
        let shown = crate::io::shown(&ch.name);
        let what = format!("{} of {shown} (frame {k})", ch.kind.class_name());
        let frame_ns = self.frames[k].gps_start_ns;
        if pos >= self.src.len {
            bail!(
                "{}: FrTOC: {what} at byte {pos} is beyond the end of the file",
                path.display()
            );
        }
        let want_class = self.class_id(ch.kind.class_name())?;
        let mut r =
            StructReader::open(&self.src.file, path, self.src.len, pos, what.clone(), 1024)?;
        if r.class != want_class {
            return Err(r.err(
                "class",
                format!(
                "the table of contents points to a structure of class {} (expected {want_class})",
                r.class
            ),
            ));
        }
        let name = r.string("name")?;
        if name != ch.name {
            return Err(r.err(
                "name",
                format!(
                    "the table of contents points to channel {}",
                    crate::io::shown(&name)
                ),
            ));
        }
        r.string("comment")?;
        let (scale, units, time_offset, valid, data) = match ch.kind {
            ChannelKind::Adc => {
                r.u32("channelGroup")?;
                r.u32("channelNumber")?;
                r.u32("nBits")?;
                let bias = r.f32("bias")? as f64;
                let slope = r.f32("slope")? as f64;
                let units = r.string("units")?;
                r.f64("sampleRate")?;
                let off = r.f64("timeOffset")?;
                r.f64("fShift")?;
                r.f32("phase")?;
                let valid = r.u16("dataValid")? == 0;
                let data = r.ptr("data")?;
                r.ptr("aux")?;
                r.ptr("next")?;
                if !(slope.is_finite() && bias.is_finite()) {
                    return Err(r.err(
                        "slope",
                        format!("slope {slope} or bias {bias} is not finite"),
                    ));
                }
                (Scale { slope, bias }, Some(units), off, valid, data)
            }
            ChannelKind::Proc => {
                let ty = r.u16("type")?;
                r.u16("subType")?;
                let off = r.f64("timeOffset")?;
                r.f64("tRange")?;
                r.f64("fShift")?;
                r.f32("phase")?;
                r.f64("fRange")?;
                r.f64("BW")?;
                let naux = r.u16("nAuxParam")? as u64;
                r.f64s("auxParam", naux)?;
                r.strings("auxParamNames", naux)?;
                let data = r.ptr("data")?;
                for f in ["aux", "table", "history", "next"] {
                    r.ptr(f)?;
                }
                if ty != 1 {
                    return Err(r.err("type", format!(
                        "FrProcData of type {ty} is not a time series (type 1); only time series are read"
                    )));
                }
                (Scale::IDENTITY, None, off, true, data)
            }
            ChannelKind::Sim => {
                r.f64("sampleRate")?;
                let off = r.f64("timeOffset")?;
                r.f64("fShift")?;
                r.f32("phase")?;
                let data = r.ptr("data")?;
                for f in ["input", "table", "next"] {
                    r.ptr(f)?;
                }
                (Scale::IDENTITY, None, off, true, data)
            }
        };
        if !time_offset.is_finite() {
            return Err(r.err("timeOffset", format!("{time_offset} s is not finite")));
        }
        let end = r.start + r.len;
        r.finish()?;
        if data.is_null() {
            bail!("{}: {what}: field data: no data vector", path.display());
        }
        let vect = self.find_vect(end, data, &what)?;
        // A vector longer than its frame, or one that claims to expand more
        // than MAX_EXPANSION times, is corrupt (and would make readers decode
        // without end).
        let span_s = vect.n_data as f64 * vect.dx;
        if span_s > self.frames[k].duration_s * (1.0 + 1e-9) + vect.dx {
            bail!(
                "{}: {what}: its vector of {} samples spans {span_s} s, more than the frame's {} s",
                path.display(),
                vect.n_data,
                self.frames[k].duration_s
            );
        }
        let raw_bytes = vect.n_data as f64 * vect.elem.size() as f64;
        if raw_bytes > MAX_EXPANSION * (vect.n_bytes.max(64) as f64) {
            bail!(
                "{}: {what}: {} compressed bytes cannot hold {} samples (corrupt vector)",
                path.display(),
                vect.n_bytes,
                vect.n_data
            );
        }
        let unit = match units {
            Some(u) if scale != Scale::IDENTITY => u,
            _ => vect.unit_y.clone(),
        };
        Ok(Piece {
            frame: k,
            frame_ns,
            time_offset_s: time_offset,
            vect,
            scale,
            valid,
            unit,
        })
    }

    /// Walk forward from `from` to the FrVect `ptr` points to and read its
    /// header and trailer.
    fn find_vect(&self, from: u64, ptr: Ptr, what: &str) -> Result<VectMeta> {
        let path = self.path();
        let vect_class = self.class_id("FrVect")?;
        if ptr.class != vect_class {
            bail!(
                "{}: {what}: field data: points to class {} (FrVect is {vect_class})",
                path.display(),
                ptr.class
            );
        }
        let mut pos = from;
        for _ in 0..MAX_WALK {
            let mut h = [0u8; COMMON_LEN as usize];
            if pos + COMMON_LEN > self.src.len {
                break;
            }
            self.src
                .file
                .read_exact_at(&mut h, pos)
                .map_err(|e| anyhow!("{}: {what}: reading at byte {pos}: {e}", path.display()))?;
            let len = u64::from_le_bytes(h[..8].try_into().expect("8 bytes"));
            let class = h[9] as u16;
            let inst = u32::from_le_bytes(h[10..14].try_into().expect("4 bytes"));
            if len < COMMON_LEN + 4 || pos.checked_add(len).is_none_or(|e| e > self.src.len) {
                bail!(
                    "{}: {what}: structure at byte {pos} has impossible length {len}",
                    path.display()
                );
            }
            if class == vect_class && inst == ptr.instance {
                return self.read_vect(pos, what);
            }
            pos += len;
        }
        bail!(
            "{}: {what}: its data vector (FrVect instance {}) does not follow it in the file",
            path.display(),
            ptr.instance
        )
    }

    fn read_vect(&self, pos: u64, owner: &str) -> Result<VectMeta> {
        let path = self.path();
        let what = format!("FrVect of {owner}");
        let mut r = StructReader::open(&self.src.file, path, self.src.len, pos, what.clone(), 512)?;
        let struct_len = r.len;
        let chk_type = r.chk_type;
        r.string("name")?;
        let compress = r.u16("compress")?;
        let ty = r.u16("type")?;
        let n_data = r.u64("nData")?;
        let n_bytes = r.u64("nBytes")?;
        let elem = ElemType::from_code(ty)
            .ok_or_else(|| r.err("type", format!("unknown element type code {ty}")))?;
        if !elem.is_real() {
            return Err(r.err(
                "type",
                format!(
                    "{} samples are not supported (only real integer and float channels)",
                    elem.name()
                ),
            ));
        }
        let compression = compression_of(compress, elem).map_err(|e| r.err("compress", e))?;
        let data_pos = r.pos();
        if n_bytes > r.left() {
            return Err(r.err(
                "nBytes",
                format!("{n_bytes} data bytes do not fit in the structure (length {struct_len})"),
            ));
        }
        if compression == Compression::Raw
            && n_data.checked_mul(elem.size() as u64) != Some(n_bytes)
        {
            return Err(r.err(
                "nBytes",
                format!(
                    "{n_bytes} bytes for {n_data} uncompressed {} elements",
                    elem.name()
                ),
            ));
        }
        if n_data == 0 {
            return Err(r.err("nData", "empty vector"));
        }
        let end = pos + struct_len;
        let mut t = StructReader::part(&self.src.file, path, data_pos + n_bytes, end - 4, what);
        let ndim = t.u32("nDim")? as u64;
        if ndim != 1 {
            return Err(t.err(
                "nDim",
                format!("{ndim} dimensions (need a 1-D time series)"),
            ));
        }
        let nx = t.u64("nx")?;
        let dx = t.f64("dx")?;
        let start_x = t.f64("startX")?;
        t.string("unitX")?;
        let unit_y = t.string("unitY")?;
        let next = t.ptr("next")?;
        if nx != n_data {
            return Err(t.err("nx", format!("{nx} elements but nData is {n_data}")));
        }
        if !(dx.is_finite() && dx > 0.0 && (1.0 / dx).is_finite()) {
            return Err(t.err("dx", format!("sample spacing {dx} s")));
        }
        if !start_x.is_finite() {
            return Err(t.err("startX", format!("{start_x} s is not finite")));
        }
        if !next.is_null() {
            return Err(t.err("next", "chained vectors are not supported"));
        }
        Ok(VectMeta {
            struct_pos: pos,
            struct_len,
            chk_type,
            data_pos,
            n_bytes,
            n_data,
            elem,
            compress,
            compression,
            dx,
            start_x,
            unit_y,
        })
    }

    /// The dictionary: every FrSH/FrSE of the file up to the end of the
    /// first frame (a header-only walk: each structure's common header is
    /// read and skipped; dictionary entries are read). The reader uses the
    /// specification's version 8 layouts; tests compare them with this.
    ///
    /// # Errors
    /// Corrupt structures, naming the file and byte offset.
    pub fn dictionary(&self) -> Result<Vec<ClassDef>> {
        let path = self.path();
        let mut defs: Vec<ClassDef> = Vec::new();
        let end_of_frame = self.class_ids.get("FrEndOfFrame").copied();
        let mut pos = FILE_HEADER_LEN as u64;
        while pos + COMMON_LEN <= self.src.len {
            let mut r =
                StructReader::open(&self.src.file, path, self.src.len, pos, "structure", 512)?;
            let next = pos + r.len;
            match r.class {
                1 => {
                    r.rename("FrSH");
                    let name = r.string("name")?;
                    let id = r.u16("class")?;
                    let comment = r.string("comment")?;
                    r.finish()?;
                    defs.push(ClassDef {
                        name,
                        id,
                        comment,
                        fields: Vec::new(),
                    });
                }
                2 => {
                    r.rename("FrSE");
                    let name = r.string("name")?;
                    let ty = r.string("class")?;
                    let comment = r.string("comment")?;
                    r.finish()?;
                    match defs.last_mut() {
                        Some(d) => d.fields.push((name, ty, comment)),
                        None => bail!("{}: FrSE at byte {pos} before any FrSH", path.display()),
                    }
                }
                c if Some(c) == end_of_frame => break,
                _ => {}
            }
            pos = next;
        }
        Ok(defs)
    }

    /// Verify the whole-file checksum (FrEndOfFile `chkSumFile`) by reading
    /// the file once, in 1 MB pieces. Not done by [`GwfFile::open`], which
    /// never reads whole files; every structure read is checked on its own.
    ///
    /// # Errors
    /// A mismatch or I/O error, naming the file.
    pub fn verify_file_checksum(&self) -> Result<()> {
        if self.header.checksum_type != 1 || self.stored_file_checksum == 0 {
            return Ok(());
        }
        let mut c = Cksum::new();
        let mut buf = vec![0u8; 1 << 20];
        let mut pos = 0;
        let end = self.src.len - 4;
        while pos < end {
            let n = (end - pos).min(buf.len() as u64) as usize;
            self.src
                .file
                .read_exact_at(&mut buf[..n], pos)
                .map_err(|e| anyhow!("{}: reading at byte {pos}: {e}", self.path().display()))?;
            c.update(&buf[..n]);
            pos += n as u64;
        }
        if c.value() != self.stored_file_checksum {
            bail!(
                "{}: file checksum mismatch (FrEndOfFile chkSumFile stored {:#010x}, computed {:#010x}): the file is corrupt",
                self.path().display(),
                self.stored_file_checksum,
                c.value()
            );
        }
        Ok(())
    }
}

/// A channel's data in one frame: where its vector is and how to read it.
#[derive(Debug, Clone)]
pub(crate) struct Piece {
    /// Frame index in the file.
    pub frame: usize,
    /// Frame GPS start \[ns\].
    pub frame_ns: i64,
    /// Channel time offset within the frame \[s\].
    pub time_offset_s: f64,
    /// The data vector.
    pub vect: VectMeta,
    /// ADC calibration.
    pub scale: Scale,
    /// False when an ADC's dataValid flag marks the data invalid (read as NaN).
    pub valid: bool,
    /// Unit of the values returned.
    pub unit: String,
}

/// A TOC position that points to a structure (0 and all-ones mean absent).
fn present(p: u64) -> bool {
    p != 0 && p != u64::MAX
}

/// Read as many bytes as the file has, up to `buf.len()`.
fn read_up_to(file: &File, buf: &mut [u8], pos: u64) -> std::io::Result<usize> {
    let mut n = 0;
    while n < buf.len() {
        match file.read_at(&mut buf[n..], pos + n as u64)? {
            0 => break,
            k => n += k,
        }
    }
    Ok(n)
}
