package ledger

import (
	"bytes"
	"fmt"
	"math"
	"math/rand/v2"
	"sync"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"
	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/qc"
	"tamp/internal/soil"
)

// referenceDecode is the generic path decodeBody must agree with: the
// generated message, then FromProto, with the errors FromEnvelope gives.
func referenceDecode(body []byte) (Event, error) {
	var m pb.EventBody
	if err := proto.Unmarshal(body, &m); err != nil {
		return Event{}, &Rejection{Reason: Malformed, Field: "body", Detail: "the event body does not decode", Err: err}
	}
	return FromProto(&m)
}

// exact compares decoded events field for field: floats by their bits, times
// by instant and location, and a nil slice or pointer apart from an empty one.
var exact = cmp.Options{
	cmp.Comparer(func(a, b float64) bool { return math.Float64bits(a) == math.Float64bits(b) }),
	cmp.Comparer(func(a, b time.Time) bool { return a.Equal(b) && a.Location() == b.Location() }),
}

func isHot(k Kind) bool {
	switch k.(type) {
	case *TestRecorded, *TestCorrected, *TestReviewed:
		return true
	}
	return false
}

// hotBodies returns signed bodies of the kinds decodeBody reads: every
// readings method, with and without each optional part, and the tests,
// corrections and reviews of random project histories.
func hotBodies(tb testing.TB) [][]byte {
	tb.Helper()
	f := newFixture(tb, 60)
	var kinds []Kind
	for _, k := range everyKind(f) {
		if isHot(k) {
			kinds = append(kinds, k)
		}
	}
	ref, spec := f.reference(), f.spec()
	plain := f.test(ref.ID, spec.ID, 104, 12) // sand cone, no position, oversize or results
	failing := f.test(ref.ID, spec.ID, 96, 15)
	failing.Content.Readings = Readings{SandCone: &soil.SandCone{SandDensity: pcf(99), InitialMass: 7.2, FinalMass: 3.9, ConeCorrection: 0.24,
		SoilMass: 2.6, Moisture: 15}}
	failing.Content.DeviceResults = &Results{WetDensity: 1900, DryDensity: 1652, Moisture: 15, MaxDryDensity: 1855, OptimumMoisture: 12.9,
		RelativeCompaction: 89.1, MoistureDeviation: 2.1, Verdict: qc.Fail,
		Reasons: []qc.Finding{{Code: qc.CompactionBelowMinimum, Message: "89 % is below 95 %"}, {Code: qc.MoistureAboveWindow, Message: "2.1 above"}},
		Flags:   []qc.Finding{{Code: qc.CompactionSuspectHigh}}}
	failing.Content.Location.Position = &GeoPosition{} // a position of zeros is still a position
	zero := 0.0
	surface := f.test(ref.ID, spec.ID, 104, 12)
	surface.Content.Readings = Readings{Nuclear: &NuclearReadings{Backscatter: true, OvenMoisture: &zero,
		Counts: []soil.NuclearReading{{WetDensity: 2010, WaterPerVolume: 210}}}}
	surface.Content.DeviceResults = &Results{Verdict: qc.Pending}
	surface.RetestOf = f.id(true)
	kinds = append(kinds, plain, failing, surface,
		&TestCorrected{TestID: surface.TestID, Supersedes: f.id(true), Reason: "gauge moisture replaced by oven-dry", Content: failing.Content},
		&TestReviewed{TestID: plain.TestID, Revision: f.id(true), Decision: Approve})
	var out [][]byte
	for _, k := range kinds {
		out = append(out, f.emit("ann", k).Body)
	}
	for seed := uint64(1); seed <= 12; seed++ {
		hf := newFixture(tb, seed+600)
		for _, s := range history(hf, rand.New(rand.NewPCG(seed, 3))) {
			if isHot(s.Event.Kind) {
				out = append(out, s.Body)
			}
		}
	}
	return out
}

// marshal returns the deterministic encoding of a body built field by field.
func marshal(tb testing.TB, m *pb.EventBody) []byte {
	tb.Helper()
	b, err := deterministic.Marshal(m)
	if err != nil {
		tb.Fatal(err)
	}
	return b
}

