package server_test

import (
	"context"
	"testing"

	"tamp/client"
	"tamp/internal/pgtest"
	"tamp/server"
	"tamp/server/pgstore"
)

// startPostgresCluster starts a cluster whose store is a PostgreSQL
// database of the test's own (see internal/pgtest: TAMP_TEST_POSTGRES).
func startPostgresCluster(t testing.TB) *cluster {
	t.Helper()
	return startPostgresClusterOn(t, pgtest.NewDatabase(t))
}

// startPostgresClusterOn starts a cluster over the database dsn names.
func startPostgresClusterOn(t testing.TB, dsn string) *cluster {
	t.Helper()
	c := &cluster{tb: t, dir: t.TempDir(), openStore: func() (closingStore, error) {
		return pgstore.Open(context.Background(), dsn, pgstore.Options{})
	}}
	c.start("")
	return c
}

// The real server over PostgreSQL: devices record offline, sync and pull
// through it, and hold its ledger and state; after a restart the server
// loads the project from the database and they go on agreeing.
func TestPostgresDevicesSyncAndAgree(t *testing.T) {
	c := startPostgresCluster(t)
	project := c.newProject("Sagebrush Flats pad")
	qa, ann := c.device("quinn", server.QA), c.device("ann", server.Inspector)
	spec, ref := setUp(t, c, qa, project)
	record(t, ann, project, spec, ref, 12, 0)
	if rep := syncOK(t, ann, c.conn(""), project); rep.Waiting != 12 {
		t.Errorf("ann's first sync: %+v, want 12 waiting for the reference", rep)
	}
	syncOK(t, qa, c.conn(""), project)
	if rep := syncOK(t, ann, c.conn(""), project); rep.Accepted != 12 {
		t.Errorf("ann's second sync: %+v, want 12 accepted", rep)
	}
	syncOK(t, qa, c.conn(""), project)
	agree := func(when string, entries int) {
		t.Helper()
		head := c.head()
		if n := c.memberEntries(project); n != entries {
			t.Errorf("%s: the server holds %d of the devices' entries, want %d", when, n, entries)
		}
		for name, s := range map[string]*client.Store{"quinn": qa, "ann": ann} {
			if v := verified(t, s, project); !sameCheckpoint(v, head) {
				t.Errorf("%s: %s verified %d %s, the server's head is %d %s", when, name, v.Seq, v.Hash, head.Seq, head.Hash)
			}
			if s.Digest(project) != c.digest() {
				t.Errorf("%s: %s's state differs from the server's", when, name)
			}
			if o, _ := s.Outbox(context.Background()); o.Pending != 0 {
				t.Errorf("%s: %s has %d entries pending", when, name, o.Pending)
			}
		}
		for _, tt := range qa.Today(project) {
			if tt.Result.Verdict == client.Pending {
				t.Errorf("%s: quinn holds test %s ungraded", when, tt.ID)
			}
		}
	}
	agree("after the first round", 3+12)
	if n := len(qa.Today(project)); n != 12 {
		t.Errorf("quinn pulled %d of ann's tests, want 12", n)
	}

	addr := c.addr
	c.stop()
	c.start(addr)
	record(t, ann, project, spec, ref, 5, 1)
	if _, err := qa.DefineSpec(context.Background(), project, client.Spec{Name: "trench backfill", MinCompaction: "90"}); err != nil {
		t.Fatal(err)
	}
	syncOK(t, ann, c.conn(""), project)
	syncOK(t, qa, c.conn(""), project)
	syncOK(t, ann, c.conn(""), project)
	agree("after a restart", 3+12+5+1)
}
