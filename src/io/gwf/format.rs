//! Low-level pieces of the frame format (specification version 8): the file
//! header, element types and compression codes of vectors, and a checked
//! reader of one structure's fields.
//!
//! Every structure starts with a common header — `length` (INT_8U, the whole
//! structure in bytes, checksum included), `chkType` (1 byte: 0 none, 1 CRC),
//! `class` (1 byte, the id given by the file's FrSH dictionary) and
//! `instance` (INT_4U) — and ends with `chkSum` (INT_4U), the `cksum` CRC of
//! every byte before it ([`super::crc`]). Strings are INT_2U length
//! (terminating NUL included) followed by the bytes; pointers are a class id
//! (INT_2U) and an instance (INT_4U), `0, 0` for none.
use super::crc::Cksum;
use anyhow::{anyhow, bail, Result};
use std::fs::File;
use std::io::Read;
use std::os::unix::fs::FileExt;
use std::path::Path;

/// Length of the file header \[bytes\].
pub const FILE_HEADER_LEN: usize = 40;
/// Length of a structure's common header \[bytes\].
pub const COMMON_LEN: u64 = 14;
/// Length of FrEndOfFile in version 8 \[bytes\].
pub const END_OF_FILE_LEN: u64 = 46;
/// The frame-format version this reader and writer implement.
pub const VERSION: u8 = 8;

/// Element type of a vector (FrVect `type`, specification appendix).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum ElemType {
    /// `FR_VECT_C` (0): signed 8-bit.
    I8,
    /// `FR_VECT_2S` (1).
    I16,
    /// `FR_VECT_4S` (4).
    I32,
    /// `FR_VECT_8S` (5).
    I64,
    /// `FR_VECT_1U` (12).
    U8,
    /// `FR_VECT_2U` (9).
    U16,
    /// `FR_VECT_4U` (10).
    U32,
    /// `FR_VECT_8U` (11).
    U64,
    /// `FR_VECT_4R` (3).
    F32,
    /// `FR_VECT_8R` (2).
    F64,
    /// `FR_VECT_8C` (6): complex of two f32, refused by the reader.
    C64,
    /// `FR_VECT_16C` (7): complex of two f64, refused by the reader.
    C128,
    /// `FR_VECT_STRING` (8): refused by the reader.
    Str,
}

impl ElemType {
    /// From the FrVect `type` code.
    pub fn from_code(code: u16) -> Option<ElemType> {
        Some(match code {
            0 => ElemType::I8,
            1 => ElemType::I16,
            2 => ElemType::F64,
            3 => ElemType::F32,
            4 => ElemType::I32,
            5 => ElemType::I64,
            6 => ElemType::C64,
            7 => ElemType::C128,
            8 => ElemType::Str,
            9 => ElemType::U16,
            10 => ElemType::U32,
            11 => ElemType::U64,
            12 => ElemType::U8,
            _ => return None,
        })
    }

    /// The FrVect `type` code.
    pub fn code(self) -> u16 {
        match self {
            ElemType::I8 => 0,
            ElemType::I16 => 1,
            ElemType::F64 => 2,
            ElemType::F32 => 3,
            ElemType::I32 => 4,
            ElemType::I64 => 5,
            ElemType::C64 => 6,
            ElemType::C128 => 7,
            ElemType::Str => 8,
            ElemType::U16 => 9,
            ElemType::U32 => 10,
            ElemType::U64 => 11,
            ElemType::U8 => 12,
        }
    }

    /// Bytes per element (0 for strings).
    pub fn size(self) -> usize {
        match self {
            ElemType::I8 | ElemType::U8 => 1,
            ElemType::I16 | ElemType::U16 => 2,
            ElemType::I32 | ElemType::U32 | ElemType::F32 => 4,
            ElemType::I64 | ElemType::U64 | ElemType::F64 | ElemType::C64 => 8,
            ElemType::C128 => 16,
            ElemType::Str => 0,
        }
    }

    /// Name as NumPy spells it (`int16`, `float32`, ...).
    pub fn name(self) -> &'static str {
        match self {
            ElemType::I8 => "int8",
            ElemType::I16 => "int16",
            ElemType::I32 => "int32",
            ElemType::I64 => "int64",
            ElemType::U8 => "uint8",
            ElemType::U16 => "uint16",
            ElemType::U32 => "uint32",
            ElemType::U64 => "uint64",
            ElemType::F32 => "float32",
            ElemType::F64 => "float64",
            ElemType::C64 => "complex64",
            ElemType::C128 => "complex128",
            ElemType::Str => "string",
        }
    }

    /// Whether the reader converts this type to f64 samples.
    pub fn is_real(self) -> bool {
        !matches!(self, ElemType::C64 | ElemType::C128 | ElemType::Str)
    }
}

