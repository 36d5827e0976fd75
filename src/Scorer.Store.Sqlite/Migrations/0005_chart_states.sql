-- 0005: the monitor's CUSUM and EWMA charts, saved per version by the process that runs them, so a restart (or
-- another process) continues from where they were instead of replaying every outcome.
CREATE TABLE chart_states (
    model    TEXT    NOT NULL,
    version  TEXT    NOT NULL,
    state    TEXT    NOT NULL,
    saved_at INTEGER NOT NULL,
    PRIMARY KEY (model, version)
) WITHOUT ROWID;
