// Package fieldapp_test is an app builder's module outside tamp (the test
// TestOutsideModule in tamp/internal/layering copies it into a temporary
// directory, with a go.mod that replaces tamp by the checkout). It imports
// only tamp's public packages, grpc and the standard library, and walks a
// crew's day through them: set-up, a test of every method, a correction, a
// void, a retest, the office's review, syncs, and two reports.
package fieldapp_test

import (
	"context"
	"errors"
	"log/slog"
	"math"
	"net"
	"path/filepath"
	"slices"
	"testing"

	"google.golang.org/grpc"

	"tamp/client"
	"tamp/server"
	"tamp/server/sqlitestore"
)

// tampd is a tamp server in this process, on 127.0.0.1:0, over a SQLite
// ledger store in a temporary directory.
type tampd struct {
	srv  *server.Server
	conn *grpc.ClientConn
}

func startTampd(t *testing.T) *tampd {
	t.Helper()
	ctx := context.Background()
	st, err := sqlitestore.Open(ctx, filepath.Join(t.TempDir(), "ledger.db"), sqlitestore.Options{SynchronousNormal: true})
	if err != nil {
		t.Fatal(err)
	}
	srv := server.New(server.Options{Store: st, Logger: slog.New(slog.DiscardHandler)})
	g := grpc.NewServer(srv.RequestCodec(), grpc.UnaryInterceptor(srv.UnaryInterceptor), grpc.StreamInterceptor(srv.StreamInterceptor))
	srv.Register(g)
	if err := srv.CheckStorage(ctx); err != nil {
		t.Fatal(err)
	}
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	served := make(chan error, 1)
	go func() { served <- g.Serve(lis) }()
	conn, err := client.Dial(lis.Addr().String(), client.DialOptions{Plaintext: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		conn.Close()
		g.GracefulStop()
		if err := <-served; err != nil {
			t.Errorf("serve: %v", err)
		}
		srv.Close()
		st.Close()
	})
	return &tampd{srv: srv, conn: conn}
}

// device opens a device's store and enrols it with code.
func (d *tampd) device(t *testing.T, name, code string) *client.Store {
	t.Helper()
	ctx := context.Background()
	s, err := client.Open(ctx, filepath.Join(t.TempDir(), name+".db"), client.Options{Durability: client.DurabilityNormal})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	if err := s.Enroll(ctx, d.conn, code, name+"'s tablet"); err != nil {
		t.Fatalf("enrol %s: %v", name, err)
	}
	return s
}

// member adds a user with a role on project, issues a code and enrols the
// user's device with it.
func (d *tampd) member(t *testing.T, project, name string, role server.Role) *client.Store {
	t.Helper()
	ctx := context.Background()
	user, err := d.srv.AddUser(ctx, name, false)
	if err != nil {
		t.Fatal(err)
	}
	if err := d.srv.AddMember(ctx, project, user, role); err != nil {
		t.Fatal(err)
	}
	code, _, err := d.srv.IssueEnrollmentCode(ctx, user)
	if err != nil {
		t.Fatal(err)
	}
	return d.device(t, name, code)
}

func (d *tampd) sync(t *testing.T, s *client.Store, project string) client.SyncReport {
	t.Helper()
	rep, err := s.Sync(context.Background(), d.conn, project, client.SyncOptions{})
	if err != nil {
		t.Fatalf("sync of %s: %v", s.User(), err)
	}
	if rep.Rejected != 0 {
		rejected, _ := s.Rejected(context.Background())
		t.Fatalf("sync of %s: %d entries rejected: %+v", s.User(), rep.Rejected, rejected)
	}
	return rep
}

// near reports whether got agrees with a hand-worked value given to the
// hundredth.
func near(got, want float64) bool { return math.Abs(got-want) <= 0.005 }

