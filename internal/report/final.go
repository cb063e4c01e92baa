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

// finalsOf indexes the retests of a projection's tests.
func finalsOf(p *ledger.Projection) Finals { return newFinals(p.AllTests()) }

func newFinals(tests iter.Seq[*ledger.Test]) Finals {
	f := Finals{replacedBy: map[string]*ledger.Test{}}
	for t := range tests {
		if t.RetestOf == "" || !counts(t) {
			continue
		}
		if r, ok := f.replacedBy[t.RetestOf]; !ok || byTime(t, r) < 0 {
			f.replacedBy[t.RetestOf] = t
		}
	}
	return f
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
