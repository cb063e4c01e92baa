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

// byTime orders tests by hybrid time, then id.
func byTime(a, b *ledger.Test) int {
	if c := a.HLC.Compare(b.HLC); c != 0 {
		return c
	}
	return cmp.Compare(a.ID, b.ID)
}

// sortByTime sorts tests by byTime. Tests come from the projection in id
// order, which for UUIDv7 ids is nearly time order: most are sorted
// already, and checking costs one pass.
func sortByTime(ts []*ledger.Test) {
	if !slices.IsSortedFunc(ts, byTime) {
		slices.SortFunc(ts, byTime)
	}
}

// ReviewQueue returns the tests whose current revision awaits the office:
// not voided, and unreviewed (never reviewed, or returned and since
// corrected: a review is of a revision, so a correction is reviewed
// afresh). A test returned and not yet corrected awaits its inspector, not
// the office. With day set (YYYY-MM-DD), only the tests taken that day.
// Oldest first.
func ReviewQueue(p *ledger.Projection, day string) []*ledger.Test {
	var out []*ledger.Test
	for t := range p.AllTests() {
		if t.ReviewStatus != ledger.Unreviewed || t.Voided() || (day != "" && t.Day != day) {
			continue
		}
		if out == nil {
			out = make([]*ledger.Test, 0, p.NumTests())
		}
		out = append(out, t)
	}
	sortByTime(out)
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
	var chain retestChain
	for t := range p.AllTests() {
		if t.Result.Verdict != qc.Fail || t.RetestOf != "" {
			continue
		}
		c := Chain{Failed: t, Closure: Open}
		for _, r := range chain.of(p, t.ID) {
			rt, _ := p.Test(r)
			c.Retests = append(c.Retests, rt)
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
	if !slices.IsSortedFunc(out, func(a, b Chain) int { return byTime(a.Failed, b.Failed) }) {
		slices.SortFunc(out, func(a, b Chain) int { return byTime(a.Failed, b.Failed) })
	}
	return out
}

// retestChain walks the retests of a test, retests of retests included,
// breadth first; it keeps its buffers from one test to the next.
type retestChain struct {
	ids  []string // the test, then its retests in the order found
	seen map[string]bool
}

// of returns the ids of every test in the chain of retests after id, in
// the order a breadth-first walk finds them, each once. The slice is
// reused by the next call.
func (c *retestChain) of(p *ledger.Projection, id string) []string {
	c.ids = append(c.ids[:0], id)
	clear(c.seen)
	for i := 0; i < len(c.ids); i++ {
		for _, r := range p.RetestsOf(c.ids[i]) {
			if c.has(r) {
				continue
			}
			c.ids = append(c.ids, r)
		}
	}
	return c.ids[1:]
}

// has reports whether id is in the chain so far: a look along it while
// the chain is short, as chains are, and a set beyond.
func (c *retestChain) has(id string) bool {
	if len(c.ids) <= 16 {
		return slices.Contains(c.ids, id)
	}
	if c.seen == nil {
		c.seen = map[string]bool{}
	}
	if len(c.seen) == 0 {
		for _, s := range c.ids {
			c.seen[s] = true
		}
	}
	if c.seen[id] {
		return true
	}
	c.seen[id] = true
	return false
}
