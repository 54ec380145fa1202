// Integration tests, one module per topic.

// Coupling: tail probabilities against SciPy fixtures.
mod coupling_stats;

// Coupling: constructed cases (hand-worked grid, planted witness, null
// distribution, safety).
mod coupling_cases;

// Coupling: catalogue round trip, writers and segment files.
mod coupling_catalogue;
