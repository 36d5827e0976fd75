-- 0005: the drift series of the linear predictor is named linear_predictor, as in the model file's baseline and the
-- report (it was score). A model file may not name a feature linear_predictor, so the name cannot meet a feature's.
UPDATE drift_counts SET series = 'linear_predictor' WHERE series = 'score';
