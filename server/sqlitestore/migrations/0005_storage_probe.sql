-- A row the server writes and deletes again to tell whether the store can
-- write, while a full disk or a read-only data directory keeps it from
-- storing pushes. It is empty between probes.
CREATE TABLE storage_probe (
    probe_id INTEGER PRIMARY KEY CHECK (probe_id = 1),
    filler   BLOB    NOT NULL
);
