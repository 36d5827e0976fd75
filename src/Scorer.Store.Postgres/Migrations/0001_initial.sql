-- 0001: the whole schema of the SQLite driver's migrations 0001-0004, with the same meaning, in PostgreSQL's types.
--
-- Tables are created unqualified, in the first schema of the connection's search_path (the store's Schema option).
-- Times are timestamptz (microseconds, UTC; the store rounds towards the past before writing). Doubles are float8,
-- written and read in binary, so they come back bit for bit (-0.0 included). Stages are the text 'live', 'shadow' or
-- 'retired'. Prediction ids are uuid (the Guid's RFC 9562 byte order, so version-7 ids are appended to the key).
-- Names (model, version, key, series) are text COLLATE "C": compared byte by byte, whatever the database's locale,
-- so indexes on them cost no locale-aware comparison and they sort in ordinal order, as in the SQLite driver.

CREATE TABLE model_versions (
    model       text COLLATE "C" NOT NULL,
    version     text COLLATE "C" NOT NULL,
    file_sha256 text             NOT NULL,
    loaded_at   timestamptz      NOT NULL,
    stage       text             NOT NULL CHECK (stage IN ('live', 'shadow', 'retired')),
    PRIMARY KEY (model, version)
);

-- Append-only; id gives the order in which the changes were made (the store takes a per-model lock around each
-- change, so for one model the ids also follow the commits).
CREATE TABLE stage_changes (
    id         bigint           GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    model      text COLLATE "C" NOT NULL,
    version    text COLLATE "C" NOT NULL,
    from_stage text             NULL CHECK (from_stage IN ('live', 'shadow', 'retired')),
    to_stage   text             NOT NULL CHECK (to_stage IN ('live', 'shadow', 'retired')),
    actor      text             NOT NULL,
    at         timestamptz      NOT NULL,
    FOREIGN KEY (model, version) REFERENCES model_versions (model, version)
);

CREATE INDEX stage_changes_by_model ON stage_changes (model, id);

-- The prediction log, the one table written in volume (binary COPY). No foreign key to model_versions: the log keeps
-- what was scored whatever becomes of the registry's records. No CHECK constraints: the store writes it only from
-- typed, checked values.
--
-- log_seq numbers the rows in the order they were written, for the implicit-negative sweep (SQLite walks its rowid):
-- batch * 2^24 + the row's place in its batch, the batch number taken from the sequence prediction_batches when the
-- batch is written (one sequence call per batch, not per row). Numbers are taken when rows are written, not when they
-- commit, so the sweep does not trust one until every transaction that may hold a smaller one has finished (see
-- PostgresScorerStore.RecordImplicitNegativesAsync).
--
-- live_id: for a row scored by a shadow version, the id of the live prediction of the same row (NULL otherwise).
CREATE TABLE predictions (
    id          uuid             NOT NULL PRIMARY KEY,
    log_seq     bigint           NOT NULL,
    model       text COLLATE "C" NOT NULL,
    version     text COLLATE "C" NOT NULL,
    stage       text             NOT NULL,
    scored_at   timestamptz      NOT NULL,
    "key"       text COLLATE "C" NULL,
    eta         float8           NOT NULL,
    probability float8           NOT NULL,
    features    text             NOT NULL,
    live_id     uuid             NULL
);

CREATE SEQUENCE prediction_batches AS bigint;

-- The sweep's walk (by model, in write order); also serves counts by model. Appended to, as log_seq only grows.
CREATE INDEX predictions_by_model_seq ON predictions (model, log_seq);
-- Outcomes by key. Rows without a key are left out: a lookup by key never wants them, and they then cost it nothing.
CREATE INDEX predictions_by_key ON predictions (model, "key") WHERE "key" IS NOT NULL;
-- Outcomes for a live prediction reach the shadow predictions paired with it.
CREATE INDEX predictions_by_live_id ON predictions (live_id) WHERE live_id IS NOT NULL;

-- outcomes: one row per labelled prediction. The prediction's version, time, eta and probability are copied in when
-- the outcome is recorded, so that the monitor reads this table alone and never scans the prediction log.
-- implicit = true for a 0 recorded because the model's horizon passed with no positive report.
--
-- change: the id of the transaction that last inserted or updated the row (pg_current_xact_id()), for the labelled
-- change feed. Transaction ids are handed out when a transaction first writes, not when it commits; the store's
-- writers of a model's outcomes take a lock that the feed's reader waits on, so the reader never moves past a change
-- still in flight (see PostgresScorerStore.GetLabelledChangesAsync).
CREATE TABLE outcomes (
    prediction_id uuid             NOT NULL PRIMARY KEY,
    model         text COLLATE "C" NOT NULL,
    version       text COLLATE "C" NOT NULL,
    stage         text             NOT NULL,
    scored_at     timestamptz      NOT NULL,
    eta           float8           NOT NULL,
    probability   float8           NOT NULL,
    outcome       smallint         NOT NULL CHECK (outcome IN (0, 1)),
    observed_at   timestamptz      NULL,
    recorded_at   timestamptz      NOT NULL,
    implicit      boolean          NOT NULL,
    live_id       uuid             NULL,
    change        xid8             NOT NULL DEFAULT pg_current_xact_id()
);

-- The monitor's reads (by version and prediction time), the change feed, and shadow-live pairing.
CREATE INDEX outcomes_by_version_time ON outcomes (model, version, scored_at);
CREATE INDEX outcomes_by_change ON outcomes (model, version, change);
CREATE INDEX outcomes_by_live_id ON outcomes (live_id) WHERE live_id IS NOT NULL;

-- Every report that disagreed with an outcome already recorded, whichever value was kept; id in the order applied.
CREATE TABLE outcome_conflicts (
    id            bigint           GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    prediction_id uuid             NOT NULL,
    model         text COLLATE "C" NOT NULL,
    recorded      smallint         NOT NULL,
    reported      smallint         NOT NULL,
    kept          smallint         NOT NULL,
    was_implicit  boolean          NOT NULL,
    at            timestamptz      NOT NULL
);

CREATE INDEX outcome_conflicts_by_model ON outcome_conflicts (model, id);

-- How far the implicit-negative sweep of each model has walked the prediction log (its log_seq).
CREATE TABLE maturity_cursors (
    model    text COLLATE "C" NOT NULL PRIMARY KEY,
    last_row bigint           NOT NULL
);

-- Predictions logged per version and minute of scoring time (minutes since the Unix epoch), kept in the same
-- transaction as the rows, so that the monitor can count a window's predictions without scanning the log.
CREATE TABLE prediction_minutes (
    model       text COLLATE "C" NOT NULL,
    version     text COLLATE "C" NOT NULL,
    minute      bigint           NOT NULL,
    predictions bigint           NOT NULL,
    PRIMARY KEY (model, version, minute)
);

-- Rows per hour of scoring time (hours since the Unix epoch), drift series and baseline bin, for the population
-- stability index without labels.
CREATE TABLE drift_counts (
    model   text COLLATE "C" NOT NULL,
    version text COLLATE "C" NOT NULL,
    hour    bigint           NOT NULL,
    series  text COLLATE "C" NOT NULL,
    bin     integer          NOT NULL,
    "rows"  bigint           NOT NULL,
    PRIMARY KEY (model, version, hour, series, bin)
);
