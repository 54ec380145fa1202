-- Issue 12 item 4: the scientists' edits of families and a classifier that
-- learns their labels.

-- Every merge, split and move a scientist makes, with who and when (kept
-- like label_history). merge: family_id merged into other_family_id;
-- split: other_family_id made from triggers of family_id; move: triggers
-- moved into family_id. trigger_ids: JSON array of the triggers concerned.
CREATE TABLE family_edits (
    id               INTEGER PRIMARY KEY,
    changed_utc      TEXT NOT NULL,
    author           TEXT NOT NULL,
    kind             TEXT NOT NULL CHECK (kind IN ('merge', 'split', 'move')),
    family_id        INTEGER NOT NULL REFERENCES families(id),
    other_family_id  INTEGER REFERENCES families(id),
    n_triggers       INTEGER NOT NULL,
    trigger_ids      TEXT NOT NULL,
    note             TEXT
);

-- Memberships a scientist decided (by an edit): every later clustering run
-- keeps these triggers in these families.
CREATE TABLE family_pins (
    trigger_id  INTEGER PRIMARY KEY REFERENCES triggers(id) ON DELETE CASCADE,
    family_id   INTEGER NOT NULL REFERENCES families(id),
    edit_id     INTEGER NOT NULL REFERENCES family_edits(id)
);
CREATE INDEX family_pins_family ON family_pins(family_id);

-- Supervised classifiers trained on the members of labelled families
-- (model_json: scaler, weights, labels; cv_json: cross-validated confusion
-- matrix and per-label precision/recall).
CREATE TABLE classifiers (
    id           INTEGER PRIMARY KEY,
    created_utc  TEXT NOT NULL,
    n_train      INTEGER NOT NULL,
    model_json   TEXT NOT NULL,
    cv_json      TEXT NOT NULL
);

-- The latest classifier's answer for each target trigger it has seen:
-- a label, or NULL (unclassified) with the reason.
CREATE TABLE trigger_classes (
    trigger_id     INTEGER PRIMARY KEY REFERENCES triggers(id) ON DELETE CASCADE,
    classifier_id  INTEGER NOT NULL REFERENCES classifiers(id),
    label          TEXT,
    probability    REAL NOT NULL,
    reason         TEXT CHECK (reason IS NULL OR reason IN ('unlabelled', 'uncertain', 'novel'))
);
