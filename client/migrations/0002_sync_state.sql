-- Per project: the chain point the device last verified, and the state of
-- its last sync, for a status a user can see.
CREATE TABLE sync_state (
    project_id           TEXT    PRIMARY KEY,
    epoch                INTEGER NOT NULL DEFAULT 0,
    seq                  INTEGER NOT NULL DEFAULT 0,
    hash                 BLOB,
    last_success_micros  INTEGER NOT NULL DEFAULT 0,
    last_attempt_micros  INTEGER NOT NULL DEFAULT 0,
    last_error           TEXT    NOT NULL DEFAULT ''
);
