-- The server's own signing identity: it signs the entries it makes itself
-- (a device's key introduced to a project, a revocation). Its device and
-- user rows stand beside the others so its key is handed down like theirs.
CREATE TABLE server_identity (
    id          INTEGER PRIMARY KEY CHECK (id = 1),
    device_id   TEXT    NOT NULL,
    user_id     TEXT    NOT NULL,
    private_key BLOB    NOT NULL       -- Ed25519 seed (32 bytes)
);
