package client

import (
	"context"
	"crypto/ed25519"
	"errors"
	"path/filepath"
	"strings"
	"testing"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
)

// A store of more events than loadViews hands over at once opens to the
// view that verifying and applying every stored event one by one, in
// reverse order, gives (the projection depends only on the set).
func TestOpenBuildsTheViewOfEveryStoredEvent(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "own.db")
	const n = 2*loadBatch + 300
	ownStore(t, path, n)
	s, err := Open(ctx, path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	projects := s.Projects()
	if len(projects) != 1 {
		t.Fatalf("projects %v, want one", projects)
	}
	got := s.views[projects[0]]
	if got.Len() != n+3 || got.NumTests() != n {
		t.Fatalf("the view holds %d events and %d tests, want %d and %d", got.Len(), got.NumTests(), n+3, n)
	}
	rows, err := s.db.Reader().QueryContext(ctx, `SELECT body, signature FROM events ORDER BY hlc_wall DESC, event_id DESC`)
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	want := ledger.NewProjection(projects[0])
	for rows.Next() {
		var m pb.Event
		if err := rows.Scan(&m.Body, &m.Signature); err != nil {
			t.Fatal(err)
		}
		sg, err := ledger.Open(&m, func(string) (ed25519.PublicKey, bool) { return s.PublicKey(), true })
		if err != nil {
			t.Fatal(err)
		}
		if _, err := want.Apply(sg); err != nil {
			t.Fatal(err)
		}
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	if got.Digest() != want.Digest() {
		t.Fatal("the view opened differs from the one every event gives")
	}
}

// A stored row that does not decode, in a later hand-over, fails the open
// with an error saying so (and TestMain's leak check sees the reading
// goroutine end).
func TestOpenRefusesAStoredEventThatDoesNotDecode(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "own.db")
	ownStore(t, path, 3*loadBatch)
	s, err := Open(ctx, path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := s.db.Writer().ExecContext(ctx, `UPDATE events SET body = x'ffffffff' WHERE event_id =
		(SELECT event_id FROM events ORDER BY hlc_wall DESC LIMIT 1 OFFSET 100)`); err != nil {
		t.Fatal(err)
	}
	s.Close()
	_, err = Open(ctx, path, Options{})
	if err == nil || !strings.Contains(err.Error(), "stored event does not decode") {
		t.Fatalf("open: %v, want the stored event does not decode", err)
	}
	var r *ledger.Rejection
	if !errors.As(err, &r) || r.Reason != ledger.Malformed {
		t.Fatalf("open: %v, want a malformed rejection", err)
	}
}
