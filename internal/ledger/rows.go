package ledger

import (
	"math"
	"time"

	"tamp/internal/qc"
)

// Handle names an id that tests name (a placement's, a spec's, a
// reviewer's user id) within one projection: a small integer that a report compares and indexes by, where
// the ids are 36-character strings, each held apart from its test. 0 names
// no id.
type Handle uint32

// RowState holds the bits of a test's state that reports filter on.
type RowState uint16

// The bits of a RowState.
const (
	RowPass              RowState = 1 << iota // the verdict is pass
	RowFail                                   // the verdict is fail
	RowPending                                // the verdict is pending
	RowVoided                                 // the test was voided
	RowReturned                               // the office returned the current revision
	RowUnreviewed                             // the current revision awaits the office
	RowExceptionAccepted                      // QA accepted the current revision as it stands
	RowRetest                                 // the test names a test in retest_of, held or not
	RowRevised                                // the test has more than one revision
	RowReviewed                               // the office reviewed the test (Test.Reviews)
	RowFlagged                                // the test has review flags (Test.Flags)
)

// Counts reports whether the test can count at all: graded, not voided,
// not returned.
func (s RowState) Counts() bool { return s&(RowPending|RowVoided|RowReturned) == 0 }

// TestRow is a test summarised in the fields reports filter and group on,
// laid out together: a report reads a row per test, and the test itself
// only for the tests it keeps. A Test spreads these fields over several
// cache lines and its ids over separate allocations, so that a report
// reading them for every test was bound by memory, not by its arithmetic.
type TestRow struct {
	ID   string // Test.ID, so that a report names a test it leaves out without reading it
	Test *Test
	// Retested is the held test this one names in retest_of; nil for none
	// or one this replica does not hold. The RowRetest... bits of State
	// compare the two (and AuditRow.RetestDistance).
	Retested *Test
	HLC      HLC
	// Test.Result's values.
	RelativeCompaction, MoistureDeviation, MoisturePercentOfOptimum, DryDensity float64
	// Station is Test.Content.Location's.
	Station float64
	// Placement and Spec are the handles of Test.Content's PlacementID and
	// SpecID.
	Placement, Spec Handle
	State           RowState
}

// AuditRow holds what only an audit reads of a test, apart from its
// TestRow: the reports that read every row read the fewer bytes.
type AuditRow struct {
	// RetestDistance is the distance between the test and the test it
	// retests (TestRow.Retested, Separation), metres; 0 for none.
	RetestDistance float64
	// DeviceTime is Test.DeviceTime in nanoseconds since 1970 UTC
	// (UnixNano), or NoDeviceTime when it lies beyond their range.
	DeviceTime int64
	// FirstReview is the least wall time of the hybrid times of the
	// test's reviews (HLC.Wall), and Reviewer the handle of the user who
	// made every one of them, 0 when none or more than one did: an audit
	// of reviewers' roles reads a test's reviews only when a role could
	// have been wrong.
	FirstReview int64
	Reviewer    Handle
}

// TestRows are a row per test, in id order as AllTests gives the tests,
// with the ids their handles name. They are shared with the projection
// and hold until its next Apply: treat them as read-only.
type TestRows struct {
	Rows []TestRow
	// Audit are the rows' AuditRows: Audit[i] is of Rows[i].
	Audit []AuditRow
	ids   []string // handle -> id; ids[0] is ""
	// handles is shared by every TestRows of the projection: it grows
	// only when rows are rebuilt, on the first call after an Apply, which
	// no reader holding rows runs beside.
	handles map[string]Handle
	records *handleRecords
}

// ID returns the id a handle names ("" for 0).
func (r TestRows) ID(h Handle) string { return r.ids[h] }

// Handle returns the handle of an id, and false when no test names it.
func (r TestRows) Handle(id string) (Handle, bool) {
	h, ok := r.handles[id]
	return h, ok && id != ""
}

// NumHandles returns one more than the largest handle, so that a report
// can keep what it gathers in a slice indexed by handle.
func (r TestRows) NumHandles() int { return len(r.ids) }

// testRows are the rows kept by the projection's order of tests.
type testRows struct {
	TestRows
	of []*Test // the order the rows were built for
}

