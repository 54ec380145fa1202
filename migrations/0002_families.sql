-- 0002: fingerprints, clustering runs, families, memberships, labels.

-- One fingerprint per target trigger; recomputed when `version` changes.
CREATE TABLE features (
    trigger_id  INTEGER PRIMARY KEY REFERENCES triggers(id) ON DELETE CASCADE,
    version     INTEGER NOT NULL,
    maps        BLOB NOT NULL,   -- f32 LE, [span][time][freq] normalised energy Z
    scalars     BLOB NOT NULL    -- f32 LE, scalar morphology (see families::features)
);

-- One row per `cluster` run; model_json holds everything `assign` needs
-- (scaler, PCA, mixture, novelty threshold, component -> family id).
CREATE TABLE cluster_runs (
    id               INTEGER PRIMARY KEY,
    created_utc      TEXT NOT NULL,
    params_json      TEXT NOT NULL,
    tool_version     TEXT NOT NULL,
    feature_version  INTEGER NOT NULL,
    n_clustered      INTEGER NOT NULL,
    n_families       INTEGER NOT NULL,
    bic_json         TEXT NOT NULL,   -- [[k, BIC], ...]
    model_json       TEXT NOT NULL
);

CREATE TABLE families (
    id            INTEGER PRIMARY KEY,
    label         TEXT,            -- NULL until a human names it
    note          TEXT,
    status        TEXT NOT NULL CHECK (status IN ('active', 'merged', 'retired')),
    created_run   INTEGER NOT NULL REFERENCES cluster_runs(id),
    last_run      INTEGER NOT NULL REFERENCES cluster_runs(id),
    merged_into   INTEGER REFERENCES families(id),
    component     INTEGER          -- family index in the last run (NULL if not active)
);

CREATE TABLE family_members (
    trigger_id   INTEGER PRIMARY KEY REFERENCES triggers(id) ON DELETE CASCADE,
    family_id    INTEGER REFERENCES families(id),
    probability  REAL,
    novel        INTEGER NOT NULL DEFAULT 0,
    run_id       INTEGER NOT NULL REFERENCES cluster_runs(id),
    source       TEXT NOT NULL CHECK (source IN ('cluster', 'assign')),
    loglik       REAL             -- ln p(x) under the run's mixture
);
CREATE INDEX family_members_family ON family_members(family_id);

-- What each run did to identities: kept, new, split (from other_family_id),
-- merge (family_id merged into other_family_id), retired.
CREATE TABLE family_events (
    id               INTEGER PRIMARY KEY,
    run_id           INTEGER NOT NULL REFERENCES cluster_runs(id),
    kind             TEXT NOT NULL CHECK (kind IN ('kept', 'new', 'split', 'merge', 'retired')),
    family_id        INTEGER NOT NULL REFERENCES families(id),
    other_family_id  INTEGER REFERENCES families(id),
    n_shared         INTEGER NOT NULL DEFAULT 0   -- triggers shared with the other/previous family
);

CREATE TABLE label_history (
    id           INTEGER PRIMARY KEY,
    family_id    INTEGER NOT NULL REFERENCES families(id),
    changed_utc  TEXT NOT NULL,
    author       TEXT NOT NULL,
    old_label    TEXT,
    new_label    TEXT,
    old_note     TEXT,
    new_note     TEXT
);
