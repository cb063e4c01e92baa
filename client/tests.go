package client

import (
	"context"
	"fmt"
	"slices"
	"strings"

	"tamp/internal/ledger"
	"tamp/internal/qc"
	"tamp/internal/soil"
)

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
	return TestResult{TestID: testID, EventID: eventID, Result: resultOf(v, *t.Content, t.Result), Flags: findingsOf(t.Flags),
		Missing: slices.Clone(t.Missing), Steps: stepsOf(steps)}
}

// ownTest returns a test the store's user may change. Call with s.mu held.
func (s *Store) ownTest(project, testID string) (*ledger.Test, error) {
	t, ok := s.view(project).Test(testID)
	switch {
	case !ok:
		return nil, fmt.Errorf("client: test %s: %w", testID, ErrNotFound)
	case t.Author != s.user:
		return nil, denied("own_tests_only", fmt.Sprintf("test %s was recorded by %s, not %s", testID, t.Author, s.user), ErrNotAuthor)
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
		return denied("no_self_review", fmt.Sprintf("%s recorded test %s and may not make a %s entry on it", s.user, test, k.KindName()), ErrOwnTest)
	}
	return nil
}

// CorrectTest records a new revision of a test: edit changes a copy of the
// current revision's content (its Project is ignored), reason says why. The
// earlier revision stays in history. Only the test's author may correct it
// (an office review is a separate entry). It returns ErrReasonRequired,
// ErrNotFound, ErrNotAuthor or ErrVoided, and ErrInvalid, naming the field,
// for content that breaks a rule; ErrReasonRequired, ErrNotAuthor and
// ErrInvalid come as an *EntryError.
func (s *Store) CorrectTest(ctx context.Context, project, testID, reason string, edit func(*TestInput)) (TestResult, error) {
	if strings.TrimSpace(reason) == "" {
		return TestResult{}, reasonRequired("the correction of test " + testID)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	t, err := s.ownTest(project, testID)
	if err != nil {
		return TestResult{}, err
	}
	in := inputOf(project, *t.Content)
	edit(&in)
	c := in.content()
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
		return reasonRequired("the void of test " + testID)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if _, err := s.ownTest(project, testID); err != nil {
		return err
	}
	_, _, err := s.record(ctx, project, &ledger.TestVoided{TestID: testID, Reason: reason})
	return err
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
	c := *t.Content // a copy: the test's content is its event's
	c.Readings, c.Remarks, c.DeviceResults = in.Readings.ledger(), in.Remarks, nil
	if in.Location != nil {
		c.Location = in.Location.ledger()
	}
	if in.EquipmentID != "" {
		c.EquipmentID = in.EquipmentID
	}
	return s.recordTest(ctx, project, s.NewID(), c, failedID)
}
