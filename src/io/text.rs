//! Text inputs: segment files, external trigger CSV, injection CSV.
use crate::segments::SegmentList;
use crate::trigger::Trigger;
use std::path::Path;

/// Read a segments file (`start end` per line, `#` comments).
pub fn read_segments_file(path: &Path) -> anyhow::Result<SegmentList> {
    todo!("{}", path.display())
}

/// Read an external trigger CSV (`time,frequency,snr` + optional columns).
pub fn read_trigger_csv(path: &Path) -> anyhow::Result<Vec<Trigger>> {
    todo!("{}", path.display())
}

/// Read an injections CSV (a `time` column) \[GPS s\].
pub fn read_injections(path: &Path) -> anyhow::Result<Vec<f64>> {
    todo!("{}", path.display())
}
