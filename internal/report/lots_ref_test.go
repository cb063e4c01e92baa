package report

import (
	"cmp"
	"math/rand/v2"
	"slices"
	"testing"

	"tamp/internal/ledger"
)

// Lots groups, judges and joins tests in one pass, most of them on a fast
// path that reads no test; it must come out as the reference that reads
// every test: NewFinals for which are final, the tests grouped by placement
// and spec, oldest first. A random history on three lifts and two specs,
// the tests of the lifts interleaved, with failures retested at once, later
// or never, voids, returns, a placement this replica does not hold and a
// test of no spec.
func TestLotsAsReference(t *testing.T) {
	s := newSite(t)
	other := s.defined(func(k *ledger.SpecDefined) { k.MoistureLow, k.MoistureHigh = "-2", "2" })
	places := []string{s.place, s.placed(s.spec, 2, nil), s.placed(other, 3, nil), id()}
	specs := []string{s.spec, other, ""}
	rng := rand.New(rand.NewPCG(7, 16))
	var failed []*ledger.TestRecorded
	for range 300 {
		c := s.content(rc(90+10*rng.Float64()), 10+4*rng.Float64())
		c.PlacementID, c.SpecID = places[rng.IntN(len(places))], specs[rng.IntN(len(specs))]
		retestOf := ""
		if len(failed) > 0 && rng.IntN(3) == 0 {
			f := failed[rng.IntN(len(failed))]
			retestOf, c.PlacementID, c.SpecID = f.TestID, f.Content.PlacementID, f.Content.SpecID
		}
		tr := s.record(c, retestOf)
		x, _ := s.p.Test(tr.TestID)
		switch n := rng.IntN(20); {
		case x.Result.RelativeCompaction < 95:
			failed = append(failed, tr)
		case n == 0:
			s.add("ann", &ledger.TestVoided{TestID: tr.TestID, Reason: "wrong lift"})
		case n == 1:
			s.add("office", &ledger.TestReviewed{TestID: tr.TestID, Revision: x.Current, Decision: ledger.Return, Comment: "check"})
		}
	}

	type key struct{ placement, spec string }
	finals := NewFinals(s.p.Tests())
	tests, left := map[key][]*ledger.Test{}, map[key][]*ledger.Test{}
	for _, x := range s.p.Tests() {
		k := key{x.Content.PlacementID, x.Content.SpecID}
		if _, held := s.p.Placement(k.placement); !held || k.spec == "" {
			continue
		}
		if why, _ := finals.Why(x); why == "" {
			tests[k] = append(tests[k], x)
		} else {
			left[k] = append(left[k], x)
		}
	}
	var keys []key
	for k := range tests {
		keys = append(keys, k)
	}
	for k := range left {
		if _, ok := tests[k]; !ok {
			keys = append(keys, k)
		}
	}
	slices.SortFunc(keys, func(a, b key) int { return cmp.Or(cmp.Compare(a.placement, b.placement), cmp.Compare(a.spec, b.spec)) })

	lots, err := Lots(s.p, LotScope{})
	if err != nil {
		t.Fatal(err)
	}
	if len(lots) != len(keys) || len(keys) < 6 {
		t.Fatalf("%d lots, want %d (at least 6)", len(lots), len(keys))
	}
	for i, k := range keys {
		l := lots[i]
		if l.Placement.ID != k.placement || l.SpecID != k.spec {
			t.Fatalf("lot %d of %s and %s, want %s and %s", i, l.Placement.ID, l.SpecID, k.placement, k.spec)
		}
		want := slices.SortedFunc(slices.Values(tests[k]), byTime)
		if !slices.Equal(l.Tests, want) {
			t.Errorf("lot %d: tests %v, want %v", i, ids(l.Tests), ids(want))
		}
		spec, _ := s.p.Spec(k.spec)
		kinds := kindsOf(spec)
		var v values
		for _, x := range want {
			v.add(kinds, x.Result.RelativeCompaction, x.Result.MoistureDeviation, x.Result.MoisturePercentOfOptimum)
		}
		if !slices.Equal(l.Compaction.Values, v.compaction) || !slices.Equal(l.Moisture.Values, v.moisture) {
			t.Errorf("lot %d: values %v and %v, want %v and %v", i, l.Compaction.Values, l.Moisture.Values, v.compaction, v.moisture)
		}
		var wantLeft []LeftOut
		for _, x := range slices.SortedFunc(slices.Values(left[k]), byTime) {
			why, by := finals.Why(x)
			o := LeftOut{TestID: x.ID, Reason: why}
			if by != nil {
				o.ReplacedBy = by.ID
			}
			wantLeft = append(wantLeft, o)
		}
		if !slices.Equal(l.LeftOut, wantLeft) {
			t.Errorf("lot %d: left out %+v, want %+v", i, l.LeftOut, wantLeft)
		}
	}
}
