-- 0006_coupling_words: coupling results in glitchbook's own words, with the false-alarm
-- figures of the time-slide background, safety that says when it was not
-- checked, and one consolidated proposal per aux channel.
--
-- Conventions: every fraction is 0-1; lags are t_aux - t_target (negative:
-- the aux trigger comes first); windows are paddings around each aux
-- trigger's extent [s]; chance_p = P(count >= observed) by chance on
-- chance_basis ('targets_poisson', 'aux_binomial' or 'slides');
-- false_alarm includes the choice of the best cell of the channel's grid
-- (false_alarm_basis 'slides', 'slides_tail' or 'bonferroni'),
-- false_alarm_any also the choice of the best of channels_compared channels.
--
-- Rows of earlier runs are carried over: renamed columns keep their values,
-- use_percentage becomes the fraction aux_hit_fraction, significance
-- (-log10 of a Poisson probability on target triggers, no trials
-- correction) becomes chance_p_log10 = -significance and
-- chance_p = 10^-significance with chance_basis
-- 'targets_poisson' and no false-alarm figures (NULL), lags change sign,
-- and a veto round of a run without injections becomes 'unchecked' (0003
-- stored it as safe). SQLite is built here without math functions, so
-- 10^-s = 10^-floor(s) * exp(-frac(s) ln 10) with exp from its Taylor
-- series (24 terms: relative error below 1e-14 on [-ln 10, 0]); tails below
-- 1e-330 become 0.

ALTER TABLE witness_stats RENAME TO witness_stats_0003;
ALTER TABLE witness_lags RENAME TO witness_lags_0003;
ALTER TABLE veto_rounds RENAME TO veto_rounds_0003;

CREATE TABLE witness_stats (
    run_id             INTEGER NOT NULL REFERENCES witness_runs(id) ON DELETE CASCADE,
    family_id          INTEGER,                 -- NULL = all target triggers
    aux_channel_id     INTEGER NOT NULL REFERENCES channels(id),
    aux_min_snr        REAL NOT NULL,
    window_s           REAL NOT NULL,
    targets            INTEGER NOT NULL,
    targets_hit        INTEGER NOT NULL,
    aux_triggers       INTEGER NOT NULL,
    aux_hit            INTEGER NOT NULL,
    covered_s          REAL NOT NULL,
    analysed_s         REAL NOT NULL,
    deadtime           REAL NOT NULL,
    efficiency         REAL NOT NULL,
    aux_hit_fraction   REAL NOT NULL,
    lift               REAL NOT NULL,
    targets_hit_chance REAL NOT NULL,
    aux_hit_chance     REAL,
    target_clumping    REAL,
    aux_clumping       REAL,
    chance_p           REAL NOT NULL,
    chance_p_log10     REAL NOT NULL,           -- log10(chance_p), kept where chance_p underflows
    chance_basis       TEXT NOT NULL
        CHECK (chance_basis IN ('targets_poisson', 'aux_binomial', 'slides')),
    slides             INTEGER NOT NULL,
    slide_p            REAL,
    false_alarm        REAL,                    -- NULL: rows from before this migration
    false_alarm_basis  TEXT
        CHECK (false_alarm_basis IN ('slides', 'slides_tail', 'bonferroni')),
    false_alarm_any    REAL,
    channels_compared  INTEGER,
    beyond_chance      INTEGER CHECK (beyond_chance IN (0, 1))
);

CREATE TABLE witness_lags (
    run_id            INTEGER NOT NULL REFERENCES witness_runs(id) ON DELETE CASCADE,
    family_id         INTEGER,
    aux_channel_id    INTEGER NOT NULL REFERENCES channels(id),
    aux_min_snr       REAL NOT NULL,
    window_s          REAL NOT NULL,
    lag_hist_json     TEXT NOT NULL,  -- {"lag":"t_aux - t_target ...","edges_s":[...],"counts":[...]}
    pairs             INTEGER NOT NULL,
    lag_peak_s        REAL,
    lag_median_s      REAL,
    freq_relation     TEXT NOT NULL,
    freq_ratio_median REAL
);

