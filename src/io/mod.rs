//! Input: channel bundles (`bundle.toml` + NumPy `.npy`), analysis segment
//! files, external trigger CSV files and injection CSV files.
//!
//! Every error names the file and the field or line at fault.

pub mod bundle;
pub mod npy;
pub mod text;

pub use bundle::{Bundle, ChannelSpec, Role};
pub use npy::{write_npy, NpyDtype, NpyReader};
pub use text::{read_injections, read_segments_file, read_trigger_csv};
