//! Frame files (`.gwf`, the open data-frame format of gravitational-wave
//! detectors, specification version 8): a reader that reads only the
//! channels and time ranges asked for, and a streaming writer.
//!
//! # Reading
//! ```no_run
//! use glitchbook::io::gwf::GwfFile;
//! use glitchbook::scan::SampleSource;
//! # fn main() -> anyhow::Result<()> {
//! let f = GwfFile::open(std::path::Path::new("X-TEST-1400000000-64.gwf"))?;
//! for info in f.channels()? {
//!     println!("{} {} {} Hz {}", info.name, info.kind.name(), info.rate_hz, info.elem.name());
//! }
//! let ch = f.channel("TB9:STRAIN")?;          // per-frame index, no samples read
//! let mut buf = vec![0.0; 4096];
//! ch.read_samples(0, &mut buf)?;              // or ch.read_gps(t, &mut buf)
//! # Ok(()) }
//! ```
//! [`GwfFile::open`] reads the file header, FrEndOfFile and the table of
//! contents (FrTOC) and nothing else. [`GwfFile::channel`] reads, for each
//! frame, the channel's structure (found through the table of contents) and
//! its vector's header; [`GwfChannel`] then reads samples by index or GPS
//! time into `&mut [f64]` and is a [`crate::scan::SampleSource`], so
//! `scan::scan_source` scans it directly. Frames without the channel, gaps
//! between frames and ADC frames flagged invalid (`dataValid ≠ 0`) read as
//! NaN, which the scan treats as dropouts.
//!
//! # What is read, and how
//! - Structures: FrSH/FrSE (the dictionary: [`GwfFile::dictionary`]),
//!   FrameH times via the table of contents, FrAdcData, FrProcData (time
//!   series, type 1), FrSimData and their FrVect. Layouts are the
//!   specification's for version 8 (field lists in `writer.rs`), checked in
//!   the tests against the dictionary the reference library writes.
//! - Element types int8/16/32/64, uint8/16/32/64, float32, float64, all
//!   returned as f64 (64-bit integers beyond 2^53 lose precision). Complex
//!   and string vectors are refused with an error naming file and channel.
//! - ADC calibration: `value = bias + slope × counts`, the specification's
//!   definitions (`bias`: "DC bias on channel (units @ ADC counts = 0)";
//!   `slope`: "ADC calibration: input units/ct"). The reference library
//!   stores slope and bias but returns raw counts; the fixtures check the
//!   counts against it and the calibrated values against this formula.
//! - Compressions: none, gzip, differences + gzip, zero suppression of 2-,
//!   4- and 8-byte words (details in `vect.rs`), little-endian data only;
//!   anything else is refused with the code in the message.
//! - Checksums (CRC of POSIX `cksum`, [`crc`]): the file header's (cheap,
//!   stored in FrEndOfFile), FrEndOfFile's and the table of contents' at
//!   open; each channel structure's when read; each vector's before its
//!   first samples are returned. The whole-file checksum needs the whole
//!   file: [`GwfFile::verify_file_checksum`] does it on request, never on
//!   open.
//! - No table of contents: a clear error (every writer in use writes one).
//! - Big-endian files and vectors: refused.
//! - Memory: bounded by the constants in [`channel`] (decoder windows, at
//!   most [`channel::POOL_BYTES`] per open channel) and the caller's
//!   buffers, not by file or vector size.
//!
//! Every error is one line naming the file, and the structure, channel or
//! field at fault.
//!
//! # Writing
//! [`GwfWriter`] writes frames as they come (each channel's vector
//! compressed in memory, nothing else kept but the table of contents),
//! with checksums and a table of contents; see its module header.
//!
//! # For multi-file channels
//! One [`GwfFile`] is one file. A channel spanning many files is a list of
//! (`GwfChannel::start_gps`, `len`, `rate`) pieces, one per file, placed on
//! one grid by the caller; [`GwfChannel::spans`] tells which samples frames
//! hold without reading data, and [`FrameInfo`] gives each frame's span.
//! Opening a file costs three small reads; `channel()` two reads per frame.
pub mod channel;
pub mod crc;
pub mod file;
pub mod format;
pub mod vect;
pub mod writer;

pub use channel::GwfChannel;
pub use file::{ChannelInfo, ChannelKind, ClassDef, FrameInfo, GwfFile};
pub use format::{Compression, ElemType};
pub use writer::{ChannelData, GwfWriter, Samples};
