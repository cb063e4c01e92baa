package client_test

import (
	"context"
	"errors"
	"io"
	"net"
	"os"
	"path/filepath"
	"sync"
	"testing"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/stats"
	"google.golang.org/grpc/status"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/soil"
	"tamp/server"
)

// The sync methods, as a stats handler names them.
const (
	pushMethod = "/tamp.v1.SyncService/Push"
	pullMethod = "/tamp.v1.SyncService/Pull"
)

// wireCount is a client's stats handler: the bytes of the messages of each
// method, as sent (compressed, with gRPC's message header) and before
// compression, and the encodings of requests and answers.
type wireCount struct {
	mu         sync.Mutex
	sent, recv map[string]int64 // wire bytes by method
	plainSent  map[string]int64 // bytes before compression, by method
	plainRecv  map[string]int64
	calls      map[string]int
	reqEnc     map[string]string // the last request's grpc-encoding, by method
	answerEnc  map[string]string // the last answer's grpc-encoding, by method
}

func newWireCount() *wireCount {
	return &wireCount{sent: map[string]int64{}, recv: map[string]int64{}, plainSent: map[string]int64{}, plainRecv: map[string]int64{},
		calls: map[string]int{}, reqEnc: map[string]string{}, answerEnc: map[string]string{}}
}

type methodKey struct{}

func (w *wireCount) TagRPC(ctx context.Context, info *stats.RPCTagInfo) context.Context {
	return context.WithValue(ctx, methodKey{}, info.FullMethodName)
}

func (w *wireCount) HandleRPC(ctx context.Context, s stats.RPCStats) {
	m, _ := ctx.Value(methodKey{}).(string)
	w.mu.Lock()
	defer w.mu.Unlock()
	switch s := s.(type) {
	case *stats.Begin:
		w.calls[m]++
	case *stats.OutPayload:
		w.sent[m] += int64(s.WireLength)
		w.plainSent[m] += int64(s.Length)
	case *stats.InPayload:
		w.recv[m] += int64(s.WireLength)
		w.plainRecv[m] += int64(s.Length)
	case *stats.OutHeader:
		w.reqEnc[m] = s.Compression
	case *stats.InHeader:
		w.answerEnc[m] = s.Compression
	}
}

func (w *wireCount) TagConn(ctx context.Context, _ *stats.ConnTagInfo) context.Context { return ctx }
func (w *wireCount) HandleConn(context.Context, stats.ConnStats)                       {}

// total returns the wire bytes of every method, both ways.
func (w *wireCount) total() int64 {
	w.mu.Lock()
	defer w.mu.Unlock()
	var n int64
	for _, b := range w.sent {
		n += b
	}
	for _, b := range w.recv {
		n += b
	}
	return n
}

func (w *wireCount) get(m map[string]int64, method string) int64 {
	w.mu.Lock()
	defer w.mu.Unlock()
	return m[method]
}

// coneAt gives sand-cone readings of dry density dry pcf at moisture w:
// sand of 99.0 pcf, 7.00 lb used, 0.53 lb in the cone.
func coneAt(dry, w float64) client.Readings {
	sd := 99.0 * soil.PoundPerCubicFoot
	used, cone := 7.00*soil.Pound, 0.53*soil.Pound
	return client.Readings{SandCone: &client.SandCone{SandDensity: sd, SandUsed: used, ConeCorrection: cone,
		SoilMass: dry * soil.PoundPerCubicFoot * (1 + w/100) * (used - cone) / sd, Moisture: w}}
}

// serveWith serves srv on another listener of 127.0.0.1:0 with extra
// options before its own, and returns the address.
func serveWith(t *testing.T, srv *server.Server, extra ...grpc.ServerOption) string {
	t.Helper()
	g := grpc.NewServer(append(extra, srv.RequestCodec(), grpc.ChainUnaryInterceptor(srv.UnaryInterceptor),
		grpc.ChainStreamInterceptor(srv.StreamInterceptor))...)
	srv.Register(g)
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	go g.Serve(lis)
	t.Cleanup(g.Stop)
	return lis.Addr().String()
}

