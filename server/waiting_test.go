package server_test

import (
	"context"
	"path/filepath"
	"slices"
	"sync"
	"testing"
	"time"

	"tamp/client"
	"tamp/server"
)

// clock is a device clock a test moves by hand.
type clock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *clock) now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *clock) advance(d time.Duration) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = c.t.Add(d)
}

// deviceWith opens a store with opts and enrols it for a new user with a
// role on the cluster's project.
func (c *cluster) deviceWith(name string, role server.Role, opts client.Options) *client.Store {
	c.tb.Helper()
	ctx := context.Background()
	opts.Durability = client.DurabilityNormal
	s, err := client.Open(ctx, filepath.Join(c.tb.TempDir(), name+".db"), opts)
	if err != nil {
		c.tb.Fatal(err)
	}
	c.tb.Cleanup(func() { s.Close() })
	user, err := c.srv.AddUser(ctx, name, false)
	if err != nil {
		c.tb.Fatal(err)
	}
	if err := c.srv.AddMember(ctx, c.project, user, role); err != nil {
		c.tb.Fatal(err)
	}
	code, _, err := c.srv.IssueEnrollmentCode(ctx, user)
	if err != nil {
		c.tb.Fatal(err)
	}
	if err := s.Enroll(ctx, c.conn(""), code, name+"'s tablet"); err != nil {
		c.tb.Fatal(err)
	}
	return s
}

// An entry that waits for a record that never reaches the server is named
// in the device's status once it has waited longer than the bound, with the
// records it waits for and, when the device knows, their kind.
func TestStatusNamesEntryWaitingPastTheBound(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Juniper Draw pad")
	clk := &clock{t: time.Now()}
	qa := c.device("quinn", server.QA)
	ann := c.deviceWith("ann", server.Inspector, client.Options{Now: clk.now, WaitLimit: 24 * time.Hour})
	spec, _ := setUp(t, c, qa, project)
	syncOK(t, qa, c.conn(""), project)
	syncOK(t, ann, c.conn(""), project)
	ctx := context.Background()

	// Ann adds a reference herself (refused: an inspector may not) and
	// grades a test against it; a second test names a reference nobody has.
	own, err := ann.AddReference(ctx, project, client.Reference{Material: "silty sand", Standard: client.ASTMD698, Method: "A",
		MaxDryDensity: pcf(112), OptimumMoisture: 14})
	if err != nil {
		t.Fatal(err)
	}
	unknown := ann.NewID()
	var tests []string
	for _, ref := range []string{own, unknown} {
		res, err := ann.RecordTest(ctx, client.TestInput{Project: project, SpecID: spec, ReferenceID: ref, Readings: coneReadings(105, 12.5), Feature: "pad"})
		if err != nil {
			t.Fatal(err)
		}
		tests = append(tests, res.TestID)
	}
	if rep := syncOK(t, ann, c.conn(""), project); rep.Rejected != 1 || rep.Waiting != 2 {
		t.Fatalf("ann's sync: %+v, want her reference refused and both tests waiting", rep)
	}

	clk.advance(23 * time.Hour)
	if st := syncStatus(t, ann, project); len(st.LongWaiting) != 0 {
		t.Errorf("after 23 hours, status names %+v as waiting too long", st.LongWaiting)
	}
	clk.advance(2 * time.Hour)
	st := syncStatus(t, ann, project)
	if len(st.LongWaiting) != 2 {
		t.Fatalf("after 25 hours, status names %d entries waiting too long, want 2: %+v", len(st.LongWaiting), st.LongWaiting)
	}
	want := map[string]client.WaitedRecord{tests[0]: {ID: own, Kind: "reference_added"}, tests[1]: {ID: unknown}}
	for _, w := range st.LongWaiting {
		if w.Kind != "test_recorded" || !slices.Contains(tests, w.RecordID) {
			t.Errorf("waiting entry %+v: want one of ann's tests", w)
			continue
		}
		if len(w.For) != 1 || w.For[0] != want[w.RecordID] {
			t.Errorf("test %s waits for %+v, want [%+v]", w.RecordID, w.For, want[w.RecordID])
		}
		if got := clk.now().Sub(w.Since); got < 25*time.Hour || got > 26*time.Hour {
			t.Errorf("test %s has waited %v, want 25 h", w.RecordID, got)
		}
	}
}
