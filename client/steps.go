package client

import "fmt"

// Steps returns the arithmetic of a test's current revision, step by step,
// as this device's view of the project computes it from the raw readings
// (with the moisture correction a gauge reading names), for a reviewer to
// follow how the result was reached. Readings that do not compute give no
// steps; the test's flags say why. It returns ErrNotFound for a test this
// device does not hold.
func (s *Store) Steps(project, testID string) ([]Step, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	v := s.view(project)
	t, ok := v.Test(testID)
	if !ok {
		return nil, fmt.Errorf("client: steps of test %s: %w", testID, ErrNotFound)
	}
	return stepsOf(v.Assess(*t.Content, t.Day, t.RetestOf).Steps), nil
}
