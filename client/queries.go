package client

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"slices"
	"strings"
	"time"

	"tamp/internal/ledger"
	"tamp/internal/qc"
)

// Test returns a test with its whole history: every revision, voids,
// reviews and exceptions. It returns ErrNotFound for a test this device
// does not hold.
func (s *Store) Test(project, testID string) (Test, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	v := s.view(project)
	t, ok := v.Test(testID)
	if !ok {
		return Test{}, fmt.Errorf("client: test %s: %w", testID, ErrNotFound)
	}
	return testOf(v, t), nil
}

// TestsOn returns the tests taken on day (YYYY-MM-DD, the project's time
// zone), in the order they were taken.
func (s *Store) TestsOn(project, day string) []Test {
	s.mu.Lock()
	defer s.mu.Unlock()
	v := s.view(project)
	return testsOf(v, byHLC(v.Tests(), func(t *ledger.Test) bool { return t.Day == day }))
}

// byHLC returns the tests that keep holds, in hybrid time order.
func byHLC(ts []*ledger.Test, keep func(*ledger.Test) bool) []*ledger.Test {
	var out []*ledger.Test
	for _, t := range ts {
		if keep(t) {
			out = append(out, t)
		}
	}
	slices.SortFunc(out, func(a, b *ledger.Test) int { return a.HLC.Compare(b.HLC) })
	return out
}

// Today returns the tests taken today, in the project's time zone.
func (s *Store) Today(project string) []Test {
	s.mu.Lock()
	day := s.view(project).Day(s.now())
	s.mu.Unlock()
	return s.TestsOn(project, day)
}

// OpenFailures returns the failing tests that still need a retest: failing,
// not voided, not accepted as they stand by QA, and with no retest that has
// been graded (a retest that failed is itself listed; a retest that passed
// closes the failure). Oldest first.
func (s *Store) OpenFailures(project string) []Test {
	s.mu.Lock()
	defer s.mu.Unlock()
	v := s.view(project)
	return testsOf(v, byHLC(v.Tests(), func(t *ledger.Test) bool {
		if t.Result.Verdict != qc.Fail || t.Voided() || t.ExceptionAccepted() {
			return false
		}
		for _, id := range v.RetestsOf(t.ID) {
			r, _ := v.Test(id)
			if !r.Voided() && (r.Result.Verdict == qc.Pass || r.Result.Verdict == qc.Fail) {
				return false
			}
		}
		return true
	}))
}

// Conflicts returns the tests whose history holds concurrent revisions (two
// corrections of the same revision, made apart; the latest in hybrid time
// stands and both stay in history) or two recordings of one test id, for a
// reviewer to settle. Oldest first.
func (s *Store) Conflicts(project string) []Test {
	s.mu.Lock()
	defer s.mu.Unlock()
	v := s.view(project)
	return testsOf(v, byHLC(v.Tests(), func(t *ledger.Test) bool {
		return slices.ContainsFunc(t.Flags, func(f qc.Finding) bool {
			return f.Code == ledger.ConcurrentRevisions || f.Code == ledger.DuplicateTestID
		})
	}))
}

// Outbox is the state of the device's unsent entries.
type Outbox struct {
	Pending int       `json:"pending"` // entries not yet accepted by the server
	Oldest  time.Time `json:"oldest"`  // when the oldest was made; zero when none
}

// Age returns how long the oldest pending entry has waited at now.
func (o Outbox) Age(now time.Time) time.Duration {
	if o.Pending == 0 {
		return 0
	}
	return now.Sub(o.Oldest)
}

// The queries of Outbox and Rejected read the local entries not accepted
// through the partial index of them, events_outbox: each names the index's
// condition, status != 'accepted', for SQLite to see that the index holds
// every row it wants (TestSyncQueryPlans reads their plans).
const (
	outboxCountQuery = `SELECT COUNT(*), MIN(created_micros) FROM events
		WHERE origin = 'local' AND status != 'accepted' AND status IN ('pending', 'waiting')`
	rejectedQuery = `SELECT event_id, project_id, device_seq, kind, record_id, reason, field, rule, message, created_micros
		FROM events WHERE origin = 'local' AND status != 'accepted' AND status = 'rejected' ORDER BY created_micros, event_id`
)

