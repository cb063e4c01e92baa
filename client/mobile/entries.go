package mobile

import (
	"context"

	"tamp/client"
)

// The entries every role makes. Each takes the project's id and the
// entry as JSON (client's type in snake case), and returns the id of the
// record it made where it makes one.

// SetUpProject records the project's set-up (name, units "us" or "si",
// water density, shrinkage basis "bank" or "compacted", time zone).
func (s *Store) SetUpProject(project, setUp string) error {
	var v client.ProjectSetUp
	if err := in("set_up", setUp, &v); err != nil {
		return err
	}
	return wrap(s.s.SetUpProject(context.Background(), project, v))
}

// DefineSpec records a specification (limits as written, e.g.
// "min_compaction": "95") and returns its id.
func (s *Store) DefineSpec(project, spec string) (string, error) {
	var v client.Spec
	if err := in("spec", spec, &v); err != nil {
		return "", err
	}
	id, err := s.s.DefineSpec(context.Background(), project, v)
	return id, wrap(err)
}

// AddReference records a laboratory reference (standard, method letter,
// curve points or the lab's maximum dry density and optimum moisture) and
// returns its id.
func (s *Store) AddReference(project, reference string) (string, error) {
	var v client.Reference
	if err := in("reference", reference, &v); err != nil {
		return "", err
	}
	id, err := s.s.AddReference(context.Background(), project, v)
	return id, wrap(err)
}

// RegisterEquipment records a gauge or apparatus and returns its id.
func (s *Store) RegisterEquipment(project, equipment string) (string, error) {
	var v client.Equipment
	if err := in("equipment", equipment, &v); err != nil {
		return "", err
	}
	id, err := s.s.RegisterEquipment(context.Background(), project, v)
	return id, wrap(err)
}

// RecordStandardCount records a gauge's daily standard count.
func (s *Store) RecordStandardCount(project, count string) error {
	var v client.StandardCount
	if err := in("standard_count", count, &v); err != nil {
		return err
	}
	return wrap(s.s.RecordStandardCount(context.Background(), project, v))
}

// SetMoistureCorrection records a nuclear moisture correction and returns
// its id.
func (s *Store) SetMoistureCorrection(project, correction string) (string, error) {
	var v client.MoistureCorrection
	if err := in("moisture_correction", correction, &v); err != nil {
		return "", err
	}
	id, err := s.s.SetMoistureCorrection(context.Background(), project, v)
	return id, wrap(err)
}

// MeasureBorrowSource records a borrow source with its bank tests and
// returns its id.
func (s *Store) MeasureBorrowSource(project, source string) (string, error) {
	var v client.BorrowSource
	if err := in("borrow_source", source, &v); err != nil {
		return "", err
	}
	id, err := s.s.MeasureBorrowSource(context.Background(), project, v)
	return id, wrap(err)
}

// RecordPlacement records a lift placed and returns its id.
func (s *Store) RecordPlacement(project, placement string) (string, error) {
	var v client.Placement
	if err := in("placement", placement, &v); err != nil {
		return "", err
	}
	id, err := s.s.RecordPlacement(context.Background(), project, v)
	return id, wrap(err)
}

// RecordHaul records loads hauled and returns its id.
func (s *Store) RecordHaul(project, haul string) (string, error) {
	var v client.Haul
	if err := in("haul", haul, &v); err != nil {
		return "", err
	}
	id, err := s.s.RecordHaul(context.Background(), project, v)
	return id, wrap(err)
}

// RecordTest records an in-place density test (client.TestInput as JSON,
// its project inside) and returns its result at once, offline, as
// {"schema", "result": {test_id, event_id, result, flags, missing, steps}}.
func (s *Store) RecordTest(test string) (string, error) {
	var v client.TestInput
	if err := in("test", test, &v); err != nil {
		return "", err
	}
	r, err := s.s.RecordTest(context.Background(), v)
	if err != nil {
		return "", wrap(err)
	}
	return out("result", r)
}

// CorrectTest records a new revision of a test: changes is JSON of the
// fields to change (client.TestInput's, e.g. {"remarks": "..."} or new
// readings), laid over the current revision; reason is required. It
// returns the new result as RecordTest does.
func (s *Store) CorrectTest(project, testID, reason, changes string) (string, error) {
	var bad error
	r, err := s.s.CorrectTest(context.Background(), project, testID, reason, func(t *client.TestInput) {
		bad = in("changes", changes, t)
	})
	if bad != nil {
		return "", bad
	}
	if err != nil {
		return "", wrap(err)
	}
	return out("result", r)
}

// VoidTest withdraws a test from the record, with the reason.
func (s *Store) VoidTest(project, testID, reason string) error {
	return wrap(s.s.VoidTest(context.Background(), project, testID, reason))
}

// RecordRetest records a retest of a failing test (client.RetestInput as
// JSON: readings, and the location or equipment where they differ) and
// returns its result.
func (s *Store) RecordRetest(project, failedID, retest string) (string, error) {
	var v client.RetestInput
	if err := in("retest", retest, &v); err != nil {
		return "", err
	}
	r, err := s.s.RecordRetest(context.Background(), project, failedID, v)
	if err != nil {
		return "", wrap(err)
	}
	return out("result", r)
}

// ReviewTest approves a test's current revision, or returns it to its
// inspector with a comment (required when returning).
func (s *Store) ReviewTest(project, testID string, approve bool, comment string) error {
	d := client.Return
	if approve {
		d = client.Approve
	}
	return wrap(s.s.ReviewTest(context.Background(), project, testID, d, comment))
}

// AcceptException records a QA manager's acceptance of a failing test as it
// stands, with the reason.
func (s *Store) AcceptException(project, testID, reason string) error {
	return wrap(s.s.AcceptException(context.Background(), project, testID, reason))
}
