package daemon

import (
	"bufio"
	"context"
	"io"
	"runtime/debug"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	reflectionpb "google.golang.org/grpc/reflection/grpc_reflection_v1"
	"google.golang.org/grpc/status"

	pb "tamp/internal/gen/tamp/v1"
)

// startServe runs tampd serve in-process and returns its address and a
// function that stops it and returns Run's error.
func startServe(t *testing.T, args ...string) (string, func() error) {
	t.Helper()
	return startServeOn(t, append([]string{"--data", t.TempDir()}, args...)...)
}

// startServeOn is startServe with the store given in args.
func startServeOn(t *testing.T, args ...string) (string, func() error) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	r, w := io.Pipe()
	done := make(chan error, 1)
	go func() {
		done <- Run(ctx, append([]string{"serve", "--listen", "127.0.0.1:0", "--log-format", "text"}, args...), w, io.Discard)
		w.Close()
	}()
	line, err := bufio.NewReader(r).ReadString('\n')
	if err != nil {
		cancel()
		t.Fatalf("tampd printed no address: %v (%v)", err, <-done)
	}
	go io.Copy(io.Discard, r)
	addr := strings.TrimSpace(strings.TrimPrefix(line, "tampd: listening on "))
	return addr, func() error {
		cancel()
		select {
		case err := <-done:
			return err
		case <-time.After(40 * time.Second):
			t.Fatal("tampd did not stop")
			return nil
		}
	}
}

func TestServeHealthReflectionAndShutdown(t *testing.T) {
	addr, stop := startServe(t)
	cc, err := grpc.NewClient(addr, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer cc.Close()
	ctx := context.Background()
	hr, err := healthpb.NewHealthClient(cc).Check(ctx, &healthpb.HealthCheckRequest{})
	if err != nil || hr.GetStatus() != healthpb.HealthCheckResponse_SERVING {
		t.Fatalf("health = %v, %v", hr.GetStatus(), err)
	}
	rc, err := reflectionpb.NewServerReflectionClient(cc).ServerReflectionInfo(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if err := rc.Send(&reflectionpb.ServerReflectionRequest{MessageRequest: &reflectionpb.ServerReflectionRequest_ListServices{}}); err != nil {
		t.Fatal(err)
	}
	resp, err := rc.Recv()
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, s := range resp.GetListServicesResponse().GetService() {
		names = append(names, s.GetName())
	}
	for _, want := range []string{"tamp.v1.SyncService", "tamp.v1.AdminService", "grpc.health.v1.Health"} {
		if !strings.Contains(strings.Join(names, " "), want) {
			t.Errorf("reflection lists %v, missing %s", names, want)
		}
	}
	rc.CloseSend()
	// Without a token the sync service refuses.
	_, err = pb.NewSyncServiceClient(cc).Push(ctx, &pb.PushRequest{ProjectId: "x"})
	if status.Code(err) != codes.Unauthenticated {
		t.Errorf("push without a token: %v", err)
	}
	if err := stop(); err != nil {
		t.Errorf("shutdown: %v", err)
	}
}

func TestServeRefusesPlainNonLoopback(t *testing.T) {
	err := Run(context.Background(), []string{"serve", "--data", t.TempDir(), "--listen", "0.0.0.0:0"}, io.Discard, io.Discard)
	if err == nil || !strings.Contains(err.Error(), "--tls-cert") {
		t.Errorf("plain gRPC on 0.0.0.0: %v", err)
	}
	for addr, want := range map[string]bool{"127.0.0.1:1": true, "[::1]:1": true, "localhost:1": true, "0.0.0.0:1": false, "10.1.2.3:1": false} {
		if got := isLoopback(addr); got != want {
			t.Errorf("isLoopback(%s) = %v", addr, got)
		}
	}
}

func TestTuneGC(t *testing.T) {
	before := debug.SetGCPercent(100)
	defer debug.SetGCPercent(before)
	t.Setenv("GOGC", "")
	if prev := TuneGC(); prev != 100 {
		t.Errorf("TuneGC returned %d, want the setting before, 100", prev)
	}
	if now := debug.SetGCPercent(100); now != GCPercent {
		t.Errorf("GC percent after TuneGC = %d, want %d", now, GCPercent)
	}
	// A GOGC in the environment wins.
	t.Setenv("GOGC", "150")
	debug.SetGCPercent(150)
	TuneGC()
	if now := debug.SetGCPercent(150); now != 150 {
		t.Errorf("GC percent with GOGC=150 = %d, want 150", now)
	}
}