// TestRows returns a row per test, in the order of AllTests. The rows are
// kept in step with that order: a call after Apply builds rows for the
// tests rebuilt since the last call only, and copies the others. It may
// run concurrently with the other read methods.
func (p *Projection) TestRows() TestRows {
	o := &p.byID
	o.mu.Lock()
	defer o.mu.Unlock()
	sorted := p.refreshOrder()
	r := &o.rows
	if r.handles == nil {
		r.handles, r.ids = map[string]Handle{"": 0}, []string{""}
	}
	// A refresh that changed anything made a new slice, so the order's
	// identity says whether the rows are still its rows.
	if len(r.of) == len(sorted) && (len(sorted) == 0 || &r.of[0] == &sorted[0]) {
		r.lookUp(p)
		return r.TestRows
	}
	old, rows := r.Rows, make([]TestRow, len(sorted))
	oldAudit, audit := r.Audit, make([]AuditRow, len(sorted))
	i := 0
	for j, t := range sorted {
		// Both lists are in id order: skip the old rows of tests removed
		// or rebuilt (a rebuilt test is a new *Test under the same id).
		for i < len(old) && old[i].Test != t && old[i].Test.ID <= t.ID {
			i++
		}
		if i < len(old) && old[i].Test == t {
			rows[j], audit[j] = old[i], oldAudit[i]
			i++
			continue
		}
		rows[j], audit[j] = r.row(t)
	}
	// The test a row retests may have been rebuilt though the row's own
	// test was not: look every one up again, which only retests pay, and
	// compare the two again when either is new (a new row retests nothing
	// yet).
	for j := range rows {
		if rows[j].State&RowRetest != 0 {
			if o := p.tests[rows[j].Test.RetestOf]; o != rows[j].Retested {
				rows[j].link(&audit[j], o)
			}
		}
	}
	r.Rows, r.Audit, r.of = rows, audit, sorted
	r.lookUp(p)
	return r.TestRows
}

// row summarises t, giving handles to the ids it names that have none.
func (r *testRows) row(t *Test) (TestRow, AuditRow) {
	audit := AuditRow{DeviceTime: unixNano(t.DeviceTime)}
	row := TestRow{ID: t.ID, Test: t, HLC: t.HLC, RelativeCompaction: t.Result.RelativeCompaction, MoistureDeviation: t.Result.MoistureDeviation,
		MoisturePercentOfOptimum: t.Result.MoisturePercentOfOptimum, DryDensity: t.Result.DryDensity, Station: t.Content.Location.Station,
		Placement: r.handle(t.Content.PlacementID), Spec: r.handle(t.Content.SpecID)}
	switch t.Result.Verdict {
	case qc.Pass:
		row.State |= RowPass
	case qc.Fail:
		row.State |= RowFail
	case qc.Pending:
		row.State |= RowPending
	}
	if t.Voided() {
		row.State |= RowVoided
	}
	switch t.ReviewStatus {
	case Returned:
		row.State |= RowReturned
	case Unreviewed:
		row.State |= RowUnreviewed
	}
	if t.ExceptionAccepted() {
		row.State |= RowExceptionAccepted
	}
	for i, rv := range t.Reviews {
		switch {
		case i == 0:
			audit.Reviewer, audit.FirstReview = r.handle(rv.Author), rv.HLC.Wall
		case audit.Reviewer != 0 && r.ids[audit.Reviewer] != rv.Author:
			audit.Reviewer = 0
		default:
			audit.FirstReview = min(audit.FirstReview, rv.HLC.Wall)
		}
	}
	for _, b := range []struct {
		set bool
		bit RowState
	}{{t.RetestOf != "", RowRetest}, {len(t.Revisions) > 1, RowRevised}, {len(t.Reviews) > 0, RowReviewed}, {len(t.Flags) > 0, RowFlagged}} {
		if b.set {
			row.State |= b.bit
		}
	}
	return row, audit
}

// NoDeviceTime is TestRow.DeviceTime for a time that nanoseconds since
// 1970 cannot hold (before 1678 or after 2262): read the test's.
const NoDeviceTime = math.MinInt64

// unixNano is t.UnixNano(), or NoDeviceTime beyond its range.
func unixNano(t time.Time) int64 {
	if n := t.UnixNano(); time.Unix(0, n).Equal(t) && n != NoDeviceTime {
		return n
	}
	return NoDeviceTime
}

func (r *testRows) handle(id string) Handle {
	if h, ok := r.handles[id]; ok {
		return h
	}
	h := Handle(len(r.ids))
	r.ids = append(r.ids, id)
	r.handles[id] = h
	return h
}
