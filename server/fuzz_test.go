package server_test

import (
	"context"
	"crypto/ed25519"
	"testing"

	"google.golang.org/protobuf/proto"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/server"
)

// FuzzPushBatch pushes batches mixing good events with arbitrary bytes and
// mutated envelopes through the real gRPC path: the call never fails for
// their content, every outcome is accounted for, and the stored ledger is
// always a valid chain of whole, decodable events.
func FuzzPushBatch(f *testing.F) {
	f.Add([]byte{}, []byte{}, uint8(0))
	f.Add([]byte{0x0a, 0x03, 0x01, 0x02, 0x03}, []byte{0x12, 0x01, 0x00}, uint8(3))
	f.Add([]byte("not protobuf at all"), []byte{0xff}, uint8(17))
	c := &cluster{tb: f, dir: f.TempDir(), rate: 1e6} // the fuzzer pushes far faster than any device may
	c.start("")
	project := c.newProject("fuzz")
	d := c.rawDevice(f, "fuzz", map[string]server.Role{project: server.Inspector}, false)
	sc := pb.NewSyncServiceClient(c.conn(""))
	f.Fuzz(func(t *testing.T, body, sig []byte, flip uint8) {
		good := d.sign(t, project, &ledger.TestRecorded{TestID: newV7(), Content: ledger.TestContent{Readings: sandCone(110, 12)}})
		mutated := good.Proto()
		mutated.Body = append([]byte{}, mutated.Body...)
		if len(mutated.Body) > 0 {
			mutated.Body[int(flip)%len(mutated.Body)] ^= flip | 1
		}
		again := d.sign(t, project, &ledger.TestRecorded{TestID: newV7(), Content: ledger.TestContent{Readings: sandCone(112, 12)}})
		req := &pb.PushRequest{ProjectId: project, Events: []*pb.Event{good.Proto(), {Body: body, Signature: sig}, mutated, again.Proto(), good.Proto()}}
		resp, err := sc.Push(d.ctx(), req)
		if err != nil {
			t.Fatalf("push: %v", err)
		}
		if len(resp.GetOutcomes()) != len(req.Events) {
			t.Fatalf("%d outcomes for %d events", len(resp.GetOutcomes()), len(req.Events))
		}
		if s := resp.GetOutcomes()[0].GetStatus(); s != pb.PushStatus_PUSH_STATUS_ACCEPTED {
			t.Errorf("good event: %v", resp.GetOutcomes()[0])
		}
		if s := resp.GetOutcomes()[4].GetStatus(); s != pb.PushStatus_PUSH_STATUS_ALREADY_PRESENT {
			t.Errorf("the same event again in the batch: %v", resp.GetOutcomes()[4])
		}
		entries, err := c.store.After(context.Background(), project, 0, 1<<20)
		if err != nil {
			t.Fatal(err)
		}
		v := ledger.NewVerifier(ledger.Start(project, 1))
		chain := make([]ledger.Entry, len(entries))
		for i, e := range entries {
			chain[i] = ledger.Entry{Seq: e.Seq, Event: e.Event, Hash: ledger.Hash(e.Hash)}
		}
		if err := v.Verify(chain); err != nil {
			t.Fatalf("stored chain: %v", err)
		}
		for _, e := range entries {
			var m pb.Event
			if err := proto.Unmarshal(e.Event, &m); err != nil {
				t.Fatal(err)
			}
			if _, err := ledger.Open(&m, func(dev string) (ed25519.PublicKey, bool) {
				held, err := c.store.Device(context.Background(), dev)
				return held.PublicKey, err == nil
			}); err != nil {
				t.Fatalf("stored event %d: %v", e.Seq, err)
			}
		}
	})
}
