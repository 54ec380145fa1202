-- Where each scan's samples came from, and re-scans that replace earlier
-- triggers (issue 14 items 4-5).
--
-- scans.data_json: the channel's data description as the scan read it
-- (format, rate, start, files, HDF5 names), so later stages reopen exactly
-- those files whatever happens to bundle.toml. NULL for imports and for
-- scans recorded before this migration (those reopen their bundle).
ALTER TABLE scans ADD COLUMN data_json TEXT;

-- scans.superseded_by: the later scan of the same channel whose analysed
-- time covers all of this scan's; NULL while any of it is current.
ALTER TABLE scans ADD COLUMN superseded_by INTEGER REFERENCES scans(id);

-- Every file a scan read: size, modification time and xxh3-128 of its
-- bytes, to refuse data changed since the scan.
CREATE TABLE scan_files (
    scan_id   INTEGER NOT NULL REFERENCES scans(id) ON DELETE CASCADE,
    path      TEXT NOT NULL,     -- absolute
    bytes     INTEGER NOT NULL,
    mtime_ns  INTEGER NOT NULL,  -- ns since the Unix epoch
    checksum  TEXT NOT NULL,     -- hex xxh3-128 of the bytes
    PRIMARY KEY (scan_id, path)
);

-- Triggers a later scan (or import) of the same channel replaced: the
-- latest scan of a time is the one listed. Rows keep their id, scan and
-- values; superseded_by is the scan that replaced them.
CREATE TABLE superseded_triggers (
    id             INTEGER PRIMARY KEY,
    scan_id        INTEGER NOT NULL REFERENCES scans(id) ON DELETE CASCADE,
    channel_id     INTEGER NOT NULL REFERENCES channels(id),
    t_peak_ns      INTEGER NOT NULL,
    t_start_ns     INTEGER NOT NULL,
    t_end_ns       INTEGER NOT NULL,
    f_peak_hz      REAL NOT NULL,
    f_low_hz       REAL NOT NULL,
    f_high_hz      REAL NOT NULL,
    snr            REAL NOT NULL,
    q              REAL,
    energy         REAL NOT NULL,
    superseded_by  INTEGER NOT NULL REFERENCES scans(id)
);
CREATE INDEX superseded_triggers_scan ON superseded_triggers(scan_id);
