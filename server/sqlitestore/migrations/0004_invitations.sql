-- An invitation of an existing user to a project, made by one of its
-- administrators; the user becomes a member only by accepting it. Closed
-- invitations stay, with their outcome, for the record.
CREATE TABLE invitations (
    invitation_id   TEXT    PRIMARY KEY,
    project_id      TEXT    NOT NULL REFERENCES projects (project_id),
    user_id         TEXT    NOT NULL REFERENCES users (user_id),
    role            TEXT    NOT NULL CHECK (role IN ('inspector', 'office', 'qa', 'admin')),
    invited_by      TEXT    NOT NULL REFERENCES users (user_id),
    created_micros  INTEGER NOT NULL,
    state           TEXT    NOT NULL DEFAULT 'pending' CHECK (state IN ('pending', 'accepted', 'declined')),
    resolved_micros INTEGER
);

-- At most one pending invitation of a user to a project.
CREATE UNIQUE INDEX invitations_pending ON invitations (project_id, user_id) WHERE state = 'pending';
CREATE INDEX invitations_by_user ON invitations (user_id, created_micros) WHERE state = 'pending';
