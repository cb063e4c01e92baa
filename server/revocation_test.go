package server_test

import (
	"context"
	"errors"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/server"
)

// Revocation is a signed entry of the ledger with its effective time and
// the last of the device's entries the ledger held then: later entries of
// the revoked key are refused whoever relays them and whatever time they
// claim, entries held before it stand, and devices learn the revocation on
// pull (issue 10, rule 5).
func TestRevocationIsALedgerEntry(t *testing.T) {
	c := startCluster(t, t.TempDir())
	p := c.newProject("Willow Bend outfall")
	lost := c.rawDevice(t, "inspector with the lost tablet", map[string]server.Role{p: server.Inspector}, false)
	relay := c.rawDevice(t, "inspector who relays", map[string]server.Role{p: server.Inspector}, false)
	root := c.rawDevice(t, "root", nil, true)
	office := c.device("office", server.Office)

	before := lost.sign(t, p, &ledger.TestRecorded{TestID: newV7(), Content: ledger.TestContent{Readings: sandCone(110, 12)}})
	if o := lost.first(t, c, p, before); o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
		t.Fatalf("the device's own entry before the revocation: %v", o)
	}
	if _, err := pb.NewAdminServiceClient(c.conn("")).RevokeDevice(root.ctx(), &pb.RevokeDeviceRequest{DeviceId: lost.id, Reason: "tablet lost"}); err != nil {
		t.Fatal(err)
	}
	after := lost.sign(t, p, &ledger.TestRecorded{TestID: newV7(), Content: ledger.TestContent{Readings: sandCone(90, 25)}})
	// A stolen key dates an entry before the revocation: the number decides.
	backdated := after.Event
	backdated.ID, backdated.DeviceSeq, backdated.HLC = newV7(), after.Event.DeviceSeq+1, before.Event.HLC
	back, err := ledger.Seal(backdated, lost.key)
	if err != nil {
		t.Fatal(err)
	}

	resp, err := relay.push(t, c, p, before, after, back)
	if err != nil {
		t.Fatal(err)
	}
	if o := resp.GetOutcomes()[0]; o.GetStatus() != pb.PushStatus_PUSH_STATUS_ALREADY_PRESENT {
		t.Errorf("an entry held before the revocation, relayed: %v", o)
	}
	for i, name := range map[int]string{1: "after the revocation", 2: "after the revocation, dated before it"} {
		if o := resp.GetOutcomes()[i]; o.GetReason() != pb.RejectReason_REJECT_REASON_PERMISSION_DENIED || o.GetRule() != "signed_after_revocation" {
			t.Errorf("an entry made %s, relayed: %v, want refused as signed_after_revocation", name, o)
		}
	}

	// Nobody but the server makes a device entry.
	forged := relay.sign(t, p, &ledger.DeviceRevoked{DeviceID: relay.id, Effective: time.Now(), RevokedBy: relay.user, Reason: "forged"})
	if o := relay.first(t, c, p, forged); o.GetStatus() != pb.PushStatus_PUSH_STATUS_REJECTED || o.GetReason() != pb.RejectReason_REJECT_REASON_PERMISSION_DENIED ||
		o.GetRule() != "server_entries_only" {
		t.Errorf("a member's own device_revoked entry: %v", o)
	}

	// The office device learns the revocation on pull.
	syncOK(t, office, c.conn(""), p)
	var revoked *ledger.DeviceRevoked
	c.srv.Inspect(context.Background(), p, func(v *ledger.Projection) {
		if d, ok := v.Device(lost.id); ok {
			revoked = d.Revoked
		}
	})
	if revoked == nil || revoked.Reason != "tablet lost" || revoked.RevokedBy != root.user {
		t.Fatalf("the server's ledger says of the device: %+v", revoked)
	}
	if office.Digest(p) != c.digest() {
		t.Error("the office device's state differs from the server's")
	}
	if n := countKind(t, c, p, "device_revoked"); n != 1 {
		t.Errorf("%d device_revoked entries in the ledger, want 1", n)
	}
}

func countKind(t *testing.T, c *cluster, project, kind string) int {
	t.Helper()
	entries, err := c.store.After(context.Background(), project, 0, 1<<30)
	if err != nil {
		t.Fatal(err)
	}
	n := 0
	for _, e := range entries {
		sg, err := ledger.Decode(e.Event)
		if err != nil {
			t.Fatal(err)
		}
		if sg.Event.Kind.KindName() == kind {
			n++
		}
	}
	return n
}

// A revoked device's user enrols again with a new code: the device gets a
// new id and key, its entries that never reached the server are signed
// again by the new key and name the old device, and they sync (issue 10,
// rule 7). Enrolling an id that is enrolled already is AlreadyExists, not
// Internal (rule 10).
func TestReenrolRevokedDevice(t *testing.T) {
	c := startCluster(t, t.TempDir())
	p := c.newProject("Sagebrush Flats pad")
	ann := c.device("ann", server.Inspector)
	record(t, ann, p, "", "", 2, 0)
	syncOK(t, ann, c.conn(""), p)
	record(t, ann, p, "", "", 3, 0)
	old := ann.DeviceID()
	root := c.rawDevice(t, "root", nil, true)
	if _, err := pb.NewAdminServiceClient(c.conn("")).RevokeDevice(root.ctx(), &pb.RevokeDeviceRequest{DeviceId: old, Reason: "found again"}); err != nil {
		t.Fatal(err)
	}
	if _, err := ann.Sync(context.Background(), c.conn(""), p, client.SyncOptions{}); !errors.Is(err, client.ErrRevoked) {
		t.Fatalf("sync of the revoked device: %v", err)
	}

	// Enrolling the same device id again is refused plainly.
	d, err := c.store.Device(context.Background(), old)
	if err != nil {
		t.Fatal(err)
	}
	code, _, err := c.srv.IssueEnrollmentCode(context.Background(), d.UserID)
	if err != nil {
		t.Fatal(err)
	}
	_, err = pb.NewAdminServiceClient(c.conn("")).EnrollDevice(context.Background(), &pb.EnrollDeviceRequest{Code: code, DeviceId: old, PublicKey: ann.PublicKey()})
	if status.Code(err) != codes.AlreadyExists {
		t.Errorf("enrolling device id %s again: %v, want AlreadyExists", old, err)
	}

	code, _, err = c.srv.IssueEnrollmentCode(context.Background(), d.UserID)
	if err != nil {
		t.Fatal(err)
	}
	if err := ann.Enroll(context.Background(), c.conn(""), code, "ann's tablet, again"); err != nil {
		t.Fatalf("enrol again: %v", err)
	}
	if ann.DeviceID() == old {
		t.Fatal("the device enrolled again under its old id")
	}
	syncOK(t, ann, c.conn(""), p)
	if o, _ := ann.Outbox(context.Background()); o.Pending != 0 {
		t.Errorf("%d entries still pending after enrolling again", o.Pending)
	}
	if n := c.memberEntries(p); n != 5 {
		t.Errorf("the server holds %d of ann's entries, want all 5", n)
	}
	handed := 0
	entries, _ := c.store.After(context.Background(), p, 0, 1<<30)
	for _, e := range entries {
		sg, _ := ledger.Decode(e.Event)
		if sg.Event.ResignedFrom == old && sg.Event.Device == ann.DeviceID() {
			handed++
		}
	}
	if handed != 3 {
		t.Errorf("%d entries name the device that first signed them, want the 3 pending ones", handed)
	}
	if ann.Digest(p) != c.digest() {
		t.Error("ann's state differs from the server's")
	}
}
