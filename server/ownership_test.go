package server_test

import (
	"testing"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/server"
)

// A test id belongs to its first recorder for good: a second recording of
// the same id, by anyone and whatever its hybrid time, is refused, and the
// first recorder keeps the test (issue 10, rule 2).
func TestTestIDBelongsToFirstRecorder(t *testing.T) {
	c := startCluster(t, t.TempDir())
	p := c.newProject("Quarry Flat haul road")
	a := c.rawDevice(t, "inspector A", map[string]server.Role{p: server.Inspector}, false)
	b := c.rawDevice(t, "inspector B", map[string]server.Role{p: server.Inspector}, false)
	testID := newV7()
	orig := a.sign(t, p, &ledger.TestRecorded{TestID: testID, Content: ledger.TestContent{Readings: sandCone(110, 12), Remarks: "A's test"}})
	if o := a.first(t, c, p, orig); o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
		t.Fatalf("A's test: %v", o)
	}
	for _, who := range []*rawDevice{b, a} {
		taken := who.sign(t, p, &ledger.TestRecorded{TestID: testID, Content: ledger.TestContent{Readings: sandCone(90, 20), Remarks: "again"}})
		taken.Event.HLC.Wall = orig.Event.HLC.Wall - 1_000_000 // an earlier hybrid time
		resigned, err := ledger.Seal(taken.Event, who.key)
		if err != nil {
			t.Fatal(err)
		}
		if o := who.first(t, c, p, resigned); o.GetReason() != pb.RejectReason_REJECT_REASON_CONFLICTING_ID {
			t.Errorf("second recording of test %s: %v, want rejected as conflicting_id", testID, o)
		}
	}
	void := b.sign(t, p, &ledger.TestVoided{TestID: testID, Reason: "mine now"})
	if o := b.first(t, c, p, void); o.GetStatus() != pb.PushStatus_PUSH_STATUS_REJECTED {
		t.Errorf("B voids A's test: %v", o)
	}
	own := a.sign(t, p, &ledger.TestVoided{TestID: testID, Reason: "wrong lift"})
	if o := a.first(t, c, p, own); o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
		t.Errorf("A voids A's own test: %v", o)
	}
	var author string
	var remarks string
	c.srv.Inspect(t.Context(), p, func(v *ledger.Projection) {
		if tt, ok := v.Test(testID); ok {
			author, remarks = tt.Author, tt.Content.Remarks
		}
	})
	if author != a.user || remarks != "A's test" {
		t.Errorf("test %s: author %s with remarks %q, want %s with A's readings", testID, author, remarks, a.user)
	}
}
