//! Integration tests: one target, one module per area (see each module's header).

// Scan: conditioning, Q tiling and triggers against SciPy, Chatterji et al.
// (2004) and analytic matched-filter SNRs.
mod scan_reference;

// Coupling: tail probabilities against SciPy fixtures.
mod coupling_stats;

// Coupling: constructed cases (hand-worked grid, planted witness, null
// distribution, safety).
mod coupling_cases;

// Coupling: catalogue round trip, writers and segment files.
mod coupling_catalogue;

// Rates: Poisson limits (Gehrels 1986, SciPy), Bayesian blocks (Astropy),
// catalogue rates; report: HTML content and a headless-browser check.
mod rates_blocks;
pub mod rates_catalogue;
mod rates_limits;
mod report_html;

mod demo_scenario;
/// Families clustering core against scikit-learn / Iris references.
mod families_core;
/// Families in a catalogue: cluster, stable ids, labels, assignment.
mod families_store;
