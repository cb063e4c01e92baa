package server_test

import (
	"context"
	"crypto/ed25519"
	"math"
	"strings"
	"testing"
	"time"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/soil"
	"tamp/server"
)

// signRaw signs the body of an event of kind k, as edit leaves it, with the
// device's key: what a device of another build, or an attacker holding a
// device key, can push, whatever this build's Seal refuses.
func (d *rawDevice) signRaw(t *testing.T, project string, k ledger.Kind, edit func(*ledger.Event, *pb.EventBody)) ledger.Signed {
	t.Helper()
	d.seq++
	now := time.Now().UTC().Truncate(time.Microsecond)
	e := ledger.Event{ID: newV7(), Project: project, Author: d.user, Device: d.id, DeviceSeq: d.seq,
		HLC: ledger.HLC{Wall: now.UnixMicro()}, DeviceTime: now, Kind: k}
	b, err := ledger.ToProto(e)
	if err != nil {
		t.Fatal(err)
	}
	if edit != nil {
		edit(&e, b)
	}
	if e.HLC.Wall != now.UnixMicro() || !e.DeviceTime.Equal(now) {
		b.Hlc.WallMicros, b.DeviceTimeMicros = e.HLC.Wall, e.DeviceTime.UnixMicro()
	}
	body, err := proto.MarshalOptions{Deterministic: true}.Marshal(b)
	if err != nil {
		t.Fatal(err)
	}
	return ledger.Signed{Body: body, Signature: ed25519.Sign(d.key, append([]byte("tamp.v1.EventBody\x00"), body...))}
}

func wetTest(v float64) ledger.Kind {
	return &ledger.TestRecorded{TestID: newV7(), Content: ledger.TestContent{Feature: "pad",
		Readings: ledger.Readings{WetDensity: &soil.WetDensityTest{WetDensity: v, Moisture: 11}}}}
}

// Pushed entries with impossible values, clocks far off or fields this
// version cannot read are rejected, each naming the field and the rule,
// and the good entry of the same batch is accepted.
func TestPushRefusesImpossibleEntries(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Ironwood Draw culvert backfill")
	d := c.rawDevice(t, "ines", map[string]server.Role{project: server.Inspector}, false)
	results := func(edit func(*pb.Results)) func(*ledger.Event, *pb.EventBody) {
		return func(_ *ledger.Event, b *pb.EventBody) {
			r := &pb.Results{WetDensity: 2000, DryDensity: 1800, Moisture: 11}
			edit(r)
			b.GetTestRecorded().GetContent().DeviceResults = r
		}
	}
	impossible, invalid, unknown := pb.RejectReason_REJECT_REASON_IMPOSSIBLE_READINGS, pb.RejectReason_REJECT_REASON_INVALID_FIELD,
		pb.RejectReason_REJECT_REASON_UNKNOWN_KIND
	cases := []struct {
		name, field, says string
		reason            pb.RejectReason
		ev                ledger.Signed
	}{
		{"wet density 5e5 kg/m3", "readings.wet_density", "outside 500 to 3500 kg/m3", impossible, d.signRaw(t, project, wetTest(5e5), nil)},
		{"wet density 1e300 kg/m3", "readings.wet_density", "outside 500 to 3500 kg/m3", impossible, d.signRaw(t, project, wetTest(1e300), nil)},
		{"NaN device dry density", "device_results.dry_density", "finite", invalid,
			d.signRaw(t, project, wetTest(2000), results(func(r *pb.Results) { r.DryDensity = math.NaN() }))},
		{"infinite device moisture", "device_results.moisture", "finite", invalid,
			d.signRaw(t, project, wetTest(2000), results(func(r *pb.Results) { r.Moisture = math.Inf(1) }))},
		{"hybrid time centuries ahead", "hlc", "years ahead of this server's clock", invalid,
			d.signRaw(t, project, wetTest(2000), func(e *ledger.Event, _ *pb.EventBody) { e.HLC.Wall = time.Now().AddDate(300, 0, 0).UnixMicro() })},
		{"device time in 1970", "device_time", "before 2000-01-01", invalid,
			d.signRaw(t, project, wetTest(2000), func(e *ledger.Event, _ *pb.EventBody) { e.DeviceTime = time.Unix(3600, 0) })},
		{"1 KB unknown field", "#1000", "newer version", unknown,
			d.signRaw(t, project, wetTest(2000), func(_ *ledger.Event, b *pb.EventBody) {
				u := protowire.AppendBytes(protowire.AppendTag(nil, 1000, protowire.BytesType), make([]byte, 1024))
				b.ProtoReflect().SetUnknown(u)
			})},
	}
	good := d.signRaw(t, project, wetTest(2000), nil)
	evs := []ledger.Signed{good}
	for _, c := range cases {
		evs = append(evs, c.ev)
	}
	resp, err := d.push(t, c, project, evs...)
	if err != nil {
		t.Fatal(err)
	}
	if o := resp.GetOutcomes()[0]; o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
		t.Errorf("the good entry: %v %s", o.GetStatus(), o.GetMessage())
	}
	for i, c := range cases {
		o := resp.GetOutcomes()[i+1]
		if o.GetStatus() != pb.PushStatus_PUSH_STATUS_REJECTED || o.GetReason() != c.reason || o.GetField() != c.field || o.GetRule() != "" {
			t.Errorf("%s: %v %v field %q rule %q, want rejected, %v, field %q", c.name, o.GetStatus(), o.GetReason(), o.GetField(), o.GetRule(), c.reason, c.field)
		}
		// The words are for people: they say what the bound is.
		if !strings.Contains(o.GetMessage(), c.says) {
			t.Errorf("%s: the message %q does not say %q", c.name, o.GetMessage(), c.says)
		}
	}
	if h := c.head(); h.Seq == 0 {
		t.Error("nothing stored")
	}
}

