-- 0002: a column pairing a shadow prediction with the live prediction of the same row.
--
-- live_id: for a row scored by a shadow version, the id of the live prediction of the same row (NULL otherwise), so
-- that shadow and live can be compared on the same outcomes.
--
-- (Tried and left: making the table WITHOUT ROWID, clustered on id, saves the primary key's separate index but did
-- not write measurably faster, and would store rows with many features poorly.)
ALTER TABLE predictions ADD COLUMN live_id BLOB NULL;
CREATE INDEX predictions_by_live_id ON predictions (live_id) WHERE live_id IS NOT NULL;
