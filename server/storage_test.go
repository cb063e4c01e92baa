package server_test

import (
	"context"
	"database/sql/driver"
	"fmt"
	"strings"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/status"
	sqlitedrv "modernc.org/sqlite"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/sqlite"
	"tamp/server"
)

// These tests put the real SQLite store in the states of a full disk and a
// read-only data directory. The tests may run as root, whom file modes do
// not stop, so the faults are made inside SQLite: a full disk by lowering
// the writer connection's max_page_count to the pages the file holds (every
// insert that needs a new page fails with SQLITE_FULL, as on a full disk);
// a read-only data directory by opening every connection to it with
// query_only while the fault lasts (every write fails with SQLITE_READONLY,
// and a connection opened meanwhile stays read-only after the fault clears,
// as a connection SQLite opened on an unwritable file does).

// readOnlyDirs holds the directories whose new connections are read-only.
var (
	readOnlyDirs sync.Map
	readOnlyHook sync.Once
)

// setReadOnly makes the connections opened from now on to databases in dir
// read-only (on) or writable (off).
func setReadOnly(dir string, on bool) {
	readOnlyHook.Do(func() {
		sqlitedrv.RegisterConnectionHook(func(conn sqlitedrv.ExecQuerierContext, dsn string) error {
			ro := false
			readOnlyDirs.Range(func(k, _ any) bool {
				ro = strings.Contains(dsn, k.(string)+"/")
				return !ro
			})
			if !ro {
				return nil
			}
			_, err := conn.ExecContext(context.Background(), "PRAGMA query_only = 1", []driver.NamedValue{})
			return err
		})
	})
	if on {
		readOnlyDirs.Store(dir, true)
	} else {
		readOnlyDirs.Delete(dir)
	}
}

// storeDB returns the database under a SQLite store, which its package
// does not export.
func storeDB(tb testing.TB, st server.Store) *sqlite.DB {
	tb.Helper()
	db, ok := sqlite.DBOf(st)
	if !ok {
		tb.Fatalf("no database under the store %T", st)
	}
	return db
}

// fillDisk makes the store's writer fail every write that needs a new page
// (full true), or lifts that limit.
func fillDisk(t *testing.T, c *cluster, full bool) {
	t.Helper()
	w := storeDB(t, c.store).Writer()
	limit := int64(1<<32 - 2)
	if full {
		if err := w.QueryRow("PRAGMA page_count").Scan(&limit); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := w.Exec(fmt.Sprintf("PRAGMA max_page_count = %d", limit)); err != nil {
		t.Fatal(err)
	}
}

// healthOf returns the server's health for service ("" for the server).
func healthOf(t *testing.T, c *cluster, service string) healthpb.HealthCheckResponse_ServingStatus {
	t.Helper()
	r, err := healthpb.NewHealthClient(c.conn("")).Check(context.Background(), &healthpb.HealthCheckRequest{Service: service})
	if err != nil {
		t.Fatalf("health of %q: %v", service, err)
	}
	return r.GetStatus()
}

// wantStorageUnavailable checks that a push failed with Unavailable giving
// the reason of the cause.
func wantStorageUnavailable(t *testing.T, err error, cause string) {
	t.Helper()
	if reason, _, _ := reasonOf(err); status.Code(err) != codes.Unavailable || reason != cause {
		t.Fatalf("push while the store cannot write: %v, want Unavailable for %s", err, cause)
	}
}

// pushAccepted pushes events and fails the test unless every one is
// accepted.
func pushAccepted(t *testing.T, c *cluster, d *rawDevice, project string, events ...ledger.Signed) {
	t.Helper()
	resp, err := d.push(t, c, project, events...)
	if err != nil {
		t.Fatalf("push after the fault cleared: %v", err)
	}
	for _, o := range resp.GetOutcomes() {
		if o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
			t.Fatalf("push after the fault cleared: event %s %v %s", o.GetEventId(), o.GetStatus(), o.GetMessage())
		}
	}
}

func closeServer(t *testing.T, c *cluster) {
	t.Cleanup(func() {
		if err := c.srv.Close(); err != nil {
			t.Errorf("close: %v", err)
		}
	})
}

