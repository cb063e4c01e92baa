package server_test

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"sync/atomic"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/server"
)

// callFault makes a connection's sync calls fail with Unavailable, as a cut
// network or a crashed server would.
type callFault struct {
	pushes           atomic.Bool // every push fails
	pulls            atomic.Bool // every pull fails
	pullsAfterAPush  atomic.Bool // every pull fails once a push was acknowledged
	acknowledgedPush atomic.Bool
}

// faultConn returns a connection to the cluster whose calls f cuts.
func (c *cluster) faultConn(f *callFault) *grpc.ClientConn {
	c.tb.Helper()
	unavailable := status.Error(codes.Unavailable, "test: the connection was cut")
	unary := func(ctx context.Context, method string, req, reply any, cc *grpc.ClientConn, invoke grpc.UnaryInvoker, opts ...grpc.CallOption) error {
		if method == pb.SyncService_Push_FullMethodName {
			if f.pushes.Load() {
				return unavailable
			}
			err := invoke(ctx, method, req, reply, cc, opts...)
			if err == nil {
				f.acknowledgedPush.Store(true)
			}
			return err
		}
		return invoke(ctx, method, req, reply, cc, opts...)
	}
	stream := func(ctx context.Context, desc *grpc.StreamDesc, cc *grpc.ClientConn, method string, streamer grpc.Streamer,
		opts ...grpc.CallOption) (grpc.ClientStream, error) {
		if method == pb.SyncService_Pull_FullMethodName && (f.pulls.Load() || f.pullsAfterAPush.Load() && f.acknowledgedPush.Load()) {
			return nil, unavailable
		}
		return streamer(ctx, desc, cc, method, opts...)
	}
	return c.conn("", grpc.WithUnaryInterceptor(unary), grpc.WithStreamInterceptor(stream))
}

var quick = client.SyncOptions{Sleep: func(time.Duration) {}}

// backUp copies the server's data directory with the server stopped, and
// starts it again on the same address; restore puts the copy back as a
// crashed server's operator would.
func (c *cluster) backUp(t *testing.T) (restore func()) {
	t.Helper()
	addr := c.addr
	c.stop()
	backup := filepath.Join(t.TempDir(), "backup.db")
	copyFile(t, filepath.Join(c.dir, "ledger.db"), backup)
	c.start(addr)
	return func() {
		t.Helper()
		c.stop()
		for _, suffix := range []string{"", "-wal", "-shm"} {
			os.Remove(filepath.Join(c.dir, "ledger.db"+suffix))
		}
		copyFile(t, backup, filepath.Join(c.dir, "ledger.db"))
		c.start(addr)
	}
}

// ledgerIDs counts the server's stored entries by event id.
func (c *cluster) ledgerIDs() map[string]int {
	c.tb.Helper()
	entries, err := c.store.After(context.Background(), c.project, 0, 1_000_000)
	if err != nil {
		c.tb.Fatal(err)
	}
	ids := map[string]int{}
	for _, e := range entries {
		sg, err := ledger.Decode(e.Event)
		if err != nil {
			c.tb.Fatal(err)
		}
		ids[sg.Event.ID]++
	}
	return ids
}

func syncStatus(t *testing.T, s *client.Store, project string) client.SyncStatus {
	t.Helper()
	st, err := s.Status(context.Background(), project)
	if err != nil {
		t.Fatal(err)
	}
	return st
}

// converged checks that the server holds every acknowledged entry exactly
// once and that every device holds what the server holds, verified to its
// head, with nothing left unconfirmed.
func converged(t *testing.T, c *cluster, acknowledged map[string]int, devices map[string]*client.Store) {
	t.Helper()
	held := c.ledgerIDs()
	for id := range acknowledged {
		if held[id] != 1 {
			t.Errorf("the server holds acknowledged entry %s %d times, want once", id, held[id])
		}
	}
	head, digest := c.head(), c.digest()
	for name, s := range devices {
		st := syncStatus(t, s, c.project)
		if !sameCheckpoint(st.Verified, head) {
			t.Errorf("%s verified %d/%d, server head %d/%d", name, st.Verified.Epoch, st.Verified.Seq, head.Epoch, head.Seq)
		}
		if s.Digest(c.project) != digest {
			t.Errorf("%s's state differs from the server's", name)
		}
		if st.Unconfirmed != 0 || st.ServerLacks != 0 || len(st.ServerMissing) != 0 {
			t.Errorf("%s's status: %d unconfirmed, %d the server lacks, %d it asks for; want none", name, st.Unconfirmed, st.ServerLacks,
				len(st.ServerMissing))
		}
	}
}

