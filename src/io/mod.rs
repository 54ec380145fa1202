//! Input: channel bundles (`bundle.toml` + NumPy `.npy`), frame files
//! ([`gwf`]), HDF5 strain files (`hdf5`, cargo feature `hdf5`), analysis segment files, external trigger CSV files and
//! injection CSV files.
//!
//! Every error names the file and the field or line at fault.

pub mod bundle;
pub mod gwf;
#[cfg(feature = "hdf5")]
pub mod hdf5;
pub mod inspect;
pub mod npy;
pub mod source;
pub mod text;

pub use bundle::{parse_bundle_toml, Bundle, ChannelSpec, DataFormat, Role};
pub use npy::{parse_header, write_npy, NpyDtype, NpyHeader, NpyReader};
pub use source::{ChannelSource, FileStamp};
pub use text::{
    parse_injections, parse_segments, parse_trigger_csv, read_injections, read_segments_file,
    read_trigger_csv,
};

/// A user-supplied string made safe for a one-line message: control
/// characters escaped (`\n`, `\u{0}`, ...) and long strings shortened.
pub(crate) fn shown(s: &str) -> String {
    const MAX_CHARS: usize = 60;
    let mut out: String = s
        .chars()
        .take(MAX_CHARS)
        .flat_map(char::escape_debug)
        .collect();
    if s.chars().count() > MAX_CHARS {
        out.push('…');
    }
    out
}
