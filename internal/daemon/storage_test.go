package daemon

import (
	"context"
	"database/sql/driver"
	"io"
	"strings"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	sqlitedrv "modernc.org/sqlite"
)

// readOnlyDirs holds the data directories whose new SQLite connections are
// read-only. Tests may run as root, whom file modes do not stop, so a
// read-only data directory is made inside SQLite: every connection opened
// to it while the fault lasts gets query_only, and stays read-only after
// the fault clears, as a connection SQLite opened on an unwritable file
// does.
var (
	readOnlyDirs sync.Map
	readOnlyHook sync.Once
)

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

// tampd started on a data directory it cannot write still starts, serves
// reads and reports NOT_SERVING; once the directory is writable it reports
// SERVING by itself, without a restart.
func TestServeOnReadOnlyDataReportsNotServingThenRecovers(t *testing.T) {
	dir := t.TempDir()
	if err := Run(context.Background(), []string{"init", "--data", dir, "--admin", "Wren Halloway"}, io.Discard, io.Discard); err != nil {
		t.Fatal(err)
	}
	setReadOnly(dir, true)
	t.Cleanup(func() { setReadOnly(dir, false) })
	addr, stop := startServe(t, "--data", dir)
	cc, err := grpc.NewClient(addr, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer cc.Close()
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	w, err := healthpb.NewHealthClient(cc).Watch(ctx, &healthpb.HealthCheckRequest{})
	if err != nil {
		t.Fatal(err)
	}
	first, err := w.Recv()
	if err != nil || first.GetStatus() != healthpb.HealthCheckResponse_NOT_SERVING {
		t.Fatalf("health on a read-only data directory: %v, %v; want NOT_SERVING", first.GetStatus(), err)
	}
	setReadOnly(dir, false)
	for {
		r, err := w.Recv()
		if err != nil {
			t.Fatalf("health never came back once the directory was writable: %v", err)
		}
		if r.GetStatus() == healthpb.HealthCheckResponse_SERVING {
			break
		}
	}
	cancel()
	if err := stop(); err != nil {
		t.Errorf("shutdown: %v", err)
	}
}