/// Compression of a vector's data (low byte of FrVect `compress`; the bit
/// 0x100 marks little-endian data).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Compression {
    /// 0: the elements as they are.
    Raw,
    /// 1: a zlib (RFC 1950) stream of the elements.
    Gzip,
    /// 3: first differences of an integer series (wrapping, the first
    /// element as is), then zlib.
    DiffGzip,
    /// 5, 8, 10: first differences of 2-, 4- or 8-byte words (floats as
    /// their bit patterns), then zero suppression: blocks of values stored
    /// with the fewest bits that hold every value of the block.
    ZeroSuppress,
}

impl Compression {
    /// The low-byte code written for elements of `size` bytes (zero
    /// suppression has one code per word size).
    pub fn code(self, size: usize) -> u16 {
        match self {
            Compression::Raw => 0,
            Compression::Gzip => 1,
            Compression::DiffGzip => 3,
            Compression::ZeroSuppress => match size {
                2 => 5,
                4 => 8,
                _ => 10,
            },
        }
    }

    /// Name for messages and listings.
    pub fn name(self) -> &'static str {
        match self {
            Compression::Raw => "raw",
            Compression::Gzip => "gzip",
            Compression::DiffGzip => "diff+gzip",
            Compression::ZeroSuppress => "zero-suppress",
        }
    }
}

/// Decode a FrVect `compress` field for elements of `elem`: the scheme, or
/// a one-line reason it cannot be read (the caller names file and channel).
pub fn compression_of(compress: u16, elem: ElemType) -> Result<Compression> {
    let little = compress & 0x100 != 0;
    if compress & !0x1ff != 0 {
        bail!("unknown compression code {compress:#x}");
    }
    if !little && elem.size() > 1 {
        bail!("big-endian vector data (compression code {compress:#x}) is not supported");
    }
    let size = elem.size();
    Ok(match compress & 0xff {
        0 => Compression::Raw,
        1 => Compression::Gzip,
        3 if elem_is_int(elem) => Compression::DiffGzip,
        3 => bail!(
            "differences + gzip (code 3) on {} data is not defined",
            elem.name()
        ),
        5 if size == 2 => Compression::ZeroSuppress,
        8 if size == 4 => Compression::ZeroSuppress,
        10 if size == 8 && elem != ElemType::C64 => Compression::ZeroSuppress,
        c @ (5 | 8 | 10) => bail!(
            "zero suppression code {c} does not match {} elements of {size} bytes",
            elem.name()
        ),
        c => bail!(
            "compression code {c} is not supported (supported: 0 raw, 1 gzip, \
             3 differences + gzip, 5/8/10 zero suppression)"
        ),
    })
}

fn elem_is_int(e: ElemType) -> bool {
    matches!(
        e,
        ElemType::I8
            | ElemType::I16
            | ElemType::I32
            | ElemType::I64
            | ElemType::U8
            | ElemType::U16
            | ElemType::U32
            | ElemType::U64
    )
}

/// The file header, validated.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct FileHeader {
    /// Format version (8).
    pub version: u8,
    /// Minor version.
    pub minor: u8,
    /// Library that wrote the file (1 = FrameL, 2 = framecpp; 0 unknown).
    pub library: u8,
    /// Checksum type of the file (0 none, 1 CRC).
    pub checksum_type: u8,
}

