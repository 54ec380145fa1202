-- 0003: witness statistics, lag summaries and veto rounds (coupling).
-- Must be applied after 0002_families (the list order in catalogue::MIGRATIONS
-- is what counts). family_id is a families(id) value but carries no foreign
-- key, so this migration does not depend on 0002; NULL = all target triggers.
-- Efficiency, deadtime: fractions; use_percentage: percent (0-100);
-- significance: -log10 P(N >= n | Poisson expected); times in seconds.

CREATE TABLE witness_runs (
    id            INTEGER PRIMARY KEY,
    kind          TEXT NOT NULL CHECK (kind IN ('witnesses', 'vetoes')),
    created_utc   TEXT NOT NULL,
    params_json   TEXT NOT NULL,
    tool_version  TEXT NOT NULL
);

CREATE TABLE witness_stats (
    run_id          INTEGER NOT NULL REFERENCES witness_runs(id) ON DELETE CASCADE,
    family_id       INTEGER,
    aux_channel_id  INTEGER NOT NULL REFERENCES channels(id),
    snr_threshold   REAL NOT NULL,
    window_s        REAL NOT NULL,
    n_target        INTEGER NOT NULL,
    n_coinc         INTEGER NOT NULL,
    n_aux           INTEGER NOT NULL,
    n_aux_used      INTEGER NOT NULL,
    vetoed_s        REAL NOT NULL,
    analysed_s      REAL NOT NULL,
    deadtime        REAL NOT NULL,
    efficiency      REAL NOT NULL,
    use_percentage  REAL NOT NULL,
    expected        REAL NOT NULL,
    significance    REAL NOT NULL,
    efficiency_over_deadtime REAL NOT NULL
);
CREATE INDEX witness_stats_run ON witness_stats(run_id, family_id, significance);

CREATE TABLE witness_lags (
    run_id            INTEGER NOT NULL REFERENCES witness_runs(id) ON DELETE CASCADE,
    family_id         INTEGER,
    aux_channel_id    INTEGER NOT NULL REFERENCES channels(id),
    snr_threshold     REAL NOT NULL,
    window_s          REAL NOT NULL,
    lag_hist_json     TEXT NOT NULL,  -- {"edges_s":[...],"counts":[...]}
    n_pairs           INTEGER NOT NULL,
    peak_lag_s        REAL,
    median_lag_s      REAL,
    freq_relation     TEXT NOT NULL,
    freq_ratio_median REAL
);

CREATE TABLE veto_rounds (
    run_id          INTEGER NOT NULL REFERENCES witness_runs(id) ON DELETE CASCADE,
    mode            TEXT NOT NULL CHECK (mode IN ('all', 'family')),
    family_id       INTEGER,
    round           INTEGER NOT NULL,
    aux_channel_id  INTEGER NOT NULL REFERENCES channels(id),
    snr_threshold   REAL NOT NULL,
    window_s        REAL NOT NULL,
    n_target        INTEGER NOT NULL,
    n_coinc         INTEGER NOT NULL,
    efficiency      REAL NOT NULL,
    deadtime        REAL NOT NULL,
    use_percentage  REAL NOT NULL,
    expected        REAL NOT NULL,
    significance    REAL NOT NULL,
    vetoed_s        REAL NOT NULL,
    cum_efficiency  REAL NOT NULL,
    cum_deadtime    REAL NOT NULL,
    n_inj           INTEGER,
    n_inj_vetoed    INTEGER,
    inj_expected    REAL,
    safety_p        REAL,
    safety_p_binomial REAL,
    safe            INTEGER NOT NULL CHECK (safe IN (0, 1)),
    proposed        INTEGER NOT NULL CHECK (proposed IN (0, 1))
);
CREATE INDEX veto_rounds_run ON veto_rounds(run_id, mode, family_id, round);