// A push is acknowledged just before the server crashes, and the device's
// closing pull never completes; the server comes back from an older copy.
// The device says that the server has not confirmed those entries, then that
// the server lacks them, and pushes them again: nothing acknowledged is lost.
func TestRestoreKeepsEntriesAcknowledgedBeforeTheCrash(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Juniper Draw pad")
	qa, ann, bo := c.device("quinn", server.QA), c.device("ann", server.Inspector), c.device("bo", server.Inspector)
	devices := map[string]*client.Store{"quinn": qa, "ann": ann, "bo": bo}
	spec, ref := setUp(t, c, qa, project)
	record(t, ann, project, spec, ref, 2, 0)
	for range 2 {
		for _, s := range []*client.Store{qa, ann, bo} {
			syncOK(t, s, c.conn(""), project)
		}
	}
	restore := c.backUp(t)

	record(t, ann, project, spec, ref, 3, 1)
	cut := &callFault{}
	cut.pullsAfterAPush.Store(true)
	if _, err := ann.Sync(context.Background(), c.faultConn(cut), project, quick); err == nil {
		t.Fatal("ann's sync succeeded although its closing pull was cut")
	}
	acknowledged := c.ledgerIDs()
	if st := syncStatus(t, ann, project); st.Outbox.Pending != 0 {
		t.Fatalf("ann has %d pending after her push was acknowledged, want 0", st.Outbox.Pending)
	}

	restore()
	if lost := len(acknowledged) - len(c.ledgerIDs()); lost != 3 {
		t.Fatalf("the restore lost %d entries, want ann's 3", lost)
	}
	if st := syncStatus(t, ann, project); st.Unconfirmed != 3 {
		t.Errorf("before syncing again, ann's status shows %d acknowledged entries not yet confirmed, want 3", st.Unconfirmed)
	}
	// A sync whose pull completes but whose push is cut: ann now knows the
	// server lacks her three entries, and says so.
	noPush := &callFault{}
	noPush.pushes.Store(true)
	if _, err := ann.Sync(context.Background(), c.faultConn(noPush), project, quick); err == nil {
		t.Fatal("a sync whose pushes all fail succeeded")
	}
	if st := syncStatus(t, ann, project); st.ServerLacks != 3 {
		t.Errorf("after a pull of the restored ledger, ann's status shows %d entries the server lacks, want 3", st.ServerLacks)
	}

	if rep := syncOK(t, ann, c.conn(""), project); rep.Repushed != 3 {
		t.Errorf("ann's sync pushed back %d entries the server had lost, want 3", rep.Repushed)
	}
	for range 2 {
		for _, name := range []string{"quinn", "ann", "bo"} {
			syncOK(t, devices[name], c.conn(""), project)
		}
	}
	converged(t, c, acknowledged, devices)
	// Confirmed entries are not offered again.
	for name, s := range devices {
		if rep := syncOK(t, s, c.conn(""), project); rep.Accepted+rep.AlreadyPresent+rep.Supplied != 0 {
			t.Errorf("%s's sync after converging offered entries again: %+v", name, rep)
		}
	}
}

