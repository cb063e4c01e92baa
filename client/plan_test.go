package client

import (
	"context"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"
)

// TestSyncQueryPlans reads SQLite's plans (EXPLAIN QUERY PLAN) of the
// queries of the events table that a sync and its status run, on a store
// file holding entries of two projects in every state a sync leaves them,
// before and after ANALYZE: each must reach its rows through the index
// named, and none may read the whole table. A sync's fixed cost then does
// not grow with the entries the device holds.
func TestSyncQueryPlans(t *testing.T) {
	ctx := context.Background()
	s, err := Open(ctx, filepath.Join(t.TempDir(), "device.db"), Options{User: "ines", Durability: DurabilityNormal})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	here, there := s.NewID(), s.NewID()
	for i := range 600 {
		p := here
		if i%4 == 0 {
			p = there
		}
		if _, err := s.RecordTest(ctx, TestInput{Project: p, Readings: sandCone(100+float64(i%20), 12), Feature: "pad"}); err != nil {
			t.Fatal(err)
		}
	}
	// Most entries synced and seen in the chain, some pulled from other
	// devices, a few acknowledged but not yet seen, a few refused, a few
	// with a clock skew, the newest pending.
	for _, q := range []string{
		`UPDATE events SET status = 'accepted', confirmed = 1, server_seq = device_seq WHERE device_seq <= 540`,
		`UPDATE events SET origin = 'remote', device_id = 'another-device' WHERE device_seq <= 300 AND device_seq % 2 = 0`,
		`UPDATE events SET status = 'accepted', server_seq = device_seq WHERE device_seq > 540 AND device_seq <= 560`,
		`UPDATE events SET status = 'waiting', waiting_since_micros = 1 WHERE device_seq > 590`,
		`UPDATE events SET status = 'rejected', reason = 'invalid_field', field = 'readings' WHERE device_seq > 585 AND device_seq <= 590`,
		`UPDATE events SET clock_skew_micros = 300000000 WHERE device_seq % 97 = 0`,
	} {
		if _, err := s.db.Writer().ExecContext(ctx, q); err != nil {
			t.Fatal(err)
		}
	}
	partial := regexp.MustCompile(`^SCAN events USING (COVERING )?INDEX (events_unconfirmed|events_outbox|events_waiting|events_skewed)\b`)
	cases := []struct {
		name  string
		query string
		args  []any
		want  string // a plan line must contain it
	}{
		{"outbox", outboxQuery, []any{here}, "USING INDEX events_unconfirmed"},
		{"lacking", lackingUpdate, []any{here, 10}, "USING INDEX events_unconfirmed"},
		{"outbox status", outboxStatusQuery, []any{here}, "USING INDEX events_outbox"},
		{"supply", supplyQuery, []any{here, s.DeviceID(), 3, 9}, "device_id=? AND device_seq>? AND device_seq<?"},
		{"own entries", ownEventsQuery + "?, ?)", []any{s.DeviceID(), here, 7, 8}, "device_seq=?"},
		// A pull of a day's own entries names them all: a long list of
		// numbers must still be looked up one by one.
		{"own entries, many", ownEventsQuery + strings.Repeat("?, ", 49) + "?)", append([]any{s.DeviceID(), here}, seqArgs(50)...), "device_seq=?"},
		{"push everything back", everythingQuery, []any{here}, "(project_id=?)"},
		{"outbox count", outboxCountQuery, nil, "USING COVERING INDEX events_outbox"},
		{"rejected", rejectedQuery, nil, "USING INDEX events_outbox"},
		{"unconfirmed count", unconfirmedCountQuery, []any{here}, "USING INDEX events_unconfirmed"},
		{"clock skews", clockSkewsQuery, []any{here}, "USING INDEX events_skewed"},
		// record's counters: the device's last number, the project's latest
		// hybrid time and the device's previous entry, each a few page reads.
		{"record counters", recordCountersQuery, []any{here, s.DeviceID()}, "(project_id=?)"},
	}
	for _, analyzed := range []bool{false, true} {
		if analyzed {
			if _, err := s.db.Writer().ExecContext(ctx, `ANALYZE`); err != nil {
				t.Fatal(err)
			}
		}
		for _, c := range cases {
			plan := queryPlan(t, s, c.query, c.args...)
			found := false
			for _, d := range plan {
				if strings.HasPrefix(d, "SCAN events") && !partial.MatchString(d) {
					t.Errorf("%s (analyzed %v) reads the whole events table: %q", c.name, analyzed, d)
				}
				found = found || strings.Contains(d, c.want)
			}
			if !found {
				t.Errorf("%s (analyzed %v): plan %q does not use %q", c.name, analyzed, plan, c.want)
			}
		}
	}
}

// seqArgs returns 1..n as query arguments.
func seqArgs(n int) []any {
	out := make([]any, n)
	for i := range out {
		out[i] = i + 1
	}
	return out
}

// Opening a store reads every entry once, in the order of an index: SQLite
// sorts nothing (it sorted every row with its bytes in a temporary tree
// before returning the first).
func TestLoadQueryPlan(t *testing.T) {
	ctx := context.Background()
	s, err := Open(ctx, filepath.Join(t.TempDir(), "device.db"), Options{User: "ines", Durability: DurabilityNormal})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	for i := range 50 {
		if _, err := s.RecordTest(ctx, TestInput{Project: s.NewID(), Readings: sandCone(100+float64(i%20), 12), Feature: "pad"}); err != nil {
			t.Fatal(err)
		}
	}
	plan := queryPlan(t, s, loadQuery)
	if len(plan) == 0 || slices.ContainsFunc(plan, func(d string) bool { return strings.Contains(d, "TEMP B-TREE") }) {
		t.Errorf("the load's plan %q sorts the entries", plan)
	}
}

// queryPlan returns the lines of SQLite's plan of query (EXPLAIN QUERY
// PLAN) on s's store.
func queryPlan(t *testing.T, s *Store, query string, args ...any) []string {
	t.Helper()
	rows, err := s.db.Reader().QueryContext(context.Background(), "EXPLAIN QUERY PLAN "+query, args...)
	if err != nil {
		t.Fatalf("plan of %q: %v", query, err)
	}
	defer rows.Close()
	var plan []string
	for rows.Next() {
		var id, parent, unused int
		var detail string
		if err := rows.Scan(&id, &parent, &unused, &detail); err != nil {
			t.Fatal(err)
		}
		plan = append(plan, detail)
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	return plan
}
