package ledger

import (
	"errors"
	"math"
	"strings"
	"testing"
	"time"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/qc"
	"tamp/internal/soil"
)

// sealAs seals k by ann's device with the event changed by edit.
func (f *fixture) sealAs(k Kind, edit func(*Event)) (Signed, error) {
	d := f.device("ann")
	d.seq++
	e := Event{ID: f.id(true), Project: f.project, Author: d.user, Device: d.id, DeviceSeq: d.seq, HLC: d.clock.Now(), DeviceTime: f.wall, Kind: k}
	if edit != nil {
		edit(&e)
	}
	return Seal(e, d.key)
}

func wantRejected(t *testing.T, err error, reason Reason, field, says string) {
	t.Helper()
	var r *Rejection
	if !errors.As(err, &r) {
		t.Fatalf("error = %v, want a rejection of %s", err, field)
	}
	if r.Reason != reason || r.Field != field || !strings.Contains(r.Detail, says) {
		t.Errorf("rejection = %s %q %q, want %s %q saying %q", r.Reason, r.Field, r.Detail, reason, field, says)
	}
}

// Values no test, apparatus or clock produces are refused when an entry is
// made, naming the field and the bound.
func TestSealRefusesImpossibleValues(t *testing.T) {
	f := newFixture(t, 40)
	test := func(edit func(*TestRecorded)) Kind {
		k := f.test("", "", 110, 12)
		edit(k)
		return k
	}
	wet := func(v float64) Kind {
		return test(func(k *TestRecorded) {
			k.Content.Readings = Readings{WetDensity: &soil.WetDensityTest{WetDensity: v, Moisture: 12}}
		})
	}
	results := func(edit func(*Results)) Kind {
		return test(func(k *TestRecorded) {
			r := &Results{WetDensity: 1980, DryDensity: 1770, Moisture: 12, MaxDryDensity: 1860, OptimumMoisture: 13, RelativeCompaction: 95.2,
				MoistureDeviation: -1, Verdict: qc.Pass}
			edit(r)
			k.Content.DeviceResults = r
		})
	}
	ref := f.reference()
	for i := range ref.Points {
		ref.Points[i].DryDensity *= 1000
	}
	for _, c := range []struct {
		name   string
		k      Kind
		edit   func(*Event)
		reason Reason
		field  string
		says   string
	}{
		{"wet density 5e5 kg/m3", wet(5e5), nil, ImpossibleReadings, "readings.wet_density", "outside 500 to 3500 kg/m3"},
		{"wet density 1e300 kg/m3", wet(1e300), nil, ImpossibleReadings, "readings.wet_density", "outside 500 to 3500 kg/m3"},
		{"wet density 100 kg/m3", wet(100), nil, ImpossibleReadings, "readings.wet_density", "no soil is looser than 500 kg/m3"},
		{"sand cone giving 5e5 kg/m3", test(func(k *TestRecorded) { k.Content.Readings.SandCone.SoilMass = 150 }), nil,
			ImpossibleReadings, "readings.wet_density", "outside 500 to 3500 kg/m3"},
		{"soil mass in grams", test(func(k *TestRecorded) { k.Content.Readings.SandCone.SoilMass = 5000 }), nil,
			ImpossibleReadings, "readings.soil_mass", "outside 0 to 200 kg"},
		{"sand density 5e5", test(func(k *TestRecorded) { k.Content.Readings.SandCone.SandDensity = 5e5 }), nil,
			ImpossibleReadings, "readings.sand_density", "outside 1000 to 2000 kg/m3"},
		{"gauge wet density 1e6", test(func(k *TestRecorded) {
			k.Content.Readings = Readings{Nuclear: &NuclearReadings{Counts: []soil.NuclearReading{{WetDensity: 1e6, WaterPerVolume: 200}}}}
		}), nil, ImpossibleReadings, "readings.counts[0].wet_density", "outside 500 to 3500 kg/m3"},
		{"cylinder diameter in millimetres", test(func(k *TestRecorded) {
			k.Content.Readings = Readings{DriveCylinder: &soil.DriveCylinder{Diameter: 101.6, Length: 0.127, SoilMass: 2.15, Moisture: 15}}
		}), nil, ImpossibleReadings, "readings.diameter", "outside 0 to 1 m"},
		{"balloon reading in litres as m3", test(func(k *TestRecorded) {
			k.Content.Readings = Readings{RubberBalloon: &soil.RubberBalloon{InitialReading: 1.02, FinalReading: 2.85, SoilMass: 3600, Moisture: 9}}
		}), nil, ImpossibleReadings, "readings.initial_reading", "outside 0 to 0.1 m3"},
		{"device dry density NaN", results(func(r *Results) { r.DryDensity = math.NaN() }), nil, InvalidField, "device_results.dry_density", "finite"},
		{"device moisture +Inf", results(func(r *Results) { r.Moisture = math.Inf(1) }), nil, InvalidField, "device_results.moisture", "finite"},
		{"device dry density 5e5", results(func(r *Results) { r.DryDensity = 5e5 }), nil, ImpossibleReadings, "device_results.dry_density", "3500 kg/m3"},
		{"device relative compaction -5", results(func(r *Results) { r.RelativeCompaction = -5 }), nil,
			ImpossibleReadings, "device_results.relative_compaction", "outside 0 to 700 %"},
		{"curve point 1e5 kg/m3", ref, nil, ImpossibleReadings, "points[0].dry_density", "outside 500 to 3500 kg/m3"},
		{"moisture pair 250 %", &MoistureCorrectionSet{ID: f.id(true), EquipmentID: f.id(true), ReferenceID: f.id(true),
			Correction: soil.MoistureCorrection{Kind: soil.Offset, Value: 1}, Pairs: []soil.MoisturePair{{Gauge: 12, Oven: 250}}}, nil,
			ImpossibleReadings, "pairs[0].oven", "outside 0 to 100 %"},
		{"borrow loose dry density 1e6", &BorrowSourceMeasured{ID: f.id(true), Name: "pit 3", BankTests: []Readings{sandCone(101, 9)}, LooseDryDensity: 1e6}, nil,
			ImpossibleReadings, "loose_dry_density", "outside 500 to 3500 kg/m3"},
		{"station offset NaN", &LiftPlacementRecorded{ID: f.id(true), Feature: "pad", Stations: &StationRange{From: 1, To: 2, OffsetLeft: math.NaN()},
			Thickness: 0.2, CompactedVolume: 10}, nil, InvalidField, "stations.offset_left", "finite"},
		{"device time in 1970", test(func(*TestRecorded) {}), func(e *Event) { e.DeviceTime = time.Unix(86400, 0).UTC() },
			InvalidField, "device_time", "before 2000-01-01"},
		{"hybrid time in 1970", test(func(*TestRecorded) {}), func(e *Event) { e.HLC = HLC{Wall: 86400e6} },
			InvalidField, "hlc", "before 2000-01-01"},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := f.sealAs(c.k, c.edit)
			wantRejected(t, err, c.reason, c.field, c.says)
		})
	}
}