// oddBodies returns canonical bodies no device writes but every replica
// must read alike: absent and empty messages, enum values this version does
// not know, extreme integers.
func oddBodies(tb testing.TB) [][]byte {
	rec := func(t *pb.TestRecorded) *pb.EventBody {
		return &pb.EventBody{EventId: "e", Kind: &pb.EventBody_TestRecorded{TestRecorded: t}}
	}
	content := func(c *pb.TestContent) *pb.EventBody { return rec(&pb.TestRecorded{TestId: "t", Content: c}) }
	bodies := []*pb.EventBody{
		rec(&pb.TestRecorded{}),
		content(&pb.TestContent{}),
		content(&pb.TestContent{Readings: &pb.Readings{}, Location: &pb.Location{Position: &pb.GeoPosition{}}, Oversize: &pb.Oversize{},
			DeviceResults: &pb.Results{Reasons: []*pb.Finding{{}}, Verdict: pb.Verdict(9)}, LiftNumber: math.MaxUint32}),
		content(&pb.TestContent{Readings: &pb.Readings{Method: &pb.Readings_Nuclear{Nuclear: &pb.NuclearReadings{
			Counts: []*pb.NuclearCount{{}, {WetDensity: math.Inf(1)}}, OvenMoisture: proto.Float64(math.NaN())}}}}),
		content(&pb.TestContent{Readings: &pb.Readings{Method: &pb.Readings_SandCone{SandCone: &pb.SandConeReadings{}}}}),
		content(&pb.TestContent{Readings: &pb.Readings{Method: &pb.Readings_DriveCylinder{DriveCylinder: &pb.DriveCylinderReadings{}}}}),
		content(&pb.TestContent{Readings: &pb.Readings{Method: &pb.Readings_RubberBalloon{RubberBalloon: &pb.RubberBalloonReadings{}}}}),
		content(&pb.TestContent{Readings: &pb.Readings{Method: &pb.Readings_WetDensity{WetDensity: &pb.WetDensityReadings{}}}}),
		{Kind: &pb.EventBody_TestReviewed{TestReviewed: &pb.TestReviewed{Decision: pb.ReviewDecision(-3)}}},
		{Kind: &pb.EventBody_TestCorrected{TestCorrected: &pb.TestCorrected{}}, DeviceTimeMicros: math.MinInt64,
			Hlc: &pb.HybridTime{WallMicros: -1, Logical: math.MaxUint32}, DeviceSeq: math.MaxUint64, ResignedFromDeviceId: "d-old"},
	}
	var out [][]byte
	for _, m := range bodies {
		out = append(out, marshal(tb, m))
	}
	return out
}

// field appends one length-delimited field.
func field(b []byte, num protowire.Number, v []byte) []byte {
	return protowire.AppendBytes(protowire.AppendTag(b, num, protowire.BytesType), v)
}

// refusedBodies returns bodies decodeBody must leave to the generic path,
// each with why.
func refusedBodies(tb testing.TB, hot []byte) map[string][]byte {
	cat := func(parts ...[]byte) []byte { return bytes.Join(parts, nil) }
	other := marshal(tb, &pb.EventBody{Kind: &pb.EventBody_TestVoided{TestVoided: &pb.TestVoided{TestId: "t", Reason: "r"}}})
	readings := field(field(nil, 1, nil), 2, nil) // nuclear and sand cone
	return map[string][]byte{
		"other kind":             other,
		"no kind":                marshal(tb, &pb.EventBody{EventId: "e"}),
		"empty":                  {},
		"unknown field":          protowire.AppendVarint(protowire.AppendTag(hot, 15, protowire.VarintType), 1),
		"unknown kind number":    field(marshal(tb, &pb.EventBody{EventId: "e"}), 40, nil),
		"string twice":           field(hot, 1, []byte("later")),
		"message twice":          field(hot, 6, protowire.AppendVarint([]byte{0x10}, 9)),
		"kind twice":             cat(hot, other),
		"two kinds read here":    field(hot, 28, field(nil, 1, []byte("t"))),
		"kind message twice":     field(hot, 25, field(nil, 3, []byte("x"))),
		"two readings methods":   field(nil, 25, field(nil, 2, field(nil, 1, readings))),
		"invalid UTF-8":          field(hot, 9, []byte{0xff, 0xfe}),
		"wrong wire type":        protowire.AppendFixed64(protowire.AppendTag(hot, 5, protowire.Fixed64Type), 7),
		"truncated":              hot[:len(hot)-3],
		"length past the end":    append(protowire.AppendTag(nil, 25, protowire.BytesType), 0x7f, 0x01),
		"group":                  cat(hot, protowire.AppendTag(nil, 20, protowire.StartGroupType), protowire.AppendTag(nil, 20, protowire.EndGroupType)),
		"field number zero":      cat([]byte{0x02, 0x00}, hot),
		"nested field zero":      field(nil, 25, field(nil, 2, field(nil, 1, field(nil, 2, protowire.AppendFixed64([]byte{0x01}, 1))))),
		"overlong varint":        cat(hot, []byte{0x28, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0x02}),
		"nested unknown field":   field(nil, 25, protowire.AppendVarint(protowire.AppendTag(nil, 4, protowire.VarintType), 1)),
		"nested invalid UTF-8":   field(nil, 25, field(nil, 2, field(nil, 11, []byte{0xc3}))),
		"repeated wrong type":    field(nil, 25, field(nil, 2, field(nil, 12, protowire.AppendVarint(protowire.AppendTag(nil, 9, protowire.VarintType), 1)))),
		"finding unknown field":  field(nil, 25, field(nil, 2, field(nil, 12, field(nil, 9, field(nil, 3, nil))))),
		"count past its numbers": field(nil, 25, field(nil, 2, field(nil, 1, field(nil, 1, field(nil, 3, protowire.AppendFixed64(protowire.AppendTag(nil, 3, protowire.Fixed64Type), 1)))))),
	}
}

