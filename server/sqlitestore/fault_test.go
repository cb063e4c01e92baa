package sqlitestore

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"testing"
	"time"

	"tamp/internal/ledger"
	"tamp/server"
)

// rowsOf returns n ledger rows of about size bytes each after head.
func rowsOf(head server.Checkpoint, n, size int) []server.Row {
	log := ledger.NewLog(head.Project, head.Epoch)
	rows := make([]server.Row, 0, n)
	for i := range n {
		e := log.Append([]byte(strings.Repeat(fmt.Sprint(i%10), size)))
		rows = append(rows, server.Row{Seq: e.Seq, EventID: fmt.Sprintf("e%d", i), DeviceID: "d", DeviceSeq: uint64(i + 1),
			Kind: "test_recorded", Envelope: e.Event, Hash: server.Hash(e.Hash), Received: time.Now()})
	}
	return rows
}

// The writer is made to refuse new pages as a full disk does (tests may run
// as root, whom file modes do not stop, so the fault is made inside
// SQLite): Append and Probe fail with ErrStorageFull, the ledger is
// unchanged, and both succeed once the limit is lifted.
func TestFullDiskIsErrStorageFull(t *testing.T) {
	s := open(t)
	ctx := context.Background()
	const p = "0190d3a0-0000-7000-8000-0000000000ab"
	if err := s.CreateProject(ctx, p, "haul road", genesis(p), time.Now()); err != nil {
		t.Fatal(err)
	}
	head, _ := s.Head(ctx, p)
	w := s.db.Writer()
	var pages int64
	if err := w.QueryRow("PRAGMA page_count").Scan(&pages); err != nil {
		t.Fatal(err)
	}
	if _, err := w.Exec(fmt.Sprintf("PRAGMA max_page_count = %d", pages)); err != nil {
		t.Fatal(err)
	}
	rows := rowsOf(head, 200, 400)
	if err := s.Append(ctx, p, head, rows); !errors.Is(err, server.ErrStorageFull) {
		t.Fatalf("append on a full disk: %v, want ErrStorageFull", err)
	}
	if err := s.Probe(ctx); !errors.Is(err, server.ErrStorageFull) {
		t.Fatalf("probe on a full disk: %v, want ErrStorageFull", err)
	}
	if h, _ := s.Head(ctx, p); h != head {
		t.Fatalf("head after a failed append = %+v, want %+v", h, head)
	}
	if _, err := w.Exec("PRAGMA max_page_count = 4294967294"); err != nil {
		t.Fatal(err)
	}
	if err := s.Probe(ctx); err != nil {
		t.Fatalf("probe once space is freed: %v", err)
	}
	if err := s.Append(ctx, p, head, rows); err != nil {
		t.Fatalf("append once space is freed: %v", err)
	}
	var left int
	if err := s.db.Reader().QueryRow("SELECT COUNT(*) FROM storage_probe").Scan(&left); err != nil || left != 0 {
		t.Errorf("probe rows left: %d, %v; want none", left, err)
	}
}

// A writer connection that may not write (as SQLite opens a file it may
// not write, here made with query_only since file modes do not stop root)
// fails with ErrStorageReadOnly; Probe replaces it with a new connection,
// which writes.
func TestReadOnlyWriterIsErrStorageReadOnlyAndProbeReopensIt(t *testing.T) {
	s := open(t)
	ctx := context.Background()
	if _, err := s.db.Writer().Exec("PRAGMA query_only = 1"); err != nil {
		t.Fatal(err)
	}
	const p = "0190d3a0-0000-7000-8000-0000000000ac"
	if err := s.CreateProject(ctx, p, "haul road", genesis(p), time.Now()); !errors.Is(err, server.ErrStorageReadOnly) {
		t.Fatalf("create project on a read-only connection: %v, want ErrStorageReadOnly", err)
	}
	if err := s.AddUser(ctx, "u1", "Wren Halloway", false, time.Now()); !errors.Is(err, server.ErrStorageReadOnly) {
		t.Fatalf("add user on a read-only connection: %v, want ErrStorageReadOnly", err)
	}
	if err := s.Probe(ctx); err != nil {
		t.Fatalf("probe: %v, want a new, writable connection", err)
	}
	if err := s.CreateProject(ctx, p, "haul road", genesis(p), time.Now()); err != nil {
		t.Fatalf("create project after the probe: %v", err)
	}
	head, _ := s.Head(ctx, p)
	if err := s.Append(ctx, p, head, rowsOf(head, 70, 100)); err != nil {
		t.Fatalf("append after the probe (the prepared inserts on the new connection): %v", err)
	}
}

// Errors that are no storage fault pass unchanged.
func TestFaultLeavesOtherErrors(t *testing.T) {
	s := open(t)
	ctx := context.Background()
	const p = "0190d3a0-0000-7000-8000-0000000000ad"
	if err := s.CreateProject(ctx, p, "haul road", genesis(p), time.Now()); err != nil {
		t.Fatal(err)
	}
	err := s.CreateProject(ctx, p, "haul road", genesis(p), time.Now()) // a unique constraint
	if err == nil {
		t.Fatal("second project with one id: no error")
	}
	for _, f := range []error{server.ErrStorageFull, server.ErrStorageReadOnly, server.ErrStorageIO} {
		if errors.Is(err, f) {
			t.Errorf("constraint error classified as %v: %v", f, err)
		}
	}
	if fault(nil) != nil {
		t.Error("fault(nil) != nil")
	}
}
