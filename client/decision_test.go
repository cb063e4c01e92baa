package client

import (
	"context"
	"errors"
	"testing"

	"tamp/internal/ledger"
)

// The device refuses, as the server does, a review or an accepted exception
// by the user who recorded the test, and stores nothing; another user of
// the same device may make them.
func TestNoDecisionOnOwnTestOnDevice(t *testing.T) {
	ctx := context.Background()
	e := newEnv(t, "ines")
	fail := e.test(104, 13)
	tt, err := e.store.Test(e.project, fail.TestID)
	if err != nil {
		t.Fatal(err)
	}
	before, _ := e.store.Outbox(ctx)
	for _, k := range []ledger.Kind{
		&ledger.ExceptionAccepted{TestID: fail.TestID, Revision: tt.Current, Reason: "within the engineer's tolerance"},
		&ledger.TestReviewed{TestID: fail.TestID, Revision: tt.Current, Decision: ledger.Approve},
	} {
		if _, _, err := e.store.Record(ctx, e.project, k); !errors.Is(err, ErrOwnTest) {
			t.Errorf("%s on one's own test: %v, want ErrOwnTest", k.KindName(), err)
		}
	}
	if after, _ := e.store.Outbox(ctx); after.Pending != before.Pending {
		t.Errorf("outbox holds %d entries after the refusals, want %d", after.Pending, before.Pending)
	}
	if got, _ := e.store.Test(e.project, fail.TestID); got.ExceptionAccepted() || len(got.Reviews) != 0 {
		t.Errorf("the refused decisions reached the view: exception %v, %d reviews", got.ExceptionAccepted(), len(got.Reviews))
	}

	e.store.Close()
	e.open("quinn") // the QA manager, on the same device
	e.rec(&ledger.ExceptionAccepted{TestID: fail.TestID, Revision: tt.Current, Reason: "within the engineer's tolerance"})
	if n := len(e.store.OpenFailures(e.project)); n != 0 {
		t.Errorf("open failures after another user's accepted exception = %d", n)
	}
}
