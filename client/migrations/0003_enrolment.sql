-- The bearer token the server issued at enrolment.
ALTER TABLE device ADD COLUMN token TEXT NOT NULL DEFAULT '';