// Outbox returns the count and age of the entries not yet accepted.
func (s *Store) Outbox(ctx context.Context) (Outbox, error) {
	var o Outbox
	var oldest *int64
	err := s.db.Reader().QueryRowContext(ctx, outboxCountQuery).Scan(&o.Pending, &oldest)
	if err != nil {
		return Outbox{}, fmt.Errorf("client: outbox: %w", err)
	}
	if oldest != nil {
		o.Oldest = time.UnixMicro(*oldest).UTC()
	}
	return o, nil
}

// Rejected is an entry the server refused, kept for the user.
type Rejected struct {
	EventID   string `json:"event_id"`
	Project   string `json:"project"`
	DeviceSeq uint64 `json:"device_seq"` // the entry's number on this device
	Kind      string `json:"kind"`
	RecordID  string `json:"record_id"` // the test, spec... it concerns
	Reason    string `json:"reason"`    // machine-readable reason, e.g. "permission_denied", "invalid_field"
	// Field is the field at fault, as a path within the entry (e.g.
	// "readings.sand_cone.soil_mass"), for every reason but
	// permission_denied; empty when no one field is.
	Field string `json:"field"`
	// Rule is the rule the entry breaks, for permission_denied (e.g.
	// "role_may_make_entry", "own_tests_only", "no_self_review"); empty
	// otherwise.
	Rule    string    `json:"rule"`
	Message string    `json:"message"` // the server's words, for people
	Created time.Time `json:"created"`
}

// Rejected returns the entries the server refused that the user has not
// discarded, oldest first.
func (s *Store) Rejected(ctx context.Context) ([]Rejected, error) {
	rows, err := s.db.Reader().QueryContext(ctx, rejectedQuery)
	if err != nil {
		return nil, fmt.Errorf("client: rejected: %w", err)
	}
	defer rows.Close()
	var out []Rejected
	for rows.Next() {
		var r Rejected
		var created int64
		if err := rows.Scan(&r.EventID, &r.Project, &r.DeviceSeq, &r.Kind, &r.RecordID, &r.Reason, &r.Field, &r.Rule, &r.Message, &created); err != nil {
			return nil, fmt.Errorf("client: rejected: %w", err)
		}
		r.Created = time.UnixMicro(created).UTC()
		out = append(out, r)
	}
	return out, rows.Err()
}

// Discard sets aside a rejected entry once the user has dealt with it. The
// entry stays in the store, marked discarded. It returns ErrNotRejected for
// an entry that was not rejected.
func (s *Store) Discard(ctx context.Context, eventID string) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	res, err := s.db.Writer().ExecContext(ctx, `UPDATE events SET status = 'discarded' WHERE event_id = ? AND status = 'rejected'`, eventID)
	if err != nil {
		return fmt.Errorf("client: discard %s: %w", eventID, err)
	}
	if n, _ := res.RowsAffected(); n == 0 {
		return fmt.Errorf("client: discard %s: %w", eventID, ErrNotRejected)
	}
	return nil
}

// markRejected records the server's refusal of a local entry and rebuilds
// the views without it. Call with s.mu held.
func (s *Store) markRejected(ctx context.Context, eventID, reason, message string) error {
	if _, err := s.db.Writer().ExecContext(ctx, `UPDATE events SET status = 'rejected', reason = ?, field = '', rule = '', message = ?
		WHERE event_id = ? AND origin = 'local'`, reason, message, eventID); err != nil {
		return fmt.Errorf("client: mark %s rejected: %w", eventID, err)
	}
	return s.loadViews(ctx)
}

// Digest returns a hash (SHA-256, hex) of the project's view: two replicas
// holding the same entries have the same digest, the server's included.
func (s *Store) Digest(project string) string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.view(project).Digest().String()
}

// KnownProjects returns the projects this device holds events of or has
// synced, sorted.
func (s *Store) KnownProjects(ctx context.Context) ([]string, error) {
	set := map[string]bool{}
	for _, p := range s.Projects() {
		set[p] = true
	}
	rows, err := s.db.Reader().QueryContext(ctx, `SELECT project_id FROM sync_state`)
	if err != nil {
		return nil, fmt.Errorf("client: known projects: %w", err)
	}
	defer rows.Close()
	for rows.Next() {
		var p string
		if err := rows.Scan(&p); err != nil {
			return nil, fmt.Errorf("client: known projects: %w", err)
		}
		set[p] = true
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("client: known projects: %w", err)
	}
	out := make([]string, 0, len(set))
	for p := range set {
		out = append(out, p)
	}
	slices.Sort(out)
	return out, nil
}

