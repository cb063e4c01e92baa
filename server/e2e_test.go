package server_test

import (
	"bytes"
	"context"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/qc"
	"tamp/server"
)

// Three devices record offline, sync in turn and concurrently, and all hold
// the server's ledger: the same head hash and the same state.
func TestThreeDevicesConverge(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Sagebrush Flats pad")
	qa, ann, bo := c.device("quinn", server.QA), c.device("ann", server.Inspector), c.device("bo", server.Inspector)
	cc := c.conn("")
	spec, ref := setUp(t, c, qa, project)
	// The inspectors record before the reference data reaches them: their
	// tests are pending, and their pushes wait for the reference.
	record(t, ann, project, spec, ref, 12, 0)
	record(t, bo, project, spec, ref, 9, 0.5)
	for _, tt := range ann.Today(project) {
		if tt.Result.Verdict != client.Pending {
			t.Fatalf("offline test without its reference: %v", tt.Result.Verdict)
		}
	}
	rep := syncOK(t, ann, cc, project)
	if rep.Waiting != 12 || rep.Accepted != 0 {
		t.Errorf("ann's first sync: %+v, want 12 waiting for the reference", rep)
	}
	syncOK(t, qa, cc, project)
	rep = syncOK(t, ann, cc, project)
	if rep.Accepted != 12 {
		t.Errorf("ann's second sync: %+v, want 12 accepted", rep)
	}
	syncOK(t, bo, cc, project)
	for _, s := range []*client.Store{qa, ann} {
		syncOK(t, s, cc, project)
	}
	head := c.head()
	if n := c.memberEntries(project); n != 3+12+9 {
		t.Errorf("server holds %d of the devices' events, want 24", n)
	}
	for name, s := range map[string]*client.Store{"qa": qa, "ann": ann, "bo": bo} {
		if v := verified(t, s, project); !sameCheckpoint(v, head) {
			t.Errorf("%s verified %d %s, server head %d %s", name, v.Seq, v.Hash, head.Seq, head.Hash)
		}
		if s.Digest(project) != c.digest() {
			t.Errorf("%s's state differs from the server's", name)
		}
		if o, _ := s.Outbox(context.Background()); o.Pending != 0 {
			t.Errorf("%s has %d pending", name, o.Pending)
		}
	}
	for _, tt := range bo.Today(project) {
		if tt.Result.Verdict == client.Pending {
			t.Errorf("after sync a test is still pending: %s", tt.ID)
		}
	}

	// Now all three record more and sync at the same time, twice.
	record(t, ann, project, spec, ref, 20, 1)
	record(t, bo, project, spec, ref, 20, 2)
	for range 5 {
		if _, err := qa.DefineSpec(context.Background(), project, client.Spec{Name: "trench backfill", MinCompaction: "90"}); err != nil {
			t.Fatal(err)
		}
	}
	for range 2 {
		var wg sync.WaitGroup
		for _, s := range []*client.Store{qa, ann, bo} {
			wg.Add(1)
			go func() {
				defer wg.Done()
				if _, err := s.Sync(context.Background(), c.conn(""), project, client.SyncOptions{}); err != nil {
					t.Error(err)
				}
			}()
		}
		wg.Wait()
	}
	head = c.head()
	if n := c.memberEntries(project); n != 24+45 {
		t.Errorf("server holds %d of the devices' events, want 69", n)
	}
	for _, s := range []*client.Store{qa, ann, bo} {
		if v := verified(t, s, project); !sameCheckpoint(v, head) {
			t.Errorf("after concurrent syncs a device verified %d, head %d", v.Seq, head.Seq)
		}
		if s.Digest(project) != c.digest() {
			t.Error("after concurrent syncs a device's state differs")
		}
	}
}

// A new device gets the reference data first and then the history, and can
// grade offline afterwards.
func TestNewDeviceGetsEverything(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Sagebrush Flats pad")
	qa, ann := c.device("quinn", server.QA), c.device("ann", server.Inspector)
	cc := c.conn("")
	spec, ref := setUp(t, c, qa, project)
	syncOK(t, qa, cc, project)
	record(t, ann, project, spec, ref, 5, 0)
	syncOK(t, ann, cc, project)
	cy := c.device("cy", server.Inspector)
	var phases []string
	rep, err := cy.Sync(context.Background(), cc, project, client.SyncOptions{Progress: func(p client.Progress) { phases = append(phases, p.Phase) }})
	if err != nil {
		t.Fatal(err)
	}
	if rep.Pulled < 8 || len(phases) == 0 {
		t.Errorf("new device pulled %d, progress %v", rep.Pulled, phases)
	}
	r, err := cy.RecordTest(context.Background(), client.TestInput{Project: project, SpecID: spec, ReferenceID: ref, Readings: coneReadings(112, 13)})
	if err != nil {
		t.Fatal(err)
	}
	if r.Result.Verdict != client.Pass {
		t.Errorf("a test on the new device, offline: %v", r.Result.Verdict)
	}
	if len(cy.Today(project)) != 6 {
		t.Errorf("the new device shows %d of today's tests, want 6", len(cy.Today(project)))
	}
}

