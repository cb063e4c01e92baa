CREATE TABLE projects (
    project_id     TEXT    PRIMARY KEY,
    name           TEXT    NOT NULL,
    epoch          INTEGER NOT NULL,
    head_seq       INTEGER NOT NULL,
    head_hash      BLOB    NOT NULL,
    created_micros INTEGER NOT NULL
);

-- The ledger: every event of every project at its place in the chain.
CREATE TABLE ledger (
    project_id        TEXT    NOT NULL REFERENCES projects (project_id),
    seq               INTEGER NOT NULL,
    event_id          TEXT    NOT NULL,
    device_id         TEXT    NOT NULL,
    device_seq        INTEGER NOT NULL,
    kind              TEXT    NOT NULL,
    record_id         TEXT    NOT NULL,
    envelope          BLOB    NOT NULL,
    hash              BLOB    NOT NULL,
    clock_skew_micros INTEGER NOT NULL DEFAULT 0,
    received_micros   INTEGER NOT NULL,
    PRIMARY KEY (project_id, seq)
) WITHOUT ROWID;

CREATE UNIQUE INDEX ledger_by_event ON ledger (event_id);
CREATE INDEX ledger_by_kind ON ledger (project_id, kind, seq);

-- The highest device sequence number accepted from each device.
CREATE TABLE device_marks (
    project_id TEXT    NOT NULL,
    device_id  TEXT    NOT NULL,
    high_seq   INTEGER NOT NULL,
    PRIMARY KEY (project_id, device_id)
) WITHOUT ROWID;

CREATE TABLE users (
    user_id        TEXT    PRIMARY KEY,
    name           TEXT    NOT NULL,
    created_micros INTEGER NOT NULL
);

CREATE TABLE devices (
    device_id       TEXT    PRIMARY KEY,
    user_id         TEXT    NOT NULL REFERENCES users (user_id),
    name            TEXT    NOT NULL DEFAULT '',
    public_key      BLOB    NOT NULL,
    token_hash      BLOB    NOT NULL UNIQUE,
    enrolled_micros INTEGER NOT NULL,
    revoked_micros  INTEGER
);

CREATE TABLE enrollment_codes (
    code_hash      BLOB    PRIMARY KEY,
    user_id        TEXT    NOT NULL REFERENCES users (user_id),
    expires_micros INTEGER NOT NULL,
    used_micros    INTEGER
);
