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
