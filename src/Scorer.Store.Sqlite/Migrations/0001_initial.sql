-- 0001: model versions and their stages, the stage history, the prediction log.
--
-- Times are INTEGER microseconds since 1970-01-01T00:00:00Z (UTC), so ordering and range queries are exact.
-- Stages are the text 'live', 'shadow' or 'retired'.

CREATE TABLE model_versions (
    model       TEXT    NOT NULL,
    version     TEXT    NOT NULL,
    file_sha256 TEXT    NOT NULL,
    loaded_at   INTEGER NOT NULL,
    stage       TEXT    NOT NULL CHECK (stage IN ('live', 'shadow', 'retired')),
    PRIMARY KEY (model, version)
) STRICT;

-- Append-only; id gives the order in which the changes were made.
CREATE TABLE stage_changes (
    id         INTEGER PRIMARY KEY,
    model      TEXT    NOT NULL,
    version    TEXT    NOT NULL,
    from_stage TEXT    NULL CHECK (from_stage IN ('live', 'shadow', 'retired')),
    to_stage   TEXT    NOT NULL CHECK (to_stage IN ('live', 'shadow', 'retired')),
    actor      TEXT    NOT NULL,
    at         INTEGER NOT NULL,
    FOREIGN KEY (model, version) REFERENCES model_versions (model, version)
) STRICT;

CREATE INDEX stage_changes_by_model ON stage_changes (model, id);

-- The prediction log, the one table written in volume. id is the Guid's 16 bytes in big-endian (RFC 9562) order, so
-- time-ordered (version 7) ids are appended to the primary key rather than scattered through it.
--
-- Kept lean for write speed: not STRICT and no CHECK constraints (the store writes it only through one bound
-- statement, from typed values), no foreign key to model_versions (the log keeps what was scored whatever becomes of
-- the registry's records). Measured side by side, STRICT and the CHECKs halved the write rate.
--
-- eta and probability hold IEEE 754 doubles but have no declared type: a column of REAL affinity stores a
-- whole-number double as an integer on disk, which turns -0.0 into 0.0. Without affinity the value is kept as bound,
-- bit for bit.
CREATE TABLE predictions (
    id          BLOB    NOT NULL PRIMARY KEY,
    model       TEXT    NOT NULL,
    version     TEXT    NOT NULL,
    stage       TEXT    NOT NULL,
    scored_at   INTEGER NOT NULL,
    "key"       TEXT    NULL,
    eta                 NOT NULL,
    probability         NOT NULL,
    features    TEXT    NOT NULL
);

CREATE INDEX predictions_by_version_time ON predictions (model, version, scored_at);
-- Rows without a key are left out of the key index: a lookup by key never wants them, and they then cost it nothing.
CREATE INDEX predictions_by_key ON predictions (model, "key") WHERE "key" IS NOT NULL;
