-- 0006: the monitor's labelled summaries, as the SQLite driver's migration 0009 (docs/monitoring.md "Summaries"):
-- per version, segment ('' for the whole version) and bucket of prediction time, one summary document written by the
-- holder of the summaries' lease; revision says when the bucket was last written.
CREATE TABLE labelled_summaries (
    model          text COLLATE "C" NOT NULL,
    version        text COLLATE "C" NOT NULL,
    segment        text COLLATE "C" NOT NULL,
    bucket_start   timestamptz      NOT NULL,
    bucket_seconds integer          NOT NULL,
    revision       bigint           NOT NULL,
    summary        bytea            NOT NULL,
    PRIMARY KEY (model, version, segment, bucket_start)
);

CREATE TABLE summary_states (
    model    text COLLATE "C" NOT NULL,
    version  text COLLATE "C" NOT NULL,
    cursor   bigint           NOT NULL,
    revision bigint           NOT NULL,
    saved_at timestamptz      NOT NULL,
    PRIMARY KEY (model, version)
);

-- true once an outcome has been changed after it was first recorded, so the change feed tells a changed outcome from
-- a new one. Adding a column with a constant default rewrites no rows.
ALTER TABLE outcomes ADD COLUMN revised boolean NOT NULL DEFAULT false;
