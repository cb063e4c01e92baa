-- The events table again, as a table with a row number, and only the
-- indexes the device's queries use. Keyed by event_id without a row number,
-- every index carried the 36-character event id as its pointer to the row,
-- and rows inserted out of id order left the table's pages part empty. Now
-- each index points with the row number, rows fill their pages in the
-- order they are written, and event_id is one unique index.
--
-- Dropped: events_by_device (project_id, device_id, device_seq), which the
-- key of a device's sequence numbers (device_id, device_seq) answers with
-- the project checked on the row: a device numbers its entries once across
-- projects. events_outbox holds only the local entries not accepted (the
-- outbox and the refused entries) instead of every local entry; its queries
-- name the condition. events_skewed finds the few entries with a clock skew
-- without reading the project.
CREATE TABLE events_new (
    event_id             TEXT    NOT NULL UNIQUE,
    project_id           TEXT    NOT NULL,
    device_id            TEXT    NOT NULL,
    device_seq           INTEGER NOT NULL,
    kind                 TEXT    NOT NULL,
    record_id            TEXT    NOT NULL,
    hlc_wall             INTEGER NOT NULL,
    hlc_logical          INTEGER NOT NULL,
    body                 BLOB    NOT NULL,
    signature            BLOB    NOT NULL,
    origin               TEXT    NOT NULL CHECK (origin IN ('local', 'remote')),
    status               TEXT    NOT NULL CHECK (status IN ('pending', 'waiting', 'accepted', 'rejected', 'discarded')),
    server_seq           INTEGER,
    reason               TEXT    NOT NULL DEFAULT '',
    message              TEXT    NOT NULL DEFAULT '',
    created_micros       INTEGER NOT NULL,
    confirmed            INTEGER NOT NULL DEFAULT 0,
    server_lacks         INTEGER NOT NULL DEFAULT 0,
    waiting_for          TEXT    NOT NULL DEFAULT '',
    waiting_since_micros INTEGER NOT NULL DEFAULT 0,
    field                TEXT    NOT NULL DEFAULT '',
    rule                 TEXT    NOT NULL DEFAULT '',
    clock_skew_micros    INTEGER NOT NULL DEFAULT 0,
    UNIQUE (device_id, device_seq)
);

-- In the order the views read them, so that a store's rows sit in its
-- pages roughly as a device that pulled them would have written them.
INSERT INTO events_new (event_id, project_id, device_id, device_seq, kind, record_id, hlc_wall, hlc_logical, body, signature,
    origin, status, server_seq, reason, message, created_micros, confirmed, server_lacks, waiting_for, waiting_since_micros,
    field, rule, clock_skew_micros)
SELECT event_id, project_id, device_id, device_seq, kind, record_id, hlc_wall, hlc_logical, body, signature,
    origin, status, server_seq, reason, message, created_micros, confirmed, server_lacks, waiting_for, waiting_since_micros,
    field, rule, clock_skew_micros
FROM events ORDER BY hlc_wall, hlc_logical, device_id, event_id;

DROP TABLE events;
ALTER TABLE events_new RENAME TO events;

CREATE INDEX events_by_project ON events (project_id, hlc_wall, hlc_logical);
CREATE INDEX events_outbox ON events (status, created_micros) WHERE origin = 'local' AND status != 'accepted';
CREATE INDEX events_unconfirmed ON events (project_id, hlc_wall, hlc_logical, device_id, event_id) WHERE confirmed = 0;
CREATE INDEX events_waiting ON events (project_id, waiting_since_micros) WHERE waiting_since_micros > 0;
CREATE INDEX events_skewed ON events (project_id) WHERE clock_skew_micros != 0;
