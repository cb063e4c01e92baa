package client

import (
	"context"
	"crypto/ed25519"
	"database/sql"
	"path/filepath"
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
