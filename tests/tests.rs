//! Integration tests: one target, one module per area (see each module's header).

mod plan_shards;
mod scan_reference;
