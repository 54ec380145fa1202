//! A streaming frame-file writer (format version 8): frames are written as
//! they are given (one vector's compressed bytes in memory at a time), the
//! table of contents and FrEndOfFile at [`GwfWriter::finish`]. Every
//! structure carries its checksum and the file its file checksum. The file
//! is written under a temporary name in the same directory and renamed into
//! place by `finish`, so a crash leaves no half-written `.gwf` behind.
//!
//! Layout, as the reference library writes it: the dictionary entry (FrSH
//! and its FrSE) of each class before the class's first structure; per
//! frame FrameH, then FrRawData and the ADC channels (each FrAdcData followed
//! by its FrVect), the processed channels (FrProcData + FrVect), the
//! simulated channels (FrSimData + FrVect) and FrEndOfFrame; instances count
//! from 0 in each frame; class ids are the reference library's.
use super::crc::Cksum;
use super::file::ChannelKind;
use super::format::{Compression, ElemType, FILE_HEADER_LEN, VERSION};
use anyhow::{bail, Context, Result};
use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

/// Samples of one channel in one frame, in their stored type.
#[derive(Debug, Clone, Copy)]
pub enum Samples<'a> {
    /// int8
    I8(&'a [i8]),
    /// int16
    I16(&'a [i16]),
    /// int32
    I32(&'a [i32]),
    /// int64
    I64(&'a [i64]),
    /// uint8
    U8(&'a [u8]),
    /// uint16
    U16(&'a [u16]),
    /// uint32
    U32(&'a [u32]),
    /// uint64
    U64(&'a [u64]),
    /// float32
    F32(&'a [f32]),
    /// float64
    F64(&'a [f64]),
}

impl Samples<'_> {
    /// Element type.
    pub fn elem(&self) -> ElemType {
        match self {
            Samples::I8(_) => ElemType::I8,
            Samples::I16(_) => ElemType::I16,
            Samples::I32(_) => ElemType::I32,
            Samples::I64(_) => ElemType::I64,
            Samples::U8(_) => ElemType::U8,
            Samples::U16(_) => ElemType::U16,
            Samples::U32(_) => ElemType::U32,
            Samples::U64(_) => ElemType::U64,
            Samples::F32(_) => ElemType::F32,
            Samples::F64(_) => ElemType::F64,
        }
    }

    /// Number of samples.
    pub fn len(&self) -> usize {
        match self {
            Samples::I8(x) => x.len(),
            Samples::I16(x) => x.len(),
            Samples::I32(x) => x.len(),
            Samples::I64(x) => x.len(),
            Samples::U8(x) => x.len(),
            Samples::U16(x) => x.len(),
            Samples::U32(x) => x.len(),
            Samples::U64(x) => x.len(),
            Samples::F32(x) => x.len(),
            Samples::F64(x) => x.len(),
        }
    }

    /// Whether there are no samples.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Append the little-endian bytes.
    fn put_le(&self, out: &mut Vec<u8>) {
        macro_rules! put {
            ($x:expr) => {{
                out.reserve(std::mem::size_of_val(*$x));
                for v in $x.iter() {
                    out.extend_from_slice(&v.to_le_bytes());
                }
            }};
        }
        match self {
            Samples::I8(x) => put!(x),
            Samples::I16(x) => put!(x),
            Samples::I32(x) => put!(x),
            Samples::I64(x) => put!(x),
            Samples::U8(x) => put!(x),
            Samples::U16(x) => put!(x),
            Samples::U32(x) => put!(x),
            Samples::U64(x) => put!(x),
            Samples::F32(x) => put!(x),
            Samples::F64(x) => put!(x),
        }
    }

    /// First differences (wrap-around) of the values as unsigned words of
    /// the element's width (floats as bit patterns); the first value as is.
    fn diffs(&self, out: &mut Vec<u64>) {
        out.clear();
        macro_rules! d {
            ($x:expr, $to:expr) => {{
                let mut prev = 0u64;
                for v in $x.iter() {
                    let u = $to(*v);
                    out.push(u.wrapping_sub(prev));
                    prev = u;
                }
            }};
        }
        match self {
            Samples::I8(x) => d!(x, |v: i8| v as u8 as u64),
            Samples::U8(x) => d!(x, |v: u8| v as u64),
            Samples::I16(x) => d!(x, |v: i16| v as u16 as u64),
            Samples::U16(x) => d!(x, |v: u16| v as u64),
            Samples::I32(x) => d!(x, |v: i32| v as u32 as u64),
            Samples::U32(x) => d!(x, |v: u32| v as u64),
            Samples::F32(x) => d!(x, |v: f32| v.to_bits() as u64),
            Samples::I64(x) => d!(x, |v: i64| v as u64),
            Samples::U64(x) => d!(x, |v: u64| v),
            Samples::F64(x) => d!(x, |v: f64| v.to_bits()),
        }
    }
}

/// One channel of one frame to write.
#[derive(Debug, Clone, Copy)]
pub struct ChannelData<'a> {
    /// Channel name (the same set of names in every frame of a file).
    pub name: &'a str,
    /// Structure that holds it.
    pub kind: ChannelKind,
    /// Sample rate \[Hz\].
    pub rate_hz: f64,
    /// Unit of the stored values (`unitY`).
    pub unit: &'a str,
    /// The samples (their count sets the vector length).
    pub data: Samples<'a>,
    /// Compression of the vector.
    pub compression: Compression,
    /// ADC slope \[unit/count\] (ignored for other kinds; 1 = none).
    pub slope: f32,
    /// ADC bias \[unit\] (ignored for other kinds; 0 = none).
    pub bias: f32,
    /// Calibrated unit of an ADC channel (`units`; ignored for other kinds).
    pub adc_units: &'a str,
    /// Offset of the first sample from the frame start \[s\].
    pub time_offset_s: f64,
}

impl<'a> ChannelData<'a> {
    /// A channel with no calibration, no time offset and no unit.
    pub fn new(
        name: &'a str,
        kind: ChannelKind,
        rate_hz: f64,
        data: Samples<'a>,
        compression: Compression,
    ) -> ChannelData<'a> {
        ChannelData {
            name,
            kind,
            rate_hz,
            unit: "",
            data,
            compression,
            slope: 1.0,
            bias: 0.0,
            adc_units: "",
            time_offset_s: 0.0,
        }
    }
}

/// Class ids of the structures written (those of the reference library).
mod class {
    pub const FRAME_H: u8 = 3;
    pub const ADC: u8 = 4;
    pub const END_OF_FILE: u8 = 6;
    pub const END_OF_FRAME: u8 = 7;
    pub const PROC: u8 = 11;
    pub const RAW: u8 = 12;
    pub const SIM: u8 = 14;
    pub const TOC: u8 = 19;
    pub const VECT: u8 = 20;
}

/// The dictionary entry of a class: name, id, comment and fields (name,
/// type); field names and types are the specification's (version 8).
fn class_def(
    id: u8,
) -> (
    &'static str,
    &'static str,
    &'static [(&'static str, &'static str)],
) {
    const PTR_VECT: &str = "PTR_STRUCT(FrVect *)";
    match id {
        class::FRAME_H => (
            "FrameH",
            "Frame header",
            &[
                ("name", "STRING"),
                ("run", "INT_4S"),
                ("frame", "INT_4U"),
                ("dataQuality", "INT_4U"),
                ("GTimeS", "INT_4U"),
                ("GTimeN", "INT_4U"),
                ("ULeapS", "INT_2U"),
                ("dt", "REAL_8"),
                ("type", PTR_VECT),
                ("user", PTR_VECT),
                ("detectSim", "PTR_STRUCT(FrDetector *)"),
                ("detectProc", "PTR_STRUCT(FrDetector *)"),
                ("history", "PTR_STRUCT(FrHistory *)"),
                ("rawData", "PTR_STRUCT(FrRawData *)"),
                ("procData", "PTR_STRUCT(FrProcData *)"),
                ("simData", "PTR_STRUCT(FrSimData *)"),
                ("event", "PTR_STRUCT(FrEvent *)"),
                ("simEvent", "PTR_STRUCT(FrSimEvent *)"),
                ("summaryData", "PTR_STRUCT(FrSummary *)"),
                ("auxData", PTR_VECT),
                ("auxTable", "PTR_STRUCT(FrTable *)"),
                ("chkSum", "INT_4U"),
            ],
        ),
        class::RAW => (
            "FrRawData",
            "Raw data",
            &[
                ("name", "STRING"),
                ("firstSer", "PTR_STRUCT(FrSerData *)"),
                ("firstAdc", "PTR_STRUCT(FrAdcData *)"),
                ("firstTable", "PTR_STRUCT(FrTable *)"),
                ("logMsg", "PTR_STRUCT(FrMsg *)"),
                ("more", PTR_VECT),
                ("chkSum", "INT_4U"),
            ],
        ),
        class::ADC => (
            "FrAdcData",
            "ADC data",
            &[
                ("name", "STRING"),
                ("comment", "STRING"),
                ("channelGroup", "INT_4U"),
                ("channelNumber", "INT_4U"),
                ("nBits", "INT_4U"),
                ("bias", "REAL_4"),
                ("slope", "REAL_4"),
                ("units", "STRING"),
                ("sampleRate", "REAL_8"),
                ("timeOffset", "REAL_8"),
                ("fShift", "REAL_8"),
                ("phase", "REAL_4"),
                ("dataValid", "INT_2U"),
                ("data", PTR_VECT),
                ("aux", PTR_VECT),
                ("next", "PTR_STRUCT(FrAdcData *)"),
                ("chkSum", "INT_4U"),
            ],
        ),
        class::VECT => (
            "FrVect",
            "Vector data",
            &[
                ("name", "STRING"),
                ("compress", "INT_2U"),
                ("type", "INT_2U"),
                ("nData", "INT_8U"),
                ("nBytes", "INT_8U"),
                ("data", "CHAR[nBytes]"),
                ("nDim", "INT_4U"),
                ("nx", "INT_8U[nDim]"),
                ("dx", "REAL_8[nDim]"),
                ("startX", "REAL_8[nDim]"),
                ("unitX", "STRING[nDim]"),
                ("unitY", "STRING"),
                ("next", PTR_VECT),
                ("chkSum", "INT_4U"),
            ],
        ),
        class::PROC => (
            "FrProcData",
            "Processed data",
            &[
                ("name", "STRING"),
                ("comment", "STRING"),
                ("type", "INT_2U"),
                ("subType", "INT_2U"),
                ("timeOffset", "REAL_8"),
                ("tRange", "REAL_8"),
                ("fShift", "REAL_8"),
                ("phase", "REAL_4"),
                ("fRange", "REAL_8"),
                ("BW", "REAL_8"),
                ("nAuxParam", "INT_2U"),
                ("auxParam", "REAL_8[nAuxParam]"),
                ("auxParamNames", "STRING[nAuxParam]"),
                ("data", PTR_VECT),
                ("aux", PTR_VECT),
                ("table", "PTR_STRUCT(FrTable *)"),
                ("history", "PTR_STRUCT(FrHistory *)"),
                ("next", "PTR_STRUCT(FrProcData *)"),
                ("chkSum", "INT_4U"),
            ],
        ),
        class::SIM => (
            "FrSimData",
            "Simulated data",
            &[
                ("name", "STRING"),
                ("comment", "STRING"),
                ("sampleRate", "REAL_8"),
                ("timeOffset", "REAL_8"),
                ("fShift", "REAL_8"),
                ("phase", "REAL_4"),
                ("data", PTR_VECT),
                ("input", PTR_VECT),
                ("table", "PTR_STRUCT(FrTable *)"),
                ("next", "PTR_STRUCT(FrSimData *)"),
                ("chkSum", "INT_4U"),
            ],
        ),
        class::END_OF_FRAME => (
            "FrEndOfFrame",
            "End of frame",
            &[
                ("run", "INT_4S"),
                ("frame", "INT_4U"),
                ("GTimeS", "INT_4U"),
                ("GTimeN", "INT_4U"),
                ("chkSum", "INT_4U"),
            ],
        ),
        class::TOC => (
            "FrTOC",
            "Table of contents",
            &[
                ("ULeapS", "INT_2S"),
                ("nFrame", "INT_4U"),
                ("dataQuality", "INT_4U[nFrame]"),
                ("GTimeS", "INT_4U[nFrame]"),
                ("GTimeN", "INT_4U[nFrame]"),
                ("dt", "REAL_8[nFrame]"),
                ("runs", "INT_4S[nFrame]"),
                ("frame", "INT_4U[nFrame]"),
                ("positionH", "INT_8U[nFrame]"),
                ("nFirstADC", "INT_8U[nFrame]"),
                ("nFirstSer", "INT_8U[nFrame]"),
                ("nFirstTable", "INT_8U[nFrame]"),
                ("nFirstMsg", "INT_8U[nFrame]"),
                ("nSH", "INT_4U"),
                ("SHid", "INT_2U[nSH]"),
                ("SHname", "STRING[nSH]"),
                ("nDetector", "INT_4U"),
                ("nameDetector", "STRING[nDetector]"),
                ("positionDetector", "INT_8U[nDetector]"),
                ("nStatType", "INT_4U"),
                ("nameStat", "STRING[nStatType]"),
                ("detector", "STRING[nStatType]"),
                ("nStatInstance", "INT_4U[nStatType]"),
                ("nTotalStat", "INT_4U"),
                ("tStart", "INT_4U[nTotalStat]"),
                ("tEnd", "INT_4U[nTotalStat]"),
                ("version", "INT_4U[nTotalStat]"),
                ("positionStat", "INT_8U[nTotalStat]"),
                ("nADC", "INT_4U"),
                ("name", "STRING[nADC]"),
                ("channelID", "INT_4U[nADC]"),
                ("groupID", "INT_4U[nADC]"),
                ("positionADC", "INT_8U[nADC][nFrame]"),
                ("nProc", "INT_4U"),
                ("nameProc", "STRING[nProc]"),
                ("positionProc", "INT_8U[nProc][nFrame]"),
                ("nSim", "INT_4U"),
                ("nameSim", "STRING[nSim]"),
                ("positionSim", "INT_8U[nSim][nFrame]"),
                ("nSer", "INT_4U"),
                ("nameSer", "STRING[nSer]"),
                ("positionSer", "INT_8U[nSer][nFrame]"),
                ("nSummary", "INT_4U"),
                ("nameSum", "STRING[nSummary]"),
                ("positionSum", "INT_8U[nSummary][nFrame]"),
                ("nEventType", "INT_4U"),
                ("nameEvent", "STRING[nEventType]"),
                ("nEvent", "INT_4U[nEventType]"),
                ("nTotalEvent", "INT_4U"),
                ("GTimeSEvent", "INT_4U[nTotalEvent]"),
                ("GTimeNEvent", "INT_4U[nTotalEvent]"),
                ("amplitudeEvent", "REAL_4[nTotalEvent]"),
                ("positionEvent", "INT_8U[nTotalEvent]"),
                ("nSimEventType", "INT_4U"),
                ("nameSimEvent", "STRING[nSimEventType]"),
                ("nSimEvent", "INT_4U[nSimEventType]"),
                ("nTotalSEvent", "INT_4U"),
                ("GTimeSSim", "INT_4U[nTotalSEvent]"),
                ("GTimeNSim", "INT_4U[nTotalSEvent]"),
                ("amplitudeSimEvent", "REAL_4[nTotalSEvent]"),
                ("positionSimEvent", "INT_8U[nTotalSEvent]"),
                ("chkSum", "INT_4U"),
            ],
        ),
        class::END_OF_FILE => (
            "FrEndOfFile",
            "End of file",
            &[
                ("nFrames", "INT_4U"),
                ("nBytes", "INT_8U"),
                ("seekTOC", "INT_8U"),
                ("chkSumFrHeader", "INT_4U"),
                ("chkSum", "INT_4U"),
                ("chkSumFile", "INT_4U"),
            ],
        ),
        _ => unreachable!("no dictionary entry for class {id}"),
    }
}

/// The version 8 field list (name, type) of a class this crate reads and
/// writes (`FrameH`, `FrRawData`, `FrAdcData`, `FrVect`, `FrProcData`,
/// `FrSimData`, `FrEndOfFrame`, `FrTOC`, `FrEndOfFile`); the reader parses
/// these fields in this order.
pub fn layout(class_name: &str) -> Option<&'static [(&'static str, &'static str)]> {
    [
        class::FRAME_H,
        class::RAW,
        class::ADC,
        class::VECT,
        class::PROC,
        class::SIM,
        class::END_OF_FRAME,
        class::TOC,
        class::END_OF_FILE,
    ]
    .into_iter()
    .map(class_def)
    .find(|(n, _, _)| *n == class_name)
    .map(|(_, _, f)| f)
}

/// GPS − UTC leap seconds at a GPS time \[s\]: the GPS times at which each
/// leap second took effect (from memory; only written as metadata).
fn gps_leap_seconds(gps_s: i64) -> u16 {
    const AT: [i64; 18] = [
        46_828_800,
        78_364_801,
        109_900_802,
        173_059_203,
        252_028_804,
        315_187_205,
        346_723_206,
        393_984_007,
        425_520_008,
        457_056_009,
        504_489_610,
        551_750_411,
        599_184_012,
        820_108_813,
        914_803_214,
        1_025_136_015,
        1_119_744_016,
        1_167_264_017,
    ];
    AT.iter().filter(|&&t| gps_s >= t).count() as u16
}

/// Structure bytes under construction (little-endian fields).
#[derive(Default)]
struct Buf(Vec<u8>);

impl Buf {
    fn begin(&mut self, class: u8, instance: u32) {
        self.0.clear();
        self.0.extend_from_slice(&[0u8; 8]);
        self.0.push(1); // chkType: CRC
        self.0.push(class);
        self.0.extend_from_slice(&instance.to_le_bytes());
    }
    fn u16(&mut self, v: u16) {
        self.0.extend_from_slice(&v.to_le_bytes());
    }
    fn u32(&mut self, v: u32) {
        self.0.extend_from_slice(&v.to_le_bytes());
    }
    fn i32(&mut self, v: i32) {
        self.0.extend_from_slice(&v.to_le_bytes());
    }
    fn u64(&mut self, v: u64) {
        self.0.extend_from_slice(&v.to_le_bytes());
    }
    fn f32(&mut self, v: f32) {
        self.0.extend_from_slice(&v.to_le_bytes());
    }
    fn f64(&mut self, v: f64) {
        self.0.extend_from_slice(&v.to_le_bytes());
    }
    fn str(&mut self, s: &str) {
        self.u16((s.len() + 1) as u16);
        self.0.extend_from_slice(s.as_bytes());
        self.0.push(0);
    }
    fn ptr(&mut self, class: u8, instance: u32) {
        self.u16(class as u16);
        self.u32(instance);
    }
    fn null(&mut self) {
        self.ptr(0, 0);
    }
    /// Fill in the length and append the checksum.
    fn end(&mut self) -> &[u8] {
        let len = (self.0.len() + 4) as u64;
        self.0[..8].copy_from_slice(&len.to_le_bytes());
        let c = super::crc::cksum(&self.0);
        self.u32(c);
        &self.0
    }
}

/// Zero-suppression block sizes of the reference library (values per
/// block for 2-byte words, and for 4- and 8-byte words).
const ZS_BLOCK_2: usize = 12;
const ZS_BLOCK_48: usize = 8;

/// Zero-suppress first differences `d` (w-bit words) into `out` (the
/// inverse of the reader's decoder; see `vect.rs`).
fn zero_suppress(d: &[u64], word_bytes: usize, out: &mut Vec<u8>) {
    let wbits = 8 * word_bytes as u32;
    let (field, block) = match word_bytes {
        2 => (4, ZS_BLOCK_2),
        4 => (5, ZS_BLOCK_48),
        _ => (6, ZS_BLOCK_48),
    };
    let mut acc: u128 = 0;
    let mut n: u32 = 0;
    let mut put = |v: u64, bits: u32, out: &mut Vec<u8>| {
        if bits == 0 {
            return;
        }
        let v = if bits == 64 {
            v
        } else {
            v & ((1u64 << bits) - 1)
        };
        acc |= (v as u128) << n;
        n += bits;
        while n >= 8 {
            out.push(acc as u8);
            acc >>= 8;
            n -= 8;
        }
    };
    put(block as u64, 16, out);
    let sign_extend = |v: u64| -> i128 {
        let s = 64 - wbits;
        ((v << s) as i64 >> s) as i128
    };
    for blk in d.chunks(block) {
        // Fewest bits n ≥ 2 with −(2^(n−1) − 1) ≤ d ≤ 2^(n−1); 0 if all zero.
        let mut need = 0u32;
        for &v in blk {
            let x = sign_extend(v);
            let bits = if x == 0 {
                0
            } else if x > 0 {
                1 + (128 - (x - 1).leading_zeros()).max(1)
            } else {
                2 + (127 - (-x).leading_zeros())
            };
            need = need.max(bits);
        }
        let nbits = if need == 0 { 0 } else { need.clamp(2, wbits) };
        put(if nbits == 0 { 0 } else { (nbits - 1) as u64 }, field, out);
        if nbits > 0 {
            let offset = (1u64 << (nbits - 1)) - 1;
            for &v in blk {
                put(v.wrapping_add(offset), nbits, out);
            }
        }
    }
    if n > 0 {
        out.push(acc as u8);
    }
    while !out.len().is_multiple_of(word_bytes) {
        out.push(0);
    }
}

/// What the table of contents needs about each frame.
struct FrameRecord {
    gps_s: u32,
    gps_ns: u32,
    dt: f64,
    run: i32,
    frame: u32,
    position: u64,
    first_adc: u64,
}

/// A frame-file writer (see the module header).
pub struct GwfWriter {
    w: BufWriter<File>,
    tmp: PathBuf,
    path: PathBuf,
    pos: u64,
    file_crc: Cksum,
    header_crc: u32,
    level: u32,
    dict: Vec<u8>,
    frames: Vec<FrameRecord>,
    /// Channel names and kinds, fixed by the first frame.
    names: Vec<(String, ChannelKind)>,
    /// Structure positions per channel (same order as `names`) per frame.
    positions: Vec<Vec<u64>>,
    buf: Buf,
    data: Vec<u8>,
    diffs: Vec<u64>,
    done: bool,
}

impl GwfWriter {
    /// Create `path` (written as `path.tmp` until [`GwfWriter::finish`]);
    /// gzip compression uses `level` (0–9, 6 is zlib's default).
    ///
    /// # Errors
    /// The file cannot be created, or `level` > 9.
    pub fn create(path: &Path, level: u32) -> Result<GwfWriter> {
        if level > 9 {
            bail!("gzip level {level} is not in 0..=9");
        }
        let mut tmp = path.as_os_str().to_owned();
        tmp.push(".tmp");
        let tmp = PathBuf::from(tmp);
        let file = File::create(&tmp).with_context(|| format!("creating {}", tmp.display()))?;
        let mut w = GwfWriter {
            w: BufWriter::with_capacity(1 << 20, file),
            tmp,
            path: path.to_path_buf(),
            pos: 0,
            file_crc: Cksum::new(),
            header_crc: 0,
            level,
            dict: Vec::new(),
            frames: Vec::new(),
            names: Vec::new(),
            positions: Vec::new(),
            buf: Buf::default(),
            data: Vec::new(),
            diffs: Vec::new(),
            done: false,
        };
        let mut h = Vec::with_capacity(FILE_HEADER_LEN);
        h.extend_from_slice(b"IGWD\0");
        h.extend_from_slice(&[VERSION, 0, 2, 4, 8, 4, 8]);
        h.extend_from_slice(&0x1234u16.to_le_bytes());
        h.extend_from_slice(&0x1234_5678u32.to_le_bytes());
        h.extend_from_slice(&0x0123_4567_89ab_cdefu64.to_le_bytes());
        h.extend_from_slice(&std::f32::consts::PI.to_le_bytes());
        h.extend_from_slice(&std::f64::consts::PI.to_le_bytes());
        h.extend_from_slice(&[0, 1]); // library: other; checksums: CRC
        w.header_crc = super::crc::cksum(&h);
        w.emit(&h)?;
        Ok(w)
    }

    fn emit(&mut self, bytes: &[u8]) -> Result<()> {
        self.w
            .write_all(bytes)
            .with_context(|| format!("writing {}", self.tmp.display()))?;
        self.file_crc.update(bytes);
        self.pos += bytes.len() as u64;
        Ok(())
    }

    fn emit_buf(&mut self) -> Result<u64> {
        let at = self.pos;
        let b = std::mem::take(&mut self.buf);
        let mut b = b;
        let r = {
            let bytes = b.end().to_vec();
            self.emit(&bytes)
        };
        self.buf = b;
        r.map(|_| at)
    }

    /// Write the dictionary entry of `id` unless already written.
    fn define(&mut self, id: u8) -> Result<()> {
        if self.dict.contains(&id) {
            return Ok(());
        }
        self.dict.push(id);
        let (name, comment, fields) = class_def(id);
        self.buf.begin(1, 0);
        self.buf.str(name);
        self.buf.u16(id as u16);
        self.buf.str(comment);
        self.emit_buf()?;
        for (f, ty) in fields {
            self.buf.begin(2, 0);
            self.buf.str(f);
            self.buf.str(ty);
            self.buf.str("");
            self.emit_buf()?;
        }
        Ok(())
    }

    /// Write one frame. Every frame of a file must hold the same channel
    /// names (the table of contents keeps one position per channel and
    /// frame), each with as many samples as its rate × the frame duration.
    ///
    /// # Errors
    /// Bad channel sets, rates, lengths or compressions (differences + gzip
    /// on floats; zero suppression on 1-byte data), a start before 0, or
    /// I/O errors.
    pub fn write_frame(
        &mut self,
        gps_start_ns: i64,
        duration_s: f64,
        run: i32,
        channels: &[ChannelData],
    ) -> Result<()> {
        if gps_start_ns < 0 || gps_start_ns / 1_000_000_000 > u32::MAX as i64 {
            bail!("frame start {gps_start_ns} ns is outside the GPS range of the format");
        }
        if !(duration_s.is_finite() && duration_s > 0.0) {
            bail!("frame duration {duration_s} s must be finite and > 0");
        }
        let names: Vec<(String, ChannelKind)> = {
            let mut adc: Vec<_> = Vec::new();
            let mut proc_: Vec<_> = Vec::new();
            let mut sim: Vec<_> = Vec::new();
            for c in channels {
                let v = (c.name.to_string(), c.kind);
                match c.kind {
                    ChannelKind::Adc => adc.push(v),
                    ChannelKind::Proc => proc_.push(v),
                    ChannelKind::Sim => sim.push(v),
                }
            }
            adc.into_iter().chain(proc_).chain(sim).collect()
        };
        if self.frames.is_empty() {
            let mut seen = std::collections::HashSet::new();
            for (n, _) in &names {
                if !seen.insert(n.as_str()) {
                    bail!("channel {} appears twice in a frame", crate::io::shown(n));
                }
            }
            self.positions = vec![Vec::new(); names.len()];
            self.names = names;
        } else if names != self.names {
            bail!("every frame of a file must hold the same channels (of the same kinds, in the same order)");
        }
        for c in channels {
            let expect = c.rate_hz * duration_s;
            if !(c.rate_hz.is_finite() && c.rate_hz > 0.0) {
                bail!(
                    "channel {}: rate {} Hz must be finite and > 0",
                    crate::io::shown(c.name),
                    c.rate_hz
                );
            }
            if (c.data.len() as f64 - expect).abs() > 1e-6 * expect.max(1.0) {
                bail!(
                    "channel {}: {} samples in a frame of {duration_s} s at {} Hz (need {expect})",
                    crate::io::shown(c.name),
                    c.data.len(),
                    c.rate_hz
                );
            }
            if c.data.is_empty() {
                bail!("channel {}: no samples", crate::io::shown(c.name));
            }
            let size = c.data.elem().size();
            match c.compression {
                Compression::DiffGzip if matches!(c.data, Samples::F32(_) | Samples::F64(_)) => {
                    bail!(
                        "channel {}: differences + gzip is for integer data",
                        crate::io::shown(c.name)
                    )
                }
                Compression::ZeroSuppress if size == 1 => {
                    bail!(
                        "channel {}: zero suppression needs 2-, 4- or 8-byte samples",
                        crate::io::shown(c.name)
                    )
                }
                _ => {}
            }
        }
        let gps_s = (gps_start_ns / 1_000_000_000) as u32;
        let gps_ns = (gps_start_ns % 1_000_000_000) as u32;
        let leap = gps_leap_seconds(gps_s as i64) + 19;
        let order: Vec<&ChannelData> = {
            let mut v: Vec<&ChannelData> = channels.iter().collect();
            v.sort_by_key(|c| match c.kind {
                ChannelKind::Adc => 0,
                ChannelKind::Proc => 1,
                ChannelKind::Sim => 2,
            });
            v
        };
        let has = |k: ChannelKind| channels.iter().any(|c| c.kind == k);

        self.define(class::FRAME_H)?;
        self.buf.begin(class::FRAME_H, 0);
        self.buf.str("glitchbook");
        self.buf.i32(run);
        self.buf.u32(self.frames.len() as u32);
        self.buf.u32(0);
        self.buf.u32(gps_s);
        self.buf.u32(gps_ns);
        self.buf.u16(leap);
        self.buf.f64(duration_s);
        for _ in 0..5 {
            self.buf.null(); // type, user, detectSim, detectProc, history
        }
        let ptr_or_null = |b: &mut Buf, yes: bool, class: u8| {
            if yes {
                b.ptr(class, 0)
            } else {
                b.null()
            }
        };
        ptr_or_null(&mut self.buf, has(ChannelKind::Adc), class::RAW);
        ptr_or_null(&mut self.buf, has(ChannelKind::Proc), class::PROC);
        ptr_or_null(&mut self.buf, has(ChannelKind::Sim), class::SIM);
        for _ in 0..5 {
            self.buf.null(); // event, simEvent, summaryData, auxData, auxTable
        }
        let frame_pos = self.emit_buf()?;
        let mut first_adc = 0;
        if has(ChannelKind::Adc) {
            self.define(class::RAW)?;
            self.buf.begin(class::RAW, 0);
            self.buf.str("");
            self.buf.null();
            self.buf.ptr(class::ADC, 0);
            for _ in 0..3 {
                self.buf.null();
            }
            self.emit_buf()?;
        }
        let mut per_kind = [0u32; 3];
        for (j, c) in order.iter().enumerate() {
            // One vector per channel, numbered in writing order.
            let vect_instance = j as u32;
            let ki = match c.kind {
                ChannelKind::Adc => 0,
                ChannelKind::Proc => 1,
                ChannelKind::Sim => 2,
            };
            let inst = per_kind[ki];
            per_kind[ki] += 1;
            let last = order.get(j + 1).is_none_or(|n| n.kind != c.kind);
            let cls = [class::ADC, class::PROC, class::SIM][ki];
            self.define(cls)?;
            self.buf.begin(cls, inst);
            self.buf.str(c.name);
            self.buf.str("");
            match c.kind {
                ChannelKind::Adc => {
                    self.buf.u32(0);
                    self.buf.u32(0);
                    self.buf.u32(8 * c.data.elem().size() as u32);
                    self.buf.f32(c.bias);
                    self.buf.f32(c.slope);
                    self.buf.str(c.adc_units);
                    self.buf.f64(c.rate_hz);
                    self.buf.f64(c.time_offset_s);
                    self.buf.f64(0.0);
                    self.buf.f32(0.0);
                    self.buf.u16(0);
                    self.buf.ptr(class::VECT, vect_instance);
                    self.buf.null();
                }
                ChannelKind::Proc => {
                    self.buf.u16(1); // time series
                    self.buf.u16(0);
                    self.buf.f64(c.time_offset_s);
                    self.buf.f64(duration_s);
                    self.buf.f64(0.0);
                    self.buf.f32(0.0);
                    self.buf.f64(c.rate_hz / 2.0);
                    self.buf.f64(0.0);
                    self.buf.u16(0);
                    self.buf.ptr(class::VECT, vect_instance);
                    for _ in 0..3 {
                        self.buf.null();
                    }
                }
                ChannelKind::Sim => {
                    self.buf.f64(c.rate_hz);
                    self.buf.f64(c.time_offset_s);
                    self.buf.f64(0.0);
                    self.buf.f32(0.0);
                    self.buf.ptr(class::VECT, vect_instance);
                    self.buf.null();
                    self.buf.null();
                }
            }
            if last {
                self.buf.null();
            } else {
                self.buf.ptr(cls, inst + 1);
            }
            let at = self.emit_buf()?;
            if c.kind == ChannelKind::Adc && first_adc == 0 {
                first_adc = at;
            }
            // `order` sorts by kind stably, as `names` does: same index.
            self.positions[j].push(at);
            self.write_vect(c, vect_instance)?;
        }
        self.define(class::END_OF_FRAME)?;
        self.buf.begin(class::END_OF_FRAME, 0);
        self.buf.i32(run);
        self.buf.u32(self.frames.len() as u32);
        self.buf.u32(gps_s);
        self.buf.u32(gps_ns);
        self.emit_buf()?;
        self.frames.push(FrameRecord {
            gps_s,
            gps_ns,
            dt: duration_s,
            run,
            frame: self.frames.len() as u32,
            position: frame_pos,
            first_adc,
        });
        Ok(())
    }

    fn write_vect(&mut self, c: &ChannelData, instance: u32) -> Result<()> {
        self.define(class::VECT)?;
        let elem = c.data.elem();
        let size = elem.size();
        self.data.clear();
        match c.compression {
            Compression::Raw => c.data.put_le(&mut self.data),
            Compression::Gzip | Compression::DiffGzip => {
                let mut raw = Vec::with_capacity(c.data.len() * size);
                if c.compression == Compression::DiffGzip {
                    c.data.diffs(&mut self.diffs);
                    for d in &self.diffs {
                        raw.extend_from_slice(&d.to_le_bytes()[..size]);
                    }
                } else {
                    c.data.put_le(&mut raw);
                }
                let mut z = flate2::write::ZlibEncoder::new(
                    std::mem::take(&mut self.data),
                    flate2::Compression::new(self.level),
                );
                z.write_all(&raw)?;
                self.data = z.finish()?;
            }
            Compression::ZeroSuppress => {
                c.data.diffs(&mut self.diffs);
                let diffs = std::mem::take(&mut self.diffs);
                zero_suppress(&diffs, size, &mut self.data);
                self.diffs = diffs;
            }
        }
        let code = c.compression.code(size) | 0x100;
        // The structure is written in three parts so the data bytes are not
        // copied: header fields, data, trailing fields; one checksum.
        let mut head = Buf::default();
        head.begin(class::VECT, instance);
        head.str(c.name);
        head.u16(code);
        head.u16(elem.code());
        head.u64(c.data.len() as u64);
        head.u64(self.data.len() as u64);
        let mut tail = Buf::default();
        tail.0.clear();
        tail.u32(1);
        tail.u64(c.data.len() as u64);
        tail.f64(1.0 / c.rate_hz);
        tail.f64(0.0);
        tail.str("s");
        tail.str(c.unit);
        tail.null();
        let len = (head.0.len() + self.data.len() + tail.0.len() + 4) as u64;
        head.0[..8].copy_from_slice(&len.to_le_bytes());
        let mut crc = Cksum::new();
        crc.update(&head.0);
        crc.update(&self.data);
        crc.update(&tail.0);
        tail.u32(crc.value());
        self.emit(&head.0)?;
        let data = std::mem::take(&mut self.data);
        let r = self.emit(&data);
        self.data = data;
        r?;
        self.emit(&tail.0)
    }

    /// Write the table of contents and FrEndOfFile, flush, and rename the
    /// file into place. Returns the file's length \[bytes\].
    ///
    /// # Errors
    /// No frame written, or I/O errors.
    pub fn finish(mut self) -> Result<u64> {
        if self.frames.is_empty() {
            bail!("{}: no frame written", self.path.display());
        }
        self.define(class::TOC)?;
        let nf = self.frames.len();
        let leap = gps_leap_seconds(self.frames[0].gps_s as i64) + 19;
        let mut b = Buf::default();
        b.begin(class::TOC, 0);
        b.u16(leap);
        b.u32(nf as u32);
        for _ in 0..nf {
            b.u32(0);
        }
        for f in &self.frames {
            b.u32(f.gps_s);
        }
        for f in &self.frames {
            b.u32(f.gps_ns);
        }
        for f in &self.frames {
            b.f64(f.dt);
        }
        for f in &self.frames {
            b.i32(f.run);
        }
        for f in &self.frames {
            b.u32(f.frame);
        }
        for f in &self.frames {
            b.u64(f.position);
        }
        for f in &self.frames {
            b.u64(f.first_adc);
        }
        for _ in 0..3 * nf {
            b.u64(0); // first FrSerData, FrTable, FrMsg
        }
        let mut ids = self.dict.clone();
        ids.retain(|&i| i != class::END_OF_FILE);
        b.u32(ids.len() as u32);
        for &i in &ids {
            b.u16(i as u16);
        }
        for &i in &ids {
            b.str(class_def(i).0);
        }
        b.u32(0); // detectors
        b.u32(0); // static data types
        b.u32(0); // static data instances
        for kind in [ChannelKind::Adc, ChannelKind::Proc, ChannelKind::Sim] {
            let idx: Vec<usize> = (0..self.names.len())
                .filter(|&i| self.names[i].1 == kind)
                .collect();
            b.u32(idx.len() as u32);
            for &i in &idx {
                b.str(&self.names[i].0);
            }
            if kind == ChannelKind::Adc {
                for _ in 0..2 * idx.len() {
                    b.u32(0); // channelID, groupID
                }
            }
            for &i in &idx {
                for &p in &self.positions[i] {
                    b.u64(p);
                }
            }
        }
        for _ in 0..2 {
            b.u32(0); // serial, summary
        }
        for _ in 0..4 {
            b.u32(0); // event types, events, simulated event types, simulated events
        }
        let toc_pos = self.pos;
        let bytes = b.end().to_vec();
        self.emit(&bytes)?;
        self.define(class::END_OF_FILE)?;
        let total = self.pos + super::format::END_OF_FILE_LEN;
        let mut e = Buf::default();
        e.begin(class::END_OF_FILE, 0);
        e.u32(nf as u32);
        e.u64(total);
        e.u64(total - toc_pos);
        e.u32(self.header_crc);
        let len = super::format::END_OF_FILE_LEN;
        e.0[..8].copy_from_slice(&len.to_le_bytes());
        let c = super::crc::cksum(&e.0);
        e.u32(c);
        self.emit(&e.0)?;
        let file_crc = self.file_crc.value();
        self.w.write_all(&file_crc.to_le_bytes())?;
        self.w
            .flush()
            .with_context(|| format!("writing {}", self.tmp.display()))?;
        self.w
            .get_ref()
            .sync_all()
            .with_context(|| format!("syncing {}", self.tmp.display()))?;
        std::fs::rename(&self.tmp, &self.path)
            .with_context(|| format!("renaming {} into place", self.tmp.display()))?;
        self.done = true;
        Ok(total)
    }
}

impl Drop for GwfWriter {
    fn drop(&mut self) {
        // An unfinished file is removed.
        if !self.done {
            let _ = std::fs::remove_file(&self.tmp);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn zero_suppression_bit_widths() {
        // Differences that need exactly n bits: −(2^(n−1) − 1) and 2^(n−1).
        let mut out = Vec::new();
        zero_suppress(&[0, 0, 0], 2, &mut out);
        // 16 bits of block size (12), one 4-bit field of 0, padding.
        assert_eq!(out, vec![12, 0, 0, 0]);
        for (d, n) in [
            (1i64, 2u32),
            (-1, 2),
            (2, 2),
            (3, 3),
            (-3, 3),
            (4, 3),
            (-4, 4),
            (5, 4),
        ] {
            let mut out = Vec::new();
            zero_suppress(&[d as u64 & 0xffff], 2, &mut out);
            let field = (out[2] & 0xf) as u32;
            assert_eq!(field + 1, n, "d = {d}");
        }
    }

    #[test]
    fn leap_seconds_from_memory() {
        // GPS − UTC was 18 s from 2017-01-01 (from memory).
        assert_eq!(gps_leap_seconds(1_400_000_000), 18);
        assert_eq!(gps_leap_seconds(1_000_000_000), 15); // GPS − UTC in 2011
    }
}
