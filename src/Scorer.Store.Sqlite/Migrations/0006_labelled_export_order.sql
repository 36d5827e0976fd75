-- 0006: the export of labelled rows reads them in pages, in (scored_at, prediction_id) order from a position on; this
-- index makes each page a range read, with or without a version (outcomes_by_version_time orders one version only,
-- and by time alone). Building it on an existing file reads the outcomes table once.
CREATE INDEX outcomes_by_model_time ON outcomes (model, scored_at, prediction_id);
