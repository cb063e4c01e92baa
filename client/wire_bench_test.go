package client_test

import (
	"bytes"
	"compress/gzip"
	"context"
	"crypto/ed25519"
	"encoding/base64"
	"encoding/json"
	"fmt"
	"log/slog"
	"net"
	"path/filepath"
	"runtime"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/google/uuid"
	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/metadata"
	"google.golang.org/protobuf/encoding/protojson"
	"google.golang.org/protobuf/proto"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/soil"
	"tamp/server"
	"tamp/server/sqlitestore"
)

// countingListener counts every byte that crosses its connections, both
// ways: what a network would carry, HTTP/2 framing and headers included.
type countingListener struct {
	net.Listener
	n atomic.Int64
}

func (l *countingListener) Accept() (net.Conn, error) {
	c, err := l.Listener.Accept()
	if err != nil {
		return nil, err
	}
	return &countingConn{Conn: c, n: &l.n}, nil
}

type countingConn struct {
	net.Conn
	n *atomic.Int64
}

func (c *countingConn) Read(p []byte) (int, error) {
	k, err := c.Conn.Read(p)
	c.n.Add(int64(k))
	return k, err
}

func (c *countingConn) Write(p []byte) (int, error) {
	k, err := c.Conn.Write(p)
	c.n.Add(int64(k))
	return k, err
}

// benchServer is tampd's server in process on 127.0.0.1:0, and a device's
// connection to it (from client.Dial: gzip, as devices sync) whose
// messages are counted, and which keeps the events of the last push.
type benchServer struct {
	tb     testing.TB
	srv    *server.Server
	lis    *countingListener
	cc     *grpc.ClientConn
	wire   *wireCount
	mu     sync.Mutex
	pushed []*pb.Event // the events of the pushes since the last take
}

func startBenchServer(tb testing.TB) *benchServer {
	tb.Helper()
	ctx := context.Background()
	db, err := sqlitestore.Open(ctx, filepath.Join(tb.TempDir(), "ledger.db"), sqlitestore.Options{SynchronousNormal: true})
	if err != nil {
		tb.Fatal(err)
	}
	srv := server.New(server.Options{Store: db, Logger: slog.New(slog.DiscardHandler)})
	g := grpc.NewServer(srv.RequestCodec(), grpc.UnaryInterceptor(srv.UnaryInterceptor), grpc.StreamInterceptor(srv.StreamInterceptor))
	srv.Register(g)
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		tb.Fatal(err)
	}
	bs := &benchServer{tb: tb, srv: srv, lis: &countingListener{Listener: l}, wire: newWireCount()}
	done := make(chan struct{})
	go func() { defer close(done); _ = g.Serve(bs.lis) }()
	keep := func(ctx context.Context, method string, req, reply any, cc *grpc.ClientConn, invoke grpc.UnaryInvoker, opts ...grpc.CallOption) error {
		if p, ok := req.(*pb.PushRequest); ok {
			bs.mu.Lock()
			bs.pushed = append(bs.pushed, p.GetEvents()...)
			bs.mu.Unlock()
		}
		return invoke(ctx, method, req, reply, cc, opts...)
	}
	bs.cc, err = client.Dial(l.Addr().String(), client.DialOptions{Plaintext: true,
		Extra: []grpc.DialOption{grpc.WithStatsHandler(bs.wire), grpc.WithChainUnaryInterceptor(keep)}})
	if err != nil {
		tb.Fatal(err)
	}
	tb.Cleanup(func() {
		bs.cc.Close()
		g.GracefulStop()
		<-done
		srv.Close()
		db.Close()
	})
	return bs
}

// takePushed returns the events pushed since the last call.
func (bs *benchServer) takePushed() []*pb.Event {
	bs.mu.Lock()
	defer bs.mu.Unlock()
	out := bs.pushed
	bs.pushed = nil
	return out
}

// member adds a user with a role on project and enrols a new device for
// them, with a store under dir.
func (bs *benchServer) member(dir, name, project string, role server.Role) *client.Store {
	bs.tb.Helper()
	ctx := context.Background()
	user, err := bs.srv.AddUser(ctx, name, false)
	if err != nil {
		bs.tb.Fatal(err)
	}
	if err := bs.srv.AddMember(ctx, project, user, role); err != nil {
		bs.tb.Fatal(err)
	}
	code, _, err := bs.srv.IssueEnrollmentCode(ctx, user)
	if err != nil {
		bs.tb.Fatal(err)
	}
	s, err := client.Open(ctx, filepath.Join(dir, name+".db"), client.Options{})
	if err != nil {
		bs.tb.Fatal(err)
	}
	bs.tb.Cleanup(func() { s.Close() })
	if err := s.Enroll(ctx, bs.cc, code, name+"'s tablet"); err != nil {
		bs.tb.Fatal(err)
	}
	return s
}

