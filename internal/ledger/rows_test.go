package ledger

import (
	"cmp"
	"math"
	"math/rand/v2"
	"slices"
	"sync"
	"testing"
	"time"

	"tamp/internal/qc"
)

// TestRowsKeptInStep applies random histories one event at a time, asking
// for the rows between (from several readers at once, as a server's
// reports do), and checks every row against its test: rows copied from an
// earlier call must still say what the test says.
func TestRowsKeptInStep(t *testing.T) {
	for seed := range uint64(12) {
		f := newFixture(t, 700+seed)
		rng := rand.New(rand.NewPCG(seed, 3))
		evs := history(f, rng)
		// A placement of stations, area and spec, and hauls, of the
		// history's placements and of one it does not hold.
		evs = append(evs, f.emit("office", &LiftPlacementRecorded{ID: f.id(true), Feature: "pad", LiftNumber: 3, Thickness: 0.2, CompactedVolume: 90,
			Area: 450, Stations: &StationRange{From: 10, To: 55, OffsetLeft: -5, OffsetRight: 5}, SpecID: f.id(true), BorrowSourceID: f.id(true)}))
		for _, s := range evs {
			if pl, ok := s.Event.Kind.(*LiftPlacementRecorded); ok {
				evs = append(evs, f.emit("office", &HaulRecorded{ID: f.id(true), BorrowSourceID: f.id(true), Loads: 12, LooseVolumePerLoad: 10, PlacementID: pl.ID}))
			}
		}
		evs = append(evs, f.emit("office", &HaulRecorded{ID: f.id(true), BorrowSourceID: f.id(true), Loads: 3, LooseVolumePerLoad: 10, PlacementID: f.id(true)}))
		rng.Shuffle(len(evs), func(i, j int) { evs[i], evs[j] = evs[j], evs[i] })
		p := NewProjection(f.project)
		for i, s := range evs {
			if _, err := p.Apply(s); err != nil {
				t.Fatalf("seed %d: apply: %v", seed, err)
			}
			if i%3 != 0 && i != len(evs)-1 {
				continue
			}
			var wg sync.WaitGroup
			for range 3 {
				wg.Go(func() { p.TestRows() })
			}
			wg.Wait()
			checkRows(t, p)
		}
	}
}

