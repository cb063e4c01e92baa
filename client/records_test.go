package client_test

import (
	"context"
	"log/slog"
	"net"
	"path/filepath"
	"testing"

	"google.golang.org/grpc"

	"tamp/client"
	"tamp/server"
	"tamp/server/sqlitestore"
)

// crew is a server on loopback with one project, and a way to enrol a
// member's device on it.
type crew struct {
	t       *testing.T
	srv     *server.Server
	conn    *grpc.ClientConn
	project string
	dir     string
}

func newCrew(t *testing.T) *crew {
	t.Helper()
	ctx := context.Background()
	dir := t.TempDir()
	db, err := sqlitestore.Open(ctx, filepath.Join(dir, "ledger.db"), sqlitestore.Options{})
	if err != nil {
		t.Fatal(err)
	}
	srv := server.New(server.Options{Store: db, Logger: slog.New(slog.DiscardHandler)})
	g := grpc.NewServer(srv.RequestCodec(), grpc.UnaryInterceptor(srv.UnaryInterceptor), grpc.StreamInterceptor(srv.StreamInterceptor))
	srv.Register(g)
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	go g.Serve(lis)
	conn, err := client.Dial(lis.Addr().String(), client.DialOptions{Plaintext: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		conn.Close()
		g.GracefulStop()
		srv.Close()
		db.Close()
	})
	project, err := srv.CreateProject(ctx, "Sagebrush Flat haul road")
	if err != nil {
		t.Fatal(err)
	}
	return &crew{t: t, srv: srv, conn: conn, project: project, dir: dir}
}

// member adds a user with role and enrols a device for them.
func (c *crew) member(name string, role server.Role) *client.Store {
	c.t.Helper()
	ctx := context.Background()
	user, err := c.srv.AddUser(ctx, name, false)
	if err != nil {
		c.t.Fatal(err)
	}
	if err := c.srv.AddMember(ctx, c.project, user, role); err != nil {
		c.t.Fatal(err)
	}
	code, _, err := c.srv.IssueEnrollmentCode(ctx, user)
	if err != nil {
		c.t.Fatal(err)
	}
	s, err := client.Open(ctx, filepath.Join(c.dir, name+".db"), client.Options{})
	if err != nil {
		c.t.Fatal(err)
	}
	c.t.Cleanup(func() { s.Close() })
	if err := s.Enroll(ctx, c.conn, code, name+"'s tablet"); err != nil {
		c.t.Fatal(err)
	}
	return s
}

func (c *crew) sync(s *client.Store) client.SyncReport {
	c.t.Helper()
	rep, err := s.Sync(context.Background(), c.conn, c.project, client.SyncOptions{})
	if err != nil {
		c.t.Fatal(err)
	}
	return rep
}