func (bs *benchServer) sync(s *client.Store, project string) client.SyncReport {
	bs.tb.Helper()
	rep, err := s.Sync(context.Background(), bs.cc, project, client.SyncOptions{})
	if err != nil {
		bs.tb.Fatal(err)
	}
	return rep
}

// day records n tests on a device, as an inspector's day: a sand-cone or
// a nuclear-gauge test at a station on a lift of a feature, graded against
// a reference and a spec when given.
func day(tb testing.TB, s *client.Store, project, spec, ref string, n, seed int) {
	tb.Helper()
	for i := range n {
		k := seed*n + i
		in := client.TestInput{Project: project, SpecID: spec, ReferenceID: ref, Feature: "embankment", LiftNumber: uint32(k/25 + 1),
			LiftThickness: 0.2, Location: client.Location{Station: 1200 + float64(k%40)*12.5, Offset: float64(k%7) - 3},
			Readings: coneAt(104+float64(k%13), 11.5+float64(k%5)*0.5)}
		if k%3 == 0 {
			wet, w := (118+float64(k%11))*soil.PoundPerCubicFoot, 11+float64(k%6)*0.4
			in.Readings = client.Readings{Nuclear: &client.NuclearGauge{ProbeDepth: 0.2,
				Readings: []client.GaugeReading{{WetDensity: wet, WaterPerVolume: wet * w / (100 + w)}}}}
		}
		if _, err := s.RecordTest(context.Background(), in); err != nil {
			tb.Fatal(err)
		}
	}
}

// jsonRecord is a signed record as JSON: the event's fields (protojson,
// field names as in the .proto) and its signature in base64.
type jsonRecord struct {
	Event     json.RawMessage `json:"event"`
	Signature string          `json:"signature"`
}

func gzipped(tb testing.TB, v any) int {
	tb.Helper()
	doc, err := json.Marshal(v)
	if err != nil {
		tb.Fatal(err)
	}
	var z bytes.Buffer
	w := gzip.NewWriter(&z)
	w.Write(doc)
	w.Close()
	return z.Len()
}

// gzipJSON returns the size of the signed records as one JSON array,
// gzip-compressed at the default level, as a push of the batch in JSON
// would carry them; and the sum of the sizes of each record's JSON
// gzip-compressed alone.
func gzipJSON(tb testing.TB, evs []*pb.Event) (batch, each int) {
	tb.Helper()
	recs := make([]jsonRecord, 0, len(evs))
	for _, e := range evs {
		var body pb.EventBody
		if err := proto.Unmarshal(e.GetBody(), &body); err != nil {
			tb.Fatal(err)
		}
		j, err := protojson.MarshalOptions{UseProtoNames: true}.Marshal(&body)
		if err != nil {
			tb.Fatal(err)
		}
		var compact bytes.Buffer
		if err := json.Compact(&compact, j); err != nil {
			tb.Fatal(err)
		}
		r := jsonRecord{Event: compact.Bytes(), Signature: base64.StdEncoding.EncodeToString(e.GetSignature())}
		recs = append(recs, r)
		each += gzipped(tb, r)
	}
	return gzipped(tb, recs), each
}

