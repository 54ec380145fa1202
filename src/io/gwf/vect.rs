//! FrVect: where a vector's data lie, and the decoders that turn its
//! (compressed) bytes into f64 samples: [`decode_whole`] for a vector whose
//! bytes are in memory (one call, libdeflate for gzip), and [`Decoder`], in
//! order, without holding the whole vector (input read in chunks of at most
//! [`INPUT_CHUNK`] bytes), for large vectors and as the reference when the
//! first declines.
//!
//! Decompression, as written by the reference library (checked against
//! every gwframe fixture in `tests/data/gwf/`):
//! - gzip: a zlib stream (RFC 1950) of the little-endian elements;
//! - differences + gzip: the same of `x[0], x[1] − x[0], x[2] − x[1], ...`
//!   computed in the element's integer type with wrap-around; decoding sums
//!   them back with wrap-around;
//! - zero suppression: the differences (of the bit patterns, for floats) of
//!   w-byte words (w = 2, 4, 8 for codes 5, 8, 10), packed least-significant
//!   bit first: 16 bits of block size B, then blocks of B values, each block
//!   a field of 4, 5 or 6 bits (w = 2, 4, 8) holding n − 1 (n = 1 is stored
//!   for all-zero blocks, which then take no value bits), followed by B values
//!   of n bits, each the difference plus 2^(n−1) − 1.
use super::format::{Compression, ElemType};
use anyhow::{anyhow, bail, Result};
use std::fs::File;
use std::os::unix::fs::FileExt;
use std::path::PathBuf;
use std::sync::Arc;

/// Largest read of compressed input at a time \[bytes\].
pub const INPUT_CHUNK: usize = 1 << 18;

/// Where one vector's data are and how to decode them.
#[derive(Debug, Clone, PartialEq)]
pub struct VectMeta {
    /// Byte offset of the FrVect structure.
    pub struct_pos: u64,
    /// FrVect structure length \[bytes\], checksum included.
    pub struct_len: u64,
    /// Checksum type of the structure (0 none, 1 CRC).
    pub chk_type: u8,
    /// Byte offset of the data bytes.
    pub data_pos: u64,
    /// Number of data bytes (compressed).
    pub n_bytes: u64,
    /// Number of elements.
    pub n_data: u64,
    /// Element type.
    pub elem: ElemType,
    /// The FrVect `compress` field.
    pub compress: u16,
    /// Decoded compression scheme.
    pub compression: Compression,
    /// Sample spacing \[s\] (`dx[0]`).
    pub dx: f64,
    /// Origin of the first sample relative to the owner's time \[s\] (`startX[0]`).
    pub start_x: f64,
    /// Unit of the values (`unitY`).
    pub unit_y: String,
}

/// Affine calibration applied to every decoded value: `bias + slope × x`
/// (an ADC channel's slope and bias; identity elsewhere).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Scale {
    /// Multiplier \[unit/count\].
    pub slope: f64,
    /// Offset \[unit\].
    pub bias: f64,
}

impl Scale {
    /// No calibration.
    pub const IDENTITY: Scale = Scale {
        slope: 1.0,
        bias: 0.0,
    };

    fn is_identity(&self) -> bool {
        self.slope == 1.0 && self.bias == 0.0
    }

    fn apply(&self, out: &mut [f64]) {
        if !self.is_identity() {
            let (s, b) = (self.slope, self.bias);
            for v in out {
                *v = b + s * *v;
            }
        }
    }
}

/// An open frame file shared by readers on many threads (positional reads).
#[derive(Debug)]
pub struct Source {
    /// The file.
    pub file: File,
    /// Its path, for messages.
    pub path: PathBuf,
    /// Its length \[bytes\].
    pub len: u64,
}

/// Compressed input of one vector, read from the file in chunks.
struct Input {
    src: Arc<Source>,
    /// File offset of the next byte not yet in `buf`.
    next: u64,
    /// File offset just past the data.
    end: u64,
    buf: Vec<u8>,
    lo: usize,
    hi: usize,
}

