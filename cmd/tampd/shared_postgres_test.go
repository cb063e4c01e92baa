package main_test

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"sort"
	"strings"
	"sync"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/backoff"
	"google.golang.org/grpc/codes"
	"google.golang.org/protobuf/proto"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/pgtest"
	"tamp/internal/soil"
	"tamp/server/pgstore"
)

// instance is one tampd serving a PostgreSQL store at a fixed address,
// which it keeps across SIGKILLs and restarts.
type instance struct {
	bin, store, addr, log string

	mu   sync.Mutex
	cmd  *exec.Cmd
	runs int
}

// start starts the instance's tampd (on addr, or on a free port the first
// time) and waits for it to listen.
func (in *instance) start() error {
	in.mu.Lock()
	defer in.mu.Unlock()
	listen := in.addr
	if listen == "" {
		listen = "127.0.0.1:0"
	}
	logf, err := os.OpenFile(in.log, os.O_CREATE|os.O_APPEND|os.O_WRONLY, 0o600)
	if err != nil {
		return err
	}
	defer logf.Close()
	in.runs++
	fmt.Fprintf(logf, "--- run %d on %s\n", in.runs, listen)
	cmd := exec.Command(in.bin, "serve", "--store", in.store, "--listen", listen, "--log-format", "text")
	cmd.Stderr = logf
	out, err := cmd.StdoutPipe()
	if err != nil {
		return err
	}
	if err := cmd.Start(); err != nil {
		return err
	}
	line, err := bufio.NewReader(out).ReadString('\n')
	if err != nil {
		cmd.Process.Kill()
		cmd.Wait()
		return fmt.Errorf("tampd (run %d on %s) printed no address: %v; see %s", in.runs, listen, err, in.log)
	}
	go io.Copy(io.Discard, out)
	in.cmd = cmd
	in.addr = strings.TrimSpace(strings.TrimPrefix(line, "tampd: listening on "))
	return nil
}

// kill ends the instance's tampd with SIGKILL, as a crash or a pulled plug.
func (in *instance) kill() {
	in.mu.Lock()
	defer in.mu.Unlock()
	if in.cmd != nil && in.cmd.ProcessState == nil {
		in.cmd.Process.Signal(syscall.SIGKILL)
		in.cmd.Wait()
	}
}

// dialRetrying connects to addr, reconnecting within a fraction of a second
// after the server there comes back (gRPC's default backoff grows to two
// minutes, which would leave a restarted instance unused). When pushing is
// not nil it counts the pushes in flight over the connection.
func dialRetrying(t *testing.T, addr string, pushing *atomic.Int32) *grpc.ClientConn {
	t.Helper()
	count := func(ctx context.Context, method string, req, reply any, cc *grpc.ClientConn, invoker grpc.UnaryInvoker, opts ...grpc.CallOption) error {
		if pushing != nil && method == pb.SyncService_Push_FullMethodName {
			pushing.Add(1)
			defer pushing.Add(-1)
		}
		return invoker(ctx, method, req, reply, cc, opts...)
	}
	cc, err := client.Dial(addr, client.DialOptions{Plaintext: true, Extra: []grpc.DialOption{grpc.WithConnectParams(grpc.ConnectParams{
		Backoff:           backoff.Config{BaseDelay: 50 * time.Millisecond, Multiplier: 1.6, Jitter: 0.2, MaxDelay: 300 * time.Millisecond},
		MinConnectTimeout: 2 * time.Second,
	}), grpc.WithChainUnaryInterceptor(count)}})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { cc.Close() })
	return cc
}

