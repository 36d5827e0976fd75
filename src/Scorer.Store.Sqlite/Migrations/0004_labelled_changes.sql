-- 0004: a change number on every outcome row, for the monitor's incremental read of what was labelled (or relabelled).
--
-- Every transaction that writes outcomes takes the next number from outcome_change_counter and stamps it on the rows
-- it inserts or updates. SQLite runs one write transaction at a time, so the numbers grow in commit order: a reader
-- that has seen every row up to number c has seen every commit up to it, and later commits carry larger numbers.
ALTER TABLE outcomes ADD COLUMN change INTEGER NOT NULL DEFAULT 1;

CREATE INDEX outcomes_by_change ON outcomes (model, version, change);

CREATE TABLE outcome_change_counter (
    id   INTEGER NOT NULL PRIMARY KEY CHECK (id = 1),
    last INTEGER NOT NULL
);

INSERT INTO outcome_change_counter (id, last) VALUES (1, 1);
