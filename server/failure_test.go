package server_test

import (
	"context"
	"errors"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/server"
	"tamp/server/sqlitestore"
)

// failingStore fails the next Append once armed, after holding it until
// release is closed.
type failingStore struct {
	server.Store
	mu      sync.Mutex
	armed   bool
	entered chan struct{}
	release chan struct{}
}

var errDiskFull = errors.New("disk full")

func (f *failingStore) Append(ctx context.Context, project string, head server.Checkpoint, rows []server.Row) error {
	f.mu.Lock()
	armed := f.armed
	f.armed = false
	f.mu.Unlock()
	if !armed {
		return f.Store.Append(ctx, project, head, rows)
	}
	close(f.entered)
	<-f.release
	return errDiskFull
}

// A write that fails loses nothing acknowledged: a push of the same events
// decided while it was being written (and told "already present" by the
// state that ran ahead of the store) is given up, not acknowledged, and the
// events are accepted once pushed again.
func TestFailedWriteAcknowledgesNothingUnstored(t *testing.T) {
	f := &failingStore{entered: make(chan struct{}), release: make(chan struct{})}
	c := &cluster{tb: t, dir: t.TempDir(), storage: sqlitestore.Options{SynchronousNormal: true}, wrap: func(s server.Store) server.Store { f.Store = s; return f }}
	c.start("")
	project := c.newProject("Juniper Wash detention basin")
	d := c.rawDevice(t, "ines", map[string]server.Role{project: server.Inspector}, false)
	events := d.tests(t, project, 20)

	f.mu.Lock()
	f.armed = true
	f.mu.Unlock()
	type result struct {
		resp *pb.PushResponse
		err  error
	}
	first, second := make(chan result, 1), make(chan result, 1)
	go func() { r, err := d.push(t, c, project, events...); first <- result{r, err} }()
	<-f.entered
	// The same events again, as a device does that timed out and retried.
	go func() { r, err := d.push(t, c, project, events...); second <- result{r, err} }()
	time.Sleep(100 * time.Millisecond) // let it decide and wait to write (the check holds either way)
	close(f.release)

	r1, r2 := <-first, <-second
	if status.Code(r1.err) != codes.Internal {
		t.Errorf("push whose write failed: %v, want Internal", r1.err)
	}
	stored := func() map[string]bool {
		held := map[string]bool{}
		es, err := c.store.After(context.Background(), project, 0, 1000)
		if err != nil {
			t.Fatal(err)
		}
		for _, e := range es {
			s, err := ledger.Decode(e.Event)
			if err != nil {
				t.Fatal(err)
			}
			held[s.Event.ID] = true
		}
		return held
	}
	held := stored()
	for _, r := range []result{r1, r2} {
		for _, o := range r.resp.GetOutcomes() {
			if st := o.GetStatus(); (st == pb.PushStatus_PUSH_STATUS_ACCEPTED || st == pb.PushStatus_PUSH_STATUS_ALREADY_PRESENT) && !held[o.GetEventId()] {
				t.Errorf("event %s acknowledged (%v, sequence %d) but not stored", o.GetEventId(), st, o.GetSequence())
			}
		}
	}
	if r2.err != nil && status.Code(r2.err) != codes.Aborted {
		t.Errorf("push decided over the failed write: %v, want Aborted or a stored result", r2.err)
	}

	// Pushed again, every event is stored once.
	r3, err := d.push(t, c, project, events...)
	if err != nil {
		t.Fatal(err)
	}
	for _, o := range r3.GetOutcomes() {
		if st := o.GetStatus(); st != pb.PushStatus_PUSH_STATUS_ACCEPTED && st != pb.PushStatus_PUSH_STATUS_ALREADY_PRESENT {
			t.Errorf("event %s pushed again: %v %s", o.GetEventId(), st, o.GetMessage())
		}
	}
	if n := c.memberEntries(project); n != len(events) {
		t.Errorf("the ledger holds %d of the device's events, want %d", n, len(events))
	}
	if h, held := c.head(), stored(); h.Seq != uint64(len(held)) {
		t.Errorf("head at %d, the ledger holds %d", h.Seq, len(held))
	}
}