CREATE TABLE veto_rounds (
    run_id             INTEGER NOT NULL REFERENCES witness_runs(id) ON DELETE CASCADE,
    mode               TEXT NOT NULL CHECK (mode IN ('all', 'family')),
    family_id          INTEGER,
    round              INTEGER NOT NULL,
    aux_channel_id     INTEGER NOT NULL REFERENCES channels(id),
    aux_min_snr        REAL NOT NULL,
    window_s           REAL NOT NULL,
    targets            INTEGER NOT NULL,
    targets_hit        INTEGER NOT NULL,
    efficiency         REAL NOT NULL,
    deadtime           REAL NOT NULL,
    aux_hit_fraction   REAL NOT NULL,
    lift               REAL NOT NULL,
    chance_p           REAL NOT NULL,
    chance_p_log10     REAL NOT NULL,
    chance_basis       TEXT NOT NULL
        CHECK (chance_basis IN ('targets_poisson', 'aux_binomial', 'slides')),
    false_alarm        REAL,                    -- over channels and cells; NULL before this migration
    false_alarm_basis  TEXT
        CHECK (false_alarm_basis IN ('slides', 'slides_tail', 'bonferroni')),
    channels_compared  INTEGER,
    covered_s          REAL NOT NULL,
    total_efficiency   REAL NOT NULL,
    total_deadtime     REAL NOT NULL,
    injections         INTEGER,
    injections_vetoed  INTEGER,
    injections_chance  REAL,
    safety_binomial_p  REAL,                    -- decides
    safety_poisson_p   REAL,                    -- reference
    safety             TEXT NOT NULL CHECK (safety IN ('safe', 'unsafe', 'unchecked'))
);

CREATE TABLE veto_proposals (
    run_id             INTEGER NOT NULL REFERENCES witness_runs(id) ON DELETE CASCADE,
    aux_channel_id     INTEGER NOT NULL REFERENCES channels(id),
    rounds             TEXT NOT NULL,
    round_count        INTEGER NOT NULL,
    segment_count      INTEGER NOT NULL,
    covered_s          REAL NOT NULL,
    analysed_s         REAL NOT NULL,
    deadtime           REAL NOT NULL,
    targets            INTEGER NOT NULL,
    targets_vetoed     INTEGER NOT NULL,
    efficiency         REAL NOT NULL,
    injections         INTEGER,
    injections_vetoed  INTEGER,
    injections_chance  REAL,
    safety_binomial_p  REAL,
    safety_poisson_p   REAL,
    safety             TEXT NOT NULL CHECK (safety IN ('safe', 'unsafe', 'unchecked')),
    state              TEXT NOT NULL CHECK (state IN ('proposed', 'unchecked', 'unsafe'))
);

-- Powers of ten for the conversion.
CREATE TEMP TABLE pow10_0006 (k INTEGER PRIMARY KEY, v REAL NOT NULL);
WITH RECURSIVE p(k, v) AS (SELECT 0, 1.0 UNION ALL SELECT k + 1, v * 0.1 FROM p WHERE k < 330)
INSERT INTO pow10_0006 SELECT k, v FROM p;

INSERT INTO witness_stats (run_id, family_id, aux_channel_id, aux_min_snr, window_s, targets,
    targets_hit, aux_triggers, aux_hit, covered_s, analysed_s, deadtime, efficiency,
    aux_hit_fraction, lift, targets_hit_chance, chance_p, chance_p_log10, chance_basis, slides)
SELECT o.run_id, o.family_id, o.aux_channel_id, o.snr_threshold, o.window_s, o.n_target,
    o.n_coinc, o.n_aux, o.n_aux_used, o.vetoed_s, o.analysed_s, o.deadtime, o.efficiency,
    o.use_percentage / 100.0, o.efficiency_over_deadtime, o.expected,
    coalesce((SELECT v FROM pow10_0006 WHERE k = o.n), 0.0) * (1.0 + o.x * (1.0 + o.x / 2.0 * (1.0 + o.x / 3.0 * (1.0 + o.x / 4.0 * (1.0 + o.x / 5.0 * (1.0 + o.x / 6.0 * (1.0 + o.x / 7.0 * (1.0 + o.x / 8.0 * (1.0 + o.x / 9.0 * (1.0 + o.x / 10.0 * (1.0 + o.x / 11.0 * (1.0 + o.x / 12.0 * (1.0 + o.x / 13.0 * (1.0 + o.x / 14.0 * (1.0 + o.x / 15.0 * (1.0 + o.x / 16.0 * (1.0 + o.x / 17.0 * (1.0 + o.x / 18.0 * (1.0 + o.x / 19.0 * (1.0 + o.x / 20.0 * (1.0 + o.x / 21.0 * (1.0 + o.x / 22.0 * (1.0 + o.x / 23.0 * (1.0 + o.x / 24.0 * 1.0)))))))))))))))))))))))),
    -o.significance, 'targets_poisson', 0
