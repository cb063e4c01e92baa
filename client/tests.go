package client

import (
	"context"
	"fmt"
	"strings"

	"tamp/internal/ledger"
	"tamp/internal/qc"
	"tamp/internal/soil"
)

// TestInput is what an inspector enters for an in-place density test. All
// values are SI (kg, m, kg/m3, percent).
type TestInput struct {
	Project       string
	Readings      ledger.Readings
	Location      ledger.Location
	PlacementID   string
	Feature       string
	LiftNumber    uint32
	LiftThickness float64 // m
	ReferenceID   string  // the laboratory reference graded against
	SpecID        string  // the specification graded against
	EquipmentID   string  // the gauge or apparatus used
	Oversize      *soil.Oversize
	Remarks       string
}

func (in TestInput) content() ledger.TestContent {
	return ledger.TestContent{Readings: in.Readings, Location: in.Location, PlacementID: in.PlacementID, Feature: in.Feature,
		LiftNumber: in.LiftNumber, LiftThickness: in.LiftThickness, ReferenceID: in.ReferenceID, SpecID: in.SpecID,
		EquipmentID: in.EquipmentID, Oversize: in.Oversize, Remarks: in.Remarks}
}

// TestResult is what the inspector sees the moment a test is recorded.
type TestResult struct {
	TestID  string
	EventID string // the revision just recorded
	// Result holds dry density, relative compaction, moisture deviation, the
	// verdict (pending while the reference or spec has not reached the
	// device), the reasons and the flags of the arithmetic.
	Result qc.Result
	// Flags are the review flags of the record: equipment, retests,
	// conflicts.
	Flags []qc.Finding
	// Missing names records the test refers to that the device lacks.
	Missing []string
	// Steps show the arithmetic, for the inspector and the reviewer.
	Steps []soil.Step
}

// RecordTest records a new test and returns its result at once.
func (s *Store) RecordTest(ctx context.Context, in TestInput) (TestResult, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.recordTest(ctx, in.Project, s.NewID(), in.content(), "")
}

func (s *Store) recordTest(ctx context.Context, project, testID string, c ledger.TestContent, retestOf string) (TestResult, error) {
	v := s.view(project)
	a := v.Assess(c, v.Day(s.now()), retestOf)
	c.DeviceResults = ledger.ResultsOf(a.Result)
	signed, _, err := s.record(ctx, project, &ledger.TestRecorded{TestID: testID, Content: c, RetestOf: retestOf})
	if err != nil {
		return TestResult{}, err
	}
	return s.result(v, testID, signed.Event.ID, a.Steps), nil
}

func (s *Store) result(v *ledger.Projection, testID, eventID string, steps []soil.Step) TestResult {
	t, _ := v.Test(testID)
	return TestResult{TestID: testID, EventID: eventID, Result: t.Result, Flags: t.Flags, Missing: t.Missing, Steps: steps}
}

// ownTest returns a test the store's user may change. Call with s.mu held.
func (s *Store) ownTest(project, testID string) (*ledger.Test, error) {
	t, ok := s.view(project).Test(testID)
	switch {
	case !ok:
		return nil, fmt.Errorf("client: test %s: %w", testID, ErrNotFound)
	case t.Author != s.user:
		return nil, fmt.Errorf("client: test %s was recorded by %s, not %s: %w", testID, t.Author, s.user, ErrNotAuthor)
	case t.Voided():
		return nil, fmt.Errorf("client: test %s: %w", testID, ErrVoided)
	}
	return t, nil
}

// notOwnTest refuses a decision on a test (a review, an accepted
// exception) by the user who recorded it, as the server does: no one
// decides on their own test. Call with s.mu held.
func (s *Store) notOwnTest(project string, k ledger.Kind) error {
	var test string
	switch k := k.(type) {
	case *ledger.TestReviewed:
		test = k.TestID
	case *ledger.ExceptionAccepted:
		test = k.TestID
	default:
		return nil
	}
	if t, ok := s.view(project).Test(test); ok && t.Author == s.user {
		return fmt.Errorf("client: %s on test %s, which %s recorded: %w", k.KindName(), test, s.user, ErrOwnTest)
	}
	return nil
}

// CorrectTest records a new revision of a test: edit changes a copy of the
// current revision's content, reason says why. The earlier revision stays in
// history. Only the test's author may correct it (an office review is a
// separate entry). It returns ErrReasonRequired, ErrNotFound, ErrNotAuthor
// or ErrVoided.
func (s *Store) CorrectTest(ctx context.Context, project, testID, reason string, edit func(*ledger.TestContent)) (TestResult, error) {
	if strings.TrimSpace(reason) == "" {
		return TestResult{}, fmt.Errorf("client: correct test %s: %w", testID, ErrReasonRequired)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	t, err := s.ownTest(project, testID)
	if err != nil {
		return TestResult{}, err
	}
	c := t.Content
	edit(&c)
	v := s.view(project)
	a := v.Assess(c, t.Day, t.RetestOf)
	c.DeviceResults = ledger.ResultsOf(a.Result)
	signed, _, err := s.record(ctx, project, &ledger.TestCorrected{TestID: testID, Supersedes: t.Current, Reason: reason, Content: c})
	if err != nil {
		return TestResult{}, err
	}
	return s.result(v, testID, signed.Event.ID, a.Steps), nil
}

// VoidTest withdraws a test from the record, with the reason. The test and
// its history stay. It returns ErrReasonRequired, ErrNotFound, ErrNotAuthor
// or ErrVoided.
func (s *Store) VoidTest(ctx context.Context, project, testID, reason string) error {
	if strings.TrimSpace(reason) == "" {
		return fmt.Errorf("client: void test %s: %w", testID, ErrReasonRequired)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if _, err := s.ownTest(project, testID); err != nil {
		return err
	}
	_, _, err := s.record(ctx, project, &ledger.TestVoided{TestID: testID, Reason: reason})
	return err
}

// RetestInput is what an inspector enters for a retest after rework. Where
// a field is left zero it is taken from the failing test: location, lift,
// reference, spec, equipment and oversize.
type RetestInput struct {
	Readings    ledger.Readings
	Location    *ledger.Location
	EquipmentID string
	Remarks     string
}

// RecordRetest records a retest of a failing test. It returns ErrNotFailing
// for a test that did not fail (or is not graded yet), ErrVoided, or
// ErrNotFound.
func (s *Store) RecordRetest(ctx context.Context, project, failedID string, in RetestInput) (TestResult, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	t, ok := s.view(project).Test(failedID)
	switch {
	case !ok:
		return TestResult{}, fmt.Errorf("client: retest of %s: %w", failedID, ErrNotFound)
	case t.Voided():
		return TestResult{}, fmt.Errorf("client: retest of %s: %w", failedID, ErrVoided)
	case t.Result.Verdict != qc.Fail:
		return TestResult{}, fmt.Errorf("client: retest of %s, whose verdict is %s: %w", failedID, t.Result.Verdict, ErrNotFailing)
	}
	c := t.Content
	c.Readings, c.Remarks, c.DeviceResults = in.Readings, in.Remarks, nil
	if in.Location != nil {
		c.Location = *in.Location
	}
	if in.EquipmentID != "" {
		c.EquipmentID = in.EquipmentID
	}
	return s.recordTest(ctx, project, s.NewID(), c, failedID)
}

// RecordStandardCount records a gauge's daily standard count.
func (s *Store) RecordStandardCount(ctx context.Context, project string, c ledger.StandardCountRecorded) error {
	_, _, err := s.Record(ctx, project, &c)
	return err
}
