-- 0007: predictions and outcomes in tables partitioned by day of prediction time (scored_at, UTC days), so that the
-- retention drops a day's partition whole instead of deleting rows (PostgresScorerStore.PruneAsync).
--
-- Each table has one partition per UTC day, named <table>_YYYYMMDD, FOR VALUES FROM (day 00:00 UTC) TO (next day
-- 00:00 UTC), and a DEFAULT partition, <table>_default, so that no write fails for lack of a partition: a row whose
-- day has no partition yet goes there, and the next retention pass moves it to a partition of its day. Partitions
-- are created here for every day the existing rows have and for today and the next 3 days, then by every pass.
--
-- Primary keys must hold the partition key: predictions (id, scored_at), outcomes (prediction_id, scored_at). An
-- outcome copies its prediction's scored_at, so outcomes join their predictions on both columns, and a lookup of a
-- prediction by id reads only the partitions of the time its id carries (see prediction_times).
--
-- The conversion: the tables are renamed, the partitioned ones created and filled from them (every column kept,
-- outcomes.revised and outcomes.change included), the old ones dropped, then the keys and indexes made as before.
-- It holds the tables for its whole run (one transaction, like every migration). outcome_conflicts, the summaries,
-- the counts and the registry are left as they are.

ALTER TABLE predictions RENAME TO predictions_0006;
ALTER TABLE outcomes RENAME TO outcomes_0006;

CREATE TABLE predictions (
    id          uuid             NOT NULL,
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
) PARTITION BY RANGE (scored_at);

CREATE TABLE outcomes (
    prediction_id uuid             NOT NULL,
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
    change        xid8             NOT NULL DEFAULT pg_current_xact_id(),
    revised       boolean          NOT NULL DEFAULT false
) PARTITION BY RANGE (scored_at);

CREATE TABLE predictions_default PARTITION OF predictions DEFAULT;
CREATE TABLE outcomes_default PARTITION OF outcomes DEFAULT;

DO $$
DECLARE
    day timestamptz;
BEGIN
    FOR day IN
        SELECT date_trunc('day', scored_at, 'UTC') FROM predictions_0006
        UNION SELECT date_trunc('day', scored_at, 'UTC') FROM outcomes_0006
        UNION SELECT date_trunc('day', now(), 'UTC') + make_interval(days => n) FROM generate_series(0, 3) AS n
    LOOP
        EXECUTE format('CREATE TABLE %I PARTITION OF predictions FOR VALUES FROM (%L) TO (%L)',
            'predictions_' || to_char(day AT TIME ZONE 'UTC', 'YYYYMMDD'), day, day + interval '1 day');
        EXECUTE format('CREATE TABLE %I PARTITION OF outcomes FOR VALUES FROM (%L) TO (%L)',
            'outcomes_' || to_char(day AT TIME ZONE 'UTC', 'YYYYMMDD'), day, day + interval '1 day');
    END LOOP;
END
$$;

INSERT INTO predictions (id, log_seq, model, version, stage, scored_at, "key", eta, probability, features, live_id)
    SELECT id, log_seq, model, version, stage, scored_at, "key", eta, probability, features, live_id FROM predictions_0006;
INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id, change, revised)
    SELECT prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id, change, revised
    FROM outcomes_0006;

-- Predictions whose id does not carry their time: not a version-7 id, or one whose milliseconds are not within the
-- hour after scored_at (the service makes a shadow's id when it scores it, after its live row's time, which it
-- keeps). A lookup by id reads this table first (a probe of its key), then the partition of the time it gives. The
-- store adds such rows here when it writes them.
CREATE TABLE prediction_times (
    id        uuid        NOT NULL PRIMARY KEY,
    scored_at timestamptz NOT NULL
);

INSERT INTO prediction_times (id, scored_at)
    SELECT id, scored_at FROM predictions_0006
    WHERE NOT (substr(id::text, 15, 1) = '7'
        AND ('x' || substr(replace(id::text, '-', ''), 1, 12))::bit(48)::bigint - floor(extract(epoch FROM scored_at) * 1000)::bigint BETWEEN 0 AND 3600000);

DROP TABLE predictions_0006;
DROP TABLE outcomes_0006;

ALTER TABLE predictions ADD PRIMARY KEY (id, scored_at);
CREATE INDEX predictions_by_model_seq ON predictions (model, log_seq);
CREATE INDEX predictions_by_key ON predictions (model, "key") WHERE "key" IS NOT NULL;
CREATE INDEX predictions_by_live_id ON predictions (live_id) WHERE live_id IS NOT NULL;

ALTER TABLE outcomes ADD PRIMARY KEY (prediction_id, scored_at);
CREATE INDEX outcomes_by_version_time ON outcomes (model, version, scored_at);
CREATE INDEX outcomes_by_change ON outcomes (model, version, change);
CREATE INDEX outcomes_by_live_id ON outcomes (live_id) WHERE live_id IS NOT NULL;
CREATE INDEX outcomes_by_model_time ON outcomes (model, scored_at, prediction_id);
