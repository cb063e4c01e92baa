package server_test

import (
	"context"
	"crypto/sha256"
	"io"
	"log/slog"
	"net"
	"path/filepath"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/soil"
	"tamp/server"
	"tamp/server/sqlitestore"
)

// closingStore is a store the cluster opens and closes.
type closingStore interface {
	server.Store
	Close() error
}

// cluster is a real server on 127.0.0.1:0 over a temporary data directory
// (or over the store openStore opens).
type cluster struct {
	tb      testing.TB
	dir     string
	store   closingStore
	srv     *server.Server
	g       *grpc.Server
	addr    string
	project string
	done    chan struct{}
	extra   []grpc.ServerOption
	rate    float64                         // pushes a second per device; zero for the server's default
	storage sqlitestore.Options             // how the store commits
	wrap    func(server.Store) server.Store // stands between server and store when set
	now     func() time.Time                // the server's clock; time.Now when nil
	opts    func(*server.Options)           // adjusts the server's options when set
	// openStore opens the store at each start when set; the SQLite file
	// ledger.db in dir otherwise.
	openStore func() (closingStore, error)
}

func hashOf(secret string) []byte {
	h := sha256.Sum256([]byte(secret))
	return h[:]
}

func startCluster(t testing.TB, dir string) *cluster {
	t.Helper()
	return startClusterSync(t, dir, sqlitestore.Options{SynchronousNormal: true})
}

// startClusterSync starts a cluster whose store commits as storage says.
func startClusterSync(t testing.TB, dir string, storage sqlitestore.Options) *cluster {
	t.Helper()
	c := &cluster{tb: t, dir: dir, storage: storage}
	c.start("")
	return c
}

func (c *cluster) start(addr string) {
	c.tb.Helper()
	var st closingStore
	var err error
	if c.openStore != nil {
		st, err = c.openStore()
	} else {
		st, err = sqlitestore.Open(context.Background(), filepath.Join(c.dir, "ledger.db"), c.storage)
	}
	if err != nil {
		c.tb.Fatal(err)
	}
	c.store = st
	var store server.Store = st
	if c.wrap != nil {
		store = c.wrap(st)
	}
	opts := server.Options{Store: store, Logger: slog.New(slog.NewTextHandler(io.Discard, nil)), PushRate: c.rate, PushBurst: int(c.rate), Now: c.now}
	if c.opts != nil {
		c.opts(&opts)
	}
	c.srv = server.New(opts)
	c.g = grpc.NewServer(append([]grpc.ServerOption{c.srv.RequestCodec(), grpc.UnaryInterceptor(c.srv.UnaryInterceptor),
		grpc.StreamInterceptor(c.srv.StreamInterceptor)}, c.extra...)...)
	c.srv.Register(c.g)
	if addr == "" {
		addr = "127.0.0.1:0"
	}
	var lis net.Listener
	for i := 0; ; i++ { // a restart reuses the port, which may linger briefly
		lis, err = net.Listen("tcp", addr)
		if err == nil || i > 50 {
			break
		}
		time.Sleep(20 * time.Millisecond)
	}
	if err != nil {
		c.tb.Fatal(err)
	}
	c.addr = lis.Addr().String()
	c.done = make(chan struct{})
	go func() { defer close(c.done); _ = c.g.Serve(lis) }()
	c.tb.Cleanup(c.stop)
}

func (c *cluster) stop() {
	if c.g == nil {
		return
	}
	c.g.GracefulStop()
	<-c.done
	c.srv.Close()
	c.store.Close()
	c.g = nil
}

func (c *cluster) conn(addr string, opts ...grpc.DialOption) *grpc.ClientConn {
	c.tb.Helper()
	if addr == "" {
		addr = c.addr
	}
	cc, err := grpc.NewClient(addr, append([]grpc.DialOption{grpc.WithTransportCredentials(insecure.NewCredentials())}, opts...)...)
	if err != nil {
		c.tb.Fatal(err)
	}
	c.tb.Cleanup(func() { cc.Close() })
	return cc
}

// device opens a store and enrols it for a new user with a role on the
// cluster's project.
func (c *cluster) device(name string, role server.Role) *client.Store {
	c.tb.Helper()
	ctx := context.Background()
	s, err := client.Open(ctx, filepath.Join(c.tb.TempDir(), name+".db"), client.Options{Durability: client.DurabilityNormal})
	if err != nil {
		c.tb.Fatal(err)
	}
	c.tb.Cleanup(func() { s.Close() })
	user, err := c.srv.AddUser(ctx, name, false)
	if err != nil {
		c.tb.Fatal(err)
	}
	if err := c.srv.AddMember(ctx, c.project, user, role); err != nil {
		c.tb.Fatal(err)
	}
	code, _, err := c.srv.IssueEnrollmentCode(ctx, user)
	if err != nil {
		c.tb.Fatal(err)
	}
	if err := s.Enroll(ctx, c.conn(""), code, name+"'s tablet"); err != nil {
		c.tb.Fatal(err)
	}
	return s
}

func (c *cluster) newProject(name string) string {
	c.tb.Helper()
	id, err := c.srv.CreateProject(context.Background(), name)
	if err != nil {
		c.tb.Fatal(err)
	}
	c.project = id
	return id
}

func (c *cluster) head() server.Checkpoint {
	c.tb.Helper()
	h, err := c.store.Head(context.Background(), c.project)
	if err != nil {
		c.tb.Fatal(err)
	}
	return h
}

