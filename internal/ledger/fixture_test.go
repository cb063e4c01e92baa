package ledger

import (
	"crypto/ed25519"
	"encoding/binary"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/google/uuid"

	"tamp/internal/qc"
	"tamp/internal/soil"
)

// fixture makes signed events for tests, deterministically from a seed.
type fixture struct {
	tb      testing.TB
	rng     *rand.Rand
	project string
	wall    time.Time
	devices map[string]*device
}

type device struct {
	id, user string
	key      ed25519.PrivateKey
	seq      uint64
	clock    *Clock
}

func newFixture(tb testing.TB, seed uint64) *fixture {
	f := &fixture{tb: tb, rng: rand.New(rand.NewPCG(seed, seed^0x9e3779b97f4a7c15)),
		wall: time.Date(2026, 6, 15, 14, 0, 0, 0, time.UTC), devices: map[string]*device{}}
	f.project = f.id(false)
	return f
}

// id returns a UUIDv7 (v7 true) or v4 from the fixture's randomness and clock.
func (f *fixture) id(v7 bool) string {
	var b [16]byte
	binary.BigEndian.PutUint64(b[:8], f.rng.Uint64())
	binary.BigEndian.PutUint64(b[8:], f.rng.Uint64())
	if v7 {
		ms := uint64(f.wall.UnixMilli())
		b[0], b[1], b[2], b[3], b[4], b[5] = byte(ms>>40), byte(ms>>32), byte(ms>>24), byte(ms>>16), byte(ms>>8), byte(ms)
		b[6] = 0x70 | b[6]&0x0f
	} else {
		b[6] = 0x40 | b[6]&0x0f
	}
	b[8] = 0x80 | b[8]&0x3f
	return uuid.UUID(b).String()
}

func (f *fixture) device(name string) *device {
	if d, ok := f.devices[name]; ok {
		return d
	}
	var seed [32]byte
	binary.BigEndian.PutUint64(seed[:], f.rng.Uint64())
	d := &device{id: f.id(true), user: "user-" + name, key: ed25519.NewKeyFromSeed(seed[:])}
	d.clock = NewClock(func() time.Time { return f.wall }, HLC{})
	f.devices[name] = d
	return d
}

func (f *fixture) keys(dev string) (ed25519.PublicKey, bool) {
	for _, d := range f.devices {
		if d.id == dev {
			return d.key.Public().(ed25519.PublicKey), true
		}
	}
	return nil, false
}

// emit signs an event of kind k by the named device, advancing the clock.
func (f *fixture) emit(name string, k Kind) Signed {
	f.tb.Helper()
	f.wall = f.wall.Add(time.Duration(1+f.rng.IntN(90)) * time.Second)
	d := f.device(name)
	d.seq++
	e := Event{ID: f.id(true), Project: f.project, Author: d.user, Device: d.id, DeviceSeq: d.seq,
		HLC: d.clock.Now(), DeviceTime: f.wall, Kind: k}
	s, err := Seal(e, d.key)
	if err != nil {
		f.tb.Fatalf("seal %s: %v", k.KindName(), err)
	}
	return s
}

func pcf(v float64) float64 { return v * soil.PoundPerCubicFoot }

func pt(w, drypcf float64) soil.CurvePoint {
	return soil.CurvePoint{Moisture: w, DryDensity: pcf(drypcf)}
}

func (f *fixture) setUp() *ProjectSetUp {
	return &ProjectSetUp{Name: "Cedar Flats levee, reach 2", Units: soil.US, WaterDensity: soil.Water624, TimeZone: "America/Denver"}
}

func (f *fixture) spec() *SpecDefined {
	return &SpecDefined{ID: f.id(true), Name: "embankment, 95 % standard", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"}
}

func (f *fixture) reference() *ReferenceAdded {
	return &ReferenceAdded{ID: f.id(true), Material: "brown silty sand", LabSampleID: "L-104",
		Procedure: soil.Procedure{Standard: soil.ASTMD698, Method: "A", Edition: 2012},
		Points:    []soil.CurvePoint{pt(9.5, 108.2), pt(11.6, 112.9), pt(13.4, 115.8), pt(15.1, 113.7), pt(17.0, 109.1)},
		Gs:        2.66}
}

// sandCone returns readings whose dry density is dry pcf at moisture w.
func sandCone(dry, w float64) Readings {
	sd := pcf(99.0)
	used := 7.00 * soil.Pound
	cone := 0.53 * soil.Pound
	vol := (used - cone) / sd
	soilMass := pcf(dry) * (1 + w/100) * vol
	return Readings{SandCone: &soil.SandCone{SandDensity: sd, SandUsed: used, ConeCorrection: cone, SoilMass: soilMass, Moisture: w}}
}

func (f *fixture) test(ref, spec string, dry, w float64) *TestRecorded {
	return &TestRecorded{TestID: f.id(true), Content: TestContent{Readings: sandCone(dry, w), ReferenceID: ref, SpecID: spec,
		Feature: "embankment", LiftNumber: 3, LiftThickness: 8 * soil.Inch,
		Location: Location{Station: 1250 * soil.Foot, Offset: -12 * soil.Foot, Elevation: 1523.4}}}
}

// apply applies events and fails the test on a rejection.
func apply(tb testing.TB, p *Projection, evs ...Signed) {
	tb.Helper()
	for _, s := range evs {
		if _, err := p.Apply(s); err != nil {
			tb.Fatalf("apply %s: %v", s.Event.Kind.KindName(), err)
		}
	}
}

func verdictOf(tb testing.TB, p *Projection, id string) qc.Verdict {
	tb.Helper()
	t, ok := p.Test(id)
	if !ok {
		tb.Fatalf("test %s not in the projection", id)
	}
	return t.Result.Verdict
}

func hasFlag(fs []qc.Finding, code string) bool {
	for _, f := range fs {
		if f.Code == code {
			return true
		}
	}
	return false
}
