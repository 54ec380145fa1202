//! Integration tests; one submodule per topic.

/// Families clustering core against scikit-learn / Iris references.
mod families_core;
/// Families in a catalogue: cluster, stable ids, labels, assignment.
mod families_store;