FROM (SELECT *, CAST(significance AS INTEGER) AS n,
             -(significance - CAST(significance AS INTEGER)) * 2.302585092994046 AS x
      FROM witness_stats_0003) o;

INSERT INTO veto_rounds (run_id, mode, family_id, round, aux_channel_id, aux_min_snr, window_s,
    targets, targets_hit, efficiency, deadtime, aux_hit_fraction, lift, chance_p, chance_p_log10,
    chance_basis, covered_s, total_efficiency, total_deadtime, injections, injections_vetoed,
    injections_chance, safety_binomial_p, safety_poisson_p, safety)
SELECT o.run_id, o.mode, o.family_id, o.round, o.aux_channel_id, o.snr_threshold, o.window_s,
    o.n_target, o.n_coinc, o.efficiency, o.deadtime, o.use_percentage / 100.0,
    CASE WHEN o.deadtime > 0 THEN o.efficiency / o.deadtime ELSE 0.0 END,
    coalesce((SELECT v FROM pow10_0006 WHERE k = o.n), 0.0) * (1.0 + o.x * (1.0 + o.x / 2.0 * (1.0 + o.x / 3.0 * (1.0 + o.x / 4.0 * (1.0 + o.x / 5.0 * (1.0 + o.x / 6.0 * (1.0 + o.x / 7.0 * (1.0 + o.x / 8.0 * (1.0 + o.x / 9.0 * (1.0 + o.x / 10.0 * (1.0 + o.x / 11.0 * (1.0 + o.x / 12.0 * (1.0 + o.x / 13.0 * (1.0 + o.x / 14.0 * (1.0 + o.x / 15.0 * (1.0 + o.x / 16.0 * (1.0 + o.x / 17.0 * (1.0 + o.x / 18.0 * (1.0 + o.x / 19.0 * (1.0 + o.x / 20.0 * (1.0 + o.x / 21.0 * (1.0 + o.x / 22.0 * (1.0 + o.x / 23.0 * (1.0 + o.x / 24.0 * 1.0)))))))))))))))))))))))),
    -o.significance, 'targets_poisson', o.vetoed_s, o.cum_efficiency, o.cum_deadtime, o.n_inj, o.n_inj_vetoed,
    o.inj_expected, o.safety_p_binomial, o.safety_p,
    CASE WHEN o.n_inj IS NULL THEN 'unchecked' WHEN o.safe = 1 THEN 'safe' ELSE 'unsafe' END
FROM (SELECT *, CAST(significance AS INTEGER) AS n,
             -(significance - CAST(significance AS INTEGER)) * 2.302585092994046 AS x
      FROM veto_rounds_0003) o;

-- Lags: t_target - t_aux becomes t_aux - t_target (edges negated and
-- reversed, counts reversed).
INSERT INTO witness_lags (run_id, family_id, aux_channel_id, aux_min_snr, window_s,
    lag_hist_json, pairs, lag_peak_s, lag_median_s, freq_relation, freq_ratio_median)
SELECT o.run_id, o.family_id, o.aux_channel_id, o.snr_threshold, o.window_s,
    json_object(
        'lag', 't_aux - t_target (negative: the aux trigger comes first)',
        'edges_s', json((SELECT json_group_array(-e.value) FROM
            (SELECT value FROM json_each(o.lag_hist_json, '$.edges_s') ORDER BY key DESC) e)),
        'counts', json((SELECT json_group_array(c.value) FROM
            (SELECT value FROM json_each(o.lag_hist_json, '$.counts') ORDER BY key DESC) c))),
    o.n_pairs, -o.peak_lag_s, -o.median_lag_s, o.freq_relation, o.freq_ratio_median
FROM witness_lags_0003 o;

DROP TABLE pow10_0006;
DROP TABLE witness_stats_0003;
DROP TABLE witness_lags_0003;
DROP TABLE veto_rounds_0003;

CREATE INDEX witness_stats_run ON witness_stats(run_id, family_id, chance_p_log10);
CREATE INDEX veto_rounds_run ON veto_rounds(run_id, mode, family_id, round);
CREATE INDEX veto_proposals_run ON veto_proposals(run_id);