// Pulled counts the entries of other devices that the sync brought to this
// device, each once: not the device's own entries coming back in the
// chain, and not the reference data a first sync receives ahead of the
// chain and again within it.
func TestSyncPulledCountsOthersEntriesOnce(t *testing.T) {
	ctx := context.Background()
	c := newCrew(t)
	qa := c.member("Quillon", server.QA)
	insp := c.member("Ines", server.Inspector)

	spec, err := qa.DefineSpec(ctx, c.project, client.Spec{Name: "subgrade", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"})
	if err != nil {
		t.Fatal(err)
	}
	ref, err := qa.AddReference(ctx, c.project, client.Reference{Material: "brown silty sand", Standard: client.ASTMD698, Method: "A",
		MaxDryDensity: 1900, OptimumMoisture: 12})
	if err != nil {
		t.Fatal(err)
	}
	qaFirst := c.sync(qa)
	// The ledger holds the server's introductions of both devices and
	// QA's two entries; QA's own two do not count.
	if want := int(qaFirst.Head.Seq) - 2; qaFirst.Pulled != want {
		t.Errorf("QA's first sync: Pulled=%d, want %d (ledger of %d entries, 2 of them QA's own)", qaFirst.Pulled, want, qaFirst.Head.Seq)
	}

	first := c.sync(insp)
	if want := int(first.Head.Seq); first.Pulled != want {
		t.Errorf("the inspector's first sync: Pulled=%d, want %d (every entry of the ledger once, none its own)", first.Pulled, want)
	}
	if _, err := insp.RecordTest(ctx, client.TestInput{Project: c.project, SpecID: spec, ReferenceID: ref, Feature: "subgrade",
		Readings: client.Readings{WetDensity: &client.MeasuredDensity{WetDensity: 2100, Moisture: 12}}}); err != nil {
		t.Fatal(err)
	}
	second := c.sync(insp)
	if second.Accepted != 1 || second.Pulled != 0 {
		t.Errorf("the inspector's second sync: Accepted=%d Pulled=%d, want 1 and 0 (its own test is not pulled from others)",
			second.Accepted, second.Pulled)
	}
	if again := c.sync(qa); again.Pulled != 1 {
		t.Errorf("QA's second sync: Pulled=%d, want 1 (the inspector's test)", again.Pulled)
	}
}

// The records a device holds read back by name, with the values a test
// is graded against and who recorded them.
func TestRecordsReadBack(t *testing.T) {
	ctx := context.Background()
	c := newCrew(t)
	admin := c.member("Ada", server.Admin)
	qa := c.member("Quillon", server.QA)
	office := c.member("Osric", server.Office)

	if _, ok := admin.SetUp(c.project); ok {
		t.Error("SetUp reported a set-up before any")
	}
	if err := admin.SetUpProject(ctx, c.project, client.ProjectSetUp{Name: "Sagebrush Flat haul road", Units: client.USCustomary,
		TimeZone: "America/Boise", Shrinkage: client.CompactedBasis}); err != nil {
		t.Fatal(err)
	}
	su, ok := admin.SetUp(c.project)
	if !ok || su.Name != "Sagebrush Flat haul road" || su.Units != client.USCustomary || su.TimeZone != "America/Boise" ||
		su.Shrinkage != client.CompactedBasis {
		t.Errorf("SetUp()=%+v, %v", su, ok)
	}

	if _, err := qa.DefineSpec(ctx, c.project, client.Spec{Name: "subgrade", MinCompaction: "95.0", MoistureLow: "-2",
		MoistureHigh: "+2", VolumePerTest: 500}); err != nil {
		t.Fatal(err)
	}
	if _, err := qa.DefineSpec(ctx, c.project, client.Spec{Name: "base", MinCompaction: "98"}); err != nil {
		t.Fatal(err)
	}
	specs := qa.Specs(c.project)
	if len(specs) != 2 || specs[0].Name != "base" || specs[1].MinCompaction != "95.0" || specs[1].MoistureHigh != "+2" ||
		specs[1].VolumePerTest != 500 || specs[1].MoistureBasis != client.PointsOfOptimum {
		t.Errorf("Specs()=%+v", specs)
	}

	pts := []client.CurvePoint{{Moisture: 8, DryDensity: 1800}, {Moisture: 10, DryDensity: 1870}, {Moisture: 12, DryDensity: 1890},
		{Moisture: 14, DryDensity: 1850}}
	fitted, err := qa.AddReference(ctx, c.project, client.Reference{Material: "tan sand", LabSampleID: "L-7", Standard: client.ASTMD698,
		Method: "A", Points: pts})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := qa.AddReference(ctx, c.project, client.Reference{Material: "gravel", Standard: client.AASHTOT180, Method: "D",
		MaxDryDensity: 2150, OptimumMoisture: 7.5}); err != nil {
		t.Fatal(err)
	}
	refs := qa.References(c.project)
	if len(refs) != 2 || refs[0].Material != "gravel" || refs[0].Fitted || refs[0].GradingMaxDryDensity != 2150 {
		t.Fatalf("References()=%+v", refs)
	}
	if r := refs[1]; r.ID != fitted || !r.Fitted || !r.Bracketed || r.GradingMaxDryDensity < 1880 || r.GradingMaxDryDensity > 1900 ||
		r.GradingOptimumMoisture < 11 || r.GradingOptimumMoisture > 13 || len(r.Points) != 4 || r.RecordedBy != qa.User() {
		t.Errorf("the fitted reference: %+v", r)
	}

	gauge, err := office.RegisterEquipment(ctx, c.project, client.Equipment{Kind: client.NuclearGaugeEquipment, Model: "MD-4",
		SerialNumber: "40417", CalibrationDue: "2031-04-30"})
	if err != nil {
		t.Fatal(err)
	}
	bank := client.Readings{WetDensity: &client.MeasuredDensity{WetDensity: 1980, Moisture: 10}}
	if _, err := qa.MeasureBorrowSource(ctx, c.project, client.BorrowSource{Name: "pit 2", BankTests: []client.Readings{bank}}); err != nil {
		t.Fatal(err)
	}
	c.sync(admin)
	c.sync(qa)
	c.sync(office)
	insp := c.member("Ines", server.Inspector)
	c.sync(insp)
	if err := insp.RecordStandardCount(ctx, c.project, client.StandardCount{EquipmentID: gauge, Date: "2031-03-02",
		DensityCount: 2810, MoistureCount: 690, Accepted: true}); err != nil {
		t.Fatal(err)
	}
	eq := insp.Equipment(c.project)
	if len(eq) != 1 || eq[0].Kind != client.NuclearGaugeEquipment || eq[0].SerialNumber != "40417" || len(eq[0].Counts) != 1 ||
		eq[0].Counts[0].DensityCount != 2810 || eq[0].RecordedBy != office.User() {
		t.Errorf("Equipment()=%+v", eq)
	}
	bs := insp.BorrowSources(c.project)
	if len(bs) != 1 || bs[0].Name != "pit 2" || bs[0].BankDryDensity < 1799 || bs[0].BankDryDensity > 1801 {
		t.Errorf("BorrowSources()=%+v (bank dry density 1980/1.10 = 1800)", bs)
	}
	if su, ok := insp.SetUp(c.project); !ok || su.Name != "Sagebrush Flat haul road" {
		t.Errorf("the inspector's SetUp()=%+v, %v", su, ok)
	}

	members := insp.Members(c.project)
	roles := map[string]string{}
	for _, m := range members {
		roles[m.Name] = m.Role
		if len(m.Devices) != 1 || m.Devices[0] != m.Name+"'s tablet" {
			t.Errorf("member %s's devices: %q", m.Name, m.Devices)
		}
	}
	want := map[string]string{"Ada": "admin", "Quillon": "qa", "Osric": "office", "Ines": "inspector"}
	if len(roles) != len(want) {
		t.Errorf("Members()=%+v", members)
	}
	for n, r := range want {
		if roles[n] != r {
			t.Errorf("member %s: role %q, want %q", n, roles[n], r)
		}
	}

	place, err := office.RecordPlacement(ctx, c.project, client.Placement{Feature: "embankment", LiftNumber: 2, Thickness: 0.2,
		CompactedVolume: 400, BorrowSourceID: bs[0].ID, PlacedOn: "2031-03-02"})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := office.RecordHaul(ctx, c.project, client.Haul{BorrowSourceID: bs[0].ID, Loads: 30, LooseVolumePerLoad: 10,
		PlacementID: place, HauledOn: "2031-03-02"}); err != nil {
		t.Fatal(err)
	}
	if ps := office.Placements(c.project); len(ps) != 1 || ps[0].ID != place || ps[0].CompactedVolume != 400 {
		t.Errorf("Placements()=%+v", ps)
	}
	if hs := office.Hauls(c.project); len(hs) != 1 || hs[0].Loads != 30 || hs[0].PlacementID != place {
		t.Errorf("Hauls()=%+v", hs)
	}
}

// Status counts the entries the server holds back for records it has not
// received, until they arrive.
func TestStatusCountsWaitingEntries(t *testing.T) {
	ctx := context.Background()
	c := newCrew(t)
	qa := c.member("Quillon", server.QA)
	insp := c.member("Ines", server.Inspector)
	// QA defines the spec on a device that has not synced yet; the
	// inspector's test names it.
	spec, err := qa.DefineSpec(ctx, c.project, client.Spec{Name: "subgrade", MinCompaction: "95"})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := insp.RecordTest(ctx, client.TestInput{Project: c.project, SpecID: spec, Feature: "subgrade",
		Readings: client.Readings{WetDensity: &client.MeasuredDensity{WetDensity: 2100, Moisture: 12}}}); err != nil {
		t.Fatal(err)
	}
	c.sync(insp)
	st, err := insp.Status(ctx, c.project)
	if err != nil {
		t.Fatal(err)
	}
	if st.Waiting != 1 || st.Outbox.Pending != 1 {
		t.Errorf("after the first sync: Waiting=%d Pending=%d, want 1 and 1", st.Waiting, st.Outbox.Pending)
	}
	c.sync(qa)
	c.sync(insp)
	if st, _ = insp.Status(ctx, c.project); st.Waiting != 0 || st.Outbox.Pending != 0 {
		t.Errorf("once the spec reached the server: Waiting=%d Pending=%d, want 0 and 0", st.Waiting, st.Outbox.Pending)
	}
}
