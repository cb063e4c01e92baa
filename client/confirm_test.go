package client

import (
	"context"
	"crypto/ed25519"
	"database/sql"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"tamp/internal/ledger"
	"tamp/internal/soil"
	"tamp/internal/sqlite"
)

// A store of the previous release opens with each event's confirmation
// inferred from what that release kept: events acknowledged at or below the
// verified point count as confirmed, and only the others (a push whose
// closing pull never completed, reference data pulled out of chain order)
// are offered again at the next push.
func TestMigrateMarksConfirmedEntries(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "release4.db")
	w, err := sql.Open("sqlite", sqlite.DSN(path, sqlite.Full, 5*time.Second, false))
	if err != nil {
		t.Fatal(err)
	}
	if err := sqlite.Migrate(ctx, w, sub(migrationFiles), 4); err != nil {
		t.Fatal(err)
	}
	seed := make([]byte, ed25519.SeedSize)
	seed[0] = 7
	key := ed25519.NewKeyFromSeed(seed)
	const dev, other, project = "0190d3a0-0000-7000-8000-00000000000d", "0190d3a0-0000-7000-8000-0000000000e1", "0190d3a0-0000-7000-8000-0000000000f0"
	if _, err := w.Exec(`INSERT INTO device (id, device_id, private_key, user_id, last_seq, hlc_wall, hlc_logical)
		VALUES (1, ?, ?, 'ines', 4, 0, 0)`, dev, seed); err != nil {
		t.Fatal(err)
	}
	if _, err := w.Exec(`INSERT INTO sync_state (project_id, epoch, seq, hash) VALUES (?, 1, 10, ?)`, project, make([]byte, 32)); err != nil {
		t.Fatal(err)
	}
	wall := time.Date(2026, 6, 15, 14, 0, 0, 0, time.UTC)
	otherKey := ed25519.NewKeyFromSeed(make([]byte, ed25519.SeedSize))
	row := func(id, device string, seq uint64, k ed25519.PrivateKey, origin, status string, serverSeq any) {
		t.Helper()
		wall = wall.Add(time.Minute)
		s, err := ledger.Seal(ledger.Event{ID: id, Project: project, Author: "ines", Device: device, DeviceSeq: seq,
			HLC: ledger.HLC{Wall: wall.UnixMicro()}, DeviceTime: wall, Kind: &ledger.SpecDefined{ID: id, Name: "fill " + id[len(id)-2:], MinCompaction: "95"}}, k)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := w.Exec(`INSERT INTO events (event_id, project_id, device_id, device_seq, kind, record_id, hlc_wall, hlc_logical, body, signature,
			origin, status, server_seq, created_micros) VALUES (?, ?, ?, ?, 'spec_defined', ?, ?, 0, ?, ?, ?, ?, ?, ?)`,
			id, project, device, seq, id, wall.UnixMicro(), s.Body, s.Signature, origin, status, serverSeq, wall.UnixMicro()); err != nil {
			t.Fatal(err)
		}
	}
	row("0190d3a0-0000-7000-8000-000000000101", dev, 1, key, "local", "accepted", 5)           // pulled back below the verified point
	row("0190d3a0-0000-7000-8000-000000000102", dev, 2, key, "local", "accepted", 12)          // acknowledged above it: closing pull cut
	row("0190d3a0-0000-7000-8000-000000000103", other, 1, otherKey, "remote", "accepted", 7)   // pulled in the chain
	row("0190d3a0-0000-7000-8000-000000000104", other, 2, otherKey, "remote", "accepted", nil) // reference data, out of chain order
	row("0190d3a0-0000-7000-8000-000000000105", dev, 3, key, "local", "pending", nil)          // never pushed
	w.Close()

	s, err := Open(ctx, path, Options{})
	if err != nil {
		t.Fatalf("open a previous-release store: %v", err)
	}
	defer s.Close()
	offered, err := s.outbox(ctx, project, false)
	if err != nil {
		t.Fatal(err)
	}
	var ids []string
	for _, e := range offered {
		ids = append(ids, e.id[len(e.id)-3:])
	}
	if want := []string{"102", "104", "105"}; !slices.Equal(ids, want) {
		t.Errorf("offered after migration: %v, want %v", ids, want)
	}
	st, err := s.Status(ctx, project)
	if err != nil {
		t.Fatal(err)
	}
	if st.Unconfirmed != 2 || st.ServerLacks != 0 || st.Outbox.Pending != 1 {
		t.Errorf("status after migration: %d unconfirmed, %d lacking, %d pending; want 2, 0, 1", st.Unconfirmed, st.ServerLacks, st.Outbox.Pending)
	}
}

// An entry names its device's previous entry in the same project, skipping
// entries in other projects and entries the server refused.
func TestRecordLinksPreviousEntryInProject(t *testing.T) {
	e := newEnv(t, "ines")
	other := e.store.NewID()
	ctx := context.Background()
	first, _, err := e.store.recordEntry(ctx, other, &ledger.ProjectSetUp{Name: "Red Mesa trench", Units: soil.US})
	if err != nil {
		t.Fatal(err)
	}
	if first.Event.PrevDeviceSeq != 0 {
		t.Errorf("first entry in a project links to %d, want 0", first.Event.PrevDeviceSeq)
	}
	refused, _, err := e.store.recordEntry(ctx, e.project, &ledger.SpecDefined{ID: e.store.NewID(), Name: "refused", MinCompaction: "95"})
	if err != nil {
		t.Fatal(err)
	}
	e.store.mu.Lock()
	err = e.store.markRejected(ctx, refused.Event.ID, "permission_denied", "refused")
	e.store.mu.Unlock()
	if err != nil {
		t.Fatal(err)
	}
	next, _, err := e.store.recordEntry(ctx, e.project, &ledger.SpecDefined{ID: e.store.NewID(), Name: "next", MinCompaction: "95"})
	if err != nil {
		t.Fatal(err)
	}
	// newEnv recorded three entries in e.project (1-3), then 4 went to
	// another project and 5 was refused.
	if next.Event.DeviceSeq != 6 || next.Event.PrevDeviceSeq != 3 {
		t.Errorf("entry %d links to %d, want 6 linking to 3", next.Event.DeviceSeq, next.Event.PrevDeviceSeq)
	}
}