// countedConn dials addr as a device does, counting what goes over the
// connection.
func countedConn(tb testing.TB, addr string) (*grpc.ClientConn, *wireCount) {
	tb.Helper()
	w := newWireCount()
	cc, err := client.Dial(addr, client.DialOptions{Plaintext: true, Extra: []grpc.DialOption{grpc.WithStatsHandler(w)}})
	if err != nil {
		tb.Fatal(err)
	}
	tb.Cleanup(func() { cc.Close() })
	return cc, w
}

// pullAll pulls a project's whole ledger as device s, with its own events
// left out or not.
func pullAll(t *testing.T, s *client.Store, cc grpc.ClientConnInterface, project string, omitOwn bool) []*pb.LedgerEntry {
	t.Helper()
	ctx, err := s.CallContext(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	stream, err := pb.NewSyncServiceClient(cc).Pull(ctx, &pb.PullRequest{ProjectId: project, OmitOwnEvents: omitOwn})
	if err != nil {
		t.Fatal(err)
	}
	var out []*pb.LedgerEntry
	for {
		resp, err := stream.Recv()
		if errors.Is(err, io.EOF) {
			return out
		}
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, resp.GetEntries()...)
	}
}

// A device's own entries do not come back to it: the server sends each as
// its device sequence number, the device rebuilds the entry from its copy,
// verifies the chain through it and marks it seen in the chain. Another
// device pulls the same entries in full and verifies the same point.
func TestSyncLeavesOwnEntriesOnDevice(t *testing.T) {
	ctx := context.Background()
	c := newCrew(t)
	qa := c.member("Quillon", server.QA)
	insp := c.member("Ines", server.Inspector)
	spec, err := qa.DefineSpec(ctx, c.project, client.Spec{Name: "subgrade 95", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"})
	if err != nil {
		t.Fatal(err)
	}
	ref, err := qa.AddReference(ctx, c.project, client.Reference{Material: "silty sand", Standard: client.ASTMD698, Method: "A",
		MaxDryDensity: 116 * soil.PoundPerCubicFoot, OptimumMoisture: 13.5})
	if err != nil {
		t.Fatal(err)
	}
	c.sync(qa)
	c.sync(insp)
	const n = 20
	for i := range n {
		if _, err := insp.RecordTest(ctx, client.TestInput{Project: c.project, SpecID: spec, ReferenceID: ref,
			Readings: coneAt(104+float64(i%12), 12.5), Feature: "subgrade", LiftNumber: uint32(i%4 + 1)}); err != nil {
			t.Fatal(err)
		}
	}
	cc, w := countedConn(t, c.conn.Target())
	rep, err := insp.Sync(ctx, cc, c.project, client.SyncOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if rep.Accepted != n || rep.Pulled != 0 {
		t.Fatalf("accepted %d, pulled %d; want %d and 0", rep.Accepted, rep.Pulled, n)
	}
	// Echoed, the n tests would come back as at least the bytes pushed.
	if pushed, pulled := w.get(w.plainSent, pushMethod), w.get(w.plainRecv, pullMethod); pulled*10 > pushed {
		t.Errorf("the sync pulled %d bytes after pushing %d: the device's own entries came back", pulled, pushed)
	}
	st, err := insp.Status(ctx, c.project)
	if err != nil {
		t.Fatal(err)
	}
	if st.Unconfirmed != 0 || st.ServerLacks != 0 || st.Outbox.Pending != 0 {
		t.Errorf("after the sync: %d unconfirmed, %d the server lacks, %d pending", st.Unconfirmed, st.ServerLacks, st.Outbox.Pending)
	}

	// What the server sends the inspector, asked to leave its own out, and
	// not asked.
	lean, full := pullAll(t, insp, c.conn, c.project, true), pullAll(t, insp, c.conn, c.project, false)
	if len(lean) != len(full) {
		t.Fatalf("%d entries with the device's own left out, %d in full", len(lean), len(full))
	}
	own := 0
	for i, e := range lean {
		sg, err := ledger.FromEnvelope(full[i].GetEvent())
		if err != nil {
			t.Fatalf("entry %d in full: %v", full[i].GetSequence(), err)
		}
		mine := sg.Event.Device == insp.DeviceID()
		switch {
		case mine && (e.GetEvent() != nil || len(e.GetHash()) != 0 || e.GetOwnDeviceSeq() != sg.Event.DeviceSeq):
			t.Errorf("entry %d, the inspector's own: event %v, hash %x, own_device_seq %d (want %d)", e.GetSequence(), e.GetEvent() != nil,
				e.GetHash(), e.GetOwnDeviceSeq(), sg.Event.DeviceSeq)
		case !mine && (e.GetOwnDeviceSeq() != 0 || e.GetEvent() == nil || len(e.GetHash()) == 0):
			t.Errorf("entry %d, of device %s, was not sent in full", e.GetSequence(), sg.Event.Device)
		}
		if mine {
			own++
		}
	}
	if own != n {
		t.Errorf("%d of the inspector's entries in the ledger, want %d", own, n)
	}

	// The QA device pulls the tests in full and verifies the same point.
	c.sync(qa)
	qst, err := qa.Status(ctx, c.project)
	if err != nil {
		t.Fatal(err)
	}
	if qst.Verified != st.Verified || st.Verified.Seq != uint64(len(full)) {
		t.Errorf("the inspector verified %+v, the QA device %+v; the ledger holds %d entries", st.Verified, qst.Verified, len(full))
	}
	if qa.Digest(c.project) != insp.Digest(c.project) {
		t.Error("the two devices' views differ")
	}
}

// A device whose store was restored from an older copy lacks some of its
// own entries that the server holds: its sync pulls them in full, verifies
// the chain through them and holds them again.
func TestRestoredStoreGetsOwnEntriesBack(t *testing.T) {
	ctx := context.Background()
	c := newCrew(t)
	insp := c.member("Ines", server.Inspector)
	record := func(s *client.Store, n int) []string {
		var ids []string
		for i := range n {
			r, err := s.RecordTest(ctx, client.TestInput{Project: c.project, Readings: coneAt(106+float64(i), 12), Feature: "trench backfill"})
			if err != nil {
				t.Fatal(err)
			}
			ids = append(ids, r.TestID)
		}
		return ids
	}
	kept := record(insp, 3)
	c.sync(insp)
	path := filepath.Join(c.dir, "Ines.db")
	insp.Close()
	backup := copyStore(t, path, filepath.Join(t.TempDir(), "backup"))
	insp, err := client.Open(ctx, path, client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	lost := record(insp, 4)
	c.sync(insp)
	want, err := insp.Status(ctx, c.project)
	if err != nil {
		t.Fatal(err)
	}
	insp.Close()

	copyStore(t, backup, path)
	restored, err := client.Open(ctx, path, client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer restored.Close()
	for _, id := range lost {
		if _, err := restored.Test(c.project, id); err == nil {
			t.Fatalf("the restored store already holds test %s", id)
		}
	}
	cc, w := countedConn(t, c.conn.Target())
	if _, err := restored.Sync(ctx, cc, c.project, client.SyncOptions{}); err != nil {
		t.Fatalf("the restored device's sync: %v", err)
	}
	for _, id := range append(kept, lost...) {
		if _, err := restored.Test(c.project, id); err != nil {
			t.Errorf("after the sync, test %s: %v", id, err)
		}
	}
	st, err := restored.Status(ctx, c.project)
	if err != nil {
		t.Fatal(err)
	}
	if st.Verified != want.Verified {
		t.Errorf("the restored device verified %+v, the ledger's head is %+v", st.Verified, want.Verified)
	}
	if st.Unconfirmed != 0 || st.ServerLacks != 0 || st.Outbox.Pending != 0 {
		t.Errorf("after the sync: %d unconfirmed, %d the server lacks, %d pending", st.Unconfirmed, st.ServerLacks, st.Outbox.Pending)
	}
	// The first pull left its own entries out, met one it lacks and pulled
	// again in full; the closing pull left them out.
	if calls := w.calls[pullMethod]; calls != 3 {
		t.Errorf("%d pulls, want 3", calls)
	}
	// The restored device numbers its next entry after the ones it got
	// back, so the server takes it.
	r, err := restored.RecordTest(ctx, client.TestInput{Project: c.project, Readings: coneAt(110, 12), Feature: "trench backfill"})
	if err != nil {
		t.Fatalf("a test recorded after the restore: %v", err)
	}
	rep, err := restored.Sync(ctx, cc, c.project, client.SyncOptions{})
	if err != nil || rep.Accepted != 1 {
		t.Fatalf("the restored device's next sync: %+v, %v; want test %s accepted", rep, err, r.TestID)
	}
}

// copyStore copies a closed store's file (and its write-ahead log, if any)
// to to, and returns to.
func copyStore(t *testing.T, from, to string) string {
	t.Helper()
	for _, suffix := range []string{"", "-wal", "-shm"} {
		os.Remove(to + suffix)
		b, err := os.ReadFile(from + suffix)
		if errors.Is(err, os.ErrNotExist) {
			continue
		}
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(to+suffix, b, 0o600); err != nil {
			t.Fatal(err)
		}
	}
	return to
}

// refusesGzip makes a server answer a compressed call as a server without
// gzip's decompressor does.
type refusesGzip struct{ compressed sync.Map } // call context -> its request's grpc-encoding

type callKey struct{}

func (r *refusesGzip) TagRPC(ctx context.Context, _ *stats.RPCTagInfo) context.Context {
	return context.WithValue(ctx, callKey{}, new(string))
}

func (r *refusesGzip) HandleRPC(ctx context.Context, s stats.RPCStats) {
	if h, ok := s.(*stats.InHeader); ok {
		*ctx.Value(callKey{}).(*string) = h.Compression
	}
}

func (r *refusesGzip) TagConn(ctx context.Context, _ *stats.ConnTagInfo) context.Context { return ctx }
func (r *refusesGzip) HandleConn(context.Context, stats.ConnStats)                       {}

func (r *refusesGzip) refuse(ctx context.Context) error {
	if enc, _ := ctx.Value(callKey{}).(*string); enc != nil && *enc != "" && *enc != "identity" {
		return status.Errorf(codes.Unimplemented, "grpc: Decompressor is not installed for grpc-encoding %q", *enc)
	}
	return nil
}

// A device's connection to a server that cannot decompress gzip (an
// earlier release) repeats the refused call uncompressed and compresses
// nothing more; enrolment and syncs work, whether the first call is a
// unary one (an enrolment) or a stream (a sync's pull).
func TestDialWithoutServerGzip(t *testing.T) {
	ctx := context.Background()
	c := newCrew(t)
	r := &refusesGzip{}
	addr := serveWith(t, c.srv, grpc.StatsHandler(r),
		grpc.ChainUnaryInterceptor(func(ctx context.Context, req any, _ *grpc.UnaryServerInfo, h grpc.UnaryHandler) (any, error) {
			if err := r.refuse(ctx); err != nil {
				return nil, err
			}
			return h(ctx, req)
		}),
		grpc.ChainStreamInterceptor(func(s any, ss grpc.ServerStream, _ *grpc.StreamServerInfo, h grpc.StreamHandler) error {
			if err := r.refuse(ss.Context()); err != nil {
				return err
			}
			return h(s, ss)
		}))
	record := func(s *client.Store) {
		for i := range 3 {
			if _, err := s.RecordTest(ctx, client.TestInput{Project: c.project, Readings: coneAt(108+float64(i), 12)}); err != nil {
				t.Fatal(err)
			}
		}
	}
	syncThrough := func(s *client.Store, cc *grpc.ClientConn, w *wireCount) {
		t.Helper()
		rep, err := s.Sync(ctx, cc, c.project, client.SyncOptions{})
		if err != nil {
			t.Fatalf("sync: %v", err)
		}
		if rep.Accepted != 3 {
			t.Errorf("accepted %d, want 3", rep.Accepted)
		}
		for _, m := range []string{pushMethod, pullMethod} {
			if enc := w.reqEnc[m]; enc != "" && enc != "identity" {
				t.Errorf("%s still sent with %q", m, enc)
			}
		}
	}

	// Enrolled elsewhere: the sync's first call, a pull, is refused.
	ines := c.member("Ines", server.Inspector)
	record(ines)
	cc, w := countedConn(t, addr)
	syncThrough(ines, cc, w)

	// Enrolled through the connection: the enrolment is refused first.
	user, err := c.srv.AddUser(ctx, "Ona", false)
	if err != nil {
		t.Fatal(err)
	}
	if err := c.srv.AddMember(ctx, c.project, user, server.Inspector); err != nil {
		t.Fatal(err)
	}
	code, _, err := c.srv.IssueEnrollmentCode(ctx, user)
	if err != nil {
		t.Fatal(err)
	}
	ona, err := client.Open(ctx, filepath.Join(t.TempDir(), "ona.db"), client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer ona.Close()
	cc, w = countedConn(t, addr)
	if err := ona.Enroll(ctx, cc, code, "Ona's tablet"); err != nil {
		t.Fatalf("enrol: %v", err)
	}
	record(ona)
	syncThrough(ona, cc, w)
}

// A device's connection compresses its calls with gzip, and the server
// answers compressed.
func TestDialCompresses(t *testing.T) {
	ctx := context.Background()
	c := newCrew(t)
	s := c.member("Ines", server.Inspector)
	for i := range 5 {
		if _, err := s.RecordTest(ctx, client.TestInput{Project: c.project, Readings: coneAt(108+float64(i), 12), Feature: "pad"}); err != nil {
			t.Fatal(err)
		}
	}
	cc, w := countedConn(t, c.conn.Target())
	if _, err := s.Sync(ctx, cc, c.project, client.SyncOptions{}); err != nil {
		t.Fatal(err)
	}
	for _, m := range []string{pushMethod, pullMethod} {
		if w.reqEnc[m] != "gzip" || w.answerEnc[m] != "gzip" {
			t.Errorf("%s: request sent with %q, answered with %q; want gzip both ways", m, w.reqEnc[m], w.answerEnc[m])
		}
	}
	if sent, plain := w.get(w.sent, pushMethod), w.get(w.plainSent, pushMethod); sent >= plain {
		t.Errorf("the push went as %d bytes for %d before compression", sent, plain)
	}
}

// swapOwn is a server stream that swaps the device sequence numbers of the
// first two entries of each pulled chunk sent as the device's own: a server
// naming the wrong copies.
type swapOwn struct{ grpc.ServerStream }

func (s swapOwn) SendMsg(m any) error {
	if r, ok := m.(*pb.PullResponse); ok {
		var own []*pb.LedgerEntry
		for _, e := range r.GetEntries() {
			if e.GetOwnDeviceSeq() > 0 {
				own = append(own, e)
			}
		}
		if len(own) >= 2 {
			own[0].OwnDeviceSeq, own[1].OwnDeviceSeq = own[1].OwnDeviceSeq, own[0].OwnDeviceSeq
		}
	}
	return s.ServerStream.SendMsg(m)
}

// The entries a device rebuilds from its own copies are verified against
// the chain: when the server names the wrong copies, the hashes they give
// do not reach the server's head, and the device pulls them in full and
// verifies the server's real chain.
func TestOwnEntriesVerifiedAgainstTheChain(t *testing.T) {
	ctx := context.Background()
	c := newCrew(t)
	insp := c.member("Ines", server.Inspector)
	qa := c.member("Quillon", server.QA)
	addr := serveWith(t, c.srv, grpc.ChainStreamInterceptor(func(s any, ss grpc.ServerStream, _ *grpc.StreamServerInfo, h grpc.StreamHandler) error {
		return h(s, swapOwn{ss})
	}))
	for i := range 4 {
		if _, err := insp.RecordTest(ctx, client.TestInput{Project: c.project, Readings: coneAt(104+float64(i), 12), Feature: "pad"}); err != nil {
			t.Fatal(err)
		}
	}
	cc, w := countedConn(t, addr)
	if _, err := insp.Sync(ctx, cc, c.project, client.SyncOptions{}); err != nil {
		t.Fatalf("sync: %v", err)
	}
	if calls := w.calls[pullMethod]; calls != 3 {
		t.Errorf("%d pulls, want 3: the swapped copies were not refused", calls)
	}
	c.sync(qa)
	got, err := insp.Status(ctx, c.project)
	if err != nil {
		t.Fatal(err)
	}
	want, err := qa.Status(ctx, c.project)
	if err != nil {
		t.Fatal(err)
	}
	if got.Verified != want.Verified || got.Unconfirmed != 0 {
		t.Errorf("the inspector verified %+v (%d unconfirmed), the QA device %+v", got.Verified, got.Unconfirmed, want.Verified)
	}
}
