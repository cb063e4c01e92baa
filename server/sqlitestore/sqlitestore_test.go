package sqlitestore

import (
	"context"
	"crypto/sha256"
	"database/sql"
	"errors"
	"fmt"
	"io/fs"
	"path/filepath"
	"testing"
	"time"

	"tamp/internal/ledger"
	"tamp/internal/sqlite"
	"tamp/server"
)

// genesis is h(0) of project's chain, which the server gives CreateProject.
func genesis(project string) server.Hash { return server.Hash(ledger.Genesis(project)) }

func open(t *testing.T) *Store {
	t.Helper()
	s, err := Open(context.Background(), filepath.Join(t.TempDir(), "ledger.db"), Options{SynchronousNormal: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

func TestAppendHeadAndConflict(t *testing.T) {
	s := open(t)
	ctx := context.Background()
	const p = "0190d3a0-0000-7000-8000-0000000000aa"
	if err := s.CreateProject(ctx, p, "levee", genesis(p), time.Now()); err != nil {
		t.Fatal(err)
	}
	head, err := s.Head(ctx, p)
	if err != nil || head.Seq != 0 || head.Epoch != 1 || head.Hash != genesis(p) {
		t.Fatalf("new head = %+v, %v", head, err)
	}
	log := ledger.NewLog(p, 1)
	var rows []server.Row
	for i := range 3 {
		e := log.Append([]byte{byte(i), 1, 2})
		rows = append(rows, server.Row{Seq: e.Seq, EventID: string(rune('a' + i)), DeviceID: "d", DeviceSeq: uint64(i + 1), Kind: "test_recorded",
			Envelope: e.Event, Hash: server.Hash(e.Hash), Received: time.Now()})
	}
	if err := s.Append(ctx, p, head, rows); err != nil {
		t.Fatal(err)
	}
	got, _ := s.Head(ctx, p)
	if got.Seq != 3 || got.Hash != server.Hash(log.Head().Hash) {
		t.Errorf("head after append = %d %s, want %d %s", got.Seq, got.Hash, 3, log.Head().Hash)
	}
	// Appending after a stale head is refused and changes nothing.
	if err := s.Append(ctx, p, head, rows[:1]); !errors.Is(err, server.ErrConflict) {
		t.Errorf("append after a stale head: %v", err)
	}
	entries, _ := s.After(ctx, p, 1, 10)
	if len(entries) != 2 || entries[0].Seq != 2 {
		t.Errorf("after 1: %+v", entries)
	}
	// HashAt answers for the stored entries only: h(0) is the server's.
	for seq := range uint64(5) {
		h, ok, err := s.HashAt(ctx, p, seq)
		held := seq >= 1 && seq <= 3
		if err != nil || ok != held || held && h != rows[seq-1].Hash {
			t.Errorf("HashAt(%d) = %s, %v, %v; want held %v", seq, h, ok, err, held)
		}
	}
	if err := s.SetEpoch(ctx, p, 2); err != nil {
		t.Fatal(err)
	}
	if err := s.SetEpoch(ctx, p, 2); !errors.Is(err, server.ErrConflict) {
		t.Errorf("setting the same epoch again: %v", err)
	}
	if _, err := s.Head(ctx, "nope"); !errors.Is(err, server.ErrNoProject) {
		t.Errorf("unknown project: %v", err)
	}
}

func TestEnrolmentCodes(t *testing.T) {
	s := open(t)
	ctx := context.Background()
	now := time.Now()
	if err := s.AddUser(ctx, "u1", "Ines", false, now); err != nil {
		t.Fatal(err)
	}
	h := sha256.Sum256([]byte("code"))
	if err := s.AddEnrollmentCode(ctx, h[:], "u1", now.Add(time.Hour)); err != nil {
		t.Fatal(err)
	}
	tok := sha256.Sum256([]byte("token"))
	d, err := s.Enroll(ctx, h[:], server.Device{ID: "dev1", PublicKey: make([]byte, 32)}, tok[:], now)
	if err != nil || d.UserID != "u1" {
		t.Fatalf("enrol = %+v, %v", d, err)
	}
	if _, err := s.Enroll(ctx, h[:], server.Device{ID: "dev2", PublicKey: make([]byte, 32)}, tok[:], now); !errors.Is(err, server.ErrCodeInvalid) {
		t.Errorf("code used twice: %v", err)
	}
	h2 := sha256.Sum256([]byte("late"))
	_ = s.AddEnrollmentCode(ctx, h2[:], "u1", now.Add(time.Hour))
	if _, err := s.Enroll(ctx, h2[:], server.Device{ID: "dev3", PublicKey: make([]byte, 32)}, tok[:], now.Add(2*time.Hour)); !errors.Is(err, server.ErrCodeInvalid) {
		t.Errorf("expired code: %v", err)
	}
	got, err := s.DeviceByToken(ctx, tok[:])
	if err != nil || got.ID != "dev1" || got.Revoked {
		t.Errorf("device by token = %+v, %v", got, err)
	}
	if err := s.Revoke(ctx, "dev1", now); err != nil {
		t.Fatal(err)
	}
	if got, _ := s.Device(ctx, "dev1"); !got.Revoked {
		t.Error("revocation not kept")
	}
}

// A ledger made by the first release's schema opens under the current one.
func TestMigrateFromFirstSchema(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "old.db")
	w, err := sql.Open("sqlite", sqlite.DSN(path, sqlite.Full, 5*time.Second, false))
	if err != nil {
		t.Fatal(err)
	}
	m, _ := fs.Sub(migrationFiles, "migrations")
	if err := sqlite.Migrate(ctx, w, m, 1); err != nil {
		t.Fatal(err)
	}
	if _, err := w.Exec(`INSERT INTO users (user_id, name, created_micros) VALUES ('u1', 'Rosa', 1)`); err != nil {
		t.Fatal(err)
	}
	w.Close()
	s, err := Open(ctx, path, Options{})
	if err != nil {
		t.Fatalf("open a first-release ledger: %v", err)
	}
	defer s.Close()
	u, err := s.User(ctx, "u1")
	if err != nil || u.Name != "Rosa" || u.ServerAdmin {
		t.Errorf("user after migration: %+v, %v", u, err)
	}
}

// A batch goes in as statements of the prepared sizes (87 = 64 + 16 + 4 +
// 1 + 1 + 1); every row lands once, in order, and the device's mark is its
// highest sequence.
func TestAppendBatchOfMixedStatementSizes(t *testing.T) {
	s := open(t)
	ctx := context.Background()
	const p = "0190d3a0-0000-7000-8000-0000000000bb"
	if err := s.CreateProject(ctx, p, "pad", genesis(p), time.Now()); err != nil {
		t.Fatal(err)
	}
	head, _ := s.Head(ctx, p)
	log := ledger.NewLog(p, 1)
	var rows []server.Row
	for i := range 87 {
		e := log.Append([]byte{byte(i), byte(i >> 8), 7})
		rows = append(rows, server.Row{Seq: e.Seq, EventID: fmt.Sprintf("ev-%03d", i), DeviceID: "d", DeviceSeq: uint64(i + 1), Kind: "test_recorded",
			RecordID: fmt.Sprintf("t-%03d", i), Envelope: e.Event, Hash: server.Hash(e.Hash), Received: time.Now()})
	}
	if err := s.Append(ctx, p, head, rows); err != nil {
		t.Fatal(err)
	}
	got, err := s.After(ctx, p, 0, 200)
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != len(rows) {
		t.Fatalf("%d entries stored, want %d", len(got), len(rows))
	}
	for i, e := range got {
		if e.Seq != rows[i].Seq || e.Hash != rows[i].Hash || string(e.Event) != string(rows[i].Envelope) {
			t.Fatalf("entry %d = seq %d, want %d with its hash and bytes", i, e.Seq, rows[i].Seq)
		}
	}
	if h, _ := s.Head(ctx, p); h.Seq != 87 || h.Hash != server.Hash(log.Head().Hash) {
		t.Errorf("head = %d, want 87 with the log's hash", h.Seq)
	}
	var mark uint64
	if err := s.db.Reader().QueryRowContext(ctx, `SELECT high_seq FROM device_marks WHERE project_id = ? AND device_id = 'd'`, p).Scan(&mark); err != nil || mark != 87 {
		t.Errorf("device mark = %d, %v; want 87", mark, err)
	}
}

// The zero Options commit with synchronous=FULL on the writer connection,
// SynchronousNormal with NORMAL.
func TestOpenOptionsSetDurability(t *testing.T) {
	for _, tc := range []struct {
		opts Options
		want int // PRAGMA synchronous: 2 FULL, 1 NORMAL
	}{{Options{}, 2}, {Options{SynchronousNormal: true}, 1}} {
		s, err := Open(context.Background(), filepath.Join(t.TempDir(), "ledger.db"), tc.opts)
		if err != nil {
			t.Fatal(err)
		}
		var got int
		if err := s.db.Writer().QueryRow("PRAGMA synchronous").Scan(&got); err != nil || got != tc.want {
			t.Errorf("Open(%+v): writer's synchronous = %d, %v; want %d", tc.opts, got, err, tc.want)
		}
		s.Close()
	}
}
