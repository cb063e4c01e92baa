package main_test

import (
	"bufio"
	"context"
	"errors"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"syscall"
	"testing"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/soil"
)

// tampd is a running tampd process.
type tampd struct {
	cmd  *exec.Cmd
	addr string
}

func buildTampd(t *testing.T) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "tampd")
	out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput()
	if err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

func startTampd(t *testing.T, bin, data string) *tampd {
	t.Helper()
	cmd := exec.Command(bin, "serve", "--data", data, "--listen", "127.0.0.1:0", "--log-format", "text")
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	cmd.Stderr = io.Discard
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	line, err := bufio.NewReader(out).ReadString('\n')
	if err != nil {
		cmd.Process.Kill()
		t.Fatalf("tampd printed no address: %v", err)
	}
	go io.Copy(io.Discard, out)
	d := &tampd{cmd: cmd, addr: strings.TrimSpace(strings.TrimPrefix(line, "tampd: listening on "))}
	t.Cleanup(func() { d.kill() })
	return d
}

func (d *tampd) kill() {
	if d.cmd.ProcessState == nil {
		d.cmd.Process.Signal(syscall.SIGKILL)
		d.cmd.Wait()
	}
}

func (d *tampd) stop(t *testing.T) {
	t.Helper()
	d.cmd.Process.Signal(syscall.SIGTERM)
	if err := d.cmd.Wait(); err != nil {
		t.Fatalf("tampd stop: %v", err)
	}
}

func dial(t *testing.T, addr string) *grpc.ClientConn {
	t.Helper()
	cc, err := grpc.NewClient(addr, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { cc.Close() })
	return cc
}

func copyData(t *testing.T, from, to string) {
	t.Helper()
	os.MkdirAll(to, 0o755)
	for _, name := range []string{"ledger.db", "ledger.db-wal", "ledger.db-shm"} {
		os.Remove(filepath.Join(to, name))
		b, err := os.ReadFile(filepath.Join(from, name))
		if errors.Is(err, os.ErrNotExist) {
			continue
		}
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join(to, name), b, 0o600); err != nil {
			t.Fatal(err)
		}
	}
}

type crew struct {
	t       *testing.T
	dir     string
	admin   *client.Store
	project string
	spec    string
	ref     string
}

func (c *crew) open(name string) *client.Store {
	c.t.Helper()
	s, err := client.Open(context.Background(), filepath.Join(c.dir, name+".db"), client.Options{Durability: client.DurabilityNormal})
	if err != nil {
		c.t.Fatal(err)
	}
	c.t.Cleanup(func() { s.Close() })
	return s
}

func (c *crew) adminCtx() context.Context {
	ctx, err := c.admin.CallContext(context.Background())
	if err != nil {
		c.t.Fatal(err)
	}
	return ctx
}

// member adds a user with a role and enrols a device for them.
func (c *crew) member(cc *grpc.ClientConn, name string, role pb.Role) *client.Store {
	c.t.Helper()
	ac := pb.NewAdminServiceClient(cc)
	m, err := ac.AddMember(c.adminCtx(), &pb.AddMemberRequest{ProjectId: c.project, UserName: name, Role: role})
	if err != nil {
		c.t.Fatal(err)
	}
	code, err := ac.IssueEnrollmentCode(c.adminCtx(), &pb.IssueEnrollmentCodeRequest{UserId: m.GetUserId()})
	if err != nil {
		c.t.Fatal(err)
	}
	s := c.open(name)
	if err := s.Enroll(context.Background(), cc, code.GetCode(), name+"'s tablet"); err != nil {
		c.t.Fatal(err)
	}
	return s
}

func (c *crew) record(s *client.Store, n int, dry float64) []string {
	c.t.Helper()
	var ids []string
	for i := range n {
		sd := 99.0 * soil.PoundPerCubicFoot
		used, cone := 7.0*soil.Pound, 0.53*soil.Pound
		w := 12.0
		mass := (dry + float64(i)) * soil.PoundPerCubicFoot * (1 + w/100) * (used - cone) / sd
		r, err := s.RecordTest(context.Background(), client.TestInput{Project: c.project, SpecID: c.spec, ReferenceID: c.ref,
			Readings: client.Readings{SandCone: &client.SandCone{SandDensity: sd, SandUsed: used, ConeCorrection: cone, SoilMass: mass, Moisture: w}},
			Feature:  "pad fill", LiftNumber: uint32(1 + i)})
		if err != nil {
			c.t.Fatal(err)
		}
		ids = append(ids, r.TestID)
	}
	return ids
}