// BenchmarkWire syncs an inspector's day of 50 tests, graded against the
// project's reference and spec, and reports what goes over the wire:
//
//   - push/gzip-json: the push's request bytes (its messages as sent,
//     gzip-compressed, with gRPC's message header) over the same signed
//     records as JSON, each record gzip-compressed alone (the measure the
//     issue's "today 0.96" was taken with);
//   - push/gzip-json-batch: the same over the records as one JSON array
//     gzip-compressed whole, as the push compresses its batch: the stricter
//     comparison, bounded by what neither format compresses (each record's
//     64-byte signature and random ids);
//   - sync/push: all the bytes of the whole sync (both pulls and the push,
//     both ways, HTTP/2 framing and headers included, counted at the
//     server's listener) over the push call's messages both ways;
//   - sync/push-request: the same over the push's request alone.
func BenchmarkWire(b *testing.B) {
	const tests = 50
	ctx := context.Background()
	bs := startBenchServer(b)
	project, err := bs.srv.CreateProject(ctx, "Cottonwood Draw embankment")
	if err != nil {
		b.Fatal(err)
	}
	dir := b.TempDir()
	qa := bs.member(dir, "quinn", project, server.QA)
	insp := bs.member(dir, "ines", project, server.Inspector)
	spec, err := qa.DefineSpec(ctx, project, client.Spec{Name: "embankment 95", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"})
	if err != nil {
		b.Fatal(err)
	}
	ref, err := qa.AddReference(ctx, project, client.Reference{Material: "sandy lean clay", Standard: client.ASTMD698, Method: "A",
		MaxDryDensity: 116 * soil.PoundPerCubicFoot, OptimumMoisture: 13.5})
	if err != nil {
		b.Fatal(err)
	}
	bs.sync(qa, project)
	bs.sync(insp, project)
	days := 0
	b.Run("day-of-50", func(b *testing.B) {
		var push, answers, all, json, jsonEach int64
		for range b.N {
			b.StopTimer()
			day(b, insp, project, spec, ref, tests, days)
			days++
			bs.takePushed()
			before := bs.lis.n.Load()
			pushBefore, answersBefore := bs.wire.get(bs.wire.sent, pushMethod), bs.wire.get(bs.wire.recv, pushMethod)
			b.StartTimer()
			rep := bs.sync(insp, project)
			b.StopTimer()
			if rep.Accepted != tests {
				b.Fatalf("accepted %d of %d", rep.Accepted, tests)
			}
			push += bs.wire.get(bs.wire.sent, pushMethod) - pushBefore
			answers += bs.wire.get(bs.wire.recv, pushMethod) - answersBefore
			all += bs.lis.n.Load() - before
			batch, each := gzipJSON(b, bs.takePushed())
			json, jsonEach = json+int64(batch), jsonEach+int64(each)
			b.StartTimer()
		}
		b.ReportMetric(float64(push)/float64(jsonEach), "push/gzip-json")
		b.ReportMetric(float64(push)/float64(json), "push/gzip-json-batch")
		b.ReportMetric(float64(all)/float64(push+answers), "sync/push")
		b.ReportMetric(float64(all)/float64(push), "sync/push-request")
		b.ReportMetric(float64(push)/float64(b.N*tests), "push-bytes/test")
		b.ReportMetric(float64(jsonEach)/float64(b.N*tests), "gzip-json-bytes/test")
		b.ReportMetric(float64(json)/float64(b.N*tests), "gzip-json-batch-bytes/test")
		b.ReportMetric(float64(all)/float64(b.N*tests), "sync-bytes/test")
	})
}

// rawCrew is a device of the benchmark's own, outside the client library,
// that signs tests and pushes them in batches: the fastest way to give a
// project tens of thousands of entries.
type rawCrew struct {
	id, user, token string
	key             ed25519.PrivateKey
	seq             uint64
}

func newRawCrew(tb testing.TB, bs *benchServer, project, name string) *rawCrew {
	tb.Helper()
	ctx := context.Background()
	user, err := bs.srv.AddUser(ctx, name, false)
	if err != nil {
		tb.Fatal(err)
	}
	if err := bs.srv.AddMember(ctx, project, user, server.Inspector); err != nil {
		tb.Fatal(err)
	}
	code, _, err := bs.srv.IssueEnrollmentCode(ctx, user)
	if err != nil {
		tb.Fatal(err)
	}
	pub, key, err := ed25519.GenerateKey(nil)
	if err != nil {
		tb.Fatal(err)
	}
	c := &rawCrew{id: uuid.Must(uuid.NewV7()).String(), user: user, key: key}
	resp, err := pb.NewAdminServiceClient(bs.cc).EnrollDevice(ctx, &pb.EnrollDeviceRequest{Code: code, DeviceId: c.id, PublicKey: pub})
	if err != nil {
		tb.Fatal(err)
	}
	c.token = resp.GetToken()
	return c
}

// push signs n tests of project, on all cores, and pushes them in batches
// of 500 over a connection of its own.
func (c *rawCrew) push(tb testing.TB, addr, project string, n int) {
	tb.Helper()
	evs := make([]*pb.Event, n)
	start := time.Now()
	first := c.seq
	var wg sync.WaitGroup
	var failed atomic.Value
	workers := runtime.GOMAXPROCS(0)
	for w := range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := w; i < n; i += workers {
				seq := first + uint64(i) + 1
				at := start.Add(time.Duration(i) * time.Millisecond)
				wet, w := (118+float64(i%11))*soil.PoundPerCubicFoot, 11+float64(i%6)*0.4
				sg, err := ledger.Seal(ledger.Event{ID: uuid.Must(uuid.NewV7()).String(), Project: project, Author: c.user, Device: c.id,
					DeviceSeq: seq, PrevDeviceSeq: seq - 1, HLC: ledger.HLC{Wall: at.UnixMicro()}, DeviceTime: at.UTC().Truncate(time.Microsecond),
					Kind: &ledger.TestRecorded{TestID: uuid.Must(uuid.NewV7()).String(), Content: ledger.TestContent{
						Readings: ledger.Readings{Nuclear: &ledger.NuclearReadings{ProbeDepth: 0.2,
							Counts: []soil.NuclearReading{{WetDensity: wet, WaterPerVolume: wet * w / (100 + w)}}}},
						Feature: "embankment", LiftNumber: uint32(i/200 + 1), LiftThickness: 0.2,
						Location: ledger.Location{Station: float64(i%400) * 12.5}}}}, c.key)
				if err != nil {
					failed.Store(err)
					return
				}
				evs[i] = sg.Proto()
			}
		}()
	}
	wg.Wait()
	if err, _ := failed.Load().(error); err != nil {
		tb.Fatal(err)
	}
	c.seq = first + uint64(n)
	cc, err := grpc.NewClient(addr, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		tb.Fatal(err)
	}
	defer cc.Close()
	ctx := metadata.AppendToOutgoingContext(context.Background(), "authorization", "Bearer "+c.token)
	sc := pb.NewSyncServiceClient(cc)
	for i := 0; i < n; i += 500 {
		resp, err := sc.Push(ctx, &pb.PushRequest{ProjectId: project, Events: evs[i:min(n, i+500)], DeviceTimeMicros: time.Now().UnixMicro()})
		if err != nil {
			tb.Fatal(err)
		}
		for _, o := range resp.GetOutcomes() {
			if o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
				tb.Fatalf("crew push: %s %s", o.GetStatus(), o.GetMessage())
			}
		}
	}
}

