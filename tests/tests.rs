//! Integration tests: one target, one module per area (see each module's header).

// Scan: conditioning, Q tiling and triggers against SciPy, Chatterji et al.
// (2004) and analytic matched-filter SNRs.
/// Scale-out CLI end to end on the demo (plan, run-plan, merge vs one scan).
mod plan_cli;
mod plan_shards;
/// Extended glitches (arches, sweeps, long tones) at their loudness.
mod scan_extended;
mod scan_offgrid;
mod scan_reference;
/// Noise tails per plane and row band (long; `.ci/run` runs it).
mod scan_tails;

// Coupling: tail probabilities against SciPy fixtures.
mod coupling_stats;

// Coupling: constructed cases (hand-worked grid, planted witness, null
// distribution, safety).
mod coupling_cases;

// Coupling: catalogue round trip, writers and segment files.
mod coupling_catalogue;

// Coupling: trains, many channels and cells (issue 13): the trains case and
// the calibration of false-alarm probabilities on random channels.
mod coupling_background;

// Rates: Poisson limits (Gehrels 1986, SciPy), Bayesian blocks (Astropy),
// catalogue rates; report: HTML content and a headless-browser check.
mod rates_blocks;
pub mod rates_catalogue;
mod rates_limits;
mod report_html;

mod demo_scenario;
/// The classifier by label: against scikit-learn, and in a catalogue.
mod families_classify;
/// Families clustering core against scikit-learn / Iris references.
mod families_core;
/// Families on the demo scenario: ground truth and stable ids (issue 3).
mod families_demo;
/// The scientists' edits of families (merge, split, move) and re-clustering.
mod families_edits;
/// Families in a catalogue: cluster, stable ids, labels, assignment.
pub mod families_store;
/// The second scenario (invented site QM4): determinism, truth
/// consistency, metrics vs scikit-learn, a short end-to-end smoke run.
mod scenario_qm4;

/// Harness running the real binary in a temporary directory.
mod cli_util;

/// CLI behaviour of scan/import/triggers/channels/check on good input.
mod cli_basic;

/// witnesses/vetoes/rates/report through the binary on a planted-witness catalogue.
mod cli_coupling_rates;

/// `scan` end to end (the full run waits for scan::scan_channel).
mod cli_scan;

/// The fuzz targets' checks (fuzz/checks.rs) run on the fuzz seeds.
mod fuzz_seeds;
/// Frame files: gwframe fixtures, corrupt files, writer round trip, scan from frames.
mod io_gwf;
/// HDF5 strain files: h5py fixtures, bad files, scan from HDF5.
mod io_hdf5;
mod io_inputs;
/// Issue 6 reliability: bad input leaves the catalogue unchanged.
mod reliability_bad_input;
/// Issue 6 reliability: two writers and a reader at once.
mod reliability_concurrency;
/// Issue 6 reliability: hostile text round-trips verbatim through every format.
mod reliability_injection;
/// Issue 6 reliability: SIGKILL during writes (ignored; run by .ci/run).
mod reliability_kill;
/// Issue 6 reliability: SIGKILL during scan, cluster and label (ignored; run by .ci/run).
mod reliability_kill_pipeline;
/// Issue 15 reliability: read-only listings, GPS range, bounded work, safe report output,
/// quoted batch scripts, checked shards.
mod reliability_round2;
/// Issue 6 reliability: schema upgrades and refusal of newer catalogues.
mod reliability_upgrade;

/// Following a run: days of one channel, overlapping and repeated scans, changed data, frame bundles.
mod runs_data;