impl Input {
    /// Input already in memory: the data are `bytes[at..at + n_bytes]`.
    fn in_memory(src: Arc<Source>, m: &VectMeta, bytes: Vec<u8>, at: usize) -> Input {
        let end = m.data_pos + m.n_bytes;
        Input {
            src,
            next: end,
            end,
            hi: at + m.n_bytes as usize,
            lo: at,
            buf: bytes,
        }
    }

    fn new(src: Arc<Source>, m: &VectMeta) -> Input {
        Input {
            src,
            next: m.data_pos,
            end: m.data_pos + m.n_bytes,
            buf: vec![0; (m.n_bytes as usize).clamp(16, INPUT_CHUNK)],
            lo: 0,
            hi: 0,
        }
    }

    /// Bytes not yet read from the file.
    fn file_left(&self) -> u64 {
        self.end - self.next
    }

    /// Keep `buf[lo..hi]`, move it to the front and read more after it.
    /// Returns the number of bytes added (0 at the end of the data).
    fn refill(&mut self) -> Result<usize> {
        self.buf.copy_within(self.lo..self.hi, 0);
        self.hi -= self.lo;
        self.lo = 0;
        let room = self.buf.len() - self.hi;
        let n = (room as u64).min(self.file_left()) as usize;
        if n == 0 {
            return Ok(0);
        }
        self.src
            .file
            .read_exact_at(&mut self.buf[self.hi..self.hi + n], self.next)
            .map_err(|e| {
                anyhow!(
                    "{}: reading vector data at byte {}: {e}",
                    self.src.path.display(),
                    self.next
                )
            })?;
        self.next += n as u64;
        self.hi += n;
        Ok(n)
    }
}

/// Convert little-endian elements to f64 (no calibration).
pub fn convert_le(elem: ElemType, bytes: &[u8], out: &mut [f64]) {
    macro_rules! conv {
        ($t:ty, $n:expr) => {
            for (o, b) in out.iter_mut().zip(bytes.chunks_exact($n)) {
                *o = <$t>::from_le_bytes(b.try_into().expect("element bytes")) as f64;
            }
        };
    }
    match elem {
        ElemType::I8 => conv!(i8, 1),
        ElemType::U8 => conv!(u8, 1),
        ElemType::I16 => conv!(i16, 2),
        ElemType::U16 => conv!(u16, 2),
        ElemType::I32 => conv!(i32, 4),
        ElemType::U32 => conv!(u32, 4),
        ElemType::I64 => conv!(i64, 8),
        ElemType::U64 => conv!(u64, 8),
        ElemType::F32 => conv!(f32, 4),
        ElemType::F64 => conv!(f64, 8),
        ElemType::C64 | ElemType::C128 | ElemType::Str => {
            unreachable!("complex and string vectors are refused before decoding")
        }
    }
}

/// Sum little-endian integer differences back (wrap-around), carrying the
/// running value `acc` (bit pattern) across calls, into f64.
fn integrate_le(elem: ElemType, bytes: &[u8], acc: &mut u64, out: &mut [f64]) {
    macro_rules! integ {
        ($t:ty, $n:expr) => {{
            let mut a = *acc as $t;
            for (o, b) in out.iter_mut().zip(bytes.chunks_exact($n)) {
                a = a.wrapping_add(<$t>::from_le_bytes(b.try_into().expect("element bytes")));
                *o = a as f64;
            }
            *acc = a as u64;
        }};
    }
    match elem {
        ElemType::I8 => integ!(i8, 1),
        ElemType::U8 => integ!(u8, 1),
        ElemType::I16 => integ!(i16, 2),
        ElemType::U16 => integ!(u16, 2),
        ElemType::I32 => integ!(i32, 4),
        ElemType::U32 => integ!(u32, 4),
        ElemType::I64 => integ!(i64, 8),
        ElemType::U64 => integ!(u64, 8),
        _ => unreachable!("differences only for integer vectors"),
    }
}