// Entries a ledger held before the bounds (stored by an older server) stay
// readable: the server loads them after a restart, answers a push of one
// "already present", and a device pulls them.
func TestStoredOutOfBoundsEntriesStayReadable(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Ironwood Draw culvert backfill")
	d := c.rawDevice(t, "ines", map[string]server.Role{project: server.Inspector}, false)
	pushAccepted(t, c, d, project, d.tests(t, project, 1)...)
	old := d.signRaw(t, project, wetTest(5e5), func(e *ledger.Event, _ *pb.EventBody) { e.DeviceTime = time.Unix(3600, 0) })
	sg, err := ledger.FromEnvelope(old.Proto())
	if err != nil {
		t.Fatal(err)
	}
	// Stored as an older server stored it, past today's admission.
	ctx := context.Background()
	head := c.head()
	env := sg.Bytes()
	row := server.Row{Seq: head.Seq + 1, EventID: sg.Event.ID, DeviceID: d.id, DeviceSeq: sg.Event.DeviceSeq, Kind: "test_recorded",
		RecordID: ledger.RecordID(sg.Event.Kind), Envelope: env, Hash: server.Hash(ledger.Link(ledger.Hash(head.Hash), head.Seq+1, env)), Received: time.Now()}
	if err := c.store.Append(ctx, project, head, []server.Row{row}); err != nil {
		t.Fatal(err)
	}
	c.stop()
	c.start("")

	resp, err := d.push(t, c, project, old)
	if err != nil {
		t.Fatalf("push after the restart: %v", err)
	}
	if o := resp.GetOutcomes()[0]; o.GetStatus() != pb.PushStatus_PUSH_STATUS_ALREADY_PRESENT {
		t.Errorf("a push of a stored out-of-bounds entry: %v %s, want already present", o.GetStatus(), o.GetMessage())
	}
	pushAccepted(t, c, d, project, d.tests(t, project, 1)...)
	office := c.device("otto", server.Office)
	syncOK(t, office, c.conn(""), project)
	if h := verified(t, office, project); h.Seq != c.head().Seq {
		t.Errorf("the device verified up to %d, the ledger holds %d", h.Seq, c.head().Seq)
	}
}
