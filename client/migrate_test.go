package client

import (
	"context"
	"crypto/ed25519"
	"database/sql"
	"fmt"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"tamp/internal/ledger"
	"tamp/internal/sqlite"
)

// A store made by the first release's schema opens under the current one
// with its identity and events intact.
func TestMigrateFromFirstSchema(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "old.db")
	w, err := sql.Open("sqlite", sqlite.DSN(path, sqlite.Full, 5*time.Second, false))
	if err != nil {
		t.Fatal(err)
	}
	if err := sqlite.Migrate(ctx, w, sub(migrationFiles), 1); err != nil {
		t.Fatal(err)
	}
	seed := make([]byte, 32)
	seed[0] = 9
	if _, err := w.Exec(`INSERT INTO device (id, device_id, private_key, user_id, last_seq, hlc_wall, hlc_logical)
		VALUES (1, '0190d3a0-0000-7000-8000-00000000000d', ?, 'ines', 41, 1700000000000000, 2)`, seed); err != nil {
		t.Fatal(err)
	}
	w.Close()
	s, err := Open(ctx, path, Options{})
	if err != nil {
		t.Fatalf("open a first-release store: %v", err)
	}
	defer s.Close()
	if s.DeviceID() != "0190d3a0-0000-7000-8000-00000000000d" || s.User() != "ines" || s.seq != 41 {
		t.Errorf("identity after migration: %s %s %d", s.DeviceID(), s.User(), s.seq)
	}
	v, _ := sqlite.Version(ctx, s.db.Writer())
	if v < 4 {
		t.Errorf("schema version %d after open", v)
	}
	if err := s.SetSetting(ctx, "server", "127.0.0.1:7420"); err != nil {
		t.Errorf("a table of a later migration: %v", err)
	}
}

// An entry the server refused under the previous release's schema keeps
// its reason and words; the field and rule it never stored read empty.
func TestMigrateKeepsRejectedEntries(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "release5.db")
	w, err := sql.Open("sqlite", sqlite.DSN(path, sqlite.Full, 5*time.Second, false))
	if err != nil {
		t.Fatal(err)
	}
	if err := sqlite.Migrate(ctx, w, sub(migrationFiles), 5); err != nil {
		t.Fatal(err)
	}
	seed := make([]byte, ed25519.SeedSize)
	seed[0] = 5
	const dev, project, id = "0190d3a0-0000-7000-8000-00000000000d", "0190d3a0-0000-7000-8000-0000000000f0", "0190d3a0-0000-7000-8000-000000000101"
	if _, err := w.Exec(`INSERT INTO device (id, device_id, private_key, user_id, last_seq, hlc_wall, hlc_logical)
		VALUES (1, ?, ?, 'ines', 1, 0, 0)`, dev, seed); err != nil {
		t.Fatal(err)
	}
	wall := time.Date(2026, 6, 15, 14, 0, 0, 0, time.UTC)
	s, err := ledger.Seal(ledger.Event{ID: id, Project: project, Author: "ines", Device: dev, DeviceSeq: 1, HLC: ledger.HLC{Wall: wall.UnixMicro()},
		DeviceTime: wall, Kind: &ledger.SpecDefined{ID: id, Name: "fill", MinCompaction: "95"}}, ed25519.NewKeyFromSeed(seed))
	if err != nil {
		t.Fatal(err)
	}
	const msg = "permission_denied: role_may_make_entry: a member with the role inspector may not make a spec_defined entry (allowed: qa)"
	if _, err := w.Exec(`INSERT INTO events (event_id, project_id, device_id, device_seq, kind, record_id, hlc_wall, hlc_logical, body, signature,
		origin, status, reason, message, created_micros) VALUES (?, ?, ?, 1, 'spec_defined', ?, ?, 0, ?, ?, 'local', 'rejected', 'permission_denied', ?, ?)`,
		id, project, dev, id, wall.UnixMicro(), s.Body, s.Signature, msg, wall.UnixMicro()); err != nil {
		t.Fatal(err)
	}
	w.Close()

	st, err := Open(ctx, path, Options{})
	if err != nil {
		t.Fatalf("open a previous-release store: %v", err)
	}
	defer st.Close()
	rs, err := st.Rejected(ctx)
	if err != nil || len(rs) != 1 {
		t.Fatalf("rejected entries after the migration: %+v, %v; want one", rs, err)
	}
	if r := rs[0]; r.EventID != id || r.Reason != "permission_denied" || r.Message != msg || r.Field != "" || r.Rule != "" {
		t.Errorf("the rejected entry after the migration: %+v", r)
	}
}

