-- 0004: the export of labelled rows reads them in pages, in (scored_at, prediction_id) order from a position on; this
-- index makes each page a range read, with or without a version (outcomes_by_version_time orders one version only,
-- and by time alone). Building it takes a lock that holds off outcome writes while it reads the outcomes table once
-- (measured: 0.9 s per million outcomes).
CREATE INDEX outcomes_by_model_time ON outcomes (model, scored_at, prediction_id);