// The server recomputes every result; a device that reports numbers its
// readings do not give is flagged on the server.
func TestServerFlagsTamperedResult(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Sagebrush Flats pad")
	qa := c.device("quinn", server.QA)
	// The device library always reports what the readings give, so the
	// tampering device signs its entry itself.
	ann := c.rawDevice(t, "ann", map[string]server.Role{project: server.Inspector}, false)
	cc := c.conn("")
	spec, ref := setUp(t, c, qa, project)
	syncOK(t, qa, cc, project)
	id := newV7()
	// 100 pcf against 116 is 86 %: a fail, reported as a pass at 97 %.
	tampered := &ledger.TestRecorded{TestID: id, Content: ledger.TestContent{Readings: sandCone(100, 13), SpecID: spec, ReferenceID: ref,
		DeviceResults: &ledger.Results{WetDensity: pcf(100) * 1.13, DryDensity: pcf(112.5), Moisture: 13, RelativeCompaction: 97, Verdict: qc.Pass}}}
	if o := ann.first(t, c, project, ann.sign(t, project, tampered)); o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
		t.Fatalf("the tampered test: %v %s", o.GetStatus(), o.GetMessage())
	}
	// A device that pulls it sees the recomputed fail, flagged.
	syncOK(t, qa, cc, project)
	if tt, err := qa.Test(project, id); err != nil || tt.Result.Verdict != client.Fail || !hasFinding(tt.Flags, client.FlagDeviceResultMismatch) {
		t.Errorf("on a device that pulled it: %v, verdict %v, flags %v; want a fail flagged %s", err, tt.Result.Verdict, tt.Flags,
			client.FlagDeviceResultMismatch)
	}
	err := c.srv.Inspect(context.Background(), project, func(p *ledger.Projection) {
		tt, ok := p.Test(id)
		if !ok {
			t.Fatal("test not on the server")
		}
		if tt.Result.Verdict != qc.Fail {
			t.Errorf("server verdict %v, want the recomputed fail", tt.Result.Verdict)
		}
		found := false
		for _, f := range tt.Flags {
			found = found || f.Code == ledger.DeviceResultMismatch
		}
		if !found {
			t.Errorf("flags %v, want %s", tt.Flags, ledger.DeviceResultMismatch)
		}
	})
	if err != nil {
		t.Fatal(err)
	}
}

// A device whose clock is off by more than the limit has its skew recorded
// and its pushed events flagged.
func TestClockSkewFlagged(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Sagebrush Flats pad")
	ctx := context.Background()
	fast := time.Now().Add(12 * time.Minute)
	s, err := client.Open(ctx, filepath.Join(t.TempDir(), "fast.db"), client.Options{Now: func() time.Time { return fast }})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	user, _ := c.srv.AddUser(ctx, "fay", false)
	if err := c.srv.AddMember(ctx, project, user, server.Inspector); err != nil {
		t.Fatal(err)
	}
	code, _, _ := c.srv.IssueEnrollmentCode(ctx, user)
	if err := s.Enroll(ctx, c.conn(""), code, "fay's tablet"); err != nil {
		t.Fatal(err)
	}
	ok := c.device("gus", server.Inspector)
	record(t, s, project, "", "", 2, 0)
	record(t, ok, project, "", "", 2, 0)
	rep := syncOK(t, s, c.conn(""), project)
	syncOK(t, ok, c.conn(""), project)
	if rep.ClockSkew < 11*time.Minute || rep.ClockSkew > 13*time.Minute {
		t.Errorf("reported skew %v, want about 12 minutes", rep.ClockSkew)
	}
	skews, err := c.store.ClockSkews(ctx, project)
	if err != nil {
		t.Fatal(err)
	}
	if len(skews) != 2 {
		t.Errorf("%d events flagged for clock skew, want fay's 2: %v", len(skews), skews)
	}
	for _, tt := range s.Today(project) {
		if _, ok := skews[tt.Current]; !ok {
			t.Errorf("fay's test %s not flagged", tt.ID)
		}
	}

	// Another device that pulls fay's entries learns their skew with them,
	// and its audit reports each, as the server's does.
	syncOK(t, ok, c.conn(""), project)
	offline, err := ok.AuditFindings(ctx, project)
	if err != nil {
		t.Fatal(err)
	}
	var got []string
	for _, f := range offline {
		if f.Code == "clock_skew" {
			if len(f.Entries) != 1 || skews[f.Entries[0]] == 0 || !strings.Contains(f.Message, "ahead") {
				t.Errorf("finding %+v, want one of fay's entries, ahead", f)
			}
			got = append(got, f.Entries...)
		}
	}
	rctx, err := ok.CallContext(ctx)
	if err != nil {
		t.Fatal(err)
	}
	audit, err := pb.NewLedgerReadServiceClient(c.conn("")).GetRetestAudit(rctx, &pb.GetRetestAuditRequest{ProjectId: project})
	if err != nil {
		t.Fatal(err)
	}
	var online []string
	for _, f := range audit.GetFindings() {
		if f.GetCode() == "clock_skew" {
			online = append(online, f.GetEntries()...)
		}
	}
	if len(got) != 2 || !slices.Equal(got, online) {
		t.Errorf("clock-skew findings on gus's device %v, on the server %v; want fay's 2 on both", got, online)
	}
}