/// Read elements `[first, first + out.len())` of an uncompressed vector
/// straight from the file (random access), calibrated.
///
/// # Errors
/// I/O errors, naming the file.
pub fn read_raw(
    src: &Source,
    m: &VectMeta,
    scale: Scale,
    first: u64,
    out: &mut [f64],
) -> Result<()> {
    const CHUNK: usize = 1 << 16;
    let size = m.elem.size();
    let mut bytes = vec![0u8; out.len().min(CHUNK) * size];
    for (k, o) in out.chunks_mut(CHUNK).enumerate() {
        let b = &mut bytes[..o.len() * size];
        let at = m.data_pos + (first + (k * CHUNK) as u64) * size as u64;
        src.file.read_exact_at(b, at).map_err(|e| {
            anyhow!(
                "{}: reading vector data at byte {at}: {e}",
                src.path.display()
            )
        })?;
        convert_le(m.elem, b, o);
        scale.apply(o);
    }
    Ok(())
}

/// A sequential decoder of one compressed vector.
pub struct Decoder {
    input: Input,
    elem: ElemType,
    scale: Scale,
    kind: Kind,
    /// Elements produced so far.
    pub produced: u64,
    n_data: u64,
}

enum Kind {
    Inflate {
        z: Box<flate2::Decompress>,
        diff: bool,
        acc: u64,
        obuf: Vec<u8>,
    },
    Zero(ZeroState),
}

/// State of the zero-suppression decoder.
struct ZeroState {
    word_bits: u32,
    field_bits: u32,
    mask: u64,
    block: u32,
    left_in_block: u32,
    nbits: u32,
    offset: u64,
    acc: u64,
    bits: u64,
    nbuf: u32,
    started: bool,
    /// Bits consumed from the data so far (to detect reads past its end).
    used_bits: u64,
    /// Bits in the data.
    data_bits: u64,
}

impl Decoder {
    /// A decoder at the first element of a compressed vector.
    ///
    /// # Errors
    /// Called on a raw vector (use [`read_raw`]).
    pub fn new(src: Arc<Source>, m: &VectMeta, scale: Scale) -> Result<Decoder> {
        let input = Input::new(src, m);
        Decoder::with_input(input, m, scale)
    }

    fn with_input(input: Input, m: &VectMeta, scale: Scale) -> Result<Decoder> {
        let kind = match m.compression {
            Compression::Raw => bail!("internal: raw vectors are read directly"),
            Compression::Gzip | Compression::DiffGzip => Kind::Inflate {
                z: Box::new(flate2::Decompress::new(true)),
                diff: m.compression == Compression::DiffGzip,
                acc: 0,
                obuf: Vec::new(),
            },
            Compression::ZeroSuppress => {
                let w = m.elem.size() as u32;
                Kind::Zero(ZeroState {
                    word_bits: 8 * w,
                    field_bits: match w {
                        2 => 4,
                        4 => 5,
                        _ => 6,
                    },
                    mask: if w == 8 {
                        u64::MAX
                    } else {
                        (1u64 << (8 * w)) - 1
                    },
                    block: 0,
                    left_in_block: 0,
                    nbits: 0,
                    offset: 0,
                    acc: 0,
                    bits: 0,
                    nbuf: 0,
                    started: false,
                    used_bits: 0,
                    data_bits: 8 * m.n_bytes,
                })
            }
        };
        Ok(Decoder {
            input,
            elem: m.elem,
            scale,
            kind,
            produced: 0,
            n_data: m.n_data,
        })
    }

    /// The decoder's input buffer (for reuse).
    fn into_bytes(self) -> Vec<u8> {
        self.input.buf
    }

    /// Memory held by the decoder \[bytes\] (input buffer and state).
    pub fn mem_bytes(&self) -> usize {
        let state = match &self.kind {
            Kind::Inflate { obuf, .. } => 48 * 1024 + obuf.capacity(),
            Kind::Zero(_) => 64,
        };
        self.input.buf.capacity() + state
    }