/// Parse and validate the 40-byte file header.
///
/// # Errors
/// Not a frame file, another version than 8, unexpected type sizes, a
/// big-endian file, or corrupt test patterns; one line, no file name (the
/// caller adds it).
pub fn parse_file_header(b: &[u8]) -> Result<FileHeader> {
    if b.len() < FILE_HEADER_LEN {
        bail!(
            "not a frame file: {} bytes, shorter than the {FILE_HEADER_LEN}-byte file header",
            b.len()
        );
    }
    if &b[..5] != b"IGWD\0" {
        bail!("not a frame file (file header does not start with \"IGWD\")");
    }
    let (version, minor) = (b[5], b[6]);
    if version != VERSION {
        bail!("frame-format version {version} is not supported (only version 8)");
    }
    if b[7..12] != [2, 4, 8, 4, 8] {
        bail!(
            "file header: unexpected type sizes {:?} (need INT_2 2, INT_4 4, INT_8 8, REAL_4 4, REAL_8 8)",
            &b[7..12]
        );
    }
    match [b[12], b[13]] {
        [0x34, 0x12] => {}
        [0x12, 0x34] => bail!("big-endian frame files are not supported"),
        _ => bail!("file header: corrupt byte-order pattern"),
    }
    let ok = u32::from_le_bytes(b[14..18].try_into().expect("4 bytes")) == 0x1234_5678
        && u64::from_le_bytes(b[18..26].try_into().expect("8 bytes")) == 0x0123_4567_89ab_cdef
        && f32::from_le_bytes(b[26..30].try_into().expect("4 bytes")) == std::f32::consts::PI
        && f64::from_le_bytes(b[30..38].try_into().expect("8 bytes")) == std::f64::consts::PI;
    if !ok {
        bail!("file header: corrupt byte-order or floating-point test patterns");
    }
    Ok(FileHeader {
        version,
        minor,
        library: b[38],
        checksum_type: b[39],
    })
}

/// A pointer to a structure: class id and instance (`0, 0` is none).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Ptr {
    /// Class id (FrSH id).
    pub class: u16,
    /// Instance number.
    pub instance: u32,
}

impl Ptr {
    /// Whether this pointer points nowhere.
    pub fn is_null(self) -> bool {
        self.class == 0 && self.instance == 0
    }
}

/// Positional reads from a shared file (no seek state, so many threads can
/// read one handle at once).
pub struct At<'a> {
    /// The file.
    pub file: &'a File,
    /// Offset of the next read \[bytes\].
    pub pos: u64,
}

impl Read for At<'_> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.file.read_at(buf, self.pos)?;
        self.pos += n as u64;
        Ok(n)
    }
}

/// Reads the fields of one structure in order, checking that none runs past
/// the structure's length and (optionally) computing its checksum.
pub struct StructReader<'a> {
    r: std::io::BufReader<At<'a>>,
    path: &'a Path,
    what: String,
    /// Byte offset of the structure in the file.
    pub start: u64,
    /// Structure length \[bytes\], checksum included.
    pub len: u64,
    /// Checksum type (0 none, 1 CRC).
    pub chk_type: u8,
    /// Class id.
    pub class: u16,
    /// Instance number.
    pub instance: u32,
    consumed: u64,
    crc: Option<Cksum>,
}

