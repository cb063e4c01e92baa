package client

import (
	"context"
	"testing"
)

// The device refuses, as the server does, a review or an accepted exception
// by the user who recorded the test, and stores nothing; another user of
// the same device may make them.
func TestNoDecisionOnOwnTestOnDevice(t *testing.T) {
	ctx := context.Background()
	e := newEnv(t, "ines")
	fail := e.test(104, 13)
	before, _ := e.store.Outbox(ctx)
	wantEntryError(t, "an exception on one's own test", e.store.AcceptException(ctx, e.project, fail.TestID, "within the engineer's tolerance"),
		ErrOwnTest, "permission_denied", "", "no_self_review")
	wantEntryError(t, "a review of one's own test", e.store.ReviewTest(ctx, e.project, fail.TestID, Approve, ""),
		ErrOwnTest, "permission_denied", "", "no_self_review")
	if after, _ := e.store.Outbox(ctx); after.Pending != before.Pending {
		t.Errorf("outbox holds %d entries after the refusals, want %d", after.Pending, before.Pending)
	}
	if got, _ := e.store.Test(e.project, fail.TestID); got.ExceptionAccepted || len(got.Reviews) != 0 {
		t.Errorf("the refused decisions reached the view: exception %v, %d reviews", got.ExceptionAccepted, len(got.Reviews))
	}

	e.store.Close()
	e.open("quinn") // the QA manager, on the same device
	if err := e.store.AcceptException(ctx, e.project, fail.TestID, "within the engineer's tolerance"); err != nil {
		t.Fatal(err)
	}
	if n := len(e.store.OpenFailures(e.project)); n != 0 {
		t.Errorf("open failures after another user's accepted exception = %d", n)
	}
}
