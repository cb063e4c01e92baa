-- What the device knows of the server's copy of each event it holds, so
-- that it offers again whatever a server restored from an older copy lost.
--
-- confirmed: 1 once the device has seen the event at its place in the chain
-- it verified (in the current epoch). Until then an event the server
-- acknowledged is offered again at the next push; pushing is idempotent.
-- server_lacks: 1 once a completed pull showed the server's ledger without
-- the event, after the server had acknowledged it.
-- waiting_for, waiting_since_micros: the records the server said the event
-- waits for (space-separated ids), and since when it has waited.
ALTER TABLE events ADD COLUMN confirmed INTEGER NOT NULL DEFAULT 0;
ALTER TABLE events ADD COLUMN server_lacks INTEGER NOT NULL DEFAULT 0;
ALTER TABLE events ADD COLUMN waiting_for TEXT NOT NULL DEFAULT '';
ALTER TABLE events ADD COLUMN waiting_since_micros INTEGER NOT NULL DEFAULT 0;

-- Events acknowledged at or below the point the device verified were seen
-- in the chain as far as an earlier release can tell. Those above it (a
-- push whose closing pull never completed) and those pulled out of chain
-- order are offered once more.
UPDATE events SET confirmed = 1
WHERE status = 'accepted' AND server_seq IS NOT NULL
  AND server_seq <= (SELECT seq FROM sync_state WHERE sync_state.project_id = events.project_id);

CREATE INDEX events_unconfirmed ON events (project_id, hlc_wall, hlc_logical, device_id, event_id) WHERE confirmed = 0;
CREATE INDEX events_by_device ON events (project_id, device_id, device_seq);
CREATE INDEX events_waiting ON events (project_id, waiting_since_micros) WHERE waiting_since_micros > 0;

-- Entries the server asked for (a gap in a device's sequence) that this
-- device does not hold, as of its last push of the project.
CREATE TABLE server_missing (
    project_id TEXT    NOT NULL,
    device_id  TEXT    NOT NULL,
    device_seq INTEGER NOT NULL,
    PRIMARY KEY (project_id, device_id, device_seq)
) WITHOUT ROWID;
