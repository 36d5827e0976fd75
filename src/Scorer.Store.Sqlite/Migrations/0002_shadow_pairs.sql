-- 0002: a column pairing a shadow prediction with the live prediction of the same row.
--
-- live_id: for a row scored by a shadow version, the id of the live prediction of the same row (NULL otherwise), so
-- that shadow and live can be compared on the same outcomes.
--
-- (Tried and left: making the table WITHOUT ROWID, clustered on id, saves the primary key's separate index but did
-- not write measurably faster, and would store rows with many features poorly.)
ALTER TABLE predictions ADD COLUMN live_id BLOB NULL;
CREATE INDEX predictions_by_live_id ON predictions (live_id) WHERE live_id IS NOT NULL;

-- The (model, version, scored_at) index goes: it cost a quarter of the write rate of keyless rows (measured with
-- bench/Scorer.Bench --store-writes: 143k -> 188k rows/s per batch), and nothing on a hot path reads predictions by
-- time: the monitor reads the outcomes table, and walks new predictions in rowid order.
DROP INDEX predictions_by_version_time;