// A cancelled context stops a sync; what it had not sent stays pending.
func TestSyncCancelled(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Sagebrush Flats pad")
	ann := c.device("ann", server.Inspector)
	record(t, ann, project, "", "", 3, 0)
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := ann.Sync(ctx, c.conn(""), project, client.SyncOptions{}); err == nil {
		t.Fatal("a cancelled sync succeeded")
	}
	if o, _ := ann.Outbox(context.Background()); o.Pending != 3 {
		t.Errorf("pending after a cancelled sync = %d", o.Pending)
	}
	syncOK(t, ann, c.conn(""), project)
	if o, _ := ann.Outbox(context.Background()); o.Pending != 0 {
		t.Errorf("pending after a sync = %d", o.Pending)
	}
}

// Large entries are pushed and pulled in chunks that fit gRPC's default
// message size, so a device with long remarks still syncs.
func TestLargeEntriesSync(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Sagebrush Flats pad")
	ann := c.device("ann", server.Inspector)
	long := strings.Repeat("sandy lens at the toe; ", 5000) // about 115 kB
	for range 60 {
		if _, err := ann.RecordTest(context.Background(), client.TestInput{Project: project, Readings: coneReadings(110, 12), Remarks: long}); err != nil {
			t.Fatal(err)
		}
	}
	syncOK(t, ann, c.conn(""), project)
	bo := c.device("bo", server.Inspector)
	rep := syncOK(t, bo, c.conn(""), project)
	if rep.Pulled < 60 {
		t.Errorf("pulled %d, want 60", rep.Pulled)
	}
	if bo.Digest(project) != c.digest() {
		t.Error("the new device's state differs")
	}
}

// The ledger exported by the read service verifies offline; an altered
// byte does not.
func TestExportVerifiesOffline(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Sagebrush Flats pad")
	qa, ann := c.device("quinn", server.QA), c.device("ann", server.Inspector)
	spec, ref := setUp(t, c, qa, project)
	syncOK(t, qa, c.conn(""), project)
	record(t, ann, project, spec, ref, 8, 0)
	syncOK(t, ann, c.conn(""), project)
	var buf bytes.Buffer
	n, err := qa.Export(context.Background(), c.conn(""), project, &buf)
	if want := 11 + countKind(t, c, project, "device_enrolled"); err != nil || n != want {
		t.Fatalf("export: %d events, %v; want %d", n, err, want)
	}
	rep, err := client.VerifyExport(bytes.NewReader(buf.Bytes()))
	if err != nil {
		t.Fatal(err)
	}
	if rep.Events != 11+countKind(t, c, project, "device_enrolled") || rep.Head.Hash != c.head().Hash.String() || rep.Digest != c.digest() || rep.Tests != 8 {
		t.Errorf("verified %+v; server head %s", rep, c.head().Hash)
	}
	// Change one byte inside the body of the fifth event (a soil mass, a
	// station...): its signature no longer verifies.
	raw := buf.Bytes()
	entries, err := c.store.After(context.Background(), project, 4, 1)
	if err != nil {
		t.Fatal(err)
	}
	sg, _ := ledger.Decode(entries[0].Event)
	at := bytes.Index(raw, sg.Body)
	if at < 0 {
		t.Fatal("the fifth event's body is not in the export")
	}
	altered := append([]byte{}, raw...)
	altered[at+len(sg.Body)/2] ^= 0x01
	if _, err := client.VerifyExport(bytes.NewReader(altered)); ledger.ReasonOf(err) != ledger.BadSignature && ledger.ReasonOf(err) != ledger.Malformed {
		t.Errorf("an altered export: %v, want a bad signature", err)
	}
	// The read service answers its members only.
	outsider := c.rawDevice(t, "stranger", nil, false)
	_, err = pb.NewLedgerReadServiceClient(c.conn("")).ListReviewQueue(outsider.ctx(), &pb.ListReviewQueueRequest{ProjectId: project})
	if status.Code(err) != codes.PermissionDenied {
		t.Errorf("review queue for a non-member: %v", err)
	}
	ctx, err := qa.CallContext(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	q, err := pb.NewLedgerReadServiceClient(c.conn("")).ListReviewQueue(ctx, &pb.ListReviewQueueRequest{ProjectId: project})
	if err != nil || len(q.GetTests()) != 8 {
		t.Errorf("review queue: %d tests, %v", len(q.GetTests()), err)
	}
}

// hasFinding reports whether fs holds a finding of code.
func hasFinding(fs []client.Finding, code string) bool {
	for _, f := range fs {
		if f.Code == code {
			return true
		}
	}
	return false
}
