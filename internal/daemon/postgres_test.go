package daemon

import (
	"bytes"
	"context"
	"io"
	"path/filepath"
	"strings"
	"testing"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/pgtest"
)

// tampd init and serve on PostgreSQL: init creates the schema and the first
// administrator, whose device enrols with the code and creates a project;
// a second init is refused; serve restarted on the same database knows
// them.
func TestPostgresInitAndServe(t *testing.T) {
	dsn := pgtest.NewDatabase(t)
	var out bytes.Buffer
	if err := Run(t.Context(), []string{"init", "--store", dsn, "--admin", "Marta Quill", "--code-only"}, &out, io.Discard); err != nil {
		t.Fatal(err)
	}
	code := strings.TrimSpace(out.String())
	err := Run(t.Context(), []string{"init", "--store", dsn, "--admin", "Someone Else"}, io.Discard, io.Discard)
	if err == nil || !strings.Contains(err.Error(), "already initialised") {
		t.Errorf("init again on one database: %v, want already initialised", err)
	}

	addr, stop := startServeOn(t, "--store", dsn)
	cc, err := grpc.NewClient(addr, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer cc.Close()
	ctx := context.Background()
	if hr, err := healthpb.NewHealthClient(cc).Check(ctx, &healthpb.HealthCheckRequest{}); err != nil || hr.GetStatus() != healthpb.HealthCheckResponse_SERVING {
		t.Fatalf("health = %v, %v", hr.GetStatus(), err)
	}
	dev, err := client.Open(ctx, filepath.Join(t.TempDir(), "laptop.db"), client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer dev.Close()
	if err := dev.Enroll(ctx, cc, code, "Marta's laptop"); err != nil {
		t.Fatalf("enrol with init's code: %v", err)
	}
	actx, err := dev.CallContext(ctx)
	if err != nil {
		t.Fatal(err)
	}
	r, err := pb.NewAdminServiceClient(cc).CreateProject(actx, &pb.CreateProjectRequest{Name: "Juniper Flats haul road"})
	if err != nil {
		t.Fatalf("create a project: %v", err)
	}
	if err := stop(); err != nil {
		t.Errorf("shutdown: %v", err)
	}

	addr, stop = startServeOn(t, "--store", dsn)
	defer func() {
		if err := stop(); err != nil {
			t.Errorf("shutdown: %v", err)
		}
	}()
	cc2, err := grpc.NewClient(addr, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer cc2.Close()
	if _, err := dev.Sync(ctx, cc2, r.GetProjectId(), client.SyncOptions{}); err != nil {
		t.Errorf("sync with the restarted tampd: %v", err)
	}
	ms, err := pb.NewAdminServiceClient(cc2).ListMembers(actx, &pb.ListMembersRequest{ProjectId: r.GetProjectId()})
	if err != nil || len(ms.GetMembers()) != 1 || ms.GetMembers()[0].GetUserName() != "Marta Quill" {
		t.Errorf("the project's members after a restart = %v, %v; want Marta Quill", ms.GetMembers(), err)
	}
}

// --data and --store: exactly one, and --store a PostgreSQL URL.
func TestStoreFlags(t *testing.T) {
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"init"}, "--data or --store: one is required"},
		{[]string{"serve"}, "--data or --store: one is required"},
		{[]string{"init", "--data", t.TempDir(), "--store", "postgres://u@h/db"}, "not both"},
		{[]string{"serve", "--store", "mysql://u@h/db"}, "--store: must be a PostgreSQL URL"},
		{[]string{"serve", "--store", "host=h dbname=db"}, "--store: must be a PostgreSQL URL"},
		{[]string{"serve", "--store", "postgres://u@h/db", "--synchronous-normal"}, "applies to SQLite (--data) only"},
	} {
		err := Run(context.Background(), tc.args, io.Discard, io.Discard)
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("tampd %s: %v, want %q", strings.Join(tc.args, " "), err, tc.want)
		}
	}
}
