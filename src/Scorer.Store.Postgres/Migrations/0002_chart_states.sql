-- 0002: the monitor's CUSUM and EWMA charts, saved per version by the process that runs them (the holder of the
-- charts' lease), so a restart, or another replica that takes the lease over, continues from where they were
-- instead of replaying every outcome. state is an opaque document.
CREATE TABLE chart_states (
    model    text COLLATE "C" NOT NULL,
    version  text COLLATE "C" NOT NULL,
    state    text             NOT NULL,
    saved_at timestamptz      NOT NULL,
    PRIMARY KEY (model, version)
);