// unconfirmedCountQuery counts, for serverCopyStatus, the project's
// acknowledged entries not yet seen in the chain, through the partial index
// of unconfirmed entries (named: left to itself SQLite may take the index
// of project_id and read every entry of the project).
const unconfirmedCountQuery = `SELECT COUNT(*) FILTER (WHERE server_lacks = 0), COUNT(*) FILTER (WHERE server_lacks = 1)
	FROM events INDEXED BY events_unconfirmed WHERE project_id = ? AND confirmed = 0 AND status = 'accepted'`

// serverCopyStatus fills what st says of the server's copy of the
// project: entries acknowledged and not yet confirmed, entries the server
// lacks, entries it asked for that this device does not hold, and entries
// that have waited longer than the store's wait limit.
func (s *Store) serverCopyStatus(ctx context.Context, project string, st *SyncStatus) error {
	r := s.db.Reader()
	if err := r.QueryRowContext(ctx, unconfirmedCountQuery, project).Scan(&st.Unconfirmed, &st.ServerLacks); err != nil {
		return fmt.Errorf("client: sync status: %w", err)
	}
	rows, err := r.QueryContext(ctx, `SELECT device_id, device_seq FROM server_missing WHERE project_id = ? ORDER BY device_id, device_seq`, project)
	if err != nil {
		return fmt.Errorf("client: sync status: %w", err)
	}
	defer rows.Close()
	for rows.Next() {
		var m MissingEntry
		if err := rows.Scan(&m.Device, &m.Seq); err != nil {
			return fmt.Errorf("client: sync status: %w", err)
		}
		st.ServerMissing = append(st.ServerMissing, m)
	}
	if err := rows.Err(); err != nil {
		return fmt.Errorf("client: sync status: %w", err)
	}
	st.LongWaiting, err = s.longWaiting(ctx, project)
	return err
}

// longWaiting returns the entries that have waited longer than the wait
// limit for records the server lacks, longest first, each with the records
// it waits for and, when this device holds an entry that makes one, its
// kind. Finding a kind reads the project's events (record ids carry no
// index): it runs only for the rare entries past the limit.
func (s *Store) longWaiting(ctx context.Context, project string) ([]WaitingEntry, error) {
	r := s.db.Reader()
	rows, err := r.QueryContext(ctx, `SELECT event_id, kind, record_id, waiting_for, waiting_since_micros FROM events
		WHERE project_id = ? AND waiting_since_micros > 0 AND waiting_since_micros <= ? AND status NOT IN ('rejected', 'discarded')
		ORDER BY waiting_since_micros, event_id`, project, s.now().Add(-s.waitLimit).UnixMicro())
	if err != nil {
		return nil, fmt.Errorf("client: waiting entries: %w", err)
	}
	var out []WaitingEntry
	for rows.Next() {
		var w WaitingEntry
		var waitingFor string
		var since int64
		if err := rows.Scan(&w.EventID, &w.Kind, &w.RecordID, &waitingFor, &since); err != nil {
			rows.Close()
			return nil, fmt.Errorf("client: waiting entries: %w", err)
		}
		w.Since = time.UnixMicro(since).UTC()
		for _, id := range strings.Fields(waitingFor) {
			w.For = append(w.For, WaitedRecord{ID: id})
		}
		out = append(out, w)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("client: waiting entries: %w", err)
	}
	for i := range out {
		for j := range out[i].For {
			rec := &out[i].For[j]
			err := r.QueryRowContext(ctx, `SELECT kind FROM events WHERE project_id = ? AND record_id = ?
				ORDER BY hlc_wall, hlc_logical, device_id, event_id LIMIT 1`, project, rec.ID).Scan(&rec.Kind)
			if err != nil && !errors.Is(err, sql.ErrNoRows) {
				return nil, fmt.Errorf("client: waiting entries: %w", err)
			}
		}
	}
	return out, nil
}
