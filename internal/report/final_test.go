package report

import (
	"math"
	"slices"
	"testing"

	"tamp/internal/ledger"
	"tamp/internal/qc"
)

// The reports decide which tests are final in the one pass they make over
// the tests, holding each failure until the pass has met every retest that
// may replace it. Retests met right after their failure, later with other
// tests between, and before it in id order must all come out as NewFinals,
// which indexes every retest first, says; so must final failures, which
// join their lots and placements after the pass.
func TestFinalsInOnePass(t *testing.T) {
	s := newSite(t)
	early := id() // an id below the next test's: a retest that sorts before its failure
	s.test(rc(97), 100, "")
	s.test(rc(88), 110, "") // fails, never retested: final
	f2, _ := s.test(rc(89), 120, "")
	s.test(rc(96), 130, "")
	f3, _ := s.test(rc(90), 140, "")
	s.test(rc(96.5), 141, f3.TestID) // right after its failure
	s.test(rc(97.5), 121, f2.TestID) // with tests between
	s.test(rc(98), 142, f3.TestID)   // a second retest: the first one replaces
	f4, _ := s.test(rc(91), 150, "")
	s.add("ann", &ledger.TestRecorded{TestID: early, RetestOf: f4.TestID, Content: ledger.TestContent{Readings: cone(rc(96), 12),
		ReferenceID: s.ref, SpecID: s.spec, PlacementID: s.place, Location: ledger.Location{Station: 151}}})
	f5, _ := s.test(rc(92), 160, "") // its only retest is voided: final
	r5, _ := s.test(rc(99), 161, f5.TestID)
	s.add("ann", &ledger.TestVoided{TestID: r5.TestID, Reason: "wrong lift"})
	f6, _ := s.test(rc(87), 170, "")
	r6, _ := s.test(rc(93), 171, f6.TestID) // fails in turn, and is retested
	s.test(rc(97), 172, r6.TestID)

	tests := s.p.Tests()
	if early > f4.TestID || tests[0].ID != early {
		t.Fatalf("the early retest's id %s does not sort first", early)
	}
	finals := NewFinals(tests)
	var want []*ledger.Test
	var wantLeft []LeftOut
	for _, x := range tests {
		switch why, by := finals.Why(x); {
		case why == "":
			want = append(want, x)
		default:
			o := LeftOut{TestID: x.ID, Reason: why}
			if by != nil {
				o.ReplacedBy = by.ID
			}
			wantLeft = append(wantLeft, o)
		}
	}
	if len(want) != 9 || len(wantLeft) != 6 {
		t.Fatalf("NewFinals: %d final, %d left out; want 9 and 6", len(want), len(wantLeft))
	}

	l := oneLot(t, s.p, LotScope{})
	byTimeWant := slices.SortedFunc(slices.Values(want), byTime)
	if !slices.Equal(l.Tests, byTimeWant) {
		t.Errorf("lot tests %v, want %v", ids(l.Tests), ids(byTimeWant))
	}
	for i, x := range l.Tests {
		if l.Compaction.Values[i] != x.Result.RelativeCompaction {
			t.Errorf("compaction value %d = %v, want test %s's %v", i, l.Compaction.Values[i], x.ID, x.Result.RelativeCompaction)
		}
	}
	byID := map[string]*ledger.Test{}
	for _, x := range tests {
		byID[x.ID] = x
	}
	slices.SortFunc(wantLeft, func(a, b LeftOut) int { return byTime(byID[a.TestID], byID[b.TestID]) })
	if !slices.Equal(l.LeftOut, wantLeft) {
		t.Errorf("left out %+v, want %+v", l.LeftOut, wantLeft)
	}

	fs := TestFrequency(s.p)
	if f, ok := frequencyOf(fs, s.place, s.spec); !ok || f.Taken != len(want) {
		t.Errorf("frequency %+v, want %d taken", fs, len(want))
	}

	// Reconciliation takes the final dry densities in id order.
	var dry []float64
	for _, x := range want {
		dry = append(dry, x.Result.DryDensity)
	}
	m := meanOf(dry)
	bs, err := Reconcile(s.p)
	if err != nil {
		t.Fatal(err)
	}
	i := slices.IndexFunc(bs, func(b Balance) bool { return b.Scope == FeatureScope })
	if i < 0 || bs[i].FillDensity.N != m.N || bs[i].FillDensity.StdDev != m.StdDev || math.Abs(bs[i].FillDensity.Value-m.Value) > 1e-9 {
		t.Errorf("reconciliation %+v, want the fill of the final tests %+v", bs, m)
	}

	// The retest audit walks the same chains as the projection's RetestsOf.
	for _, c := range RetestAudit(s.p) {
		var chain []*ledger.Test
		for next := []string{c.Failed.ID}; len(next) > 0; next = next[1:] {
			for _, r := range s.p.RetestsOf(next[0]) {
				x, _ := s.p.Test(r)
				chain = append(chain, x)
				next = append(next, r)
			}
		}
		slices.SortFunc(chain, byTime)
		if !slices.Equal(c.Retests, chain) {
			t.Errorf("chain of %s: %v, want %v", c.Failed.ID, ids(c.Retests), ids(chain))
		}
		if c.Failed.Result.Verdict != qc.Fail {
			t.Errorf("chain of %s, which did not fail", c.Failed.ID)
		}
	}
}

func ids(ts []*ledger.Test) []string {
	out := make([]string, len(ts))
	for i, x := range ts {
		out[i] = shortRef(x.ID)
	}
	return out
}