// Values at the bounds are accepted.
func TestSealAcceptsValuesAtTheBounds(t *testing.T) {
	f := newFixture(t, 41)
	for _, v := range []float64{MinDensity, MaxDensity} {
		k := f.test("", "", 110, 12)
		k.Content.Readings = Readings{WetDensity: &soil.WetDensityTest{WetDensity: v, Moisture: 0}}
		if _, err := f.sealAs(k, nil); err != nil {
			t.Errorf("wet density %v: %v", v, err)
		}
	}
	if _, err := f.sealAs(f.test("", "", 110, 12), func(e *Event) { e.DeviceTime, e.HLC = MinWallTime, HLC{Wall: MinWallTime.UnixMicro()} }); err != nil {
		t.Errorf("an entry made at %s: %v", MinWallTime, err)
	}
}

// withUnknown returns body with an unknown field of n bytes added to the
// message edit picks.
func withUnknown(t *testing.T, body []byte, num protowire.Number, n int, pick func(*pb.EventBody) proto.Message) []byte {
	t.Helper()
	var b pb.EventBody
	if err := proto.Unmarshal(body, &b); err != nil {
		t.Fatal(err)
	}
	m := pick(&b).ProtoReflect()
	u := protowire.AppendTag(nil, num, protowire.BytesType)
	u = protowire.AppendBytes(u, make([]byte, n))
	m.SetUnknown(append(m.GetUnknown(), u...))
	out, err := proto.MarshalOptions{Deterministic: true}.Marshal(&b)
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// An entry made by a newer version may hold fields this version does not
// know; it is refused as a new entry (unknown_kind, naming the field), and
// read as it is when a ledger already holds it.
func TestAdmitRefusesUnknownFieldsAndReadsThemInHistory(t *testing.T) {
	f := newFixture(t, 42)
	s := f.emit("ann", f.test("", "", 110, 12))
	for _, c := range []struct {
		name  string
		body  []byte
		field string
	}{
		{"1 KB field in the body", withUnknown(t, s.Body, 1000, 1024, func(b *pb.EventBody) proto.Message { return b }), "#1000"},
		{"field in the readings", withUnknown(t, s.Body, 77, 8, func(b *pb.EventBody) proto.Message {
			return b.GetTestRecorded().GetContent().GetReadings().GetSandCone()
		}), "readings.sand_cone.#77"},
	} {
		t.Run(c.name, func(t *testing.T) {
			u := Signed{Event: s.Event, Body: c.body, Signature: s.Signature}
			wantRejected(t, Admit(u), UnknownKind, c.field, "newer version")
			// History stays readable: a replica holding the entry decodes
			// and applies it.
			held, err := Decode(u.Bytes())
			if err != nil {
				t.Fatalf("decode: %v", err)
			}
			if _, err := NewProjection(f.project).Apply(held); err != nil {
				t.Errorf("apply an entry with an unknown field from history: %v", err)
			}
		})
	}
	// An enum value this version does not define.
	var b pb.EventBody
	if err := proto.Unmarshal(s.Body, &b); err != nil {
		t.Fatal(err)
	}
	b.GetTestRecorded().GetContent().DeviceResults = &pb.Results{WetDensity: 1980, DryDensity: 1770, Moisture: 12, Verdict: pb.Verdict(99)}
	body, err := proto.MarshalOptions{Deterministic: true}.Marshal(&b)
	if err != nil {
		t.Fatal(err)
	}
	wantRejected(t, Admit(Signed{Event: s.Event, Body: body, Signature: s.Signature}), UnknownKind, "device_results.verdict", "newer version")
	if err := Admit(s); err != nil {
		t.Errorf("the entry as made: %v", err)
	}
}

// The hybrid time and device time of a new entry may run at most
// MaxTimeAhead ahead of the receiver's clock.
func TestCheckAhead(t *testing.T) {
	now := time.Date(2026, 12, 3, 12, 0, 0, 0, time.UTC)
	at := func(hlc, dev time.Time) Event { return Event{HLC: HLC{Wall: hlc.UnixMicro()}, DeviceTime: dev} }
	for _, c := range []struct {
		name  string
		e     Event
		field string
		says  string
	}{
		{"hybrid time centuries ahead", at(now.AddDate(300, 0, 0), now), "hlc", "300 years ahead"},
		{"hybrid time 3 days ahead", at(now.Add(72*time.Hour), now), "hlc", "3 days ahead"},
		{"device time 25 h ahead", at(now, now.Add(25*time.Hour)), "device_time", "25h0m0s ahead"},
		{"hybrid time at the bound", at(now.Add(MaxTimeAhead), now), "", ""},
		{"in the past", at(now.AddDate(-1, 0, 0), now.AddDate(-1, 0, 0)), "", ""},
	} {
		t.Run(c.name, func(t *testing.T) {
			r := CheckAhead(c.e, now)
			if c.field == "" {
				if r != nil {
					t.Errorf("CheckAhead = %v, want nil", r)
				}
				return
			}
			wantRejected(t, r, InvalidField, c.field, c.says)
		})
	}
}

// A known field encoded as another type is kept as unknown by decoding, so
// it is refused like an unknown one; the check of a good body allocates
// nothing.
func TestAdmitReadsTheEncodingAsItIs(t *testing.T) {
	f := newFixture(t, 43)
	s := f.emit("ann", f.test("", "", 110, 12))
	odd := protowire.AppendVarint(protowire.AppendTag(nil, 1, protowire.VarintType), 7) // event_id as a number
	if _, err := Decode(Signed{Event: s.Event, Body: append(append([]byte{}, s.Body...), odd...), Signature: s.Signature}.Bytes()); err != nil {
		t.Fatalf("decode: %v", err)
	}
	wantRejected(t, Admit(Signed{Event: s.Event, Body: append(append([]byte{}, s.Body...), odd...)}), UnknownKind, "#1", "newer version")
	if n := testing.AllocsPerRun(50, func() { _ = checkWire(s.Body, bodyDescriptor) }); n != 0 {
		t.Errorf("checkWire of a good body: %v allocations, want 0", n)
	}
}
