package report

import (
	"cmp"
	"slices"

	"tamp/internal/ledger"
	"tamp/internal/qc"
)

// Lot is the statistical acceptance of the final tests of one placement
// against one spec.
type Lot struct {
	Placement *ledger.Placement
	SpecID    string
	Values    []float64 // relative compaction of each final test
	PWL       qc.Lot
	// LeftOut are the placement's tests against the spec that are not
	// final, oldest first, each with why.
	LeftOut []LeftOut
}

// LeftOut is a test left out of its lot.
type LeftOut struct {
	TestID     string
	Reason     Reason
	ReplacedBy string // for ReworkedAndRetested, the earliest retest that counts
}

// Lots estimates, for every placement with at least three final graded
// tests against one spec with a minimum relative compaction, the percent of
// the lot within the minimum (percent within limits, AASHTO R 9, with the
// estimator of qc.PercentWithinLimits). A final test is graded and neither
// voided, returned by the office, nor a failure replaced by a retest that
// counts; a retest that counts is final. The tests left out are listed in
// the lot with their reason. One pass over the tests: linear in the size of
// the project.
func Lots(p *ledger.Projection) ([]Lot, error) {
	tests := p.Tests()
	counts := func(t *ledger.Test) bool {
		return !t.Voided() && t.ReviewStatus != ledger.Returned && t.Result.Verdict != qc.Pending
	}
	// replacedBy maps a failing test to the earliest retest of it that counts.
	replacedBy := map[string]*ledger.Test{}
	for _, t := range tests {
		if t.RetestOf == "" || !counts(t) {
			continue
		}
		if r, ok := replacedBy[t.RetestOf]; !ok || byTime(t, r) < 0 {
			replacedBy[t.RetestOf] = t
		}
	}
	type left struct {
		t *ledger.Test
		o LeftOut
	}
	type group struct {
		values  []float64
		leftOut []left
	}
	groups := map[[2]string]*group{}
	for _, t := range tests {
		c := t.Content
		if c.PlacementID == "" {
			continue
		}
		k := [2]string{c.PlacementID, c.SpecID}
		g := groups[k]
		if g == nil {
			g = &group{}
			groups[k] = g
		}
		out := LeftOut{TestID: t.ID}
		r, retested := replacedBy[t.ID]
		switch {
		case t.Voided():
			out.Reason = VoidedTest
		case t.ReviewStatus == ledger.Returned:
			out.Reason = ReturnedByOffice
		case t.Result.Verdict == qc.Fail && retested:
			out.Reason, out.ReplacedBy = ReworkedAndRetested, r.ID
		case t.Result.Verdict == qc.Pending:
			continue
		default:
			g.values = append(g.values, t.Result.RelativeCompaction)
			continue
		}
		g.leftOut = append(g.leftOut, left{t, out})
	}
	keys := make([][2]string, 0, len(groups))
	for k, g := range groups {
		if len(g.values) >= qc.MinLotSize {
			keys = append(keys, k)
		}
	}
	slices.SortFunc(keys, func(a, b [2]string) int { return cmp.Or(cmp.Compare(a[0], b[0]), cmp.Compare(a[1], b[1])) })
	var out []Lot
	for _, k := range keys {
		pl, ok := p.Placement(k[0])
		if !ok {
			continue
		}
		spec, ok := p.Spec(k[1])
		if !ok || spec.QC().MinCompaction == nil {
			continue
		}
		g := groups[k]
		lsl := spec.QC().MinCompaction.Value
		lot, err := qc.PercentWithinLimits(g.values, &lsl, nil)
		if err != nil {
			return nil, err
		}
		slices.SortFunc(g.leftOut, func(a, b left) int { return byTime(a.t, b.t) })
		l := Lot{Placement: pl, SpecID: k[1], Values: g.values, PWL: lot}
		for _, o := range g.leftOut {
			l.LeftOut = append(l.LeftOut, o.o)
		}
		out = append(out, l)
	}
	return out, nil
}
