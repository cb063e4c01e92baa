-- The clock skew the server recorded for an entry when its device's clock
-- was beyond the project's limit at push, microseconds (device minus
-- server); zero otherwise. The retest audit reports such entries.
ALTER TABLE events ADD COLUMN clock_skew_micros INTEGER NOT NULL DEFAULT 0;