    /// Decode the next `out.len()` elements, calibrated.
    ///
    /// # Errors
    /// Asking past the vector's end, corrupt compressed data (the data end
    /// early, the zlib stream is invalid), or I/O errors; all name the file.
    pub fn decode(&mut self, out: &mut [f64]) -> Result<()> {
        if self.produced + out.len() as u64 > self.n_data {
            bail!(
                "{}: internal: decoding past the end of a vector of {} elements",
                self.input.src.path.display(),
                self.n_data
            );
        }
        match &mut self.kind {
            Kind::Inflate { .. } => self.inflate(out)?,
            Kind::Zero(_) => self.unsuppress(out)?,
        }
        self.scale.apply(out);
        self.produced += out.len() as u64;
        Ok(())
    }

    fn inflate(&mut self, out: &mut [f64]) -> Result<()> {
        const OUT_ELEMS: usize = 1 << 15;
        let size = self.elem.size();
        let Kind::Inflate { z, diff, acc, obuf } = &mut self.kind else {
            unreachable!()
        };
        let input = &mut self.input;
        let path = input.src.path.clone();
        for o in out.chunks_mut(OUT_ELEMS) {
            let want = o.len() * size;
            if obuf.len() < want {
                obuf.resize(want, 0);
            }
            let mut got = 0;
            while got < want {
                if input.lo == input.hi && input.refill()? == 0 {
                    bail!(
                        "{}: gzip data end after {} of {} elements (corrupt vector)",
                        path.display(),
                        (self.produced * size as u64 + got as u64) / size as u64,
                        self.n_data
                    );
                }
                let (in0, out0) = (z.total_in(), z.total_out());
                let status = z
                    .decompress(
                        &input.buf[input.lo..input.hi],
                        &mut obuf[got..want],
                        flate2::FlushDecompress::None,
                    )
                    .map_err(|e| anyhow!("{}: corrupt gzip data: {e}", path.display()))?;
                input.lo += (z.total_in() - in0) as usize;
                got += (z.total_out() - out0) as usize;
                if status == flate2::Status::StreamEnd && got < want {
                    bail!(
                        "{}: gzip stream ends after {} bytes, short of the {} elements declared",
                        path.display(),
                        z.total_out(),
                        self.n_data
                    );
                }
            }
            if *diff {
                integrate_le(self.elem, &obuf[..want], acc, o);
            } else {
                convert_le(self.elem, &obuf[..want], o);
            }
        }
        Ok(())
    }

    fn unsuppress(&mut self, out: &mut [f64]) -> Result<()> {
        let elem = self.elem;
        self.zero_blocks(out, |st, input, o| match elem {
            ElemType::I16 => run(st, input, o, |a| a as u16 as i16 as f64),
            ElemType::U16 => run(st, input, o, |a| a as u16 as f64),
            ElemType::I32 => run(st, input, o, |a| a as u32 as i32 as f64),
            ElemType::U32 => run(st, input, o, |a| a as u32 as f64),
            ElemType::F32 => run(st, input, o, |a| f32::from_bits(a as u32) as f64),
            ElemType::I64 => run(st, input, o, |a| a as i64 as f64),
            ElemType::U64 => run(st, input, o, |a| a as f64),
            ElemType::F64 => run(st, input, o, f64::from_bits),
            _ => unreachable!("zero suppression only for 2-, 4- and 8-byte elements"),
        })
    }

    /// Zero-suppressed decoding of the next `out.len()` elements as their
    /// bit patterns (the element's word, zero-extended), uncalibrated.
    fn unsuppress_words(&mut self, out: &mut [u64]) -> Result<()> {
        self.zero_blocks(out, |st, input, o| run(st, input, o, |a| a))
    }

