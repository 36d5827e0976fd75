-- 0003: outcomes, and per-minute counts of the prediction log.
--
-- outcomes: one row per labelled prediction. The prediction's version, time, eta and probability are copied in when
-- the outcome is recorded, so that the monitor reads this table alone (by version and prediction time) and never
-- scans the prediction log. implicit = 1 for a 0 recorded because the model's horizon passed with no positive report.
CREATE TABLE outcomes (
    prediction_id BLOB    NOT NULL PRIMARY KEY,
    model         TEXT    NOT NULL,
    version       TEXT    NOT NULL,
    stage         TEXT    NOT NULL,
    scored_at     INTEGER NOT NULL,
    eta                   NOT NULL,
    probability           NOT NULL,
    outcome       INTEGER NOT NULL CHECK (outcome IN (0, 1)),
    observed_at   INTEGER NULL,
    recorded_at   INTEGER NOT NULL,
    implicit      INTEGER NOT NULL CHECK (implicit IN (0, 1)),
    live_id       BLOB    NULL
);

CREATE INDEX outcomes_by_version_time ON outcomes (model, version, scored_at);
-- A shadow prediction's outcome carries the live prediction's id (predictions.live_id), to pair the two.
CREATE INDEX outcomes_by_live_id ON outcomes (live_id) WHERE live_id IS NOT NULL;

-- Every report that disagreed with an outcome already recorded, whichever value was kept.
CREATE TABLE outcome_conflicts (
    id            INTEGER PRIMARY KEY,
    prediction_id BLOB    NOT NULL,
    model         TEXT    NOT NULL,
    recorded      INTEGER NOT NULL,
    reported      INTEGER NOT NULL,
    kept          INTEGER NOT NULL,
    was_implicit  INTEGER NOT NULL,
    at            INTEGER NOT NULL
);

CREATE INDEX outcome_conflicts_by_model ON outcome_conflicts (model, id);

-- How far the implicit-negative sweep of each model has walked the prediction log (its rowid).
CREATE TABLE maturity_cursors (
    model    TEXT    NOT NULL PRIMARY KEY,
    last_row INTEGER NOT NULL
);

-- Predictions logged per version and minute of scoring time, kept in the same transaction as the rows, so that the
-- monitor can say how many predictions of a window are still without an outcome without scanning the log.
CREATE TABLE prediction_minutes (
    model       TEXT    NOT NULL,
    version     TEXT    NOT NULL,
    minute      INTEGER NOT NULL,
    predictions INTEGER NOT NULL,
    PRIMARY KEY (model, version, minute)
) WITHOUT ROWID;

INSERT INTO prediction_minutes (model, version, minute, predictions)
    SELECT model, version, scored_at / 60000000, count(*) FROM predictions GROUP BY model, version, scored_at / 60000000;

-- Rows per hour of scoring time, drift series and baseline bin, for the population stability index without labels.
CREATE TABLE drift_counts (
    model   TEXT    NOT NULL,
    version TEXT    NOT NULL,
    hour    INTEGER NOT NULL,
    series  TEXT    NOT NULL,
    bin     INTEGER NOT NULL,
    rows    INTEGER NOT NULL,
    PRIMARY KEY (model, version, hour, series, bin)
) WITHOUT ROWID;
