-- The ledgers of every project, their users and devices: the schema of the
-- SQLite store's migrations 1 to 5, in PostgreSQL's types.

-- A project and its chain head, advanced in the transaction that appends
-- its entries: the row every append of the project updates (and locks).
CREATE TABLE projects (
    project_id text        PRIMARY KEY,
    name       text        NOT NULL,
    epoch      bigint      NOT NULL CHECK (epoch >= 1),
    head_seq   bigint      NOT NULL CHECK (head_seq >= 0),
    head_hash  bytea       NOT NULL CHECK (length(head_hash) = 32),
    created_at timestamptz NOT NULL
);

-- The ledger: every event of every project at its place in the chain.
CREATE TABLE ledger (
    project_id        text        NOT NULL REFERENCES projects (project_id),
    seq               bigint      NOT NULL CHECK (seq >= 1),
    event_id          text        NOT NULL,
    device_id         text        NOT NULL,
    device_seq        bigint      NOT NULL,
    kind              text        NOT NULL,
    record_id         text        NOT NULL,
    envelope          bytea       NOT NULL,
    hash              bytea       NOT NULL CHECK (length(hash) = 32),
    clock_skew_micros bigint      NOT NULL DEFAULT 0,
    received_at       timestamptz NOT NULL,
    PRIMARY KEY (project_id, seq)
);

-- Each event once.
CREATE UNIQUE INDEX ledger_by_event ON ledger (event_id);
CREATE INDEX ledger_by_kind ON ledger (project_id, kind, seq);
CREATE INDEX ledger_skewed ON ledger (project_id) WHERE clock_skew_micros <> 0;

CREATE TABLE users (
    user_id      text        PRIMARY KEY,
    name         text        NOT NULL,
    server_admin boolean     NOT NULL DEFAULT false,
    created_at   timestamptz NOT NULL
);

CREATE TABLE devices (
    device_id   text        PRIMARY KEY,
    user_id     text        NOT NULL REFERENCES users (user_id),
    name        text        NOT NULL DEFAULT '',
    public_key  bytea       NOT NULL,
    token_hash  bytea       UNIQUE,      -- SHA-256 of the bearer token; NULL: no token finds the device
    enrolled_at timestamptz NOT NULL,
    revoked_at  timestamptz
);
CREATE INDEX devices_by_user ON devices (user_id, enrolled_at);

CREATE TABLE enrollment_codes (
    code_hash  bytea       PRIMARY KEY,
    user_id    text        NOT NULL REFERENCES users (user_id),
    expires_at timestamptz NOT NULL,
    used_at    timestamptz
);
CREATE INDEX enrollment_codes_by_user ON enrollment_codes (user_id) WHERE used_at IS NULL;

-- A user's role on a project.
CREATE TABLE members (
    project_id text NOT NULL REFERENCES projects (project_id),
    user_id    text NOT NULL REFERENCES users (user_id),
    role       text NOT NULL CHECK (role IN ('inspector', 'office', 'qa', 'admin')),
    PRIMARY KEY (project_id, user_id)
);
CREATE INDEX members_by_user ON members (user_id);

-- The server's own signing identity: it signs the entries it makes itself
-- (a device's key introduced to a project, a revocation). Its device and
-- user rows stand beside the others so its key is handed down like theirs.
CREATE TABLE server_identity (
    id          integer PRIMARY KEY CHECK (id = 1),
    device_id   text    NOT NULL,
    user_id     text    NOT NULL,
    private_key bytea   NOT NULL       -- Ed25519 seed (32 bytes)
);

-- An invitation of an existing user to a project, made by one of its
-- administrators; the user becomes a member only by accepting it. Closed
-- invitations stay, with their outcome, for the record.
CREATE TABLE invitations (
    invitation_id text        PRIMARY KEY,
    project_id    text        NOT NULL REFERENCES projects (project_id),
    user_id       text        NOT NULL REFERENCES users (user_id),
    role          text        NOT NULL CHECK (role IN ('inspector', 'office', 'qa', 'admin')),
    invited_by    text        NOT NULL REFERENCES users (user_id),
    created_at    timestamptz NOT NULL,
    state         text        NOT NULL DEFAULT 'pending' CHECK (state IN ('pending', 'accepted', 'declined')),
    resolved_at   timestamptz
);

-- At most one pending invitation of a user to a project.
CREATE UNIQUE INDEX invitations_pending ON invitations (project_id, user_id) WHERE state = 'pending';
CREATE INDEX invitations_by_user ON invitations (user_id, created_at) WHERE state = 'pending';

-- A row the server writes and deletes again to tell whether the store can
-- write. It is empty between probes.
CREATE TABLE storage_probe (
    probe_id integer PRIMARY KEY CHECK (probe_id = 1),
    filler   bytea   NOT NULL
);