    /// The block structure of zero suppression: block headers read here,
    /// each block's values by `block_run`.
    fn zero_blocks<T>(
        &mut self,
        out: &mut [T],
        mut block_run: impl FnMut(&mut ZeroState, &mut Input, &mut [T]) -> Result<()>,
    ) -> Result<()> {
        let Kind::Zero(st) = &mut self.kind else {
            unreachable!()
        };
        let input = &mut self.input;
        if !st.started {
            st.block = read_bits(st, input, 16)? as u32;
            if st.block == 0 {
                bail!(
                    "{}: zero-suppressed vector with block size 0 (corrupt)",
                    input.src.path.display()
                );
            }
            st.started = true;
        }
        let mut done = 0;
        while done < out.len() {
            if st.left_in_block == 0 {
                let f = read_bits(st, input, st.field_bits)? as u32;
                st.nbits = if f == 0 { 0 } else { f + 1 };
                st.offset = if st.nbits == 0 {
                    0
                } else {
                    (1u64 << (st.nbits - 1)) - 1
                };
                if st.nbits > st.word_bits {
                    bail!(
                        "{}: zero-suppressed block of {} bits in {}-bit words (corrupt)",
                        input.src.path.display(),
                        st.nbits,
                        st.word_bits
                    );
                }
                st.left_in_block = st.block;
            }
            let m = (st.left_in_block as usize).min(out.len() - done);
            block_run(st, input, &mut out[done..done + m])?;
            st.left_in_block -= m as u32;
            done += m;
        }
        if st.used_bits > st.data_bits {
            // Missing bits read as zeros; using any means the data ended early.
            bail!(
                "{}: zero-suppressed data end before the {} elements declared (corrupt)",
                input.src.path.display(),
                self.n_data
            );
        }
        Ok(())
    }
}

/// Decode a whole compressed vector at once into `out`: its `n_data`
/// elements as little-endian bytes of the stored type (differences already
/// summed back), uncalibrated, from its compressed data `bytes[at..at +
/// n_bytes]` already in memory. gzip and differences + gzip go through
/// libdeflate (one call into a buffer of the known decompressed size), zero
/// suppression through [`Decoder`] on the bytes in memory. [`convert_le`]
/// and the calibration then give the samples.
///
/// Returns `bytes` back, and whether it decoded: `false` when the data are
/// not exactly `n_data` elements of valid compressed data (corrupt, or a
/// stream longer than declared). The caller then reads the vector with the
/// streaming [`Decoder`], whose samples and errors stay the reference (it
/// returns the samples before a corruption, and ignores data past the
/// declared length, as it always did).
pub fn decode_whole(
    src: &Arc<Source>,
    m: &VectMeta,
    bytes: Vec<u8>,
    at: usize,
    out: &mut Vec<u8>,
) -> (Vec<u8>, bool) {
    let size = m.elem.size();
    let want = m.n_data as usize * size;
    out.clear();
    out.resize(want, 0);
    match m.compression {
        Compression::Gzip | Compression::DiffGzip => {
            let Some(data) = bytes.get(at..at + m.n_bytes as usize) else {
                return (bytes, false);
            };
            let mut z = libdeflater::Decompressor::new();
            if z.zlib_decompress(data, out) != Ok(want) {
                return (bytes, false);
            }
            if m.compression == Compression::DiffGzip {
                integrate_in_place(m.elem, out);
            }
            (bytes, true)
        }
        Compression::ZeroSuppress => {
            if at as u64 + m.n_bytes > bytes.len() as u64 {
                return (bytes, false);
            }
            let mut d = match Decoder::with_input(
                Input::in_memory(src.clone(), m, bytes, at),
                m,
                Scale::IDENTITY,
            ) {
                Ok(d) => d,
                Err(_) => return (Vec::new(), false),
            };
            let mut words = [0u64; 2048];
            for chunk in out.chunks_mut(words.len() * size) {
                let w = &mut words[..chunk.len() / size];
                if d.unsuppress_words(w).is_err() {
                    return (d.into_bytes(), false);
                }
                for (c, v) in chunk.chunks_exact_mut(size).zip(w.iter()) {
                    c.copy_from_slice(&v.to_le_bytes()[..size]);
                }
            }
            (d.into_bytes(), true)
        }
        Compression::Raw => (bytes, false),
    }
}