func syncOK(t *testing.T, s *client.Store, cc *grpc.ClientConn, project string) {
	t.Helper()
	if _, err := s.Sync(context.Background(), cc, project, client.SyncOptions{}); err != nil {
		t.Fatalf("sync: %v", err)
	}
}

// A restore of tampd's data directory from an older copy, with the real
// binary: devices enrolled before and after the copy (one of them lost
// before the restore, whose work only the others can hand back), a push acknowledged
// just before a crash (the device's closing pull never happens), a
// revocation after the copy. After the restore every device syncs twice:
// the server then holds every entry any device had acknowledged, once, every
// device's ledger equals the server's, and the revoked device stays revoked
// (issue 10, rule 6).
func TestRestoreFromOlderCopy(t *testing.T) {
	if testing.Short() {
		t.Skip("builds and runs tampd")
	}
	bin := buildTampd(t)
	data, backup := t.TempDir(), t.TempDir()
	out, err := exec.Command(bin, "init", "--data", data, "--admin", "Root Admin").CombinedOutput()
	if err != nil {
		t.Fatalf("tampd init: %v\n%s", err, out)
	}
	code := regexp.MustCompile(`enrolment code: (\S+)`).FindStringSubmatch(string(out))
	if code == nil {
		t.Fatalf("no enrolment code in %q", out)
	}
	srv := startTampd(t, bin, data)
	cc := dial(t, srv.addr)
	c := &crew{t: t, dir: t.TempDir()}
	c.admin = c.open("admin")
	if err := c.admin.Enroll(context.Background(), cc, code[1], "admin laptop"); err != nil {
		t.Fatal(err)
	}
	p, err := pb.NewAdminServiceClient(cc).CreateProject(c.adminCtx(), &pb.CreateProjectRequest{Name: "Tumbleweed Mesa pad"})
	if err != nil {
		t.Fatal(err)
	}
	c.project = p.GetProjectId()
	qa := c.member(cc, "Quill", pb.Role_ROLE_QA)
	ana := c.member(cc, "Ana", pb.Role_ROLE_INSPECTOR)
	rae := c.member(cc, "Rae", pb.Role_ROLE_INSPECTOR)
	if c.spec, err = qa.DefineSpec(context.Background(), c.project, client.Spec{Name: "pad fill 95", MinCompaction: "95",
		MoistureLow: "-2", MoistureHigh: "2"}); err != nil {
		t.Fatal(err)
	}
	if c.ref, err = qa.AddReference(context.Background(), c.project, client.Reference{Material: "red sandy clay",
		Standard: client.ASTMD698, Method: "A", Edition: 2012, MaxDryDensity: 116 * soil.PoundPerCubicFoot, OptimumMoisture: 13.5}); err != nil {
		t.Fatal(err)
	}
	everyone := []*client.Store{c.admin, qa, ana, rae}
	for _, s := range everyone {
		syncOK(t, s, cc, c.project)
	}
	c.record(ana, 3, 110)
	c.record(rae, 2, 112)
	syncOK(t, ana, cc, c.project)
	syncOK(t, rae, cc, c.project)

	// The copy, taken with tampd stopped.
	srv.stop(t)
	copyData(t, data, backup)
	srv = startTampd(t, bin, data)
	cc = dial(t, srv.addr)

	// After the copy: a device enrolled, entries made and synced, a
	// revocation that others pull.
	cy := c.member(cc, "Cy", pb.Role_ROLE_INSPECTOR)
	syncOK(t, cy, cc, c.project)
	cyTests := c.record(cy, 2, 108)
	syncOK(t, cy, cc, c.project)
	// Dot's tablet, enrolled after the copy, syncs once and is lost: only
	// the others can hand its work back.
	dot := c.member(cc, "Dot", pb.Role_ROLE_INSPECTOR)
	syncOK(t, dot, cc, c.project)
	dotTests := c.record(dot, 2, 106)
	syncOK(t, dot, cc, c.project)
	if _, err := pb.NewAdminServiceClient(cc).RevokeDevice(c.adminCtx(), &pb.RevokeDeviceRequest{DeviceId: rae.DeviceID(), Reason: "tablet lost"}); err != nil {
		t.Fatal(err)
	}
	for _, s := range []*client.Store{c.admin, qa, cy} {
		syncOK(t, s, cc, c.project)
	}
	// Ana pushes; the server acknowledges and is killed before her pull.
	anaTests := c.record(ana, 2, 104)
	_, err = ana.Sync(context.Background(), cc, c.project, client.SyncOptions{MaxAttempts: 1, Progress: func(pr client.Progress) {
		if pr.Phase == "push" && pr.Events == pr.Total {
			srv.kill()
		}
	}})
	if err == nil {
		t.Fatal("ana's sync ended well although tampd was killed before her pull")
	}
	if st, _ := ana.Status(context.Background(), c.project); st.Outbox.Pending != 0 {
		t.Fatalf("ana's push was not acknowledged before the kill: %d pending", st.Outbox.Pending)
	}

	// The restore.
	copyData(t, backup, data)
	srv = startTampd(t, bin, data)
	cc = dial(t, srv.addr)

	for round := range 2 {
		for _, s := range []*client.Store{c.admin, qa, ana, cy} {
			if _, err := s.Sync(context.Background(), cc, c.project, client.SyncOptions{}); err != nil && !errors.Is(err, client.ErrFork) {
				t.Errorf("round %d: sync: %v", round, err)
			}
		}
		_, err := rae.Sync(context.Background(), cc, c.project, client.SyncOptions{})
		if round == 1 && !errors.Is(err, client.ErrRevoked) {
			t.Errorf("round %d: the revoked device's sync: %v, want ErrRevoked", round, err)
		}
	}

	// What the server holds, read by the administrator's device after one
	// more sync: every device verified the same head and holds the same
	// state.
	syncOK(t, c.admin, cc, c.project)
	ref, err := c.admin.Status(context.Background(), c.project)
	if err != nil {
		t.Fatal(err)
	}
	for name, s := range map[string]*client.Store{"qa": qa, "ana": ana, "cy": cy} {
		syncOK(t, s, cc, c.project)
		st, err := s.Status(context.Background(), c.project)
		if err != nil {
			t.Fatal(err)
		}
		if st.Verified != ref.Verified {
			t.Errorf("%s verified %d/%d, the server's head is %d/%d", name, st.Verified.Epoch, st.Verified.Seq, ref.Verified.Epoch, ref.Verified.Seq)
		}
		if s.Digest(c.project) != c.admin.Digest(c.project) {
			t.Errorf("%s's state differs from the server's", name)
		}
		if st.Unconfirmed != 0 || st.ServerLacks != 0 || st.Outbox.Pending != 0 {
			t.Errorf("%s: %d unconfirmed, %d the server lacks, %d pending", name, st.Unconfirmed, st.ServerLacks, st.Outbox.Pending)
		}
	}
	for _, id := range append(append(anaTests, cyTests...), dotTests...) {
		if _, err := c.admin.Test(c.project, id); err != nil {
			t.Errorf("test %s, acknowledged before the restore, is not in the server's ledger: %v", id, err)
		}
	}
	// Every entry once: the chain the admin verified holds each event id once.
	seen := map[string]bool{}
	pc := pb.NewSyncServiceClient(cc)
	ctx, err := c.admin.CallContext(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	stream, err := pc.Pull(ctx, &pb.PullRequest{ProjectId: c.project})
	if err != nil {
		t.Fatal(err)
	}
	n := 0
	for {
		resp, err := stream.Recv()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		for _, e := range resp.GetEntries() {
			sg, err := ledger.FromEnvelope(e.GetEvent())
			if err != nil {
				t.Fatal(err)
			}
			if seen[sg.Event.ID] {
				t.Errorf("event %s is in the ledger twice", sg.Event.ID)
			}
			seen[sg.Event.ID] = true
			n++
		}
	}
	if uint64(n) != ref.Verified.Seq {
		t.Errorf("pulled %d entries, the head is at %d", n, ref.Verified.Seq)
	}
}
