-- 0001: channels, scans, analysed segments, triggers.
-- Times are integer GPS nanoseconds; frequencies in Hz.

CREATE TABLE channels (
    id          INTEGER PRIMARY KEY,
    name        TEXT NOT NULL UNIQUE,
    role        TEXT NOT NULL CHECK (role IN ('target', 'aux')),
    rate_hz     REAL            -- NULL for channels known only from imported triggers
);

-- One row per scan (or import) of one channel. `run_key` is the idempotency
-- key: a hash of channel name, input checksum, segments and parameters.
CREATE TABLE scans (
    id              INTEGER PRIMARY KEY,
    channel_id      INTEGER NOT NULL REFERENCES channels(id),
    kind            TEXT NOT NULL CHECK (kind IN ('scan', 'import')),
    run_key         TEXT NOT NULL UNIQUE,
    source_path     TEXT NOT NULL,  -- bundle dir or CSV file, as given
    input_checksum  TEXT NOT NULL,  -- xxh3-128 of the samples or CSV bytes
    params_json     TEXT NOT NULL,  -- resolved parameters
    tool_version    TEXT NOT NULL,
    created_utc     TEXT NOT NULL,
    span_start_ns   INTEGER NOT NULL,
    span_end_ns     INTEGER NOT NULL,
    n_triggers      INTEGER NOT NULL
);

-- Time actually searched by a scan (segments ∩ valid data, minus padding).
CREATE TABLE analysed_segments (
    scan_id   INTEGER NOT NULL REFERENCES scans(id) ON DELETE CASCADE,
    start_ns  INTEGER NOT NULL,
    end_ns    INTEGER NOT NULL,
    CHECK (end_ns > start_ns)
);
CREATE INDEX analysed_segments_scan ON analysed_segments(scan_id, start_ns);

CREATE TABLE triggers (
    id          INTEGER PRIMARY KEY,
    scan_id     INTEGER NOT NULL REFERENCES scans(id) ON DELETE CASCADE,
    channel_id  INTEGER NOT NULL REFERENCES channels(id),
    t_peak_ns   INTEGER NOT NULL,
    t_start_ns  INTEGER NOT NULL,
    t_end_ns    INTEGER NOT NULL,
    f_peak_hz   REAL NOT NULL,
    f_low_hz    REAL NOT NULL,
    f_high_hz   REAL NOT NULL,
    snr         REAL NOT NULL,
    q           REAL,          -- NULL when unknown (some imports)
    energy      REAL NOT NULL  -- normalised tile energy Z
);
CREATE INDEX triggers_channel_time ON triggers(channel_id, t_peak_ns);
CREATE INDEX triggers_scan ON triggers(scan_id);
