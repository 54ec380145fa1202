//! Integration tests: one target, one module per area (see each module's header).

/// Scan pipeline against reference values.
mod scan_reference;

/// Harness running the real binary in a temporary directory.
mod cli_util;

/// CLI behaviour of scan/import/triggers/channels/check on good input.
mod cli_basic;

/// `scan` end to end (the full run waits for scan::scan_channel).
mod cli_scan;

/// Issue 6 reliability: bad input leaves the catalogue unchanged.
mod reliability_bad_input;
/// Issue 6 reliability: two writers and a reader at once.
mod reliability_concurrency;
/// Issue 6 reliability: hostile text round-trips verbatim through every format.
mod reliability_injection;
/// Issue 6 reliability: SIGKILL during writes (ignored; run by .ci/run).
mod reliability_kill;
/// Issue 6 reliability: schema upgrades and refusal of newer catalogues.
mod reliability_upgrade;
