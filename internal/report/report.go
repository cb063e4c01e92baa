// Package report is the read side of a project's ledger: the office's
// review queue, the QA manager's retest audit, test frequency against the
// spec, lot acceptance by percent within limits, and the reconciliation of
// earthwork volumes. It reads a ledger.Projection and computes; it stores
// nothing, so a device or an office machine that holds the ledger produces
// the same reports as the server.
//
// Results support, and never replace, review by qualified personnel; the
// project's specifications and local codes govern every acceptance limit.
package report

import (
	"cmp"
	"math"
	"slices"

	"tamp/internal/earthwork"
	"tamp/internal/ledger"
	"tamp/internal/qc"
)

func byTime(a, b *ledger.Test) int {
	return cmp.Or(a.HLC.Compare(b.HLC), cmp.Compare(a.ID, b.ID))
}

// ReviewQueue returns the tests whose current revision awaits the office:
// not voided, and unreviewed (never reviewed, or returned and since
// corrected: a review is of a revision, so a correction is reviewed
// afresh). A test returned and not yet corrected awaits its inspector, not
// the office. With day set (YYYY-MM-DD), only the tests taken that day.
// Oldest first.
func ReviewQueue(p *ledger.Projection, day string) []*ledger.Test {
	var out []*ledger.Test
	for _, t := range p.Tests() {
		if t.Voided() || t.ReviewStatus != ledger.Unreviewed || (day != "" && t.Day != day) {
			continue
		}
		out = append(out, t)
	}
	slices.SortFunc(out, byTime)
	return out
}

// Closure says how a failure was dealt with.
type Closure string

// The closures of a failure.
const (
	Open      Closure = "open"      // no passing retest, no exception
	Retested  Closure = "retested"  // a retest passed
	Excepted  Closure = "exception" // QA accepted it as it stands
	Withdrawn Closure = "voided"    // the failing test was voided
)

// Chain is a failing test and the retests that followed it.
type Chain struct {
	Failed  *ledger.Test
	Retests []*ledger.Test // in the order they were taken, retests of retests included
	Closure Closure
	// StationShift is the largest distance along the alignment between the
	// failing test and a retest, metres: a retest far from the failure did
	// not test the reworked area.
	StationShift float64
}

// RetestAudit returns one chain per failing test that is not itself a
// retest, oldest first.
func RetestAudit(p *ledger.Projection) []Chain {
	var out []Chain
	for _, t := range p.Tests() {
		if t.Result.Verdict != qc.Fail || t.RetestOf != "" {
			continue
		}
		c := Chain{Failed: t, Closure: Open}
		seen := map[string]bool{t.ID: true}
		queue := []string{t.ID}
		for len(queue) > 0 {
			id := queue[0]
			queue = queue[1:]
			for _, r := range p.RetestsOf(id) {
				if seen[r] {
					continue
				}
				seen[r] = true
				rt, _ := p.Test(r)
				c.Retests = append(c.Retests, rt)
				queue = append(queue, r)
			}
		}
		slices.SortFunc(c.Retests, byTime)
		for _, r := range c.Retests {
			if !r.Voided() {
				c.StationShift = max(c.StationShift, math.Abs(r.Content.Location.Station-t.Content.Location.Station))
			}
		}
		switch {
		case t.Voided():
			c.Closure = Withdrawn
		case t.ExceptionAccepted():
			c.Closure = Excepted
		default:
			for _, r := range c.Retests {
				if !r.Voided() && r.Result.Verdict == qc.Pass {
					c.Closure = Retested
				}
			}
		}
		out = append(out, c)
	}
	slices.SortFunc(out, func(a, b Chain) int { return byTime(a.Failed, b.Failed) })
	return out
}

// Frequency is the test count of one placement against its spec.
type Frequency struct {
	Placement *ledger.Placement
	SpecID    string
	Tests     int // graded, not voided, not retests
	Required  int // ceil(compacted volume / volume per test)
	Shortfall int // Required - Tests when positive
}