// A full disk: pushes fail with Unavailable saying so, health is
// NOT_SERVING, nothing is half stored; once space is freed the next push is
// stored and health is SERVING, without a restart.
func TestFullDiskPushUnavailableThenResumes(t *testing.T) {
	c := startCluster(t, t.TempDir())
	closeServer(t, c)
	project := c.newProject("Quartz Hill haul road")
	d := c.rawDevice(t, "ines", map[string]server.Role{project: server.Inspector}, false)
	pushAccepted(t, c, d, project, d.tests(t, project, 3)...)
	before := c.head().Seq

	fillDisk(t, c, true)
	events := d.tests(t, project, 300)
	_, err := d.push(t, c, project, events...)
	wantStorageUnavailable(t, err, "STORAGE_FULL")
	for _, svc := range []string{"", "tamp.v1.SyncService", "tamp.v1.AdminService"} {
		if h := healthOf(t, c, svc); h != healthpb.HealthCheckResponse_NOT_SERVING {
			t.Errorf("health of %q with a full disk: %v, want NOT_SERVING", svc, h)
		}
	}
	if h := healthOf(t, c, "tamp.v1.LedgerReadService"); h != healthpb.HealthCheckResponse_SERVING {
		t.Errorf("health of the read service with a full disk: %v, want SERVING (reads still work)", h)
	}
	// Still full: the next push is refused the same way.
	_, err = d.push(t, c, project, events...)
	wantStorageUnavailable(t, err, "STORAGE_FULL")
	if h := c.head(); h.Seq != before {
		t.Fatalf("head at %d with a full disk, want %d as before", h.Seq, before)
	}

	fillDisk(t, c, false)
	pushAccepted(t, c, d, project, events...)
	if h := healthOf(t, c, ""); h != healthpb.HealthCheckResponse_SERVING {
		t.Errorf("health once space is freed: %v, want SERVING", h)
	}
	if h := c.head(); h.Seq != before+300 {
		t.Errorf("head at %d, want %d", h.Seq, before+300)
	}
}

// A read-only data directory: tampd started on it answers pushes with
// Unavailable saying so, and health NOT_SERVING; once the directory is
// writable again, the next push is stored and health is SERVING, although
// the connection the store opened was read-only.
func TestReadOnlyDataDirPushUnavailableThenResumes(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Quartz Hill haul road")
	d := c.rawDevice(t, "ines", map[string]server.Role{project: server.Inspector}, false)
	pushAccepted(t, c, d, project, d.tests(t, project, 2)...)
	before := c.head().Seq
	c.stop()

	setReadOnly(c.dir, true)
	t.Cleanup(func() { setReadOnly(c.dir, false) })
	c.start("")
	closeServer(t, c)
	events := d.tests(t, project, 5)
	_, err := d.push(t, c, project, events...)
	wantStorageUnavailable(t, err, "STORAGE_READ_ONLY")
	if h := healthOf(t, c, ""); h != healthpb.HealthCheckResponse_NOT_SERVING {
		t.Errorf("health with a read-only data directory: %v, want NOT_SERVING", h)
	}

	setReadOnly(c.dir, false)
	pushAccepted(t, c, d, project, events...)
	if h := healthOf(t, c, ""); h != healthpb.HealthCheckResponse_SERVING {
		t.Errorf("health once the directory is writable: %v, want SERVING", h)
	}
	if h := c.head(); h.Seq < before+5 {
		t.Errorf("head at %d, want at least %d", h.Seq, before+5)
	}
}

// Health comes back by itself once the fault clears, with no push to
// notice it: a balancer that stopped sending pushes sends them again.
func TestStorageHealthRecoversWithoutPushes(t *testing.T) {
	c := startCluster(t, t.TempDir())
	closeServer(t, c)
	project := c.newProject("Quartz Hill haul road")
	d := c.rawDevice(t, "ines", map[string]server.Role{project: server.Inspector}, false)
	fillDisk(t, c, true)
	_, err := d.push(t, c, project, d.tests(t, project, 300)...)
	wantStorageUnavailable(t, err, "STORAGE_FULL")

	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	w, err := healthpb.NewHealthClient(c.conn("")).Watch(ctx, &healthpb.HealthCheckRequest{})
	if err != nil {
		t.Fatal(err)
	}
	first, err := w.Recv()
	if err != nil || first.GetStatus() != healthpb.HealthCheckResponse_NOT_SERVING {
		t.Fatalf("health with a full disk: %v, %v; want NOT_SERVING", first.GetStatus(), err)
	}
	fillDisk(t, c, false)
	for {
		r, err := w.Recv()
		if err != nil {
			t.Fatalf("health never came back after space was freed: %v", err)
		}
		if r.GetStatus() == healthpb.HealthCheckResponse_SERVING {
			break
		}
	}
	cancel()
	pushAccepted(t, c, d, project, d.tests(t, project, 3)...)
}