// After a restore, every device that syncs re-offers what the server lacks,
// whether or not it is the one that notices the rollback: a sync that
// succeeds leaves the device and the server holding the same entries.
func TestRestoreEverySyncingDeviceReoffers(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Juniper Draw pad")
	qa, ann, bo, cy := c.device("quinn", server.QA), c.device("ann", server.Inspector), c.device("bo", server.Inspector),
		c.device("cy", server.Inspector)
	devices := map[string]*client.Store{"quinn": qa, "ann": ann, "bo": bo, "cy": cy}
	order := []string{"cy", "quinn", "ann", "bo"}
	spec, ref := setUp(t, c, qa, project)
	for range 2 {
		for _, name := range order {
			syncOK(t, devices[name], c.conn(""), project)
		}
	}
	restore := c.backUp(t)

	// Cy's push is acknowledged and his closing pull cut: he has verified
	// no further than the copy. Ann then syncs fully (past the copy), and
	// Bo's push is acknowledged with his closing pull cut.
	record(t, cy, project, spec, ref, 2, 0)
	cut := &callFault{}
	cut.pullsAfterAPush.Store(true)
	_, _ = cy.Sync(context.Background(), c.faultConn(cut), project, quick)
	record(t, ann, project, spec, ref, 2, 1)
	syncOK(t, ann, c.conn(""), project)
	record(t, bo, project, spec, ref, 2, 2)
	cut = &callFault{}
	cut.pullsAfterAPush.Store(true)
	_, _ = bo.Sync(context.Background(), c.faultConn(cut), project, quick)
	acknowledged := c.ledgerIDs()

	restore()
	for round := range 2 {
		for _, name := range order {
			s := devices[name]
			_, err := s.Sync(context.Background(), c.conn(""), project, quick)
			if err != nil {
				if round == 0 && errors.Is(err, client.ErrFork) {
					continue // this device noticed the rollback; its next sync resumes
				}
				t.Fatalf("round %d: %s's sync: %v", round, name, err)
			}
			if s.Digest(project) != c.digest() {
				t.Errorf("round %d: %s's sync succeeded, but %s and the server hold different entries", round, name, name)
			}
		}
	}
	converged(t, c, acknowledged, devices)
}

// signSeq signs an event of kind k by d with an explicit device sequence
// number and its predecessor in the project.
func (d *rawDevice) signSeq(t *testing.T, project string, seq, prev uint64, k ledger.Kind) ledger.Signed {
	t.Helper()
	s, err := ledger.Seal(ledger.Event{ID: newV7(), Project: project, Author: d.user, Device: d.id, DeviceSeq: seq, PrevDeviceSeq: prev,
		HLC: ledger.HLC{Wall: time.Now().UnixMicro()}, DeviceTime: time.Now().UTC().Truncate(time.Microsecond), Kind: k}, d.key)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func missingOf(resp *pb.PushResponse) []string {
	var out []string
	for _, m := range resp.GetMissing() {
		out = append(out, fmt.Sprintf("%s:%d-%d", m.GetDeviceId()[:8], m.GetAfterDeviceSeq(), m.GetThroughDeviceSeq()))
	}
	return out
}

// A device's entry 39 arrives after its 35 with 36-38 absent: the server
// asks for them (the device's entries after 35 through 38), every device
// that cannot supply them says so, and once they arrive nobody is asked.
// Sequence numbers that skip because the device wrote to another project
// are not a gap.
func TestServerAsksForDeviceSequenceGap(t *testing.T) {
	c := startCluster(t, t.TempDir())
	other := c.newProject("Red Mesa trench")
	project := c.newProject("Juniper Draw pad")
	r := c.rawDevice(t, "rae", map[string]server.Role{project: server.Inspector, other: server.Inspector}, false)
	bo := c.device("bo", server.Inspector)
	test := func() ledger.Kind {
		return &ledger.TestRecorded{TestID: newV7(), Content: ledger.TestContent{Readings: sandCone(110, 12), Feature: "pad"}}
	}
	push := func(project string, evs ...ledger.Signed) *pb.PushResponse {
		t.Helper()
		resp, err := pb.NewSyncServiceClient(c.conn("")).Push(r.ctx(), pushRequest(project, evs))
		if err != nil {
			t.Fatal(err)
		}
		for _, o := range resp.GetOutcomes() {
			if o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
				t.Fatalf("outcome %v: %s", o.GetStatus(), o.GetMessage())
			}
		}
		return resp
	}
	e := map[uint64]ledger.Signed{}
	e[35] = r.signSeq(t, project, 35, 0, test())
	e[36] = r.signSeq(t, project, 36, 35, test())
	o37 := r.signSeq(t, other, 37, 0, test()) // another project: the gap in project's numbers is no gap
	e[38] = r.signSeq(t, project, 38, 36, test())
	e[39] = r.signSeq(t, project, 39, 38, test())
	if got := missingOf(push(project, e[35])); len(got) != 0 {
		t.Fatalf("after 35, the server asks for %v", got)
	}
	if got := missingOf(push(other, o37)); len(got) != 0 {
		t.Fatalf("after 37 on another project, the server asks for %v", got)
	}
	resp := push(project, e[39])
	want := r.id[:8] + ":35-38"
	if got := missingOf(resp); len(got) != 1 || got[0] != want {
		t.Fatalf("after 39 with 36-38 absent, the server asks for %v, want [%s]", got, want)
	}
	// Bo holds none of them: his sync succeeds, and his status says the
	// server lacks an entry of another device that he cannot supply.
	syncOK(t, bo, c.conn(""), project)
	st := syncStatus(t, bo, project)
	if len(st.ServerMissing) != 1 || st.ServerMissing[0].Device != r.id || st.ServerMissing[0].Seq != 38 {
		t.Errorf("bo's status lists %+v as asked for and not held, want %s's 38", st.ServerMissing, r.id)
	}
	// Rae supplies 38, which names 36, then 36.
	if got := missingOf(push(project, e[38])); len(got) != 1 || got[0] != r.id[:8]+":35-36" {
		t.Errorf("after 38, the server asks for %v, want [%s:35-36]", got, r.id[:8])
	}
	if got := missingOf(push(project, e[36])); len(got) != 0 {
		t.Errorf("after 36, the server still asks for %v", got)
	}
	syncOK(t, bo, c.conn(""), project)
	if st := syncStatus(t, bo, project); len(st.ServerMissing) != 0 {
		t.Errorf("bo's status still lists %+v as missing", st.ServerMissing)
	}
	// A restart rebuilds what the server knows of each device's entries: no
	// gap is found where there is none.
	addr := c.addr
	c.stop()
	c.start(addr)
	if got := missingOf(push(project, r.signSeq(t, project, 40, 39, test()))); len(got) != 0 {
		t.Errorf("after a restart, the server asks for %v", got)
	}
}