// A store of the previous release keeps, through the rebuild of its events
// table, every event with every column as it was; the rebuilt table still
// refuses a second event with an event's id or with its device and
// sequence number, and the outbox, refused entries and views read the same.
func TestMigrateCompactEventsKeepsEvents(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "release7.db")
	w, err := sql.Open("sqlite", sqlite.DSN(path, sqlite.Full, 5*time.Second, false))
	if err != nil {
		t.Fatal(err)
	}
	if err := sqlite.Migrate(ctx, w, sub(migrationFiles), 7); err != nil {
		t.Fatal(err)
	}
	seed := make([]byte, ed25519.SeedSize)
	seed[0] = 8
	key := ed25519.NewKeyFromSeed(seed)
	const dev, other, project = "0190d3a0-0000-7000-8000-00000000000d", "0190d3a0-0000-7000-8000-0000000000e1", "0190d3a0-0000-7000-8000-0000000000f0"
	if _, err := w.Exec(`INSERT INTO device (id, device_id, private_key, user_id, last_seq, hlc_wall, hlc_logical)
		VALUES (1, ?, ?, 'ines', 7, 0, 0)`, dev, seed); err != nil {
		t.Fatal(err)
	}
	wall := time.Date(2026, 6, 15, 14, 0, 0, 0, time.UTC)
	otherKey := ed25519.NewKeyFromSeed(make([]byte, ed25519.SeedSize))
	// Rows inserted out of their hybrid time order (the rebuild copies them
	// in it), in every state an entry can be in, with every column set.
	type entry struct {
		id, device string
		seq        uint64
		minutes    int
		origin     string
		status     string
		set        string // an UPDATE's SET clause for the other columns
	}
	entries := []entry{
		{"0190d3a0-0000-7000-8000-000000000105", dev, 5, 5, "local", "pending", ""},
		{"0190d3a0-0000-7000-8000-000000000101", dev, 1, 1, "local", "accepted", "server_seq = 3, confirmed = 1, clock_skew_micros = -400000000"},
		{"0190d3a0-0000-7000-8000-000000000103", other, 1, 2, "remote", "accepted", "server_seq = 1, confirmed = 1"},
		{"0190d3a0-0000-7000-8000-000000000102", dev, 2, 3, "local", "accepted", "server_seq = 9, server_lacks = 1"},
		{"0190d3a0-0000-7000-8000-000000000104", dev, 3, 4, "local", "rejected",
			"reason = 'permission_denied', field = 'min_compaction', rule = 'role_may_make_entry', message = 'not for an inspector'"},
		{"0190d3a0-0000-7000-8000-000000000106", dev, 4, 6, "local", "waiting",
			"waiting_for = '0190d3a0-0000-7000-8000-000000000a01 0190d3a0-0000-7000-8000-000000000a02', waiting_since_micros = 1781532000000000, message = 'waits'"},
		{"0190d3a0-0000-7000-8000-000000000107", dev, 6, 7, "local", "discarded", "reason = 'invalid_field', message = 'discarded by the user'"},
		{"0190d3a0-0000-7000-8000-000000000108", other, 2, 8, "remote", "accepted", "server_seq = 2, hlc_logical = 3"},
	}
	for _, e := range entries {
		at := wall.Add(time.Duration(e.minutes) * time.Minute)
		k := key
		if e.device == other {
			k = otherKey
		}
		s, err := ledger.Seal(ledger.Event{ID: e.id, Project: project, Author: "ines", Device: e.device, DeviceSeq: e.seq,
			HLC: ledger.HLC{Wall: at.UnixMicro()}, DeviceTime: at, Kind: &ledger.SpecDefined{ID: e.id, Name: "fill " + e.id[len(e.id)-2:], MinCompaction: "95"}}, k)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := w.Exec(`INSERT INTO events (event_id, project_id, device_id, device_seq, kind, record_id, hlc_wall, hlc_logical, body, signature,
			origin, status, created_micros) VALUES (?, ?, ?, ?, 'spec_defined', ?, ?, 0, ?, ?, ?, ?, ?)`,
			e.id, project, e.device, e.seq, e.id, at.UnixMicro(), s.Body, s.Signature, e.origin, e.status, at.UnixMicro()); err != nil {
			t.Fatal(err)
		}
		if e.set != "" {
			if _, err := w.Exec(`UPDATE events SET `+e.set+` WHERE event_id = ?`, e.id); err != nil {
				t.Fatal(err)
			}
		}
	}
	before := eventRows(t, w)
	w.Close()

	s, err := Open(ctx, path, Options{})
	if err != nil {
		t.Fatalf("open a previous-release store: %v", err)
	}
	defer s.Close()
	if v, err := sqlite.Version(ctx, s.db.Writer()); err != nil || v < 8 {
		t.Fatalf("schema version %d (%v) after open, want at least 8", v, err)
	}
	after := eventRows(t, s.db.Writer())
	if len(after) != len(entries) {
		t.Fatalf("%d events after the migration, want %d", len(after), len(entries))
	}
	for id, row := range before {
		got, ok := after[id]
		if !ok {
			t.Errorf("event %s lost in the migration", id)
			continue
		}
		if !slices.EqualFunc(row, got, func(a, b any) bool { return fmt.Sprint(a) == fmt.Sprint(b) }) {
			t.Errorf("event %s after the migration:\n%v\nwant\n%v", id, got, row)
		}
	}

	// The keys of the old table still hold.
	dup := entries[1]
	for _, q := range []struct{ what, id, device string }{
		{"its event id", dup.id, dev + "-x"},
		{"its device and sequence number", "0190d3a0-0000-7000-8000-000000000199", dup.device},
	} {
		if _, err := s.db.Writer().ExecContext(ctx, `INSERT INTO events (event_id, project_id, device_id, device_seq, kind, record_id, hlc_wall, hlc_logical,
			body, signature, origin, status, created_micros) VALUES (?, ?, ?, ?, 'spec_defined', ?, 0, 0, x'00', x'00', 'local', 'pending', 0)`,
			q.id, project, q.device, dup.seq, q.id); err == nil {
			t.Errorf("a second event with %s was stored", q.what)
		}
	}

	if o, err := s.Outbox(ctx); err != nil || o.Pending != 2 {
		t.Errorf("outbox after the migration: %+v, %v; want 2 pending", o, err)
	}
	if rs, err := s.Rejected(ctx); err != nil || len(rs) != 1 || rs[0].EventID != entries[4].id || rs[0].Rule != "role_may_make_entry" {
		t.Errorf("rejected after the migration: %+v, %v; want %s", rs, err, entries[4].id)
	}
	// Every event but the rejected and the discarded one is in the view.
	if got := s.views[project].Len(); got != len(entries)-2 {
		t.Errorf("the view holds %d events after the migration, want %d", got, len(entries)-2)
	}
	skews, err := s.clockSkews(ctx, project)
	if err != nil || len(skews) != 1 || skews[entries[1].id] != -400000000 {
		t.Errorf("clock skews after the migration: %v, %v", skews, err)
	}
}

// eventRows reads every column of every row of the events table, by event
// id.
func eventRows(t *testing.T, db *sql.DB) map[string][]any {
	t.Helper()
	rows, err := db.Query(`SELECT event_id, project_id, device_id, device_seq, kind, record_id, hlc_wall, hlc_logical, body, signature,
		origin, status, server_seq, reason, message, created_micros, confirmed, server_lacks, waiting_for, waiting_since_micros,
		field, rule, clock_skew_micros FROM events`)
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	out := map[string][]any{}
	for rows.Next() {
		row := make([]any, 23)
		ptrs := make([]any, len(row))
		for i := range row {
			ptrs[i] = &row[i]
		}
		if err := rows.Scan(ptrs...); err != nil {
			t.Fatal(err)
		}
		out[row[0].(string)] = row
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	return out
}
