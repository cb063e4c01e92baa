package report

import (
	"iter"
	"slices"

	"tamp/internal/ledger"
	"tamp/internal/qc"
)

// Reason says why a test is not final: why a lot, the frequency count and
// the reconciliation leave it out.
type Reason string

// The reasons a test is not final.
const (
	// ReworkedAndRetested: the test failed and a retest that counts
	// (graded, neither voided nor returned) replaced it.
	ReworkedAndRetested Reason = "reworked_and_retested"
	// ReturnedByOffice: the office returned the test's current revision.
	ReturnedByOffice Reason = "returned_by_office"
	// VoidedTest: the test was voided.
	VoidedTest Reason = "voided"
	// NotGraded: the test's verdict is pending (a record it names has not
	// reached this replica, or its readings could not be graded).
	NotGraded Reason = "not_graded"
)

// ReasonText says a reason in words.
var ReasonText = map[Reason]string{
	ReworkedAndRetested: "failed, reworked and replaced by a retest",
	ReturnedByOffice:    "returned by the office",
	VoidedTest:          "voided",
	NotGraded:           "not graded",
}

// Finals tells the final tests of a project: a final test is graded and
// neither voided, returned by the office, nor a failure replaced by a
// retest that counts; a retest that counts is final. Built in one pass
// over the tests.
type Finals struct {
	// replacedBy maps a failing test to the earliest retest of it that counts.
	replacedBy map[string]*ledger.Test
}

// counts reports whether a test can count at all: graded, not voided, not
// returned.
func counts(t *ledger.Test) bool {
	return !t.Voided() && t.ReviewStatus != ledger.Returned && t.Result.Verdict != qc.Pending
}

// NewFinals indexes the retests of tests.
func NewFinals(tests []*ledger.Test) Finals { return newFinals(slices.Values(tests)) }

func newFinals(tests iter.Seq[*ledger.Test]) Finals {
	var retests []*ledger.Test
	for t := range tests {
		if t.RetestOf != "" && counts(t) {
			retests = append(retests, t)
		}
	}
	return finalsFrom(retests)
}

// finalsFrom indexes the retests that count, each failure to its earliest
// retest; the map is made to size once, not grown test by test.
func finalsFrom(retests []*ledger.Test) Finals {
	f := Finals{replacedBy: make(map[string]*ledger.Test, len(retests))}
	for _, t := range retests {
		if r, ok := f.replacedBy[t.RetestOf]; !ok || byTime(t, r) < 0 {
			f.replacedBy[t.RetestOf] = t
		}
	}
	return f
}

// finalsPass decides which tests are final in the pass a report reads them
// in, without a second pass to index the retests first. A failure that
// counts is final unless a retest that counts replaces it, and that retest
// may come later in the pass: judge holds such a failure, with what the
// report needs to place it (at), and decided gives the verdict once the
// pass is over. A retest mostly follows its failure closely, so note matches
// it against the last failure met; only the other retests are indexed by
// the test they retest, at the end, and only when there are any. It reads
// the tests' rows (ledger.TestRow), never the tests.
type finalsPass[T any] struct {
	held   []heldFailure[T]
	last   *ledger.Test // the last failure that counts met in the pass
	lastAt int          // its index in held, or -1 when it was not held
	others []*ledger.TestRow
}

// heldFailure is a failure that counts (t, with its row), with the
// earliest retest that counts of it found so far.
type heldFailure[T any] struct {
	t       *ledger.Test
	row, by *ledger.TestRow
	at      T
}

// note runs for every test of the pass, in scope or not: it matches a
// retest that counts with its failure. Most tests are neither, told
// without a call.
func (f *finalsPass[T]) note(r *ledger.TestRow) {
	if r.Retested != nil || r.State&ledger.RowFail != 0 {
		f.noteLink(r)
	}
}

// noteLink is note for a retest of a held test or a failure.
func (f *finalsPass[T]) noteLink(r *ledger.TestRow) {
	// A retest of a test this replica does not hold replaces nothing.
	if r.Retested != nil && r.State.Counts() {
		switch {
		case r.Retested == f.last:
			if f.lastAt >= 0 {
				h := &f.held[f.lastAt]
				if h.by == nil || rowTime(r, h.by) < 0 {
					h.by = r
				}
			} // else the failure is not held: the report does not need it
		default:
			f.others = append(f.others, r)
		}
	}
	if r.State.Counts() && r.State&ledger.RowFail != 0 {
		f.last, f.lastAt = r.Test, -1
	}
}

// judge returns why the row's test is not final ("" for final) and true,
// or, for a failure that counts, holds it with at and returns false:
// decided decides it.
// It runs after note, for the tests the report keeps.
func (f *finalsPass[T]) judge(r *ledger.TestRow, at T) (Reason, bool) {
	switch s := r.State; {
	case s&ledger.RowVoided != 0:
		return VoidedTest, true
	case s&ledger.RowReturned != 0:
		return ReturnedByOffice, true
	case s&ledger.RowPending != 0:
		return NotGraded, true
	case s&ledger.RowFail == 0:
		return "", true
	}
	if f.last == r.Test {
		f.lastAt = len(f.held)
	}
	f.held = append(f.held, heldFailure[T]{t: r.Test, row: r, at: at})
	return "", false
}

// decided yields each held failure, in the order held, with why it is not
// final ("" for final) and the earliest retest that replaced it.
func (f *finalsPass[T]) decided() iter.Seq2[*heldFailure[T], Reason] {
	return func(yield func(*heldFailure[T], Reason) bool) {
		var rest map[*ledger.Test]*ledger.TestRow // a failure -> its earliest other retest that counts
		if len(f.others) > 0 {
			rest = make(map[*ledger.Test]*ledger.TestRow, len(f.others))
			for _, r := range f.others {
				if by, ok := rest[r.Retested]; !ok || rowTime(r, by) < 0 {
					rest[r.Retested] = r
				}
			}
		}
		for i := range f.held {
			h := &f.held[i]
			if rest != nil { // mostly there are no others: no lookup
				if r, ok := rest[h.t]; ok && (h.by == nil || rowTime(r, h.by) < 0) {
					h.by = r
				}
			}
			why := Reason("")
			if h.by != nil {
				why = ReworkedAndRetested
			}
			if !yield(h, why) {
				return
			}
		}
	}
}

// Why returns "" for a final test, or why t is not final and, for a
// reworked failure, the retest that replaced it.
func (f Finals) Why(t *ledger.Test) (Reason, *ledger.Test) {
	switch {
	case t.Voided():
		return VoidedTest, nil
	case t.ReviewStatus == ledger.Returned:
		return ReturnedByOffice, nil
	case t.Result.Verdict == qc.Pending:
		return NotGraded, nil
	}
	if t.Result.Verdict == qc.Fail {
		if r, ok := f.replacedBy[t.ID]; ok {
			return ReworkedAndRetested, r
		}
	}
	return "", nil
}
