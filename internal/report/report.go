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

// ReviewQueue returns the tests whose current revision awaits the office:
// not voided, and unreviewed (never reviewed, or returned and since
// corrected: a review is of a revision, so a correction is reviewed
// afresh). A test returned and not yet corrected awaits its inspector, not
// the office. With day set (YYYY-MM-DD), only the tests taken that day.
// Oldest first.
func ReviewQueue(p *ledger.Projection, day string) []*ledger.Test {
	var out []*ledger.Test
	sorted := true // checked as the tests are met, not in a second pass
	for t := range p.AllTests() {
		if t.ReviewStatus != ledger.Unreviewed || t.Voided() || (day != "" && t.Day != day) {
			continue
		}
		if out == nil {
			out = make([]*ledger.Test, 0, p.NumTests())
		} else if sorted && byTime(out[len(out)-1], t) > 0 {
			sorted = false
		}
		out = append(out, t)
	}
	if !sorted {
		slices.SortFunc(out, byTime)
	}
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
	// One pass over the tests gathers the failures and indexes the retests.
	var failed []*ledger.Test
	var retests retestIndex
	for t := range p.AllTests() {
		retests.add(t)
		if t.Result.Verdict == qc.Fail && t.RetestOf == "" {
			failed = append(failed, t)
		}
	}
	retests.done(p)
	out := make([]Chain, 0, len(failed))
	var chain retestChain
	for _, t := range failed {
		c := Chain{Failed: t, Closure: Open}
		c.Retests = append(c.Retests, chain.of(&retests, t)...)
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
	if len(out) == 0 {
		return nil // as appending to nothing gives
	}
	return out
}

// retestIndex holds the retests of a project's tests, gathered in the pass
// a report makes over them (add, in id order, then done), so that a chain
// is walked without a lookup in the projection per link. A retest mostly
// follows the failure it retests in id order (the same inspector, soon
// after), so it is filed under that test by pointer, with no id read; the
// others are filed by the id they name. When a test id was recorded twice
// the projection alone knows every retest each record names, and the
// index asks it instead (Projection.RetestsOf).
type retestIndex struct {
	last   *ledger.Test      // the last failing test met
	links  [][2]*ledger.Test // a test and a retest of it that followed it
	others []*ledger.Test
	byTest map[*ledger.Test][]*ledger.Test // the links, made to size once the pass is over
	byID   map[string][]*ledger.Test       // the others, by the id they retest
	p      *ledger.Projection              // set when a test id was recorded twice
	dup    bool
}

// add files t, the next test in id order. When t retests the failure met
// last, it returns that test, which the caller need not look up.
func (x *retestIndex) add(t *ledger.Test) (retested *ledger.Test) {
	if len(t.Flags) > 0 && slices.ContainsFunc(t.Flags, func(f qc.Finding) bool { return f.Code == ledger.DuplicateTestID }) {
		x.dup = true
	}
	if t.RetestOf != "" {
		if x.last != nil && t.RetestOf == x.last.ID {
			retested = x.last
			x.links = append(x.links, [2]*ledger.Test{x.last, t})
		} else {
			x.others = append(x.others, t)
		}
	}
	if t.Result.Verdict == qc.Fail {
		x.last = t
	}
	return retested
}

// done ends the pass over p's tests.
func (x *retestIndex) done(p *ledger.Projection) {
	if x.dup {
		x.p = p
		return
	}
	if len(x.links) > 0 {
		x.byTest = make(map[*ledger.Test][]*ledger.Test, len(x.links))
		for _, l := range x.links {
			x.byTest[l[0]] = append(x.byTest[l[0]], l[1])
		}
	}
	if len(x.others) > 0 {
		x.byID = make(map[string][]*ledger.Test, len(x.others))
		for _, t := range x.others {
			x.byID[t.RetestOf] = append(x.byID[t.RetestOf], t)
		}
	}
}

// of appends the tests that name t in retest_of to rs, as
// Projection.RetestsOf gives them but for their order.
func (x *retestIndex) of(rs []*ledger.Test, t *ledger.Test) []*ledger.Test {
	if x.p != nil {
		for _, id := range x.p.RetestsOf(t.ID) {
			if r, ok := x.p.Test(id); ok {
				rs = append(rs, r)
			}
		}
		return rs
	}
	if x.byTest != nil {
		rs = append(rs, x.byTest[t]...)
	}
	if x.byID != nil {
		rs = append(rs, x.byID[t.ID]...)
	}
	return rs
}

// retestChain walks the retests of a test, retests of retests included,
// breadth first; it keeps its buffers from one test to the next.
type retestChain struct {
	tests []*ledger.Test // the test, then its retests in the order found
	next  []*ledger.Test
	seen  map[*ledger.Test]bool
}

// of returns every test in the chain of retests after t, each once, in
// the order a breadth-first walk finds them. The slice is reused by the
// next call.
func (c *retestChain) of(x *retestIndex, t *ledger.Test) []*ledger.Test {
	c.tests = append(c.tests[:0], t)
	clear(c.seen)
	for i := 0; i < len(c.tests); i++ {
		c.next = x.of(c.next[:0], c.tests[i])
		for _, r := range c.next {
			if !c.has(r) {
				c.tests = append(c.tests, r)
			}
		}
	}
	return c.tests[1:]
}

// has reports whether r is in the chain so far, adding it when not: a look
// along the chain while it is short, as chains are, and a set beyond.
func (c *retestChain) has(r *ledger.Test) bool {
	if len(c.tests) <= 16 {
		return slices.Contains(c.tests, r)
	}
	if c.seen == nil {
		c.seen = map[*ledger.Test]bool{}
	}
	if len(c.seen) == 0 {
		for _, s := range c.tests {
			c.seen[s] = true
		}
	}
	if c.seen[r] {
		return true
	}
	c.seen[r] = true
	return false
}
