package server_test

import (
	"context"
	"errors"
	"sync/atomic"
	"testing"
	"time"

	"tamp/client"
	"tamp/internal/ledger"
	"tamp/server"
)

// racedStore loses the race for the chain head on its next lose appends,
// as a store another server appended to in between answers.
type racedStore struct {
	server.Store
	lose atomic.Int32
}

func (r *racedStore) Append(ctx context.Context, project string, head server.Checkpoint, rows []server.Row) error {
	if r.lose.Add(-1) >= 0 {
		return server.ErrConflict
	}
	return r.Store.Append(ctx, project, head, rows)
}

// With several servers on one store, the entry that introduces a newly
// enrolled device to its project may lose the race for the chain head,
// at enrolment and again at the device's first push. The push then
// answers "the ledger moved; push again" (which a device retries), not an
// internal error: the device's sync goes through, and the ledger
// introduces it once.
func TestSharedIntroductionLosesTheRace(t *testing.T) {
	raced := &racedStore{}
	c := &cluster{tb: t, dir: t.TempDir(), opts: func(o *server.Options) { o.Shared = true },
		wrap: func(st server.Store) server.Store { raced.Store = st; return raced }}
	c.start("")
	project := c.newProject("Dry Creek cut")
	raced.lose.Store(2) // the introduction at enrolment, and at the first push
	ann := c.device("ann", server.Inspector)
	rep, err := ann.Sync(context.Background(), c.conn(""), project, client.SyncOptions{Sleep: func(time.Duration) {}})
	if err != nil {
		var se *client.ServerError
		errors.As(err, &se)
		t.Fatalf("ann's first sync after the introduction lost the race twice: %v (%+v)", err, se)
	}
	if n := raced.lose.Load(); n >= 0 {
		t.Fatalf("the store lost %d races fewer than armed", n+1)
	}
	if v := verified(t, ann, project); v.Seq != c.head().Seq || v.Seq != rep.Head.Seq {
		t.Errorf("ann verified %d, the server's head is %d", v.Seq, c.head().Seq)
	}
	entries, err := c.store.After(context.Background(), project, 0, 1000)
	if err != nil {
		t.Fatal(err)
	}
	introduced := 0
	for _, e := range entries {
		sg, err := ledger.Decode(e.Event)
		if err != nil {
			t.Fatal(err)
		}
		if k, ok := sg.Event.Kind.(*ledger.DeviceEnrolled); ok && k.DeviceID == ann.DeviceID() {
			introduced++
		}
	}
	if introduced != 1 {
		t.Errorf("the ledger introduces ann's device %d times, want once", introduced)
	}
}
