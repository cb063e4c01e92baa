-- The device: its identity and counters. One row.
CREATE TABLE device (
    id          INTEGER PRIMARY KEY CHECK (id = 1),
    device_id   TEXT    NOT NULL,
    private_key BLOB    NOT NULL,          -- Ed25519 seed (32 bytes)
    user_id     TEXT    NOT NULL DEFAULT '',
    last_seq    INTEGER NOT NULL,          -- the last device sequence number used
    hlc_wall    INTEGER NOT NULL,          -- the last hybrid time issued or observed
    hlc_logical INTEGER NOT NULL
);

-- Every event the device holds: its own and those pulled from the server.
-- body and signature are the signed bytes, kept as they are.
CREATE TABLE events (
    event_id       TEXT    PRIMARY KEY,
    project_id     TEXT    NOT NULL,
    device_id      TEXT    NOT NULL,
    device_seq     INTEGER NOT NULL,
    kind           TEXT    NOT NULL,
    record_id      TEXT    NOT NULL,
    hlc_wall       INTEGER NOT NULL,
    hlc_logical    INTEGER NOT NULL,
    body           BLOB    NOT NULL,
    signature      BLOB    NOT NULL,
    origin         TEXT    NOT NULL CHECK (origin IN ('local', 'remote')),
    status         TEXT    NOT NULL CHECK (status IN ('pending', 'waiting', 'accepted', 'rejected', 'discarded')),
    server_seq     INTEGER,
    reason         TEXT    NOT NULL DEFAULT '',
    message        TEXT    NOT NULL DEFAULT '',
    created_micros INTEGER NOT NULL,
    UNIQUE (device_id, device_seq)
) WITHOUT ROWID;

CREATE INDEX events_by_project ON events (project_id, hlc_wall, hlc_logical);
CREATE INDEX events_outbox ON events (status, created_micros) WHERE origin = 'local';
