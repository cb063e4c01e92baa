package mobile

import (
	"context"

	"tamp/client"
)

// Test returns a test with its whole history, as {"schema", "test": {...}}.
func (s *Store) Test(project, testID string) (string, error) {
	t, err := s.s.Test(project, testID)
	if err != nil {
		return "", wrap(err)
	}
	return out("test", t)
}

// Today returns the tests taken today, as {"schema", "tests": [...]}.
func (s *Store) Today(project string) (string, error) {
	return out("tests", nonNil(s.s.Today(project)))
}

// TestsOn returns the tests taken on day (YYYY-MM-DD, the project's time
// zone), as {"schema", "tests": [...]}.
func (s *Store) TestsOn(project, day string) (string, error) {
	return out("tests", nonNil(s.s.TestsOn(project, day)))
}

// OpenFailures returns the failing tests that still need a retest, as
// {"schema", "tests": [...]}.
func (s *Store) OpenFailures(project string) (string, error) {
	return out("tests", nonNil(s.s.OpenFailures(project)))
}

// Conflicts returns the tests whose revisions conflict, as {"schema",
// "tests": [...]}.
func (s *Store) Conflicts(project string) (string, error) {
	return out("tests", nonNil(s.s.Conflicts(project)))
}

// Rejected returns the entries the server refused, with why, as
// {"schema", "rejected": [...]}.
func (s *Store) Rejected() (string, error) {
	rs, err := s.s.Rejected(context.Background())
	if err != nil {
		return "", wrap(err)
	}
	if rs == nil {
		rs = []client.Rejected{}
	}
	return out("rejected", rs)
}

// Status returns a project's sync status (last success and error, the
// point verified, the outbox, entries the server lacks, entries waiting
// too long), as {"schema", "status": {...}}.
func (s *Store) Status(project string) (string, error) {
	st, err := s.s.Status(context.Background(), project)
	if err != nil {
		return "", wrap(err)
	}
	return out("status", st)
}

// The reports Report computes.
const (
	ReportReviewQueue    = "review_queue"   // the day's tests awaiting review (day: YYYY-MM-DD, "" for all)
	ReportRetestAudit    = "retest_audit"   // every failure with its retests
	ReportAuditFindings  = "audit_findings" // what the retest audit asks QA to look at, with the entries it rests on
	ReportFrequency      = "frequency"      // final tests required and taken per placement and spec, by rule
	ReportLots           = "lots"           // percent within limits and acceptance per lift and spec
	ReportReconciliation = "reconciliation" // volumes per borrow source
)

// Report computes a report from the device's own copy of the project's
// ledger, as the server would, offline: name is one of the Report
// constants; day is used by the review queue. It returns {"schema",
// name: [...]}.
func (s *Store) Report(project, name, day string) (string, error) {
	var v any
	switch name {
	case ReportReviewQueue:
		v = nonNil(s.s.ReviewQueue(project, day))
	case ReportRetestAudit:
		v = s.s.RetestAudit(project)
	case ReportAuditFindings:
		fs, err := s.s.AuditFindings(context.Background(), project)
		if err != nil {
			return "", wrap(err)
		}
		if fs == nil {
			fs = []client.AuditFinding{}
		}
		v = fs
	case ReportFrequency:
		v = s.s.Frequency(project)
	case ReportLots:
		lots, err := s.s.Lots(project, client.LotScope{})
		if err != nil {
			return "", wrap(err)
		}
		v = lots
	case ReportReconciliation:
		r, err := s.s.Reconcile(project)
		if err != nil {
			return "", wrap(err)
		}
		v = r
	default:
		return "", &Error{Reason: ReasonUnknownReport, Field: "name", Message: "mobile: no report " + name +
			"; the reports are review_queue, retest_audit, audit_findings, frequency, lots and reconciliation"}
	}
	return out(name, v)
}

func nonNil(ts []client.Test) []client.Test {
	if ts == nil {
		return []client.Test{}
	}
	return ts
}

// The record lists Records returns.
const (
	RecordsMembers       = "members"        // the project's people and roles, as its ledger introduces them
	RecordsSpecs         = "specs"          // specifications, limits as written
	RecordsReferences    = "references"     // laboratory references with the values tests are graded against
	RecordsEquipment     = "equipment"      // gauges and apparatus with their standard counts
	RecordsBorrowSources = "borrow_sources" // borrow sources with their bank densities
	RecordsPlacements    = "placements"     // lifts placed
	RecordsHauls         = "hauls"          // loads hauled
	RecordsTests         = "tests"          // every test, with its history
)

// Records returns a project's records of one kind (one of the Records
// constants), as the device's copy of the ledger holds them: {"schema",
// kind: [...]}. It lets an app offer specs, references and gauges by name
// when an inspector records a test.
func (s *Store) Records(project, kind string) (string, error) {
	var v any
	switch kind {
	case RecordsMembers:
		v = orEmpty(s.s.Members(project))
	case RecordsSpecs:
		v = orEmpty(s.s.Specs(project))
	case RecordsReferences:
		v = orEmpty(s.s.References(project))
	case RecordsEquipment:
		v = orEmpty(s.s.Equipment(project))
	case RecordsBorrowSources:
		v = orEmpty(s.s.BorrowSources(project))
	case RecordsPlacements:
		v = orEmpty(s.s.Placements(project))
	case RecordsHauls:
		v = orEmpty(s.s.Hauls(project))
	case RecordsTests:
		v = nonNil(s.s.Tests(project))
	default:
		return "", &Error{Reason: ReasonUnknownRecords, Field: "kind", Message: "mobile: no records " + kind +
			"; the kinds are members, specs, references, equipment, borrow_sources, placements, hauls and tests"}
	}
	return out(kind, v)
}

// SetUp returns the project's set-up, as {"schema", "set_up": {...}}, or an
// error with reason NOT_FOUND before the set-up has reached the device.
func (s *Store) SetUp(project string) (string, error) {
	su, ok := s.s.SetUp(project)
	if !ok {
		return "", &Error{Reason: ReasonNotFound, Field: "project", Message: "mobile: the project's set-up has not reached this device; sync first"}
	}
	return out("set_up", su)
}

func orEmpty[T any](v []T) []T {
	if v == nil {
		return []T{}
	}
	return v
}
