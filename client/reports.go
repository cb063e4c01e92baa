package client

import (
	"context"
	"errors"
	"fmt"

	"tamp/internal/report"
	"tamp/internal/valid"
)

// The reports of the read side, computed from this device's own copy of
// the project's ledger with the code the server runs, so an office machine
// that holds the project answers offline what the server answers for the
// same entries. They are as recent as the device's last sync.

// ReviewQueue returns the tests whose current revision awaits the office:
// not voided, and unreviewed (never reviewed, or returned and since
// corrected); a test returned and not yet corrected awaits its inspector.
// With day set (YYYY-MM-DD, the project's time zone), only the
// tests taken that day. Oldest first.
func (s *Store) ReviewQueue(project, day string) []Test {
	s.mu.Lock()
	defer s.mu.Unlock()
	v := s.view(project)
	return testsOf(v, report.ReviewQueue(v, day))
}

// RetestAudit returns, oldest first, one chain per failing test that is not
// itself a retest: the retests that followed it and how it was closed.
func (s *Store) RetestAudit(project string) []RetestChain {
	s.mu.Lock()
	defer s.mu.Unlock()
	v := s.view(project)
	var out []RetestChain
	for _, c := range report.RetestAudit(v) {
		out = append(out, chainOf(v, c))
	}
	return out
}

// Frequency compares, for every placement and every spec that applies to
// it (the placement's own spec, and every spec a test on it names), the
// final tests taken with the most any of the spec's frequency rules asks:
// one test per so much compacted volume, plan area or length, and at least
// so many on every lift. A rule whose quantity the placement does not
// record is listed as not applying, with why. Final tests count: a failure
// replaced by a passing retest counts once, through the retest; a voided
// test, one the office returned and one not graded do not count. A spec
// that sets no frequency rule, or that has not reached this device, is left
// out. Sorted by placement, then spec.
func (s *Store) Frequency(project string) []Frequency {
	s.mu.Lock()
	defer s.mu.Unlock()
	var out []Frequency
	for _, f := range report.TestFrequency(s.view(project)) {
		out = append(out, frequencyOf(f))
	}
	return out
}

// Lots estimates, for each lot of the scope, the percent within limits of
// its final tests' relative compaction against the spec's minimum and,
// when the spec sets a moisture window, of their moisture against it
// (AASHTO R 9, beta-distribution estimator), and judges the lot against the
// spec's LotAcceptancePWL. The zero scope makes one lot per lift and spec;
// a scope with a feature, one lot per spec of that feature's tests within
// its lifts and days. A failure replaced by a retest, a test the office
// returned, a voided test and one not graded are not final: each lot lists
// them in LeftOut with the reason. A lot with fewer than three final
// results is listed without an estimate, saying why. A test that names no
// spec is in no lot; in the zero scope, neither is one that names no
// placement this device holds. Sorted by placement, then spec.
//
// A scope that breaks a rule (bounds without a feature, a first lift above
// the last, a day not written YYYY-MM-DD or after the last) returns an
// *EntryError (errors.Is ErrInvalid) whose Field names the scope's field
// (lift_from, day_to...).
func (s *Store) Lots(project string, scope LotScope) ([]Lot, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	v := s.view(project)
	lots, err := report.Lots(v, report.LotScope(scope))
	if err != nil {
		var fe *valid.FieldError
		if errors.As(err, &fe) {
			msg := fe.Rule
			if fe.Value != "" {
				msg = fe.Value + " " + fe.Rule
			}
			return nil, invalid(fe.Field, msg)
		}
		return nil, fmt.Errorf("client: lots: %w", err)
	}
	out := make([]Lot, 0, len(lots))
	for _, l := range lots {
		out = append(out, lotOf(v, l))
	}
	return out, nil
}

// Reconcile balances, for each borrow source, the compacted volume placed
// from it with the bank volume consumed and the loose volume hauled,
// through dry mass. A source without graded tests on its placements, or
// without a bank density, gets no bank volume.
func (s *Store) Reconcile(project string) ([]VolumeBalance, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	bs, err := report.Reconcile(s.view(project))
	if err != nil {
		return nil, fmt.Errorf("client: reconcile: %w", err)
	}
	var out []VolumeBalance
	for _, b := range bs {
		out = append(out, balanceOf(b))
	}
	return out, nil
}

// AuditFindings returns what the retest audit finds for the QA manager to
// look at, as of now: failures not retested within the project's window,
// retests away from their failure, on another lift, before their failure or
// of a passing test, failures voided without QA's acceptance, corrections
// that turned a failure into a pass, device results that disagree with the
// readings, entries from a device whose clock was off (as the server
// recorded at push, known here once pulled), and reviews by someone who was
// not office or QA at the time. Each names the entries it rests on. It
// supports, and never replaces, review by qualified personnel.
func (s *Store) AuditFindings(ctx context.Context, project string) ([]AuditFinding, error) {
	skews, err := s.clockSkews(ctx, project)
	if err != nil {
		return nil, err
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	var out []AuditFinding
	for _, f := range report.Findings(s.view(project), report.AuditOptions{AsOf: s.now(), Skews: skews}) {
		out = append(out, AuditFinding{Code: string(f.Code), Title: report.FindingTitle[f.Code], TestID: f.TestID, Message: f.Message,
			Entries: append([]string{}, f.Entries...)})
	}
	return out, nil
}

// clockSkewsQuery reads the project's entries with a clock skew through
// the partial index of them, events_skewed, not the whole project.
const clockSkewsQuery = `SELECT event_id, clock_skew_micros FROM events WHERE project_id = ? AND clock_skew_micros != 0`

// clockSkews returns the clock skews the server recorded for the project's
// entries this device holds, by event id.
func (s *Store) clockSkews(ctx context.Context, project string) (map[string]int64, error) {
	rows, err := s.db.Reader().QueryContext(ctx, clockSkewsQuery, project)
	if err != nil {
		return nil, fmt.Errorf("client: clock skews: %w", err)
	}
	defer rows.Close()
	out := map[string]int64{}
	for rows.Next() {
		var id string
		var skew int64
		if err := rows.Scan(&id, &skew); err != nil {
			return nil, fmt.Errorf("client: clock skews: %w", err)
		}
		out[id] = skew
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("client: clock skews: %w", err)
	}
	return out, nil
}
