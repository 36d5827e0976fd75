-- 0008: leases, the right to run work that must run in one process among all that share the file (the monitor's
-- charts). A row names the store instance holding the lease and the time (microseconds since the Unix epoch, on the
-- holder's clock) until which its hold stands unless renewed; another instance may take it over after that.
CREATE TABLE leases (
    name       TEXT    NOT NULL PRIMARY KEY,
    holder     TEXT    NOT NULL,
    expires_at INTEGER NOT NULL
) WITHOUT ROWID;
