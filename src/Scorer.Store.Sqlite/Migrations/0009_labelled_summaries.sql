-- 0009: the monitor's labelled summaries (docs/monitoring.md "Summaries"): per version, segment ('' for the whole
-- version) and bucket of prediction time, one summary document, written by the holder of the summaries' lease. The
-- revision of a bucket is the summary state's revision when the bucket was last written, so a reader asks only for
-- what changed since it last read.
CREATE TABLE labelled_summaries (
    model          TEXT    NOT NULL,
    version        TEXT    NOT NULL,
    segment        TEXT    NOT NULL,
    bucket_start   INTEGER NOT NULL,
    bucket_seconds INTEGER NOT NULL,
    revision       INTEGER NOT NULL,
    summary        BLOB    NOT NULL,
    PRIMARY KEY (model, version, segment, bucket_start)
) WITHOUT ROWID;

-- How far the summaries of each version have taken in the labelled change feed, and the revision of the last save.
CREATE TABLE summary_states (
    model    TEXT    NOT NULL,
    version  TEXT    NOT NULL,
    cursor   INTEGER NOT NULL,
    revision INTEGER NOT NULL,
    saved_at INTEGER NOT NULL,
    PRIMARY KEY (model, version)
) WITHOUT ROWID;

-- 1 once an outcome has been changed after it was first recorded (a later report under take-latest), so the change
-- feed tells a changed outcome from a new one.
ALTER TABLE outcomes ADD COLUMN revised INTEGER NOT NULL DEFAULT 0;