// digest returns the digest of the server's projection of the project, in
// hexadecimal as a device's Digest.
func (c *cluster) digest() string {
	c.tb.Helper()
	var d string
	if err := c.srv.Inspect(context.Background(), c.project, func(p *ledger.Projection) { d = p.Digest().String() }); err != nil {
		c.tb.Fatal(err)
	}
	return d
}

func pcf(v float64) float64 { return v * soil.PoundPerCubicFoot }

// coneReadings gives sand-cone readings of dry density dry pcf at moisture
// w, as an inspector enters them on a device.
func coneReadings(dry, w float64) client.Readings {
	sd, used, cone, mass := coneMasses(dry, w)
	return client.Readings{SandCone: &client.SandCone{SandDensity: sd, SandUsed: used, ConeCorrection: cone, SoilMass: mass, Moisture: w}}
}

// sandCone gives the same readings as a raw device signs them.
func sandCone(dry, w float64) ledger.Readings {
	sd, used, cone, mass := coneMasses(dry, w)
	return ledger.Readings{SandCone: &soil.SandCone{SandDensity: sd, SandUsed: used, ConeCorrection: cone, SoilMass: mass, Moisture: w}}
}

// coneMasses are the sand density and masses of a sand-cone test of dry
// density dry pcf at moisture w: sand of 99.0 pcf, 7.00 lb used, 0.53 lb
// in the cone.
func coneMasses(dry, w float64) (sandDensity, used, cone, soilMass float64) {
	sandDensity = pcf(99.0)
	used, cone = 7.00*soil.Pound, 0.53*soil.Pound
	vol := (used - cone) / sandDensity
	return sandDensity, used, cone, pcf(dry) * (1 + w/100) * vol
}

// setUp has an administrator set the project up and the QA device define
// its reference data; the administrator's device syncs.
func setUp(t *testing.T, c *cluster, qa *client.Store, project string) (spec, ref string) {
	t.Helper()
	ctx := context.Background()
	admin := c.device("ada", server.Admin)
	if err := admin.SetUpProject(ctx, project, client.ProjectSetUp{Name: "Sagebrush Flats pad", Units: client.USCustomary,
		WaterDensity: soil.Water624}); err != nil {
		t.Fatal(err)
	}
	syncOK(t, admin, c.conn(""), project)
	spec, err := qa.DefineSpec(ctx, project, client.Spec{Name: "pad fill", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"})
	if err != nil {
		t.Fatal(err)
	}
	ref, err = qa.AddReference(ctx, project, client.Reference{Material: "crushed fines", Standard: client.ASTMD698, Method: "A",
		MaxDryDensity: pcf(116), OptimumMoisture: 13.5})
	if err != nil {
		t.Fatal(err)
	}
	return spec, ref
}

func record(t *testing.T, s *client.Store, project, spec, ref string, n int, seed float64) {
	t.Helper()
	for i := range n {
		if _, err := s.RecordTest(context.Background(), client.TestInput{Project: project, SpecID: spec, ReferenceID: ref,
			Readings: coneReadings(104+float64((i*7)%14)+seed, 12.5), Feature: "pad", LiftNumber: uint32(i%5 + 1)}); err != nil {
			t.Fatal(err)
		}
	}
}

func syncOK(t *testing.T, s *client.Store, cc *grpc.ClientConn, project string) client.SyncReport {
	t.Helper()
	rep, err := s.Sync(context.Background(), cc, project, client.SyncOptions{Sleep: func(time.Duration) {}})
	if err != nil {
		t.Fatalf("sync: %v", err)
	}
	return rep
}

func verified(t *testing.T, s *client.Store, project string) client.Checkpoint {
	t.Helper()
	st, err := s.Status(context.Background(), project)
	if err != nil {
		t.Fatal(err)
	}
	return st.Verified
}

// sameCheckpoint reports whether a device verified the server's point h.
func sameCheckpoint(v client.Checkpoint, h server.Checkpoint) bool {
	return v.Project == h.Project && v.Epoch == h.Epoch && v.Seq == h.Seq && v.Hash == h.Hash.String()
}

// tests signs n test records of project, with no reference or spec.
func (d *rawDevice) tests(tb testing.TB, project string, n int) []ledger.Signed {
	tb.Helper()
	out := make([]ledger.Signed, 0, n)
	for range n {
		out = append(out, d.sign(tb, project, &ledger.TestRecorded{TestID: newV7(), Content: ledger.TestContent{Readings: sandCone(110, 12), Feature: "pad"}}))
	}
	return out
}

// pushRequest is a push of events to project.
func pushRequest(project string, events []ledger.Signed) *pb.PushRequest {
	req := &pb.PushRequest{ProjectId: project, Events: make([]*pb.Event, 0, len(events))}
	for _, s := range events {
		req.Events = append(req.Events, s.Proto())
	}
	return req
}

// memberEntries returns how many entries of a project's ledger its members'
// devices made, leaving out the server's own (device_enrolled,
// device_revoked).
func (c *cluster) memberEntries(project string) int {
	c.tb.Helper()
	entries, err := c.store.After(context.Background(), project, 0, 1<<30)
	if err != nil {
		c.tb.Fatal(err)
	}
	n := 0
	for _, e := range entries {
		sg, err := ledger.Decode(e.Event)
		if err != nil {
			c.tb.Fatal(err)
		}
		switch sg.Event.Kind.(type) {
		case *ledger.DeviceEnrolled, *ledger.DeviceRevoked:
		default:
			n++
		}
	}
	return n
}
