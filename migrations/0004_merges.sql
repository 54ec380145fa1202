-- 0004: scale-out provenance (plan helper owns).
-- A shard catalogue records which plan and shard made it (shard_runs); a
-- merged catalogue records every shard folded in (merges) and which scans
-- came from which merge (merged_scans). UNIQUE(plan_id, shard) makes a second
-- merge of the same shard a no-op.

CREATE TABLE shard_runs (
    plan_id       TEXT NOT NULL,
    shard         INTEGER NOT NULL,
    tool_version  TEXT NOT NULL,
    created_utc   TEXT NOT NULL,
    PRIMARY KEY (plan_id, shard)
);

CREATE TABLE merges (
    id                  INTEGER PRIMARY KEY,
    plan_id             TEXT NOT NULL,
    shard               INTEGER NOT NULL,
    shard_path          TEXT NOT NULL,
    shard_tool_version  TEXT NOT NULL,
    forced              INTEGER NOT NULL DEFAULT 0,  -- 1 = merged past a parameter/version mismatch
    mismatch_note       TEXT,
    n_scans             INTEGER NOT NULL,
    n_triggers_in       INTEGER NOT NULL,
    n_edge_duplicates   INTEGER NOT NULL,  -- edge triggers folded into a louder twin
    merged_utc          TEXT NOT NULL,
    tool_version        TEXT NOT NULL,
    UNIQUE (plan_id, shard)
);

CREATE TABLE merged_scans (
    scan_id   INTEGER PRIMARY KEY REFERENCES scans(id) ON DELETE CASCADE,
    merge_id  INTEGER NOT NULL REFERENCES merges(id)
);