// The server asks for an entry that only its author holds: the author
// supplies it in the same sync. Here ann's entry was refused (an inspector
// may not add a reference) while her next entry, which names it as its
// predecessor, was accepted; a restart forgets the refusal and finds the
// gap, bo cannot supply the entry, and ann's next sync offers it again.
func TestDeviceSuppliesEntryTheServerAsksFor(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Juniper Draw pad")
	qa, ann, bo := c.device("quinn", server.QA), c.device("ann", server.Inspector), c.device("bo", server.Inspector)
	spec, ref := setUp(t, c, qa, project)
	syncOK(t, qa, c.conn(""), project)
	ctx := context.Background()
	refusedRef, err := ann.AddReference(ctx, project, client.Reference{Material: "silty sand", Standard: client.ASTMD698, Method: "A",
		MaxDryDensity: pcf(112), OptimumMoisture: 14})
	if err != nil {
		t.Fatal(err)
	}
	record(t, ann, project, spec, ref, 1, 0)
	if rep := syncOK(t, ann, c.conn(""), project); rep.Rejected != 1 || rep.Accepted != 1 {
		t.Fatalf("ann's sync: %+v, want her reference refused and her test accepted", rep)
	}
	rejected, err := ann.Rejected(ctx)
	if err != nil || len(rejected) != 1 || rejected[0].RecordID != refusedRef {
		t.Fatalf("ann's rejected entries: %+v, %v; want her reference %s", rejected, err, refusedRef)
	}
	refused := rejected[0]
	addr := c.addr
	c.stop()
	c.start(addr)

	syncOK(t, bo, c.conn(""), project)
	st := syncStatus(t, bo, project)
	if len(st.ServerMissing) != 1 || st.ServerMissing[0].Device != ann.DeviceID() || st.ServerMissing[0].Seq != refused.DeviceSeq {
		t.Fatalf("bo's status lists %+v as asked for, want ann's entry %d", st.ServerMissing, refused.DeviceSeq)
	}
	rep := syncOK(t, ann, c.conn(""), project)
	if rep.Supplied != 1 {
		t.Errorf("ann supplied %d entries the server asked for, want 1", rep.Supplied)
	}
	syncOK(t, bo, c.conn(""), project)
	if st := syncStatus(t, bo, project); len(st.ServerMissing) != 0 {
		t.Errorf("after ann's sync, bo's status lists %+v as asked for", st.ServerMissing)
	}
}
