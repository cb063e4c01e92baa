package main_test

import (
	"context"
	"os/exec"
	"regexp"
	"sync"
	"testing"

	"google.golang.org/grpc"
	"google.golang.org/grpc/stats"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
)

// encodings is a client's stats handler that keeps, by method, the
// grpc-encoding of the last request sent and of the last answer received.
type encodings struct {
	mu              sync.Mutex
	request, answer map[string]string
}

type methodKey struct{}

func (e *encodings) TagRPC(ctx context.Context, info *stats.RPCTagInfo) context.Context {
	return context.WithValue(ctx, methodKey{}, info.FullMethodName)
}

func (e *encodings) HandleRPC(ctx context.Context, s stats.RPCStats) {
	m, _ := ctx.Value(methodKey{}).(string)
	e.mu.Lock()
	defer e.mu.Unlock()
	switch s := s.(type) {
	case *stats.OutHeader:
		e.request[m] = s.Compression
	case *stats.InHeader:
		e.answer[m] = s.Compression
	}
}

func (e *encodings) TagConn(ctx context.Context, _ *stats.ConnTagInfo) context.Context { return ctx }
func (e *encodings) HandleConn(context.Context, stats.ConnStats)                       {}

// The tampd binary accepts gzip-compressed calls and answers them
// compressed: a device's connection compresses every call, and the server,
// another process, decompresses them only if its binary registers gzip.
func TestTampdSpeaksGzip(t *testing.T) {
	if testing.Short() {
		t.Skip("builds and runs tampd")
	}
	bin := buildTampd(t)
	data := t.TempDir()
	out, err := exec.Command(bin, "init", "--data", data, "--admin", "Root Admin").CombinedOutput()
	if err != nil {
		t.Fatalf("tampd init: %v\n%s", err, out)
	}
	code := regexp.MustCompile(`enrolment code: (\S+)`).FindStringSubmatch(string(out))
	if code == nil {
		t.Fatalf("no enrolment code in %q", out)
	}
	srv := startTampd(t, bin, data)
	enc := &encodings{request: map[string]string{}, answer: map[string]string{}}
	cc, err := client.Dial(srv.addr, client.DialOptions{Plaintext: true, Extra: []grpc.DialOption{grpc.WithStatsHandler(enc)}})
	if err != nil {
		t.Fatal(err)
	}
	defer cc.Close()
	c := &crew{t: t, dir: t.TempDir()}
	c.admin = c.open("admin")
	if err := c.admin.Enroll(context.Background(), cc, code[1], "admin laptop"); err != nil {
		t.Fatal(err)
	}
	p, err := pb.NewAdminServiceClient(cc).CreateProject(c.adminCtx(), &pb.CreateProjectRequest{Name: "Juniper Wash levee"})
	if err != nil {
		t.Fatal(err)
	}
	c.project = p.GetProjectId()
	ana := c.member(cc, "Ana", pb.Role_ROLE_INSPECTOR)
	c.record(ana, 3, 110)
	rep, err := ana.Sync(context.Background(), cc, c.project, client.SyncOptions{})
	if err != nil {
		t.Fatalf("sync: %v", err)
	}
	if rep.Accepted != 3 {
		t.Errorf("accepted %d, want 3", rep.Accepted)
	}
	enc.mu.Lock()
	defer enc.mu.Unlock()
	for _, m := range []string{"/tamp.v1.AdminService/EnrollDevice", "/tamp.v1.SyncService/Push", "/tamp.v1.SyncService/Pull"} {
		if enc.request[m] != "gzip" || enc.answer[m] != "gzip" {
			t.Errorf("%s: sent with %q, answered with %q; want gzip both ways", m, enc.request[m], enc.answer[m])
		}
	}
}