// TestFrequency compares, for every placement whose tests name a spec with a
// required frequency, the tests taken with the tests the spec asks for.
// Retests do not count toward frequency (common practice).
func TestFrequency(p *ledger.Projection) []Frequency {
	counts := map[string]map[string]int{} // placement -> spec -> tests
	for _, t := range p.Tests() {
		c := t.Content
		if t.Voided() || t.RetestOf != "" || c.PlacementID == "" || c.SpecID == "" {
			continue
		}
		if counts[c.PlacementID] == nil {
			counts[c.PlacementID] = map[string]int{}
		}
		counts[c.PlacementID][c.SpecID]++
	}
	var out []Frequency
	for _, pl := range p.Snapshot().Placements {
		for specID, n := range counts[pl.ID] {
			spec, ok := p.Spec(specID)
			if !ok || spec.VolumePerTest <= 0 {
				continue
			}
			req := int(math.Ceil(pl.CompactedVolume/spec.VolumePerTest - 1e-9))
			out = append(out, Frequency{Placement: pl, SpecID: specID, Tests: n, Required: req, Shortfall: max(0, req-n)})
		}
	}
	slices.SortFunc(out, func(a, b Frequency) int {
		return cmp.Or(cmp.Compare(a.Placement.ID, b.Placement.ID), cmp.Compare(a.SpecID, b.SpecID))
	})
	return out
}

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

// Reason says why a test is not in its lot.
type Reason string

// The reasons a test is left out of its lot.
const (
	// ReworkedAndRetested: the test failed and a retest that counts
	// (graded, neither voided nor returned) replaced it.
	ReworkedAndRetested Reason = "reworked_and_retested"
	// ReturnedByOffice: the office returned the test's current revision.
	ReturnedByOffice Reason = "returned_by_office"
	// VoidedTest: the test was voided.
	VoidedTest Reason = "voided"
)

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

// Balance is the reconciliation of one borrow source.
type Balance struct {
	Source          *ledger.BorrowSource
	CompactedVolume float64 // m3 placed from the source
	FillDryDensity  float64 // kg/m3, mean of the graded original tests on those placements
	BankVolume      float64 // m3 of borrow consumed, by dry mass
	LooseHauled     float64 // m3 loose hauled, from the haul records
	LooseExpected   float64 // m3 loose the dry mass implies (zero without a loose density)
	Balance         earthwork.Balance
	Tests           int // tests the fill density comes from
}

// Reconcile balances, for each borrow source, the compacted volume placed
// from it with the bank volume consumed and the loose volume hauled,
// through dry mass. A source without graded tests on its placements, or
// without a bank density, gets no bank volume.
func Reconcile(p *ledger.Projection) ([]Balance, error) {
	snap := p.Snapshot()
	conv := earthwork.BankBasis
	if su := p.SetUp(); su != nil {
		conv = su.Shrinkage
	}
	var out []Balance
	for _, src := range snap.BorrowSource {
		b := Balance{Source: src}
		placed := map[string]bool{}
		for _, pl := range snap.Placements {
			if pl.BorrowSourceID == src.ID {
				b.CompactedVolume += pl.CompactedVolume
				placed[pl.ID] = true
			}
		}
		var sum float64
		for _, t := range snap.Tests {
			if placed[t.Content.PlacementID] && !t.Voided() && t.RetestOf == "" && t.Result.DryDensity > 0 {
				sum += t.Result.DryDensity
				b.Tests++
			}
		}
		for _, h := range snap.Hauls {
			if h.BorrowSourceID == src.ID {
				b.LooseHauled += float64(h.Loads) * h.LooseVolumePerLoad
			}
		}
		if b.Tests > 0 && src.BankDryDensity > 0 {
			b.FillDryDensity = sum / float64(b.Tests)
			bal, err := earthwork.Reconcile(earthwork.Placement{CompactedVolume: b.CompactedVolume, CompactedDryDensity: b.FillDryDensity,
				BankDryDensity: src.BankDryDensity, LooseDryDensity: src.LooseDryDensity, Convention: conv})
			if err != nil {
				return nil, err
			}
			b.Balance, b.BankVolume, b.LooseExpected = bal, bal.BankVolume, bal.LooseVolume
		}
		out = append(out, b)
	}
	return out, nil
}
