package client

import (
	"context"
	"fmt"
	"strings"

	"tamp/internal/ledger"
)

// The entries of the office and of QA, and the set-up. Each is signed by
// the device for its user, stored in one transaction and applied to the
// project's view at once; the server decides on sync whether the user's
// role on the project allows it. An entry that breaks a rule is refused
// with an *EntryError (ErrInvalid) that names the field, and nothing is
// stored. A record id left empty is made by the store and
// returned; an id the project holds a record of already is refused
// (conflicting_id), as the server refuses it.

// SetUpProject names a project and fixes its conventions (an
// administrator's entry). A later set-up replaces an earlier one.
func (s *Store) SetUpProject(ctx context.Context, project string, p ProjectSetUp) error {
	k, err := p.kind()
	if err != nil {
		return err
	}
	_, _, err = s.recordEntry(ctx, project, k)
	return err
}

// DefineSpec defines an acceptance specification (QA) and returns its id.
// Tests name it; a test is graded against the spec it names, so a later
// spec never silently re-grades history.
func (s *Store) DefineSpec(ctx context.Context, project string, spec Spec) (string, error) {
	k, err := spec.kind()
	if err != nil {
		return "", err
	}
	return s.create(ctx, project, &k.ID, k)
}

// AddReference adds a laboratory compaction reference (QA) and returns its
// id.
func (s *Store) AddReference(ctx context.Context, project string, r Reference) (string, error) {
	k := r.kind()
	return s.create(ctx, project, &k.ID, k)
}

// RegisterEquipment registers a gauge or apparatus (office or QA) and
// returns its id. Registering the same id again records a recalibration.
func (s *Store) RegisterEquipment(ctx context.Context, project string, e Equipment) (string, error) {
	k, err := e.kind()
	if err != nil {
		return "", err
	}
	return s.create(ctx, project, &k.ID, k)
}

// RecordStandardCount records a nuclear gauge's daily standard count (an
// inspector's entry).
func (s *Store) RecordStandardCount(ctx context.Context, project string, c StandardCount) error {
	_, _, err := s.recordEntry(ctx, project, c.kind())
	return err
}

// SetMoistureCorrection sets a nuclear moisture correction for one gauge
// and material (QA) and returns its id; a gauge test names it in
// NuclearGauge.CorrectionID.
func (s *Store) SetMoistureCorrection(ctx context.Context, project string, c MoistureCorrection) (string, error) {
	k, err := c.kind()
	if err != nil {
		return "", err
	}
	return s.create(ctx, project, &k.ID, k)
}

// MeasureBorrowSource records a borrow source with its bank density tests
// (QA) and returns its id.
func (s *Store) MeasureBorrowSource(ctx context.Context, project string, b BorrowSource) (string, error) {
	k := b.kind()
	return s.create(ctx, project, &k.ID, k)
}

// RecordPlacement records a lift placed and compacted (office) and returns
// its id.
func (s *Store) RecordPlacement(ctx context.Context, project string, p Placement) (string, error) {
	k := p.kind()
	return s.create(ctx, project, &k.ID, k)
}

// RecordHaul records loads hauled from a borrow source (office) and returns
// its id.
func (s *Store) RecordHaul(ctx context.Context, project string, h Haul) (string, error) {
	k := h.kind()
	return s.create(ctx, project, &k.ID, k)
}

// create records k, whose record id *id is made when empty, and returns
// the id.
func (s *Store) create(ctx context.Context, project string, id *string, k ledger.Kind) (string, error) {
	if *id == "" {
		*id = s.NewID()
	}
	if _, _, err := s.recordEntry(ctx, project, k); err != nil {
		return "", err
	}
	return *id, nil
}

// ReviewTest records an office review of a test's current revision:
// Approve it for the record, or Return it to the inspector, which needs a
// comment saying why. No one reviews a test they recorded (ErrOwnTest). It
// returns ErrNotFound for a test this device does not hold.
func (s *Store) ReviewTest(ctx context.Context, project, testID string, d Decision, comment string) error {
	dec, err := d.ledger()
	if err != nil {
		return err
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	t, ok := s.view(project).Test(testID)
	if !ok {
		return fmt.Errorf("client: review test %s: %w", testID, ErrNotFound)
	}
	_, _, err = s.record(ctx, project, &ledger.TestReviewed{TestID: testID, Revision: t.Current, Decision: dec, Comment: comment})
	return err
}

// AcceptException records QA's acceptance of a failing test's current
// revision as it stands, with the reason; it closes the failure without a
// retest. No one accepts an exception on a test they recorded (ErrOwnTest).
// It returns ErrReasonRequired, or ErrNotFound for a test this device does
// not hold.
func (s *Store) AcceptException(ctx context.Context, project, testID, reason string) error {
	if strings.TrimSpace(reason) == "" {
		return reasonRequired("an exception on test " + testID)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	t, ok := s.view(project).Test(testID)
	if !ok {
		return fmt.Errorf("client: accept an exception on test %s: %w", testID, ErrNotFound)
	}
	_, _, err := s.record(ctx, project, &ledger.ExceptionAccepted{TestID: testID, Revision: t.Current, Reason: reason})
	return err
}
