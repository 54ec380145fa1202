// Integration tests, one module per topic.

// Coupling: tail probabilities against SciPy fixtures.
mod coupling_stats;