// check compares a result with the dry density, relative compaction and
// verdict worked by hand.
func check(t *testing.T, what string, r client.Result, dry, rc float64, v client.Verdict) {
	t.Helper()
	if !near(r.DryDensity, dry) || !near(r.RelativeCompaction, rc) || r.Verdict != v {
		t.Errorf("%s: dry density %.3f kg/m3, RC %.3f %%, %s; want %.2f kg/m3, %.2f %%, %s",
			what, r.DryDensity, r.RelativeCompaction, r.Verdict, dry, rc, v)
	}
}

func hasCode(fs []client.Finding, code string) bool {
	return slices.ContainsFunc(fs, func(f client.Finding) bool { return f.Code == code })
}

func ids(ts []client.Test) []string {
	var out []string
	for _, tt := range ts {
		out = append(out, tt.ID)
	}
	slices.Sort(out)
	return out
}

func TestFieldDay(t *testing.T) {
	ctx := context.Background()
	d := startTampd(t)

	// The operator sets the server up without a device: the first
	// administrator, a project, its members and their codes.
	adminUser, adminCode, _, err := d.srv.Bootstrap(ctx, "Ada Quill")
	if err != nil {
		t.Fatal(err)
	}
	project, err := d.srv.CreateProject(ctx, "Cottonwood Bend frontage road")
	if err != nil {
		t.Fatal(err)
	}
	if err := d.srv.AddMember(ctx, project, adminUser, server.Admin); err != nil {
		t.Fatal(err)
	}
	admin := d.device(t, "ada", adminCode)
	qa := d.member(t, project, "quinn", server.QA)
	ines := d.member(t, project, "ines", server.Inspector)
	office := d.member(t, project, "otto", server.Office)

	// A used code comes back as an error an app tests with errors.Is, with
	// the server's reason in a *client.ServerError.
	late, err := client.Open(ctx, filepath.Join(t.TempDir(), "late.db"), client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer late.Close()
	err = late.Enroll(ctx, d.conn, adminCode, "a second tablet")
	var se *client.ServerError
	if !errors.Is(err, client.ErrCodeInvalid) || !errors.As(err, &se) || se.Reason == "" {
		t.Errorf("enrolling with a used code: %v; want client.ErrCodeInvalid with a reason", err)
	}

	// The set-up, the spec and the laboratory reference.
	if err := admin.SetUpProject(ctx, project, client.ProjectSetUp{Name: "Cottonwood Bend frontage road", Units: client.SI}); err != nil {
		t.Fatal(err)
	}
	d.sync(t, admin, project)
	spec, err := qa.DefineSpec(ctx, project, client.Spec{Name: "subgrade fill", MinCompaction: "95",
		MoistureBasis: client.PointsOfOptimum, MoistureLow: "-2", MoistureHigh: "2"})
	if err != nil {
		t.Fatal(err)
	}
	ref, err := qa.AddReference(ctx, project, client.Reference{Material: "olive sandy lean clay", LabSampleID: "L-0417",
		Standard: client.ASTMD698, Method: "A", Edition: 2012, MaxDryDensity: 1900, OptimumMoisture: 12.0})
	if err != nil {
		t.Fatal(err)
	}
	if rep := d.sync(t, qa, project); rep.Accepted != 2 {
		t.Errorf("QA's sync accepted %d entries, want the spec and the reference", rep.Accepted)
	}
	d.sync(t, ines, project) // the reference data reaches the inspector

	// The inspector records a test of every method, offline, each graded
	// at once against the reference (maximum dry density 1900 kg/m3,
	// optimum moisture 12.0 %) and the spec (95 % minimum, -2 to +2 points
	// of optimum). Throughout:
	//   dry density = wet density / (1 + w/100)
	//   relative compaction = dry density / maximum dry density x 100
	//   moisture deviation = w - optimum, in points
	at := func(station float64, r client.Readings) client.TestInput {
		return client.TestInput{Project: project, SpecID: spec, ReferenceID: ref, Feature: "subgrade", LiftNumber: 3,
			LiftThickness: 0.3, Location: client.Location{Station: station, Offset: 4.5, Elevation: 1532.40}, Readings: r}
	}
	record := func(in client.TestInput) client.TestResult {
		t.Helper()
		r, err := ines.RecordTest(ctx, in)
		if err != nil {
			t.Fatal(err)
		}
		return r
	}

	// Nuclear gauge, direct transmission at 200 mm, two readings 90 degrees
	// apart: mean wet 2055 kg/m3, mean water 205 kg/m3; dry = wet - water =
	// 1850 kg/m3; w = 205 / 1850 = 11.08 %; RC = 1850 / 1900 = 97.37 %.
	direct := record(at(1200, client.Readings{Nuclear: &client.NuclearGauge{ProbeDepth: 0.2,
		Readings: []client.GaugeReading{{WetDensity: 2050, WaterPerVolume: 200}, {WetDensity: 2060, WaterPerVolume: 210}}}}))
	check(t, "nuclear direct", direct.Result, 1850.00, 97.37, client.Pass)
	if direct.Result.Method != client.NuclearDirect || !hasCode(direct.Result.Flags, client.FlagNuclearMoistureUncorrected) {
		t.Errorf("nuclear direct: method %s, flags %v; want %s flagged %s", direct.Result.Method, direct.Result.Flags,
			client.NuclearDirect, client.FlagNuclearMoistureUncorrected)
	}

	// Nuclear gauge, backscatter, one reading of wet 2030 kg/m3 with an
	// oven-dry moisture of 10.5 %: dry = 2030 / 1.105 = 1837.10 kg/m3;
	// RC = 1837.10 / 1900 = 96.69 %.
	oven := 10.5
	backscatter := record(at(1250, client.Readings{Nuclear: &client.NuclearGauge{Backscatter: true,
		Readings: []client.GaugeReading{{WetDensity: 2030, WaterPerVolume: 190}}, OvenMoisture: &oven}}))
	check(t, "nuclear backscatter", backscatter.Result, 1837.10, 96.69, client.Pass)

	// Sand cone: sand of 1400 kg/m3, apparatus 7.000 kg before and 3.500 kg
	// after, 1.600 kg in the cone: hole = (3.500 - 1.600) / 1400 =
	// 0.00135714 m3; wet = 2.800 kg / hole = 2063.16 kg/m3; w = 12.5 %:
	// dry = 2063.16 / 1.125 = 1833.92 kg/m3; RC = 96.52 %.
	cone := record(at(1300, client.Readings{SandCone: &client.SandCone{SandDensity: 1400, InitialMass: 7.000,
		FinalMass: 3.500, ConeCorrection: 1.600, SoilMass: 2.800, Moisture: 12.5}}))
	check(t, "sand cone", cone.Result, 1833.92, 96.52, client.Pass)

	// Drive cylinder of 101.6 mm inside diameter, 127 mm long: volume =
	// pi x 0.1016^2 / 4 x 0.127 = 0.00102963 m3; wet = 1.940 kg / volume =
	// 1884.17 kg/m3; w = 11.0 %: dry = 1884.17 / 1.11 = 1697.45 kg/m3;
	// RC = 89.34 %, below 95: it fails.
	cylinder := func(soil, w float64) client.Readings {
		return client.Readings{DriveCylinder: &client.DriveCylinder{Diameter: 0.1016, Length: 0.127, SoilMass: soil, Moisture: w}}
	}
	drive := record(at(1350, cylinder(1.940, 11.0)))
	check(t, "drive cylinder", drive.Result, 1697.45, 89.34, client.Fail)
	if !hasCode(drive.Result.Reasons, client.ReasonCompactionBelowMinimum) {
		t.Errorf("drive cylinder: reasons %v, want %s", drive.Result.Reasons, client.ReasonCompactionBelowMinimum)
	}

	// Rubber balloon read 0.0002 m3 before and 0.0016 m3 after: hole =
	// 0.0014 m3; wet = 2.900 kg / 0.0014 = 2071.43 kg/m3; w = 13.0 %:
	// dry = 2071.43 / 1.13 = 1833.12 kg/m3; RC = 96.48 %.
	balloon := record(at(1400, client.Readings{RubberBalloon: &client.RubberBalloon{InitialReading: 0.0002,
		FinalReading: 0.0016, SoilMass: 2.900, Moisture: 13.0}}))
	check(t, "rubber balloon", balloon.Result, 1833.12, 96.48, client.Pass)

	// A wet density measured by other means, 2100 kg/m3 at 15.0 %:
	// dry = 2100 / 1.15 = 1826.09 kg/m3; RC = 96.11 %, but w is 3.0 points
	// over optimum, above the window: it fails.
	measured := record(at(1450, client.Readings{WetDensity: &client.MeasuredDensity{WetDensity: 2100, Moisture: 15.0}}))
	check(t, "measured wet density", measured.Result, 1826.09, 96.11, client.Fail)
	if !hasCode(measured.Result.Reasons, client.ReasonMoistureAboveWindow) || !near(measured.Result.MoistureDeviation, 3.00) {
		t.Errorf("measured wet density: reasons %v, deviation %.3f; want %s at +3.00 points", measured.Result.Reasons,
			measured.Result.MoistureDeviation, client.ReasonMoistureAboveWindow)
	}

	// The moisture was typed as 15.0; the oven gave 13.0 %: dry = 2100 /
	// 1.13 = 1858.41 kg/m3; RC = 97.81 %; +1.0 point: it passes.
	fixed, err := ines.CorrectTest(ctx, project, measured.TestID, "moisture typed as 15.0, the oven gave 13.0",
		func(in *client.TestInput) { in.Readings.WetDensity.Moisture = 13.0 })
	if err != nil {
		t.Fatal(err)
	}
	check(t, "measured wet density, corrected", fixed.Result, 1858.41, 97.81, client.Pass)

	// The backscatter test was taken on the haul road, not the lift.
	if err := ines.VoidTest(ctx, project, backscatter.TestID, "taken on the haul road, not on lift 3"); err != nil {
		t.Fatal(err)
	}

	// The contractor re-rolls at station 1350; the retest takes the failing
	// test's location, lift, reference and spec. Wet = 2.150 kg /
	// 0.00102963 m3 = 2088.13 kg/m3; w = 11.5 %: dry = 2088.13 / 1.115 =
	// 1872.76 kg/m3; RC = 98.57 %.
	if got := ids(ines.OpenFailures(project)); !slices.Equal(got, []string{drive.TestID}) {
		t.Errorf("open failures before the retest: %v, want the drive-cylinder test %s", got, drive.TestID)
	}
	retest, err := ines.RecordRetest(ctx, project, drive.TestID, client.RetestInput{Readings: cylinder(2.150, 11.5)})
	if err != nil {
		t.Fatal(err)
	}
	check(t, "drive cylinder retest", retest.Result, 1872.76, 98.57, client.Pass)
	if n := len(ines.OpenFailures(project)); n != 0 {
		t.Errorf("open failures after the retest: %d, want none", n)
	}
	if rep := d.sync(t, ines, project); rep.Accepted != 9 {
		t.Errorf("the inspector's sync accepted %d entries, want 9 (six tests, a correction, a void, a retest)", rep.Accepted)
	}

	// The office reviews: it approves the nuclear test and returns the sand
	// cone. No one reviews a test they recorded.
	d.sync(t, office, project)
	if err := office.ReviewTest(ctx, project, direct.TestID, client.Approve, ""); err != nil {
		t.Fatal(err)
	}
	if err := office.ReviewTest(ctx, project, cone.TestID, client.Return, "no offset from centreline on the sheet; confirm it"); err != nil {
		t.Fatal(err)
	}
	if err := ines.ReviewTest(ctx, project, balloon.TestID, client.Approve, ""); !errors.Is(err, client.ErrOwnTest) {
		t.Errorf("the inspector approving her own test: %v, want client.ErrOwnTest", err)
	}
	d.sync(t, office, project)

	// Every device syncs and holds the same ledger.
	for _, s := range []*client.Store{admin, qa, ines, office} {
		d.sync(t, s, project)
	}
	for _, s := range []*client.Store{admin, qa, office} {
		if s.Digest(project) != ines.Digest(project) {
			t.Errorf("%s's copy of the project differs from the inspector's", s.User())
		}
	}
	for _, s := range []*client.Store{admin, qa, ines, office} {
		st, err := s.Status(ctx, project)
		if err != nil {
			t.Fatal(err)
		}
		if st.Outbox.Pending != 0 || st.Unconfirmed != 0 {
			t.Errorf("%s after the last sync: %d pending, %d unconfirmed; want none", s.User(), st.Outbox.Pending, st.Unconfirmed)
		}
	}

	// The inspector's device shows the history the others made.
	if h, err := ines.Test(project, cone.TestID); err != nil || h.ReviewStatus != client.Returned || len(h.Reviews) != 1 {
		t.Errorf("the sand cone on the inspector's device: %v, review status %s, %d reviews; want returned once", err, h.ReviewStatus, len(h.Reviews))
	}
	if h, err := ines.Test(project, measured.TestID); err != nil || len(h.Revisions) != 2 || h.Revisions[1].Reason == "" ||
		!near(h.Result.RelativeCompaction, 97.81) {
		t.Errorf("the corrected test: %v, %d revisions; want two, the correction with its reason, graded 97.81 %%", err, len(h.Revisions))
	}
	if h, err := qa.Test(project, backscatter.TestID); err != nil || !h.Voided || len(h.Voids) != 1 || h.Voids[0].Reason == "" {
		t.Errorf("the voided test on QA's device: %v, voided %v", err, h.Voided)
	}

	// Two reports, computed on QA's device from its own copy of the ledger.
	// The review queue holds every test awaiting the office: neither voided
	// nor reviewed in its current revision: the failing drive cylinder and
	// its retest, the rubber balloon and the corrected wet density. The
	// returned sand cone awaits its inspector, not the office.
	want := []string{drive.TestID, retest.TestID, balloon.TestID, measured.TestID}
	slices.Sort(want)
	if got := ids(qa.ReviewQueue(project, "")); !slices.Equal(got, want) {
		t.Errorf("review queue: %v, want %v", got, want)
	}
	// The retest audit has one chain: the drive cylinder, closed by its
	// passing retest at the same station. The wet density's failure was
	// corrected away, so it needs no retest.
	audit := qa.RetestAudit(project)
	if len(audit) != 1 {
		t.Fatalf("retest audit: %d chains, want 1", len(audit))
	}
	c := audit[0]
	if len(c.Retests) != 1 {
		t.Fatalf("retest audit: %d retests of %s, want 1", len(c.Retests), c.Failed.ID)
	}
	if c.Failed.ID != drive.TestID || c.Retests[0].ID != retest.TestID || c.Closure != client.ClosureRetested || c.StationShift != 0 {
		t.Errorf("retest audit: failed %s retested by %s, closure %s, shift %.2f m; want %s retested by %s at the same station",
			c.Failed.ID, c.Retests[0].ID, c.Closure, c.StationShift, drive.TestID, retest.TestID)
	}
	if c.Retests[0].Result.Verdict != client.Pass || c.Retests[0].RetestOf != drive.TestID {
		t.Errorf("the audit's retest: %s, retest of %q", c.Retests[0].Result.Verdict, c.Retests[0].RetestOf)
	}
}
