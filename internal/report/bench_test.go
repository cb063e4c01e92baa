package report

import (
	"crypto/ed25519"
	"math/rand/v2"
	"sync"
	"testing"
	"time"

	"github.com/google/uuid"

	"tamp/internal/ledger"
	"tamp/internal/soil"
)

// A project at scale for the report benchmarks: 2,000 placements on four
// features fed by two borrow sources, 50 tests on each (100,000 in all),
// one in twenty failing and retested (nine retests in ten within a few
// metres of the failure, the tenth away from it), a third of them reviewed
// by the office. The users' devices are introduced with their roles, as
// on every ledger a server holds.
const (
	benchPlacements = 2000
	benchPerLift    = 50
)

var (
	benchOnce sync.Once
	benchView *ledger.Projection
	benchAsOf time.Time // a month after the last entry, for the audit
	benchErr  error
)

func benchProject() (*ledger.Projection, error) {
	benchOnce.Do(func() {
		_, key, _ := ed25519.GenerateKey(nil)
		project := uuid.Must(uuid.NewV7()).String()
		p := ledger.NewProjection(project)
		clock := time.Date(2026, 4, 1, 13, 0, 0, 0, time.UTC)
		seq := map[string]uint64{}
		rng := rand.New(rand.NewPCG(1, 2))
		add := func(author string, k ledger.Kind) (ledger.Signed, error) {
			seq[author]++
			clock = clock.Add(3 * time.Second)
			s, err := ledger.Seal(ledger.Event{ID: uuid.Must(uuid.NewV7()).String(), Project: project, Author: author, Device: "dev-" + author,
				DeviceSeq: seq[author], HLC: ledger.HLC{Wall: clock.UnixMicro()}, DeviceTime: clock, Kind: k}, key)
			if err != nil {
				return s, err
			}
			_, err = p.Apply(s)
			return s, err
		}
		spec, ref := uuid.Must(uuid.NewV7()).String(), uuid.Must(uuid.NewV7()).String()
		sources := []string{uuid.Must(uuid.NewV7()).String(), uuid.Must(uuid.NewV7()).String()}
		features := []string{"north embankment", "south embankment", "core", "pad"}
		steps := []ledger.Kind{
			&ledger.SpecDefined{ID: spec, Name: "fill", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2", VolumePerTest: 400, MinTestsPerLift: 3},
			&ledger.ReferenceAdded{ID: ref, Procedure: soil.Procedure{Standard: soil.ASTMD698, Method: "A"}, MaxDryDensity: 1890, OptimumMoisture: 12},
			&ledger.BorrowSourceMeasured{ID: sources[0], Name: "east pit", BankTests: []ledger.Readings{coneSI(1620, 9), coneSI(1640, 9)}, LooseDryDensity: 1350},
			&ledger.BorrowSourceMeasured{ID: sources[1], Name: "west pit", BankTests: []ledger.Readings{coneSI(1580, 9), coneSI(1600, 9)}},
			&ledger.ProjectSetUp{Name: "bench", Units: soil.SI, Features: []ledger.FeatureDesign{{Feature: "core", DesignVolume: 2e6, BorrowSourceID: sources[0]}}},
		}
		for _, k := range steps {
			if _, benchErr = add("qa", k); benchErr != nil {
				return
			}
		}
		for _, u := range []struct{ user, role string }{{"qa", "qa"}, {"office", "office"}, {"olga", "office"}, {"ann", "inspector"}} {
			if _, benchErr = add("server", &ledger.DeviceEnrolled{DeviceID: uuid.Must(uuid.NewV7()).String(), UserID: u.user,
				PublicKey: key.Public().(ed25519.PublicKey), Name: "dev-" + u.user, UserName: u.user, Enrolled: clock, Role: u.role}); benchErr != nil {
				return
			}
		}
		var last string // the test recorded last
		var lastAt ledger.Location
		for i := range benchPlacements {
			pl := uuid.Must(uuid.NewV7()).String()
			f := features[i%len(features)]
			if _, benchErr = add("office", &ledger.LiftPlacementRecorded{ID: pl, Feature: f, LiftNumber: uint32(i/len(features) + 1), Thickness: 0.2,
				CompactedVolume: 800, BorrowSourceID: sources[i%2], SpecID: spec, Stations: &ledger.StationRange{From: 0, To: 400, OffsetLeft: -5, OffsetRight: 5}}); benchErr != nil {
				return
			}
			if _, benchErr = add("office", &ledger.HaulRecorded{ID: uuid.Must(uuid.NewV7()).String(), BorrowSourceID: sources[i%2], Loads: 80, LooseVolumePerLoad: 12, PlacementID: pl}); benchErr != nil {
				return
			}
			for j := 0; j < benchPerLift; j++ {
				dry := 1800 + 80*rng.Float64()
				if j%20 == 19 { // the previous test failed; this retests it
					dry = 1820 + 40*rng.Float64()
				}
				if j%20 == 18 {
					dry = 1650
				}
				at := ledger.Location{Station: 400 * rng.Float64(), Offset: 10*rng.Float64() - 5}
				if j%20 == 19 && i%10 != 9 { // the retest, in the reworked area
					at = ledger.Location{Station: lastAt.Station + 2*rng.Float64() - 1, Offset: lastAt.Offset + 2*rng.Float64() - 1}
				}
				tr := &ledger.TestRecorded{TestID: uuid.Must(uuid.NewV7()).String(), Content: ledger.TestContent{
					Readings: coneSI(dry, 11+2*rng.Float64()), ReferenceID: ref, SpecID: spec, PlacementID: pl, Feature: f, Location: at}}
				if j%20 == 19 {
					tr.RetestOf = last
				}
				s, err := add("ann", tr)
				if benchErr = err; err != nil {
					return
				}
				last, lastAt = tr.TestID, at
				if j%3 == 0 {
					if _, benchErr = add("olga", &ledger.TestReviewed{TestID: tr.TestID, Revision: s.Event.ID, Decision: ledger.Approve}); benchErr != nil {
						return
					}
				}
			}
		}
		benchView, benchAsOf = p, clock.Add(30*24*time.Hour)
	})
	return benchView, benchErr
}

// BenchmarkReports times each report over 100,000 tests on 2,000
// placements against a plain scan of the same tests in the same run: the
// metric <report>/scan is the report's time over the scan's (see the
// README's Performance section for the target).
func BenchmarkReports(b *testing.B) {
	p, err := benchProject()
	if err != nil {
		b.Fatal(err)
	}
	if n := len(p.Tests()); n != benchPlacements*benchPerLift {
		b.Fatalf("%d tests, want %d", n, benchPlacements*benchPerLift)
	}
	var sink float64
	scan := func() {
		for _, t := range p.Tests() {
			sink += t.Result.DryDensity
		}
	}
	reports := []struct {
		name string
		run  func() error
	}{
		{"review-queue", func() error { sink += float64(len(ReviewQueue(p, ""))); return nil }},
		{"retest-audit", func() error { sink += float64(len(RetestAudit(p))); return nil }},
		{"frequency", func() error { sink += float64(len(TestFrequency(p))); return nil }},
		{"lots", func() error { l, err := Lots(p, LotScope{}); sink += float64(len(l)); return err }},
		{"lots-by-feature", func() error {
			l, err := Lots(p, LotScope{Feature: "core", LiftFrom: 10, LiftTo: 400})
			sink += float64(len(l))
			return err
		}},
		{"reconcile", func() error { r, err := Reconcile(p); sink += float64(len(r)); return err }},
		{"findings", func() error { sink += float64(len(Findings(p, AuditOptions{AsOf: benchAsOf}))); return nil }},
	}
	timeOf := func(f func() error) (time.Duration, error) {
		start := time.Now()
		err := f()
		return time.Since(start), err
	}
	for _, r := range reports {
		b.Run(r.name, func(b *testing.B) {
			var base, took time.Duration
			for b.Loop() {
				d, _ := timeOf(func() error { scan(); return nil })
				base += d
				d, err := timeOf(r.run)
				if err != nil {
					b.Fatal(err)
				}
				took += d
			}
			b.ReportMetric(float64(took)/float64(base), r.name+"/scan")
			b.ReportMetric(float64(took.Microseconds())/float64(b.N)/1000, "ms/report")
		})
	}
	if sink == 0 {
		b.Log("nothing computed")
	}
}