// BenchmarkIncremental syncs 50 new tests from a device holding 50,000
// events and, in the same iteration, from a device holding none (a new
// device on a new project), and reports incremental/empty, the time of
// the first device's syncs over the second's (a sync's cost should not grow
// with the store), and incremental-bytes/test, the bytes over the wire of
// the first device's syncs (both ways, framing and headers included) per
// new test. The device holding 50,000 events got them in its first sync,
// from a crew that pushed them; building it takes most of the run.
func BenchmarkIncremental(b *testing.B) {
	const (
		held  = 50_000
		tests = 50
	)
	ctx := context.Background()
	bs := startBenchServer(b)
	project, err := bs.srv.CreateProject(ctx, "Cottonwood Draw embankment")
	if err != nil {
		b.Fatal(err)
	}
	dir := b.TempDir()
	newRawCrew(b, bs, project, "crew").push(b, bs.cc.Target(), project, held)
	big := bs.member(dir, "ines", project, server.Inspector)
	bs.sync(big, project)
	if st, err := big.Status(ctx, project); err != nil || st.Verified.Seq < held {
		b.Fatalf("the device verified %d entries (%v), want at least %d", st.Verified.Seq, err, held)
	}
	empties := 0
	b.Run(fmt.Sprintf("held-%d", held), func(b *testing.B) {
		var onBig, onEmpty time.Duration
		var bigBytes, emptyBytes int64
		timed := func(s *client.Store, project string) (time.Duration, int64) {
			before := bs.lis.n.Load()
			start := time.Now()
			if rep := bs.sync(s, project); rep.Accepted != tests {
				b.Fatalf("accepted %d of %d", rep.Accepted, tests)
			}
			return time.Since(start), bs.lis.n.Load() - before
		}
		for i := range b.N {
			b.StopTimer()
			day(b, big, project, "", "", tests, i)
			fresh, err := bs.srv.CreateProject(ctx, fmt.Sprintf("Cottonwood Draw borrow road %d", empties))
			if err != nil {
				b.Fatal(err)
			}
			empty := bs.member(b.TempDir(), fmt.Sprintf("emil%d", empties), fresh, server.Inspector)
			empties++
			day(b, empty, fresh, "", "", tests, i)
			b.StartTimer()
			d, n := timed(big, project)
			onBig, bigBytes = onBig+d, bigBytes+n
			d, n = timed(empty, fresh)
			onEmpty, emptyBytes = onEmpty+d, emptyBytes+n
			b.StopTimer()
			empty.Close()
			b.StartTimer()
		}
		b.ReportMetric(float64(onBig)/float64(onEmpty), "incremental/empty")
		b.ReportMetric(float64(bigBytes)/float64(b.N*tests), "incremental-bytes/test")
		b.ReportMetric(float64(emptyBytes)/float64(b.N*tests), "empty-bytes/test")
		b.ReportMetric(float64(onBig.Microseconds())/1000/float64(b.N), "incremental-ms")
		b.ReportMetric(float64(onEmpty.Microseconds())/1000/float64(b.N), "empty-ms")
	})
}
