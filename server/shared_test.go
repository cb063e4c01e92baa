package server_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"sync"
	"testing"

	"google.golang.org/grpc"

	"tamp/client"
	"tamp/server"
	"tamp/server/sqlitestore"
)

// sharedStore is one store two servers append to; closing it is left to
// the test.
type sharedStore struct{ *sqlitestore.Store }

func (sharedStore) Close() error { return nil }

// Two servers on one store (as several tampd on one PostgreSQL database):
// devices push and pull through either at random, at once. Each server
// catches up from the store before it decides, and the store's append on
// the chain head serialises their decisions: afterwards the ledger is one
// unbroken chain holding every entry once, and every device and both
// servers agree on the project.
func TestTwoServersShareOneStore(t *testing.T) {
	ctx := context.Background()
	st, err := sqlitestore.Open(ctx, filepath.Join(t.TempDir(), "ledger.db"), sqlitestore.Options{SynchronousNormal: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	start := func() *cluster {
		c := &cluster{tb: t, dir: t.TempDir(), openStore: func() (closingStore, error) { return sharedStore{st}, nil },
			opts: func(o *server.Options) { o.Shared = true }}
		c.start("")
		return c
	}
	a, b := start(), start()
	project := a.newProject("Alder Flat levee")
	b.project = project
	conns := []*grpc.ClientConn{a.conn(""), b.conn("")}

	qa := a.device("quinn", server.QA)
	spec, ref := setUp(t, a, qa, project)
	syncOK(t, qa, conns[1], project)
	const devices, rounds, perRound = 6, 4, 5
	var stores []*client.Store
	for i := range devices {
		s := a.device(fmt.Sprintf("inspector %d", i), server.Inspector)
		syncOK(t, s, conns[i%2], project)
		stores = append(stores, s)
	}

	var wg sync.WaitGroup
	errs := make(chan error, devices*rounds)
	for i, s := range stores {
		wg.Add(1)
		go func() {
			defer wg.Done()
			rng := rand.New(rand.NewPCG(uint64(i), 7))
			for r := range rounds {
				for j := range perRound {
					if _, err := s.RecordTest(ctx, client.TestInput{Project: project, SpecID: spec, ReferenceID: ref,
						Readings: coneReadings(104+float64((i+j+r)%9), 12.5), Feature: "levee", LiftNumber: uint32(r + 1)}); err != nil {
						errs <- err
						return
					}
				}
				if _, err := s.Sync(ctx, conns[rng.IntN(2)], project, client.SyncOptions{MaxAttempts: 20}); err != nil {
					errs <- fmt.Errorf("device %d, round %d: %w", i, r, err)
					return
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Fatal(err)
	}

	// Every device syncs once more through each server; then all agree.
	for _, s := range append(stores, qa) {
		syncOK(t, s, conns[0], project)
		syncOK(t, s, conns[1], project)
	}
	head, err := st.Head(ctx, project)
	if err != nil {
		t.Fatal(err)
	}
	seen := map[string]bool{}
	for seq := uint64(0); seq < head.Seq; {
		es, err := st.After(ctx, project, seq, 1000)
		if err != nil || len(es) == 0 {
			t.Fatalf("entries after %d: %d, %v", seq, len(es), err)
		}
		for _, e := range es {
			if e.Seq != seq+1 {
				t.Fatalf("entry %d follows %d", e.Seq, seq)
			}
			seq = e.Seq
			id := string(e.Event)
			if seen[id] {
				t.Fatalf("entry %d is held twice", e.Seq)
			}
			seen[id] = true
		}
	}
	da, db := a.digest(), b.digest()
	if da != db {
		t.Fatalf("the servers disagree: %s and %s", da, db)
	}
	for i, s := range append(stores, qa) {
		if got := s.Digest(project); got != da {
			t.Errorf("device %d sees %s, the servers %s", i, got, da)
		}
		if v := verified(t, s, project); v.Seq != head.Seq {
			t.Errorf("device %d verified the chain to %d, its head is %d", i, v.Seq, head.Seq)
		}
		if o, _ := s.Outbox(ctx); o.Pending != 0 {
			t.Errorf("device %d still has %d entries pending", i, o.Pending)
		}
	}
	if tests := len(qa.Tests(project)); tests != devices*rounds*perRound {
		t.Errorf("the ledger holds %d tests, want %d", tests, devices*rounds*perRound)
	}
}
