package server_test

import (
	"context"
	"fmt"
	"sync"
	"sync/atomic"
	"testing"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/server"
)

// Reports run beside each other and beside pushes (they take the read
// side of the project's lock, a push the write side), and each sees the
// ledger as stored: a pushed batch whole or not at all. An inspector pushes
// batches of tests while two office clients ask for the review queue and
// the lots over and over; run with -race.
func TestReportsWhilePushing(t *testing.T) {
	const batches, per = 12, 15
	c := startCluster(t, t.TempDir())
	project := c.newProject("Sagebrush Flats pad")
	qa := c.device("quinn", server.QA)
	office, ann := c.device("olga", server.Office), c.device("ann", server.Inspector)
	cc := c.conn("")
	ctx := context.Background()
	spec, ref := setUp(t, c, qa, project)
	syncOK(t, qa, cc, project)
	syncOK(t, ann, cc, project)
	rctx, err := office.CallContext(ctx)
	if err != nil {
		t.Fatal(err)
	}
	rs := pb.NewLedgerReadServiceClient(cc)

	var pushed atomic.Int64 // tests acknowledged by the server
	done := make(chan struct{})
	pushErr := make(chan error, 1)
	go func() {
		defer close(done)
		for b := range batches {
			for i := range per {
				if _, err := ann.RecordTest(ctx, client.TestInput{Project: project, SpecID: spec, ReferenceID: ref, Feature: "pad",
					LiftNumber: 1, Readings: coneReadings(104+float64((b*per+i)%14), 12.5)}); err != nil {
					pushErr <- err
					return
				}
			}
			rep, err := ann.Sync(ctx, cc, project, client.SyncOptions{})
			if err == nil && rep.Accepted != per {
				err = fmt.Errorf("batch %d: %d entries accepted, want %d", b, rep.Accepted, per)
			}
			if err != nil {
				pushErr <- err
				return
			}
			pushed.Add(per)
		}
	}()

	type seen struct {
		reports, during int // reports made, and of those while pushes went on
		last            int // the queue's length at the last report
	}
	results := make([]seen, 2)
	errs := make(chan error, len(results))
	var wg sync.WaitGroup
	for r := range results {
		wg.Add(1)
		go func() {
			defer wg.Done()
			s := &results[r]
			for {
				select {
				case <-done:
					errs <- nil
					return
				default:
				}
				before := int(pushed.Load())
				q, err := rs.ListReviewQueue(rctx, &pb.ListReviewQueueRequest{ProjectId: project})
				if err != nil {
					errs <- err
					return
				}
				lots, err := rs.GetLots(rctx, &pb.GetLotsRequest{ProjectId: project, Feature: "pad"})
				if err != nil {
					errs <- err
					return
				}
				n := len(q.GetTests())
				// Whole batches only, never fewer than were acknowledged
				// before asking, never fewer than the last report saw.
				if n%per != 0 || n < before || n < s.last {
					errs <- fmt.Errorf("reader %d: the review queue holds %d tests (batches of %d; %d acknowledged before asking, %d seen before)",
						r, n, per, before, s.last)
					return
				}
				inLots := 0
				for _, l := range lots.GetLots() {
					for _, q := range l.GetQualities() {
						if q.GetCharacteristic() == "relative compaction" {
							inLots += int(q.GetN())
						}
					}
					inLots += len(l.GetLeftOut())
				}
				if inLots%per != 0 || inLots < n {
					errs <- fmt.Errorf("reader %d: the lots hold %d tests after a queue of %d", r, inLots, n)
					return
				}
				s.last = n
				s.reports++
				if n < batches*per {
					s.during++
				}
			}
		}()
	}
	wg.Wait()
	for range results {
		if err := <-errs; err != nil {
			t.Fatal(err)
		}
	}
	select {
	case err := <-pushErr:
		t.Fatalf("push: %v", err)
	default:
	}
	for r, s := range results {
		if s.during == 0 {
			t.Fatalf("reader %d made %d reports, none while the pushes went on", r, s.reports)
		}
	}
	q, err := rs.ListReviewQueue(rctx, &pb.ListReviewQueueRequest{ProjectId: project})
	if err != nil {
		t.Fatal(err)
	}
	if len(q.GetTests()) != batches*per {
		t.Fatalf("the review queue holds %d tests after the pushes, want %d", len(q.GetTests()), batches*per)
	}
}