// sameAsReference fails unless decodeEvent gives what the reference path
// gives for body: the same event, or an error with the same reason and text.
func sameAsReference(t *testing.T, body []byte) {
	t.Helper()
	want, werr := referenceDecode(body)
	got, err := decodeEvent(body)
	if (err == nil) != (werr == nil) {
		t.Fatalf("decodeEvent error %v, the reference path's %v", err, werr)
	}
	if err != nil {
		if err.Error() != werr.Error() || ReasonOf(err) != ReasonOf(werr) {
			t.Fatalf("decodeEvent error %q (%s), the reference path's %q (%s)", err, ReasonOf(err), werr, ReasonOf(werr))
		}
		return
	}
	if diff := cmp.Diff(want, got, exact); diff != "" {
		t.Fatalf("decodeEvent differs from the reference path (-want +got):\n%s", diff)
	}
}

func TestDecodeBodyMatchesReference(t *testing.T) {
	bodies := append(hotBodies(t), oddBodies(t)...)
	methods := map[string]bool{}
	for i, body := range bodies {
		want, err := referenceDecode(body)
		if err != nil {
			t.Fatalf("body %d: the reference path: %v", i, err)
		}
		got, ok := decodeBody(body)
		if !ok {
			t.Fatalf("body %d (%s): decodeBody left it to the generic path", i, want.Kind.KindName())
		}
		if diff := cmp.Diff(want, got, exact); diff != "" {
			t.Fatalf("body %d (%s): decodeBody differs from the reference path (-want +got):\n%s", i, want.Kind.KindName(), diff)
		}
		sameAsReference(t, body)
		methods[want.Kind.KindName()] = true
		if c := contentOf(got.Kind); c != nil {
			r := c.Readings
			for name, set := range map[string]bool{"nuclear": r.Nuclear != nil, "sand_cone": r.SandCone != nil, "drive_cylinder": r.DriveCylinder != nil,
				"rubber_balloon": r.RubberBalloon != nil, "wet_density": r.WetDensity != nil} {
				methods[name] = methods[name] || set
			}
		}
	}
	for _, name := range []string{"test_recorded", "test_corrected", "test_reviewed", "nuclear", "sand_cone", "drive_cylinder", "rubber_balloon", "wet_density"} {
		if !methods[name] {
			t.Errorf("no body of %s was decoded", name)
		}
	}
}

func contentOf(k Kind) *TestContent {
	switch k := k.(type) {
	case *TestRecorded:
		return &k.Content
	case *TestCorrected:
		return &k.Content
	}
	return nil
}

func TestDecodeBodyRefuses(t *testing.T) {
	hot := hotBodies(t)[0]
	for name, body := range refusedBodies(t, hot) {
		t.Run(name, func(t *testing.T) {
			if _, ok := decodeBody(body); ok {
				t.Fatal("decodeBody decoded it; want it left to the generic path")
			}
			sameAsReference(t, body)
		})
	}
}

