package report

import (
	"crypto/ed25519"
	"math"
	"testing"
	"time"

	"github.com/google/uuid"

	"tamp/internal/ledger"
	"tamp/internal/soil"
)

// book records events of one project into a projection, as devices would.
type book struct {
	t       *testing.T
	p       *ledger.Projection
	project string
	key     ed25519.PrivateKey
	seq     uint64
	clock   time.Time
}

func newBook(t *testing.T) *book {
	_, key, _ := ed25519.GenerateKey(nil)
	project := uuid.Must(uuid.NewV7()).String()
	return &book{t: t, p: ledger.NewProjection(project), project: project, key: key, clock: time.Date(2026, 7, 1, 15, 0, 0, 0, time.UTC)}
}

func id() string { return uuid.Must(uuid.NewV7()).String() }

// add records k by author and returns the event.
func (b *book) add(author string, k ledger.Kind) ledger.Signed {
	b.t.Helper()
	b.seq++
	b.clock = b.clock.Add(time.Minute)
	s, err := ledger.Seal(ledger.Event{ID: id(), Project: b.project, Author: author, Device: "dev-" + author, DeviceSeq: b.seq,
		HLC: ledger.HLC{Wall: b.clock.UnixMicro()}, DeviceTime: b.clock, Kind: k}, b.key)
	if err != nil {
		b.t.Fatal(err)
	}
	if _, err := b.p.Apply(s); err != nil {
		b.t.Fatal(err)
	}
	return s
}

func pcf(v float64) float64 { return v * soil.PoundPerCubicFoot }

func cone(dry, w float64) ledger.Readings {
	sd := pcf(99.0)
	used, c := 7.00*soil.Pound, 0.53*soil.Pound
	vol := (used - c) / sd
	return ledger.Readings{SandCone: &soil.SandCone{SandDensity: sd, SandUsed: used, ConeCorrection: c, SoilMass: pcf(dry) * (1 + w/100) * vol, Moisture: w}}
}

type site struct {
	*book
	spec, ref, place, borrow string
}

func newSite(t *testing.T) *site {
	s := &site{book: newBook(t), spec: id(), ref: id(), place: id(), borrow: id()}
	s.add("qa", &ledger.SpecDefined{ID: s.spec, Name: "embankment", MinCompaction: "95", MoistureLow: "-3", MoistureHigh: "3", VolumePerTest: 500 * soil.CubicYard})
	s.add("qa", &ledger.ReferenceAdded{ID: s.ref, Procedure: soil.Procedure{Standard: soil.ASTMD698, Method: "A"}, MaxDryDensity: pcf(118), OptimumMoisture: 12})
	s.add("qa", &ledger.BorrowSourceMeasured{ID: s.borrow, Name: "pit 1", BankTests: []ledger.Readings{cone(101.5, 9)}, LooseDryDensity: pcf(84)})
	s.add("office", &ledger.LiftPlacementRecorded{ID: s.place, Feature: "embankment", LiftNumber: 1, Thickness: 0.2,
		CompactedVolume: 1800 * soil.CubicYard, BorrowSourceID: s.borrow})
	return s
}

func (s *site) test(dry float64, station float64, retestOf string) (*ledger.TestRecorded, ledger.Signed) {
	tr := &ledger.TestRecorded{TestID: id(), RetestOf: retestOf, Content: ledger.TestContent{Readings: cone(dry, 12), ReferenceID: s.ref,
		SpecID: s.spec, PlacementID: s.place, Location: ledger.Location{Station: station}}}
	return tr, s.add("ann", tr)
}

func TestReviewQueue(t *testing.T) {
	s := newSite(t)
	a, ae := s.test(113, 100, "")
	b, _ := s.test(114, 200, "")
	c, _ := s.test(112.5, 300, "")
	s.add("office", &ledger.TestReviewed{TestID: a.TestID, Revision: ae.Event.ID, Decision: ledger.Approve})
	s.add("ann", &ledger.TestVoided{TestID: c.TestID, Reason: "wrong lift"})
	q := ReviewQueue(s.p, "")
	if len(q) != 1 || q[0].ID != b.TestID {
		t.Errorf("queue = %d tests, want only the unreviewed, unvoided one", len(q))
	}
	// A correction after approval puts the test back in the queue.
	s.add("ann", &ledger.TestCorrected{TestID: a.TestID, Supersedes: ae.Event.ID, Reason: "station", Content: a.Content})
	if q := ReviewQueue(s.p, ""); len(q) != 2 {
		t.Errorf("after a correction of an approved test: %d in the queue, want 2", len(q))
	}
	if q := ReviewQueue(s.p, "2026-07-02"); len(q) != 0 {
		t.Errorf("another day: %d", len(q))
	}
}

func TestRetestAudit(t *testing.T) {
	s := newSite(t)
	f1, _ := s.test(105, 1000, "") // 89 %: fails
	r1, _ := s.test(108, 1003, f1.TestID)
	s.test(113, 1006, r1.TestID)   // retest of the retest passes
	f2, _ := s.test(104, 2000, "") // fails, retested far away and still open
	s.test(106, 2090, f2.TestID)
	f3, f3e := s.test(103, 3000, "") // fails, QA accepts it
	s.add("qa", &ledger.ExceptionAccepted{TestID: f3.TestID, Revision: f3e.Event.ID, Reason: "engineer of record memo 7"})
	s.test(114, 4000, "") // passes: not in the audit
	chains := RetestAudit(s.p)
	if len(chains) != 3 {
		t.Fatalf("%d chains, want 3", len(chains))
	}
	want := []struct {
		id      string
		n       int
		closure Closure
		shift   float64
	}{{f1.TestID, 2, Retested, 6}, {f2.TestID, 1, Open, 90}, {f3.TestID, 0, Excepted, 0}}
	for i, w := range want {
		c := chains[i]
		if c.Failed.ID != w.id || len(c.Retests) != w.n || c.Closure != w.closure || math.Abs(c.StationShift-w.shift) > 1e-9 {
			t.Errorf("chain %d: %s with %d retests, %s, shift %v; want %s, %d, %s, %v", i, c.Failed.ID, len(c.Retests), c.Closure, c.StationShift,
				w.id, w.n, w.closure, w.shift)
		}
	}
}