// coneTest is a sand-cone test of dry density dry pcf at 12% moisture on
// lift lift of the pad: sand of 99.0 pcf, 7.00 lb used, 0.53 lb in the cone
// (as crew.record).
func coneTest(project, spec, ref string, dry float64, lift uint32) client.TestInput {
	sd := 99.0 * soil.PoundPerCubicFoot
	used, cone := 7.0*soil.Pound, 0.53*soil.Pound
	w := 12.0
	mass := dry * soil.PoundPerCubicFoot * (1 + w/100) * (used - cone) / sd
	return client.TestInput{Project: project, SpecID: spec, ReferenceID: ref,
		Readings: client.Readings{SandCone: &client.SandCone{SandDensity: sd, SandUsed: used, ConeCorrection: cone, SoilMass: mass, Moisture: w}},
		Feature:  "pad fill", LiftNumber: lift}
}

// Two tampd processes share one PostgreSQL database (issue 13): twenty
// devices enrol through either, then record tests and push and pull
// through either at random, at once, while an instance is killed with
// SIGKILL and restarted four times at random moments; a device whose sync
// fails carries on recording and syncs again later, through whichever
// instance it picks then. Afterwards every device syncs through both, and:
// the project's ledger in the database is one unbroken chain (sequence
// numbers 1..head, each hash verified with every signature by
// client.VerifyExport) holding every entry once, its tests exactly the
// ones the devices recorded; every device verified that head, has nothing
// pending and holds the state the exported ledger implies; both instances'
// projections answer the review queue alike, listing every test; and a
// fresh device that pulls only from one instance holds the same state as
// one that pulls only from the other.
func TestPostgresTwoTampdWithKills(t *testing.T) {
	if testing.Short() {
		t.Skip("builds and runs two tampd on PostgreSQL")
	}
	dsn := pgtest.NewDatabase(t) // skips without a server (fails under TAMP_CI)
	began := time.Now()
	bin := buildTampd(t)
	ctx := context.Background()

	out, err := exec.Command(bin, "init", "--store", dsn, "--admin", "Root Admin").CombinedOutput()
	if err != nil {
		t.Fatalf("tampd init --store: %v\n%s", err, out)
	}
	code := regexp.MustCompile(`enrolment code: (\S+)`).FindStringSubmatch(string(out))
	if code == nil {
		t.Fatalf("no enrolment code in %q", out)
	}
	logs := t.TempDir()
	insts := make([]*instance, 2)
	for i := range insts {
		insts[i] = &instance{bin: bin, store: dsn, log: filepath.Join(logs, fmt.Sprintf("tampd-%c.log", 'a'+i))}
		if err := insts[i].start(); err != nil {
			t.Fatal(err)
		}
		t.Cleanup(insts[i].kill)
	}
	t.Cleanup(func() {
		if t.Failed() {
			for _, in := range insts {
				if b, err := os.ReadFile(in.log); err == nil {
					t.Logf("%s:\n%s", filepath.Base(in.log), tail(b, 40))
				}
			}
		}
	})
	var pushing [2]atomic.Int32
	conns := []*grpc.ClientConn{dialRetrying(t, insts[0].addr, &pushing[0]), dialRetrying(t, insts[1].addr, &pushing[1])}
	seed := uint64(time.Now().UnixNano())
	t.Logf("seed %d", seed)
	setup := rand.New(rand.NewPCG(seed, 1))
	either := func() *grpc.ClientConn { return conns[setup.IntN(2)] }

	// Set-up, through either instance at random, before any kill.
	c := &crew{t: t, dir: t.TempDir()}
	c.admin = c.open("admin")
	if err := c.admin.Enroll(ctx, either(), code[1], "admin laptop"); err != nil {
		t.Fatal(err)
	}
	p, err := pb.NewAdminServiceClient(either()).CreateProject(c.adminCtx(), &pb.CreateProjectRequest{Name: "Coyote Bench pad"})
	if err != nil {
		t.Fatal(err)
	}
	c.project = p.GetProjectId()
	// enrol adds a member through one instance and enrols the device
	// through either, at random.
	enrol := func(s *client.Store, name string, role pb.Role, rng *rand.Rand) error {
		actx, err := c.admin.CallContext(ctx)
		if err != nil {
			return err
		}
		m, err := pb.NewAdminServiceClient(conns[rng.IntN(2)]).AddMember(actx, &pb.AddMemberRequest{ProjectId: c.project, UserName: name, Role: role})
		if err != nil {
			return fmt.Errorf("add %s: %w", name, err)
		}
		code, err := pb.NewAdminServiceClient(conns[rng.IntN(2)]).IssueEnrollmentCode(actx, &pb.IssueEnrollmentCodeRequest{UserId: m.GetUserId()})
		if err != nil {
			return fmt.Errorf("code for %s: %w", name, err)
		}
		if err := s.Enroll(ctx, conns[rng.IntN(2)], code.GetCode(), name+"'s tablet"); err != nil {
			return fmt.Errorf("enrol %s: %w", name, err)
		}
		return nil
	}
	qa := c.open("Quill")
	if err := enrol(qa, "Quill", pb.Role_ROLE_QA, setup); err != nil {
		t.Fatal(err)
	}
	if c.spec, err = qa.DefineSpec(ctx, c.project, client.Spec{Name: "pad fill 95", MinCompaction: "95",
		MoistureLow: "-2", MoistureHigh: "2"}); err != nil {
		t.Fatal(err)
	}
	if c.ref, err = qa.AddReference(ctx, c.project, client.Reference{Material: "tan silty sand",
		Standard: client.ASTMD698, Method: "A", Edition: 2012, MaxDryDensity: 116 * soil.PoundPerCubicFoot, OptimumMoisture: 12.5}); err != nil {
		t.Fatal(err)
	}
	syncOK(t, qa, either(), c.project)
	syncOK(t, c.admin, either(), c.project)
	const devices = 20
	// The crew enrols at once, four devices at a time (a server's limit on
	// enrolment attempts from one address counts those in flight: ten),
	// each device then pulling the spec and the reference.
	crowd := make([]*client.Store, devices)
	for i := range crowd {
		crowd[i] = c.open(fmt.Sprintf("Inspector %02d", i+1))
	}
	var enrolled sync.WaitGroup
	slots := make(chan struct{}, 4)
	for i, s := range crowd {
		enrolled.Add(1)
		go func() {
			defer enrolled.Done()
			slots <- struct{}{}
			defer func() { <-slots }()
			rng := rand.New(rand.NewPCG(seed, uint64(200+i)))
			err := enrol(s, fmt.Sprintf("Inspector %02d", i+1), pb.Role_ROLE_INSPECTOR, rng)
			if err == nil {
				_, err = s.Sync(ctx, conns[rng.IntN(2)], c.project, client.SyncOptions{})
			}
			if err != nil {
				t.Errorf("inspector %02d: %v", i+1, err)
			}
		}()
	}
	enrolled.Wait()
	if t.Failed() {
		t.FailNow()
	}
	// Two observers, each enrolled through one instance and syncing only
	// through it.
	var observers []*client.Store
	for i, cc := range conns {
		name := fmt.Sprintf("Observer %c", 'A'+i)
		m, err := pb.NewAdminServiceClient(cc).AddMember(c.adminCtx(), &pb.AddMemberRequest{ProjectId: c.project, UserName: name, Role: pb.Role_ROLE_QA})
		if err != nil {
			t.Fatal(err)
		}
		code, err := pb.NewAdminServiceClient(cc).IssueEnrollmentCode(c.adminCtx(), &pb.IssueEnrollmentCodeRequest{UserId: m.GetUserId()})
		if err != nil {
			t.Fatal(err)
		}
		o := c.open(name)
		if err := o.Enroll(ctx, cc, code.GetCode(), name+"'s laptop"); err != nil {
			t.Fatal(err)
		}
		syncOK(t, o, cc, c.project)
		observers = append(observers, o)
	}
	st, err := pgstore.Open(ctx, dsn, pgstore.Options{MaxConns: 2})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	before, err := st.Head(ctx, c.project)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("set-up: %d entries in the ledger, %v", before.Seq, time.Since(began).Round(time.Millisecond))

	// The storm: devices record and sync through either instance at random
	// while the killer strikes; each device goes on until the killer is
	// done and it has synced at least minRounds times.
	const kills, minRounds, maxRounds = 4, 4, 40
	killed := make(chan struct{})
	var kerr error
	var killLog []string
	go func() {
		defer close(killed)
		rng := rand.New(rand.NewPCG(seed, 2))
		for k := range kills {
			time.Sleep(time.Duration(300+rng.IntN(900)) * time.Millisecond)
			in := rng.IntN(2)
			// Strike while a push to the instance is in flight, when one
			// comes within a moment: in the middle of a decision, a write
			// or an answer.
			for wait := time.Now().Add(300 * time.Millisecond); pushing[in].Load() == 0 && time.Now().Before(wait); {
				time.Sleep(100 * time.Microsecond)
			}
			flying := pushing[in].Load()
			insts[in].kill()
			down := time.Duration(50+rng.IntN(400)) * time.Millisecond
			killLog = append(killLog, fmt.Sprintf("kill %d: tampd %c with %d pushes in flight, down %v", k+1, 'a'+in, flying, down))
			time.Sleep(down)
			if kerr = insts[in].start(); kerr != nil {
				return
			}
		}
	}()
	type tally struct {
		ids                []string
		rounds, ok, failed int
		accepted, rejected int
		moved              int
		firstErr           error
		unexpected         error
	}
	tallies := make([]tally, devices)
	var wg sync.WaitGroup
	for i, s := range crowd {
		wg.Add(1)
		go func() {
			defer wg.Done()
			ty := &tallies[i]
			rng := rand.New(rand.NewPCG(seed, uint64(100+i)))
			for r := 0; r < maxRounds; r++ {
				select {
				case <-killed:
					if r >= minRounds {
						return
					}
				default:
				}
				ty.rounds++
				for range 1 + rng.IntN(2) {
					res, err := s.RecordTest(ctx, coneTest(c.project, c.spec, c.ref, 104+rng.Float64()*10, uint32(1+r)))
					if err != nil {
						ty.unexpected = fmt.Errorf("record: %w", err)
						return
					}
					ty.ids = append(ty.ids, res.TestID)
				}
				sctx, cancel := context.WithTimeout(ctx, 20*time.Second)
				rep, err := s.Sync(sctx, conns[rng.IntN(2)], c.project, client.SyncOptions{MaxAttempts: 3,
					BaseDelay: 20 * time.Millisecond, MaxDelay: 100 * time.Millisecond})
				cancel()
				ty.accepted += rep.Accepted
				ty.rejected += rep.Rejected
				if err != nil {
					// A sync cut short by a kill (the instance unreachable
					// or gone mid-call), or one that lost the race for the
					// chain head too often: carry on, try later. Anything
					// else is a fault.
					var se *client.ServerError
					if !errors.As(err, &se) || !(se.Code == codes.Unavailable && se.Reason == "" || se.Reason == "LEDGER_MOVED") {
						ty.unexpected = fmt.Errorf("sync in round %d: %w", r, err)
						return
					}
					ty.failed++
					if se.Reason == "LEDGER_MOVED" {
						ty.moved++
					}
					if ty.firstErr == nil {
						ty.firstErr = err
					}
				} else {
					ty.ok++
				}
				time.Sleep(time.Duration(rng.IntN(80)) * time.Millisecond)
			}
		}()
	}
	wg.Wait()
	<-killed
	if kerr != nil {
		t.Fatalf("restarting tampd: %v", kerr)
	}
	var recorded []string
	syncs, failures, moved, accepted := 0, 0, 0, 0
	var firstErr error
	for i, ty := range tallies {
		if ty.unexpected != nil {
			t.Fatalf("device %d: %v", i, ty.unexpected)
		}
		if ty.rejected != 0 {
			t.Errorf("device %d: the servers rejected %d of its tests", i, ty.rejected)
		}
		if ty.firstErr != nil && firstErr == nil {
			firstErr = ty.firstErr
		}
		recorded = append(recorded, ty.ids...)
		syncs += ty.rounds
		failures += ty.failed
		moved += ty.moved
		accepted += ty.accepted
	}
	t.Logf("storm: %s; %d tests recorded, %d syncs of which %d failed (%d on LEDGER_MOVED; one: %v), %d tests accepted during it; %v",
		strings.Join(killLog, "; "), len(recorded), syncs, failures, moved, firstErr, accepted, time.Since(began).Round(time.Millisecond))

	// The kills struck: some syncs failed, and the devices skipped them
	// and synced later.
	if failures == 0 {
		t.Errorf("no sync failed during %d kills: the kills missed the devices", kills)
	}

	// Every device syncs through both instances, twice: the first pass
	// pushes what is left, the second pulls what the others pushed.
	final := []*grpc.ClientConn{dialRetrying(t, insts[0].addr, nil), dialRetrying(t, insts[1].addr, nil)}
	everyone := append([]*client.Store{c.admin, qa}, crowd...)
	for range 2 {
		for _, s := range everyone {
			for _, cc := range final {
				syncOK(t, s, cc, c.project)
			}
		}
	}

	// The ledger in the database: sequence numbers 1..head with no gap,
	// every event once, its tests exactly those recorded.
	head, err := st.Head(ctx, c.project)
	if err != nil {
		t.Fatal(err)
	}
	ids, tests := map[string]bool{}, map[string]int{}
	for seq := uint64(0); seq < head.Seq; {
		es, err := st.After(ctx, c.project, seq, 500)
		if err != nil || len(es) == 0 {
			t.Fatalf("entries after %d of %d: %d, %v", seq, head.Seq, len(es), err)
		}
		for _, e := range es {
			if e.Seq != seq+1 {
				t.Fatalf("entry %d follows entry %d", e.Seq, seq)
			}
			seq = e.Seq
			sg, err := ledger.Decode(e.Event)
			if err != nil {
				t.Fatalf("entry %d: %v", e.Seq, err)
			}
			if ids[sg.Event.ID] {
				t.Errorf("event %s is in the ledger twice (again at %d)", sg.Event.ID, e.Seq)
			}
			ids[sg.Event.ID] = true
			if tr, ok := sg.Event.Kind.(*ledger.TestRecorded); ok {
				tests[tr.TestID]++
			}
		}
	}
	if want := before.Seq + uint64(len(recorded)); head.Seq != want {
		t.Errorf("the ledger holds %d entries, want the %d of the set-up and %d tests", head.Seq, before.Seq, len(recorded))
	}
	for _, id := range recorded {
		if tests[id] != 1 {
			t.Errorf("test %s is recorded %d times in the ledger, want once", id, tests[id])
		}
	}
	if len(tests) != len(recorded) {
		t.Errorf("the ledger holds %d tests, the devices recorded %d", len(tests), len(recorded))
	}

	// The chain verified end to end from an export through each instance:
	// every hash and signature, and the state it implies.
	var digest string
	for i, cc := range final {
		var buf bytes.Buffer
		if _, err := qa.Export(ctx, cc, c.project, &buf); err != nil {
			t.Fatalf("export through tampd %c: %v", 'a'+i, err)
		}
		rep, err := client.VerifyExport(&buf)
		if err != nil {
			t.Fatalf("the ledger exported through tampd %c: %v", 'a'+i, err)
		}
		if rep.Events != int(head.Seq) || rep.Head.Seq != head.Seq || rep.Head.Hash != head.Hash.String() || rep.Tests != len(recorded) {
			t.Errorf("tampd %c exports %d events to %d %s with %d tests; the database's head is %d %s, %d tests recorded",
				'a'+i, rep.Events, rep.Head.Seq, rep.Head.Hash, rep.Tests, head.Seq, head.Hash, len(recorded))
		}
		if digest == "" {
			digest = rep.Digest
		} else if rep.Digest != digest {
			t.Errorf("the ledgers exported through the two instances imply different states")
		}
	}

	// Every device verified the head and holds that state.
	for i, s := range everyone {
		stt, err := s.Status(ctx, c.project)
		if err != nil {
			t.Fatal(err)
		}
		if stt.Verified.Seq != head.Seq || stt.Verified.Hash != head.Hash.String() {
			t.Errorf("device %d verified %d %s, the head is %d %s", i, stt.Verified.Seq, stt.Verified.Hash, head.Seq, head.Hash)
		}
		if stt.Outbox.Pending != 0 || stt.Unconfirmed != 0 || stt.ServerLacks != 0 {
			t.Errorf("device %d: %d pending, %d unconfirmed, %d the server lacks", i, stt.Outbox.Pending, stt.Unconfirmed, stt.ServerLacks)
		}
		if got := s.Digest(c.project); got != digest {
			t.Errorf("device %d holds state %s, the ledger implies %s", i, got, digest)
		}
	}

	// Each instance's own projection (caught up from the database) answers
	// a report alike, listing every test recorded.
	var queues []*pb.ListReviewQueueResponse
	for i, cc := range final {
		qctx, err := qa.CallContext(ctx)
		if err != nil {
			t.Fatal(err)
		}
		q, err := pb.NewLedgerReadServiceClient(cc).ListReviewQueue(qctx, &pb.ListReviewQueueRequest{ProjectId: c.project})
		if err != nil {
			t.Fatalf("review queue through tampd %c: %v", 'a'+i, err)
		}
		queues = append(queues, q)
		var listed []string
		for _, ts := range q.GetTests() {
			listed = append(listed, ts.GetTestId())
		}
		want := append([]string(nil), recorded...)
		sort.Strings(listed)
		sort.Strings(want)
		if strings.Join(listed, ",") != strings.Join(want, ",") {
			t.Errorf("tampd %c's review queue lists %d tests, the devices recorded %d (or other ones)", 'a'+i, len(listed), len(want))
		}
		// Graded alike by the instance and by the devices.
		for _, l := range q.GetLines() {
			if tt, err := qa.Test(c.project, l.GetTestId()); err != nil || string(tt.Result.Verdict) != l.GetVerdict() || l.GetVerdict() == string(client.Pending) {
				t.Errorf("tampd %c grades test %s %q, the devices %q (%v)", 'a'+i, l.GetTestId(), l.GetVerdict(), tt.Result.Verdict, err)
			}
		}
	}
	if !proto.Equal(queues[0], queues[1]) {
		t.Errorf("the two instances' review queues differ")
	}

	// The two observers, each pulling only from its instance, hold the
	// crowd's state.
	for i, o := range observers {
		syncOK(t, o, final[i], c.project)
		if got := o.Digest(c.project); got != digest {
			t.Errorf("observer %c, pulling only from tampd %c, holds state %s, the crowd %s", 'A'+i, 'a'+i, got, digest)
		}
		if n := len(o.Tests(c.project)); n != len(recorded) {
			t.Errorf("observer %c, pulling only from tampd %c, holds %d tests, want %d", 'A'+i, 'a'+i, n, len(recorded))
		}
	}
	// Under GOFLAGS=-race tampd is built with the race detector too: its
	// reports land in the instances' logs.
	for _, in := range insts {
		if b, err := os.ReadFile(in.log); err == nil && bytes.Contains(b, []byte("WARNING: DATA RACE")) {
			t.Errorf("%s reports a data race", filepath.Base(in.log))
		}
	}
	t.Logf("%d entries, %d tests, all agree; %v in all", head.Seq, len(recorded), time.Since(began).Round(time.Millisecond))
}

// tail returns the last n lines of b.
func tail(b []byte, n int) string {
	lines := strings.Split(strings.TrimRight(string(b), "\n"), "\n")
	if len(lines) > n {
		lines = lines[len(lines)-n:]
	}
	return strings.Join(lines, "\n")
}
