package ledger

import (
	"encoding/hex"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"google.golang.org/protobuf/proto"

	pb "tamp/internal/gen/tamp/v1"
)

// FuzzDecodeApply feeds arbitrary bytes to the decoder and what decodes to
// a projection holding a history: nothing panics, and a refused event
// leaves the state as it was.
func FuzzDecodeApply(f *testing.F) {
	files, _ := filepath.Glob(filepath.Join("testdata", "*.hex"))
	for _, name := range files {
		b, err := os.ReadFile(name)
		if err != nil {
			f.Fatal(err)
		}
		raw, _ := hex.DecodeString(strings.TrimSpace(string(b)))
		f.Add(raw)
		f.Add(raw[:len(raw)/2])
	}
	f.Add([]byte{})
	f.Add([]byte{0x0a, 0x02, 0x08, 0x01})
	fx := newFixture(f, 40)
	evs := history(fx, rand.New(rand.NewPCG(40, 1)))
	f.Fuzz(func(t *testing.T, data []byte) {
		s, err := Decode(data)
		if err != nil {
			if ReasonOf(err) == 0 {
				t.Fatalf("decode error without a reason: %v", err)
			}
			return
		}
		p := NewProjection(fx.project)
		apply(t, p, evs...)
		s.Event.Project = fx.project // let it reach the projection's rules
		before := p.Digest()
		if _, err := p.Apply(s); err != nil {
			if ReasonOf(err) == 0 {
				t.Fatalf("apply error without a reason: %v", err)
			}
			if p.Digest() != before {
				t.Fatal("a refused event changed the state")
			}
		}
	})
}

// FuzzBodyFields mutates the fields of a valid body through the protobuf
// API: validation must refuse or accept without panicking.
func FuzzBodyFields(f *testing.F) {
	f.Add(uint64(1), 0.0, -1.0, "", "95", uint32(0))
	f.Add(uint64(2), 1e308, 0.0, "x", "95.", uint32(7))
	fx := newFixture(f, 41)
	evs := history(fx, rand.New(rand.NewPCG(41, 1)))
	f.Fuzz(func(t *testing.T, pick uint64, a, b float64, s1, s2 string, n uint32) {
		s := evs[pick%uint64(len(evs))]
		var body pb.EventBody
		if err := proto.Unmarshal(s.Body, &body); err != nil {
			t.Fatal(err)
		}
		switch k := body.Kind.(type) {
		case *pb.EventBody_TestRecorded:
			c := k.TestRecorded.GetContent()
			if sc := c.GetReadings().GetSandCone(); sc != nil {
				sc.SoilMass, sc.Moisture = a, b
			}
			c.ReferenceId, c.Remarks = s1, s2
			c.LiftNumber = n
		case *pb.EventBody_SpecDefined:
			k.SpecDefined.MinCompaction, k.SpecDefined.MoistureHigh = s1, s2
			k.SpecDefined.SuspectCompaction = a
		case *pb.EventBody_ReferenceAdded:
			if len(k.ReferenceAdded.Points) > 0 {
				k.ReferenceAdded.Points[0].DryDensity, k.ReferenceAdded.Points[0].Moisture = a, b
			}
			k.ReferenceAdded.Method = s1
		case *pb.EventBody_TestReviewed:
			k.TestReviewed.Decision = pb.ReviewDecision(n)
			k.TestReviewed.Comment = s1
		}
		e, err := FromProto(&body)
		if err != nil {
			return
		}
		if err := Validate(e); err != nil && ReasonOf(err) == 0 {
			t.Fatalf("validation error without a reason: %v", err)
		}
		p := NewProjection(fx.project)
		apply(t, p, evs...)
		body.EventId = fx.id(true)
		raw, _ := deterministic.Marshal(&body)
		e.ID = body.EventId
		if _, err := p.Apply(Signed{Event: e, Body: raw}); err != nil && ReasonOf(err) == 0 {
			t.Fatalf("apply error without a reason: %v", err)
		}
		_ = p.Digest()
	})
}

// FuzzDeliveryOrder delivers a history in an order the fuzzer chooses, with
// repeats: the state always equals the causal-order state.
func FuzzDeliveryOrder(f *testing.F) {
	f.Add(uint64(3), []byte{5, 4, 3, 2, 1, 0})
	f.Add(uint64(9), []byte{0, 0, 0, 200, 17, 3})
	f.Fuzz(func(t *testing.T, seed uint64, order []byte) {
		fx := newFixture(t, seed%50)
		evs := history(fx, rand.New(rand.NewPCG(seed%50, 5)))
		want := NewProjection(fx.project)
		apply(t, want, evs...)
		p := NewProjection(fx.project)
		for _, b := range order {
			apply(t, p, evs[int(b)%len(evs)])
		}
		apply(t, p, evs...)
		if p.Digest() != want.Digest() {
			t.Fatalf("order %v: state differs", order)
		}
	})
}