/// Sum little-endian integer differences back in place (wrap-around).
fn integrate_in_place(elem: ElemType, bytes: &mut [u8]) {
    macro_rules! integ {
        ($t:ty, $n:expr) => {{
            let mut a: $t = 0;
            for b in bytes.chunks_exact_mut($n) {
                a = a.wrapping_add(<$t>::from_le_bytes(
                    (&*b).try_into().expect("element bytes"),
                ));
                b.copy_from_slice(&a.to_le_bytes());
            }
        }};
    }
    match elem {
        ElemType::I8 | ElemType::U8 => integ!(u8, 1),
        ElemType::I16 | ElemType::U16 => integ!(u16, 2),
        ElemType::I32 | ElemType::U32 => integ!(u32, 4),
        ElemType::I64 | ElemType::U64 => integ!(u64, 8),
        _ => unreachable!("differences only for integer vectors"),
    }
}

/// Samples from elements decoded by [`decode_whole`]: `bytes` holds
/// `out.len()` little-endian elements; calibrated.
pub fn samples_from_le(elem: ElemType, scale: Scale, bytes: &[u8], out: &mut [f64]) {
    convert_le(elem, bytes, out);
    scale.apply(out);
}

/// Decode `out.len()` values of the current block.
#[inline]
fn run<T: Copy>(
    st: &mut ZeroState,
    input: &mut Input,
    out: &mut [T],
    conv: impl Fn(u64) -> T,
) -> Result<()> {
    let (nbits, offset, mask) = (st.nbits, st.offset, st.mask);
    let mut acc = st.acc;
    if nbits == 0 {
        out.fill(conv(acc));
        return Ok(());
    }
    for o in out.iter_mut() {
        let raw = if nbits <= 56 {
            if st.nbuf < nbits {
                refill(st, input)?;
            }
            let v = st.bits & ((1u64 << nbits) - 1);
            st.bits >>= nbits;
            st.nbuf -= nbits;
            st.used_bits += nbits as u64;
            v
        } else {
            let lo = read_bits(st, input, 32)?;
            lo | (read_bits(st, input, nbits - 32)? << 32)
        };
        acc = acc.wrapping_add(raw.wrapping_sub(offset)) & mask;
        *o = conv(acc);
    }
    st.acc = acc;
    Ok(())
}

/// Read `n` ≤ 56 bits (least-significant first).
fn read_bits(st: &mut ZeroState, input: &mut Input, n: u32) -> Result<u64> {
    debug_assert!(n <= 56);
    if st.nbuf < n {
        refill(st, input)?;
    }
    let v = st.bits & ((1u64 << n) - 1);
    st.bits >>= n;
    st.nbuf -= n;
    st.used_bits += n as u64;
    Ok(v)
}

