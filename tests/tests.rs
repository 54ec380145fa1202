//! Integration tests: one target, one module per area (see each module's header).

mod scan_reference;