func checkRows(t *testing.T, p *Projection) {
	t.Helper()
	rows, tests := p.TestRows(), p.Tests()
	if len(rows.Rows) != len(tests) {
		t.Fatalf("%d rows for %d tests", len(rows.Rows), len(tests))
	}
	pls, hs := rows.Placements()
	if want := p.Placements(); !slices.Equal(pls, want) || len(hs) != len(want) {
		t.Fatalf("rows give placements %v (%d handles), want %v as the projection holds them", pls, len(hs), want)
	}
	placed := rows.PlacementSummaries()
	for i, pl := range pls {
		if h, _ := rows.Handle(pl.ID); hs[i] != h {
			t.Errorf("placement %s: handle %d, want %d", pl.ID, hs[i], h)
		}
		want := PlacementSummary{BorrowSourceID: pl.BorrowSourceID, Feature: pl.Feature, SpecID: pl.SpecID, CompactedVolume: pl.CompactedVolume, Area: pl.Area}
		if pl.Stations != nil {
			want.Stations, want.HasStations = *pl.Stations, true
		}
		if placed[i] != want {
			t.Errorf("placement %s: summary %+v, want %+v", pl.ID, placed[i], want)
		}
	}
	hauls, haulPls := rows.Hauls()
	if want := p.Hauls(); !slices.Equal(hauls, want) || len(haulPls) != len(want) {
		t.Fatalf("rows give hauls %v (%d placements), want %v as the projection holds them", hauls, len(haulPls), want)
	}
	hauled := rows.HaulSummaries()
	for i, h := range hauls {
		pl, _ := p.Placement(h.PlacementID)
		if haulPls[i] != pl {
			t.Errorf("haul %s: placement %p, want %p", h.ID, haulPls[i], pl)
		}
		want := HaulSummary{BorrowSourceID: h.BorrowSourceID, Loads: h.Loads, LooseVolumePerLoad: h.LooseVolumePerLoad}
		if pl != nil {
			want.Feature = pl.Feature
		}
		if hauled[i] != want {
			t.Errorf("haul %s: summary %+v, want %+v", h.ID, hauled[i], want)
		}
	}
	for a := range Handle(rows.NumHandles()) {
		for b := range Handle(rows.NumHandles()) {
			if got, want := rows.CompareIDs(a, b), cmp.Compare(rows.ID(a), rows.ID(b)); got != want {
				t.Fatalf("CompareIDs(%q, %q) = %d, want %d", rows.ID(a), rows.ID(b), got, want)
			}
		}
	}
	if len(rows.Audit) != len(rows.Rows) {
		t.Fatalf("%d audit rows for %d rows", len(rows.Audit), len(rows.Rows))
	}
	for i, r := range rows.Rows {
		x, audit := tests[i], rows.Audit[i]
		if r.Test != x || r.ID != x.ID || r.HLC != x.HLC || r.DryDensity != x.Result.DryDensity || r.RelativeCompaction != x.Result.RelativeCompaction {
			t.Fatalf("row %d is of test %s (%v), want %s as it stands", i, r.ID, r.HLC, x.ID)
		}
		if rows.ID(r.Placement) != x.Content.PlacementID || rows.ID(r.Spec) != x.Content.SpecID {
			t.Errorf("test %s: row names placement %q and spec %q, want %q and %q", x.ID, rows.ID(r.Placement), rows.ID(r.Spec),
				x.Content.PlacementID, x.Content.SpecID)
		}
		pl, _ := p.Placement(x.Content.PlacementID)
		spec, _ := p.Spec(x.Content.SpecID)
		var lift Lift
		if pl != nil {
			lift = Lift{Feature: pl.Feature, Number: pl.LiftNumber}
		}
		if got := rows.Lift(r.Placement); got != lift {
			t.Errorf("test %s: rows give lift %+v, want %+v", x.ID, got, lift)
		}
		if rows.Placement(r.Placement) != pl || rows.Spec(r.Spec) != spec {
			t.Errorf("test %s: rows give placement %p and spec %p, want %p and %p as the projection holds them", x.ID,
				rows.Placement(r.Placement), rows.Spec(r.Spec), pl, spec)
		}
		retested, _ := p.Test(x.RetestOf)
		if r.Retested != retested {
			t.Errorf("test %s: row retests %v, want %v", x.ID, r.Retested, retested)
		}
		var linked struct {
			d                                 float64
			ofPass, sameLift, inOrder, onSats bool
		}
		if retested != nil {
			o := retested
			linked.d, linked.onSats = Separation(o.Content.Location, x.Content.Location)
			linked.ofPass = o.Result.Verdict == qc.Pass
			linked.sameLift = x.Content.PlacementID == o.Content.PlacementID && x.Content.Feature == o.Content.Feature &&
				x.Content.LiftNumber == o.Content.LiftNumber
			linked.inOrder = x.HLC.Compare(o.HLC) >= 0 && !x.DeviceTime.Before(o.DeviceTime)
		}
		if at := time.Unix(0, audit.DeviceTime); audit.DeviceTime == NoDeviceTime || !at.Equal(x.DeviceTime) {
			t.Errorf("test %s: row says device time %v (%d), want %v", x.ID, at, audit.DeviceTime, x.DeviceTime)
		}
		if r.Station != x.Content.Location.Station {
			t.Errorf("test %s: row says station %v, want %v", x.ID, r.Station, x.Content.Location.Station)
		}
		if audit.RetestDistance != linked.d {
			t.Errorf("test %s: row says %v m from the test it retests, want %v", x.ID, audit.RetestDistance, linked.d)
		}
		counts := !x.Voided() && x.ReviewStatus != Returned && x.Result.Verdict != qc.Pending
		for _, b := range []struct {
			name      string
			got, want bool
		}{
			{"counts", r.State.Counts(), counts},
			{"fail", r.State&RowFail != 0, x.Result.Verdict == qc.Fail},
			{"pass", r.State&RowPass != 0, x.Result.Verdict == qc.Pass},
			{"unreviewed", r.State&RowUnreviewed != 0, x.ReviewStatus == Unreviewed},
			{"exception", r.State&RowExceptionAccepted != 0, x.ExceptionAccepted()},
			{"retest", r.State&RowRetest != 0, x.RetestOf != ""},
			{"revised", r.State&RowRevised != 0, len(x.Revisions) > 1},
			{"reviewed", r.State&RowReviewed != 0, len(x.Reviews) > 0},
			{"flagged", r.State&RowFlagged != 0, len(x.Flags) > 0},
			{"retest of a pass", r.State&RowRetestOfPass != 0, linked.ofPass},
			{"retest on the same lift", r.State&RowRetestSameLift != 0, linked.sameLift},
			{"retest in order", r.State&RowRetestInOrder != 0, linked.inOrder},
			{"retest between satellite positions", r.State&RowRetestSatellite != 0, linked.onSats},
		} {
			if b.got != b.want {
				t.Errorf("test %s: row says %s %v, want %v", x.ID, b.name, b.got, b.want)
			}
		}
		if audit.Reviewer != 0 {
			for _, rv := range x.Reviews {
				if rv.Author != rows.ID(audit.Reviewer) || rv.HLC.Wall < audit.FirstReview {
					t.Errorf("test %s: row says every review is by %s from %d; review %s is by %s at %d", x.ID, rows.ID(audit.Reviewer),
						audit.FirstReview, rv.EventID, rv.Author, rv.HLC.Wall)
				}
			}
		}
	}
}

// TestRowDeviceTime holds a row's device time to the test's at the ends
// of what nanoseconds since 1970 hold, and beyond them.
func TestRowDeviceTime(t *testing.T) {
	for _, c := range []struct {
		at   time.Time
		want int64
	}{
		{time.Date(2026, 6, 15, 13, 4, 5, 123456789, time.UTC), time.Date(2026, 6, 15, 13, 4, 5, 123456789, time.UTC).UnixNano()},
		{time.Unix(0, math.MaxInt64), math.MaxInt64},
		{time.Unix(0, math.MinInt64+1), math.MinInt64 + 1},
		{time.Unix(0, math.MinInt64), NoDeviceTime},
		{time.Date(2300, 1, 1, 0, 0, 0, 0, time.UTC), NoDeviceTime},
		{time.Date(1600, 1, 1, 0, 0, 0, 0, time.UTC), NoDeviceTime},
		{time.Time{}, NoDeviceTime},
	} {
		if got := unixNano(c.at); got != c.want {
			t.Errorf("unixNano(%v) = %d, want %d", c.at, got, c.want)
		}
	}
}