/// Top up the bit buffer to at least 56 bits (fewer only at the end of the
/// data, where missing bits read as zero).
#[inline]
fn refill(st: &mut ZeroState, input: &mut Input) -> Result<()> {
    if input.hi - input.lo < 8 && input.file_left() > 0 {
        input.refill()?;
    }
    if input.hi - input.lo >= 8 {
        // Branch-free refill: the bits above `nbuf` are the next bytes of
        // the stream, so OR-ing them in again later changes nothing.
        let w = u64::from_le_bytes(
            input.buf[input.lo..input.lo + 8]
                .try_into()
                .expect("8 bytes"),
        );
        st.bits |= w << st.nbuf;
        let k = (63 - st.nbuf) / 8;
        input.lo += k as usize;
        st.nbuf += 8 * k;
    } else {
        while st.nbuf <= 56 {
            let b = if input.lo < input.hi {
                input.lo += 1;
                input.buf[input.lo - 1]
            } else {
                0
            };
            st.bits |= (b as u64) << st.nbuf;
            st.nbuf += 8;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Write;

    fn source() -> Arc<Source> {
        let path = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("Cargo.toml");
        let file = File::open(&path).unwrap();
        let len = file.metadata().unwrap().len();
        Arc::new(Source { file, path, len })
    }

    fn meta(elem: ElemType, compression: Compression, n_data: u64, n_bytes: u64) -> VectMeta {
        VectMeta {
            struct_pos: 0,
            struct_len: n_bytes + 8,
            chk_type: 0,
            data_pos: 4,
            n_bytes,
            n_data,
            elem,
            compress: 0,
            compression,
            dx: 1.0,
            start_x: 0.0,
            unit_y: String::new(),
        }
    }

    fn zlib(bytes: &[u8]) -> Vec<u8> {
        let mut e = flate2::write::ZlibEncoder::new(Vec::new(), flate2::Compression::new(6));
        e.write_all(bytes).unwrap();
        e.finish().unwrap()
    }

    /// Decoded whole, and by the streaming decoder (the reference): the
    /// stored elements, and whether the whole-vector decoder took it.
    fn both(m: &VectMeta, data: &[u8]) -> (bool, Vec<u8>, Result<Vec<f64>>) {
        let mut bytes = vec![0u8; 4];
        bytes.extend_from_slice(data);
        bytes.extend_from_slice(&[0; 4]);
        let mut elems = Vec::new();
        let (_, ok) = decode_whole(&source(), m, bytes, 4, &mut elems);
        let mut input = vec![0u8; 4];
        input.extend_from_slice(data);
        let mut dec =
            Decoder::with_input(Input::in_memory(source(), m, input, 4), m, Scale::IDENTITY)
                .unwrap();
        let mut out = vec![0.0; m.n_data as usize];
        let streamed = dec.decode(&mut out).map(|_| out);
        (ok, elems, streamed)
    }

    #[test]
    fn whole_decoding_equals_streaming_or_declines() {
        // Differences that wrap around int16.
        let x: Vec<i16> = (0..5000)
            .map(|i: i32| (i.wrapping_mul(7919) % 65536 - 32768) as i16)
            .collect();
        let le: Vec<u8> = x.iter().flat_map(|v| v.to_le_bytes()).collect();
        let n = x.len() as u64;
        let want: Vec<f64> = x.iter().map(|&v| v as f64).collect();
        let as_f64 = |e: &[u8]| {
            let mut o = vec![0.0; e.len() / 2];
            convert_le(ElemType::I16, e, &mut o);
            o
        };
        // gzip: decoded whole, equal to the stream's.
        let z = zlib(&le);
        let m = meta(ElemType::I16, Compression::Gzip, n, z.len() as u64);
        let (ok, elems, streamed) = both(&m, &z);
        assert!(ok);
        assert_eq!(as_f64(&elems), want);
        assert_eq!(streamed.unwrap(), want);
        // Differences + gzip (wrap-around differences summed back).
        let mut prev = 0i16;
        let d: Vec<u8> = x
            .iter()
            .flat_map(|&v| {
                let dv = v.wrapping_sub(prev);
                prev = v;
                dv.to_le_bytes()
            })
            .collect();
        let z = zlib(&d);
        let m = meta(ElemType::I16, Compression::DiffGzip, n, z.len() as u64);
        let (ok, elems, streamed) = both(&m, &z);
        assert!(ok);
        assert_eq!(as_f64(&elems), want);
        assert_eq!(streamed.unwrap(), want);
        // A stream longer than declared: declined (the streaming decoder
        // returns the declared elements, as it always did).
        let z = zlib(&le);
        let m = meta(ElemType::I16, Compression::Gzip, n - 10, z.len() as u64);
        let (ok, _, streamed) = both(&m, &z);
        assert!(!ok);
        assert_eq!(streamed.unwrap(), want[..want.len() - 10]);
        // Cut short or corrupt: declined; the streaming decoder's error stays.
        let m = meta(ElemType::I16, Compression::Gzip, n, z.len() as u64 / 2);
        let (ok, _, streamed) = both(&m, &z[..z.len() / 2]);
        assert!(!ok);
        assert!(streamed.is_err());
        let mut bad = z.clone();
        bad[z.len() / 3] ^= 0x55;
        let m = meta(ElemType::I16, Compression::Gzip, n, bad.len() as u64);
        assert!(!both(&m, &bad).0);
        // Zero suppression that ends early: block size 12, a block of 2-bit
        // values, then nothing.
        let zs = [12u8, 0, 0x01, 0xff];
        let m = meta(
            ElemType::I16,
            Compression::ZeroSuppress,
            24,
            zs.len() as u64,
        );
        let (ok, _, streamed) = both(&m, &zs);
        assert!(!ok);
        assert!(streamed.is_err());
    }
}