func TestInternBytes(t *testing.T) {
	// More strings than the cache has slots, so sets are shared and
	// entries evicted, read by several goroutines at once.
	words := make([][]byte, 3000)
	for i := range words {
		words[i] = []byte(fmt.Sprintf("0192a7c4-%04d-7abc-8def-0123456789ab", i))
	}
	var wg sync.WaitGroup
	for g := range 4 {
		wg.Go(func() {
			for round := range 3 {
				for i := range words {
					w := words[(i*(g+1)+round)%len(words)]
					if got := internBytes(w); got != string(w) {
						t.Errorf("internBytes(%q)=%q", w, got)
						return
					}
				}
			}
		})
	}
	wg.Wait()
	if got := internBytes(nil); got != "" {
		t.Errorf("internBytes(nil)=%q, want empty", got)
	}
	// A string met again is the one held: no allocation.
	w := words[7]
	internBytes(w)
	if n := testing.AllocsPerRun(100, func() { internBytes(w) }); n != 0 {
		t.Errorf("internBytes of a held string allocates %v times, want 0", n)
	}
}

// FuzzDecodeBody holds decodeBody to the generic path on any bytes: what it
// decodes, the generic path decodes to the same event; whatever it leaves,
// decodeEvent still answers as the generic path does; and a canonical body
// of a kind it reads, it decodes.
func FuzzDecodeBody(f *testing.F) {
	hot := hotBodies(f)
	for _, b := range append(hot, oddBodies(f)...) {
		f.Add(b)
	}
	for _, b := range refusedBodies(f, hot[0]) {
		f.Add(b)
	}
	rng := rand.New(rand.NewPCG(61, 1))
	for _, b := range hot[:8] {
		f.Add(b[:rng.IntN(len(b))])
		m := bytes.Clone(b)
		m[rng.IntN(len(m))] ^= byte(1 + rng.IntN(255))
		f.Add(m)
	}
	f.Fuzz(func(t *testing.T, body []byte) {
		got, ok := decodeBody(body)
		want, err := referenceDecode(body)
		if ok {
			if err != nil {
				t.Fatalf("decodeBody decoded a body the generic path refuses: %v", err)
			}
			if diff := cmp.Diff(want, got, exact); diff != "" {
				t.Fatalf("decodeBody differs from the generic path (-want +got):\n%s", diff)
			}
		}
		sameAsReference(t, body)
		if err == nil && !ok && isHot(want.Kind) {
			if canon, err := EncodeBody(want); err == nil && bytes.Equal(canon, body) {
				t.Fatalf("decodeBody left a canonical %s body to the generic path", want.Kind.KindName())
			}
		}
	})
}

// BenchmarkDecodeBody decodes test_recorded bodies, a fully populated
// nuclear test and a plain sand-cone one, through decodeBody and through the
// generic path in the same loop: fast/generic is the ratio of their times.
func BenchmarkDecodeBody(b *testing.B) {
	f := newFixture(b, 62)
	var nuclear, plain *TestRecorded
	for _, k := range everyKind(f) {
		if t, ok := k.(*TestRecorded); ok && t.Content.Readings.Nuclear != nil {
			nuclear = t
		}
	}
	plain = f.test(f.id(true), f.id(true), 104, 12)
	plain.Content.DeviceResults = &Results{WetDensity: 1900, DryDensity: 1700, Moisture: 11.8, MaxDryDensity: 1780, OptimumMoisture: 12.2,
		RelativeCompaction: 95.5, MoistureDeviation: -0.4, Verdict: qc.Pass}
	for _, c := range []struct {
		name string
		kind *TestRecorded
	}{{"nuclear", nuclear}, {"sand_cone", plain}} {
		body := f.emit("ann", c.kind).Body
		b.Run(c.name, func(b *testing.B) {
			var fast, generic time.Duration
			for b.Loop() {
				t0 := time.Now()
				if _, ok := decodeBody(body); !ok {
					b.Fatal("decodeBody left the body to the generic path")
				}
				t1 := time.Now()
				if _, err := referenceDecode(body); err != nil {
					b.Fatal(err)
				}
				fast, generic = fast+t1.Sub(t0), generic+time.Since(t1)
			}
			n := float64(b.N)
			b.ReportMetric(float64(fast.Nanoseconds())/n, "fast-ns/op")
			b.ReportMetric(float64(generic.Nanoseconds())/n, "generic-ns/op")
			b.ReportMetric(fast.Seconds()/generic.Seconds(), "fast/generic")
			b.ReportMetric(testing.AllocsPerRun(100, func() { decodeBody(body) }), "fast-allocs")
			b.ReportMetric(testing.AllocsPerRun(100, func() { _, _ = referenceDecode(body) }), "generic-allocs")
		})
	}
}
