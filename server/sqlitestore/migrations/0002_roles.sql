-- Server administrators may create projects and manage every project.
ALTER TABLE users ADD COLUMN server_admin INTEGER NOT NULL DEFAULT 0;

-- A user's role on a project.
CREATE TABLE members (
    project_id TEXT NOT NULL REFERENCES projects (project_id),
    user_id    TEXT NOT NULL REFERENCES users (user_id),
    role       TEXT NOT NULL CHECK (role IN ('inspector', 'office', 'qa', 'admin')),
    PRIMARY KEY (project_id, user_id)
) WITHOUT ROWID;
