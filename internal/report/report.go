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

// rowTime orders test rows as byTime orders their tests, without reading
// the tests.
func rowTime(a, b *ledger.TestRow) int {
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
	var last *ledger.TestRow
	sorted := true // checked as the tests are met, not in a second pass
	rows := p.TestRows()
	for i := range rows.Rows {
		r := &rows.Rows[i]
		if r.State&(ledger.RowUnreviewed|ledger.RowVoided) != ledger.RowUnreviewed || (day != "" && r.Test.Day != day) {
			continue
		}
		if out == nil {
			out = make([]*ledger.Test, 0, len(rows.Rows))
		} else if sorted && rowTime(last, r) > 0 {
			sorted = false
		}
		out, last = append(out, r.Test), r
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
	// One pass over the tests' rows gathers the failures and indexes the
	// retests.
	var failed []*ledger.TestRow
	var retests retestIndex
	rows := p.TestRows()
	for i := range rows.Rows {
		r := &rows.Rows[i]
		retests.add(r)
		if r.State&(ledger.RowFail|ledger.RowRetest) == ledger.RowFail {
			failed = append(failed, r)
		}
	}
	retests.done(p, rows)
	// Oldest first, by the rows: the chains are made in that order.
	if !slices.IsSortedFunc(failed, rowTime) {
		slices.SortFunc(failed, rowTime)
	}
	out := make([]Chain, 0, len(failed))
	var chain retestChain
	for _, f := range failed {
		c := Chain{Failed: f.Test, Closure: Open}
		rs := chain.of(&retests, f)
		slices.SortFunc(rs, rowTime)
		if len(rs) > 0 {
			c.Retests = make([]*ledger.Test, 0, len(rs))
		}
		for _, r := range rs {
			c.Retests = append(c.Retests, r.Test)
			if r.State&ledger.RowVoided == 0 {
				c.StationShift = max(c.StationShift, math.Abs(r.Station-f.Station))
			}
		}
		switch {
		case f.State&ledger.RowVoided != 0:
			c.Closure = Withdrawn
		case f.State&ledger.RowExceptionAccepted != 0:
			c.Closure = Excepted
		default:
			for _, r := range rs {
				if r.State&(ledger.RowVoided|ledger.RowPass) == ledger.RowPass {
					c.Closure = Retested
				}
			}
		}
		out = append(out, c)
	}
	if len(out) == 0 {
		return nil // as appending to nothing gives
	}
	return out
}

// retestIndex holds the retests of a project's tests, gathered in the pass
// a report makes over their rows (add, in id order, then done), so that a
// chain is walked without a lookup in the projection per link: a row names
// the test it retests by pointer (ledger.TestRow.Retested). When a test id
// was recorded twice the projection alone knows every retest each record
// names, and the index asks it instead (Projection.RetestsOf).
type retestIndex struct {
	links []*ledger.TestRow // the retests of held tests
	// first is, by the test retested, the index in links of its first
	// retest, and next[i] that of the retest after links[i] (-1 for
	// none): the links by test, made to size once the pass is over,
	// without a list for each.
	first map[*ledger.Test]int32
	next  []int32
	p     *ledger.Projection               // set when a test id was recorded twice
	rows  map[*ledger.Test]*ledger.TestRow // then, every test's row
	dup   bool
}

// add files the row r, the next in id order.
func (x *retestIndex) add(r *ledger.TestRow) {
	if r.State&ledger.RowFlagged != 0 && slices.ContainsFunc(r.Test.Flags, func(f qc.Finding) bool { return f.Code == ledger.DuplicateTestID }) {
		x.dup = true
	}
	if r.Retested != nil {
		x.links = append(x.links, r)
	}
}

// done ends the pass over p's tests, whose rows are rows.
func (x *retestIndex) done(p *ledger.Projection, rows ledger.TestRows) {
	if x.dup {
		x.p, x.rows = p, make(map[*ledger.Test]*ledger.TestRow, len(rows.Rows))
		for i := range rows.Rows {
			x.rows[rows.Rows[i].Test] = &rows.Rows[i]
		}
		return
	}
	if len(x.links) > 0 {
		x.first, x.next = make(map[*ledger.Test]int32, len(x.links)), make([]int32, len(x.links))
		for i := len(x.links) - 1; i >= 0; i-- { // last first: each test's list ends up in pass order
			t := x.links[i].Retested
			x.next[i] = -1
			if j, ok := x.first[t]; ok {
				x.next[i] = j
			}
			x.first[t] = int32(i)
		}
	}
}

// of appends the rows of the tests that name t in retest_of to rs, as
// Projection.RetestsOf gives them but for their order.
func (x *retestIndex) of(rs []*ledger.TestRow, t *ledger.Test) []*ledger.TestRow {
	if x.p != nil {
		for _, id := range x.p.RetestsOf(t.ID) {
			if r, ok := x.p.Test(id); ok {
				rs = append(rs, x.rows[r])
			}
		}
		return rs
	}
	i, ok := x.first[t]
	for ok && i >= 0 {
		rs = append(rs, x.links[i])
		i = x.next[i]
	}
	return rs
}

// retestChain walks the retests of a test, retests of retests included,
// breadth first; it keeps its buffers from one test to the next.
type retestChain struct {
	tests []*ledger.TestRow // the test, then its retests in the order found
	next  []*ledger.TestRow
	seen  map[*ledger.TestRow]bool
}

// of returns the row of every test in the chain of retests after the row
// t's, each once, in the order a breadth-first walk finds them. The slice
// is reused by the next call.
func (c *retestChain) of(x *retestIndex, t *ledger.TestRow) []*ledger.TestRow {
	c.tests = append(c.tests[:0], t)
	clear(c.seen)
	for i := 0; i < len(c.tests); i++ {
		c.next = x.of(c.next[:0], c.tests[i].Test)
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
func (c *retestChain) has(r *ledger.TestRow) bool {
	if len(c.tests) <= 16 {
		return slices.Contains(c.tests, r)
	}
	if c.seen == nil {
		c.seen = map[*ledger.TestRow]bool{}
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