impl<'a> StructReader<'a> {
    /// Open the structure at `pos`: read its common header and check that it
    /// fits in the file (`file_len` bytes). `what` names it in messages
    /// (e.g. `FrTOC` or `FrAdcData of TB9:ADC, frame 3`); `buf` is the read
    /// buffer size.
    ///
    /// # Errors
    /// A header past the end of the file, or a length that is too small or
    /// reaches past the end.
    pub fn open(
        file: &'a File,
        path: &'a Path,
        file_len: u64,
        pos: u64,
        what: impl Into<String>,
        buf: usize,
    ) -> Result<StructReader<'a>> {
        let what = what.into();
        if pos.checked_add(COMMON_LEN).is_none_or(|e| e > file_len) {
            bail!(
                "{}: {what} at byte {pos}: beyond the end of the file ({file_len} bytes)",
                path.display()
            );
        }
        let mut r = StructReader {
            r: std::io::BufReader::with_capacity(buf, At { file, pos }),
            path,
            what,
            start: pos,
            // Room for the common header until its length field is known.
            len: COMMON_LEN + 4,
            chk_type: 0,
            class: 0,
            instance: 0,
            consumed: 0,
            crc: Some(Cksum::new()),
        };
        let len = r.u64("length")?;
        let chk = r.u8("chkType")?;
        let class = r.u8("class")?;
        let instance = r.u32("instance")?;
        if len < COMMON_LEN + 4 || pos.checked_add(len).is_none_or(|e| e > file_len) {
            bail!(
                "{}: {} at byte {pos}: structure length {len} is impossible (file has {file_len} bytes)",
                path.display(),
                r.what
            );
        }
        r.len = len;
        r.chk_type = chk;
        r.class = class as u16;
        r.instance = instance;
        Ok(r)
    }

    /// Read fields from `pos` to `end` (a part of a structure, e.g. the
    /// fields after a vector's data) without a checksum.
    pub fn part(
        file: &'a File,
        path: &'a Path,
        pos: u64,
        end: u64,
        what: impl Into<String>,
    ) -> StructReader<'a> {
        StructReader {
            r: std::io::BufReader::with_capacity(
                (end.saturating_sub(pos)).clamp(16, 4096) as usize,
                At { file, pos },
            ),
            path,
            what: what.into(),
            start: pos,
            len: end.saturating_sub(pos),
            chk_type: 0,
            class: 0,
            instance: 0,
            consumed: 0,
            crc: None,
        }
    }

    /// Rename the structure in later messages (e.g. once its name is known).
    pub fn rename(&mut self, what: impl Into<String>) {
        self.what = what.into();
    }

    /// Absolute file offset of the next field.
    pub fn pos(&self) -> u64 {
        self.start + self.consumed
    }

    /// Bytes left before the checksum field (or the end of a part).
    pub fn left(&self) -> u64 {
        let tail = if self.crc.is_some() { 4 } else { 0 };
        self.len.saturating_sub(self.consumed + tail)
    }

    /// A one-line error about `field` of this structure.
    pub fn err(&self, field: &str, msg: impl std::fmt::Display) -> anyhow::Error {
        anyhow!(
            "{}: {} at byte {}: field {field}: {msg}",
            self.path.display(),
            self.what,
            self.start
        )
    }

    fn take(&mut self, n: usize, field: &str, out: &mut [u8]) -> Result<()> {
        // The checksum field itself is read by `finish`, which lifts the limit.
        let limit = if self.crc.is_some() && self.consumed + 4 <= self.len && field != "chkSum" {
            self.len - 4
        } else {
            self.len
        };
        if self.consumed + n as u64 > limit {
            return Err(self.err(
                field,
                format!("runs past the end of the structure (length {})", self.len),
            ));
        }
        self.r
            .read_exact(&mut out[..n])
            .map_err(|e| self.err(field, format!("read failed: {e}")))?;
        if let Some(c) = &mut self.crc {
            c.update(&out[..n]);
        }
        self.consumed += n as u64;
        Ok(())
    }

    /// One byte.
    pub fn u8(&mut self, field: &str) -> Result<u8> {
        let mut b = [0u8; 1];
        self.take(1, field, &mut b)?;
        Ok(b[0])
    }

    /// INT_2U.
    pub fn u16(&mut self, field: &str) -> Result<u16> {
        let mut b = [0u8; 2];
        self.take(2, field, &mut b)?;
        Ok(u16::from_le_bytes(b))
    }

    /// INT_2S.
    pub fn i16(&mut self, field: &str) -> Result<i16> {
        Ok(self.u16(field)? as i16)
    }

    /// INT_4U.
    pub fn u32(&mut self, field: &str) -> Result<u32> {
        let mut b = [0u8; 4];
        self.take(4, field, &mut b)?;
        Ok(u32::from_le_bytes(b))
    }

    /// INT_4S.
    pub fn i32(&mut self, field: &str) -> Result<i32> {
        Ok(self.u32(field)? as i32)
    }

    /// INT_8U.
    pub fn u64(&mut self, field: &str) -> Result<u64> {
        let mut b = [0u8; 8];
        self.take(8, field, &mut b)?;
        Ok(u64::from_le_bytes(b))
    }

    /// REAL_4.
    pub fn f32(&mut self, field: &str) -> Result<f32> {
        Ok(f32::from_bits(self.u32(field)?))
    }

    /// REAL_8.
    pub fn f64(&mut self, field: &str) -> Result<f64> {
        Ok(f64::from_bits(self.u64(field)?))
    }

    /// STRING (the terminating NUL dropped; bytes that are not UTF-8 are
    /// replaced).
    pub fn string(&mut self, field: &str) -> Result<String> {
        let n = self.u16(field)? as usize;
        let mut b = vec![0u8; n];
        self.take(n, field, &mut b)?;
        if b.last() == Some(&0) {
            b.pop();
        }
        Ok(String::from_utf8_lossy(&b).into_owned())
    }

    /// A pointer (class INT_2U, instance INT_4U).
    pub fn ptr(&mut self, field: &str) -> Result<Ptr> {
        Ok(Ptr {
            class: self.u16(field)?,
            instance: self.u32(field)?,
        })
    }

    /// A count of array elements: INT_4U, where 0xffffffff (written by some
    /// libraries for an absent list) means none. Checked against the bytes
    /// left: each element takes at least `min_elem_bytes`.
    pub fn count(&mut self, field: &str, min_elem_bytes: u64) -> Result<u64> {
        let n = match self.u32(field)? {
            u32::MAX => 0,
            n => n as u64,
        };
        self.check_array(field, n, min_elem_bytes)?;
        Ok(n)
    }

    /// Check that `n` elements of at least `min_elem_bytes` each can fit.
    pub fn check_array(&self, field: &str, n: u64, min_elem_bytes: u64) -> Result<()> {
        if n.saturating_mul(min_elem_bytes) > self.left() {
            return Err(self.err(
                field,
                format!(
                    "{n} elements do not fit in the {} bytes left of the structure",
                    self.left()
                ),
            ));
        }
        Ok(())
    }

    /// `n` elements of INT_4U.
    pub fn u32s(&mut self, field: &str, n: u64) -> Result<Vec<u32>> {
        self.check_array(field, n, 4)?;
        (0..n).map(|_| self.u32(field)).collect()
    }

    /// `n` elements of INT_8U.
    pub fn u64s(&mut self, field: &str, n: u64) -> Result<Vec<u64>> {
        self.check_array(field, n, 8)?;
        (0..n).map(|_| self.u64(field)).collect()
    }

    /// `n` elements of REAL_8.
    pub fn f64s(&mut self, field: &str, n: u64) -> Result<Vec<f64>> {
        self.check_array(field, n, 8)?;
        (0..n).map(|_| self.f64(field)).collect()
    }

    /// `n` STRINGs.
    pub fn strings(&mut self, field: &str, n: u64) -> Result<Vec<String>> {
        self.check_array(field, n, 2)?;
        (0..n).map(|_| self.string(field)).collect()
    }

    /// Skip `n` bytes (still checksummed).
    pub fn skip(&mut self, n: u64, field: &str) -> Result<()> {
        if n > self.left() {
            return Err(self.err(
                field,
                format!(
                    "{n} bytes run past the end of the structure (length {})",
                    self.len
                ),
            ));
        }
        let mut buf = [0u8; 4096];
        let mut left = n;
        while left > 0 {
            let k = left.min(buf.len() as u64) as usize;
            self.take(k, field, &mut buf)?;
            left -= k as u64;
        }
        Ok(())
    }

    /// Skip any fields not read, read `chkSum` and compare it with the
    /// checksum of the structure's bytes (when `chkType` is 1).
    ///
    /// # Errors
    /// A checksum mismatch, naming the structure.
    pub fn finish(mut self) -> Result<()> {
        let rest = self.left();
        self.skip(rest, "(unread fields)")?;
        let computed = self.crc.map(|c| c.value());
        let stored = self.u32("chkSum")?;
        if let (1, Some(c)) = (self.chk_type, computed) {
            if c != stored {
                return Err(self.err(
                    "chkSum",
                    format!(
                        "checksum mismatch (stored {stored:#010x}, computed {c:#010x}): the file is corrupt"
                    ),
                ));
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn compression_codes_follow_the_element_size() {
        assert_eq!(
            compression_of(0x100, ElemType::F64).unwrap(),
            Compression::Raw
        );
        assert_eq!(
            compression_of(0x105, ElemType::I16).unwrap(),
            Compression::ZeroSuppress
        );
        assert_eq!(
            compression_of(0x108, ElemType::F32).unwrap(),
            Compression::ZeroSuppress
        );
        assert_eq!(
            compression_of(0x10a, ElemType::U64).unwrap(),
            Compression::ZeroSuppress
        );
        assert_eq!(
            compression_of(0x103, ElemType::U32).unwrap(),
            Compression::DiffGzip
        );
        // One-byte data has no byte order.
        assert_eq!(
            compression_of(0x001, ElemType::I8).unwrap(),
            Compression::Gzip
        );
        for (code, elem) in [
            (0x105, ElemType::I32),
            (0x108, ElemType::F64),
            (0x103, ElemType::F32),
            (0x001, ElemType::I16),
            (0x107, ElemType::I16),
            (0x300, ElemType::I16),
        ] {
            let e = compression_of(code, elem).unwrap_err().to_string();
            assert!(!e.contains('\n'), "{e}");
        }
        for c in [Compression::Raw, Compression::Gzip, Compression::DiffGzip] {
            assert_eq!(c.code(4), [0, 1, 3][c as usize]);
        }
        assert_eq!(Compression::ZeroSuppress.code(2), 5);
        assert_eq!(Compression::ZeroSuppress.code(8), 10);
    }

    #[test]
    fn element_codes_round_trip() {
        for code in 0..13u16 {
            let e = ElemType::from_code(code).unwrap();
            assert_eq!(e.code(), code);
        }
        assert!(ElemType::from_code(13).is_none());
    }
}
