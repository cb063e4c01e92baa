package client_test

import (
	"context"
	"errors"
	"fmt"
	"log"
	"log/slog"
	"net"
	"os"
	"path/filepath"

	"google.golang.org/grpc"

	"tamp/client"
	"tamp/server"
	"tamp/server/sqlitestore"
)

// The store keeps SI values; this example's crew works in US customary
// units and converts at its edge, with the exact factors of the
// international foot and pound.
const (
	foot  = 0.3048     // m
	pound = 0.45359237 // kg
	pcf   = pound / (foot * foot * foot)
)

// An inspector's morning on the basin embankment: open the device's store,
// record three sand-cone tests (one fails), correct a typing error, retest
// the failing area after rework, and see the list of open failures empty.
func Example_inspectorsMorning() {
	ctx := context.Background()
	dir, _ := os.MkdirTemp("", "tamp-example")
	defer os.RemoveAll(dir)

	store, err := client.Open(ctx, filepath.Join(dir, "tablet.db"), client.Options{User: "ines"})
	if err != nil {
		log.Fatal(err)
	}
	defer store.Close()

	// The project, spec and laboratory reference came down with the last
	// sync; here the store records them itself.
	project := store.NewID()
	if err := store.SetUpProject(ctx, project, client.ProjectSetUp{Name: "Juniper Wash detention basin",
		Units: client.USCustomary, WaterDensity: 62.4 * pcf}); err != nil {
		log.Fatal(err)
	}
	spec, err := store.DefineSpec(ctx, project, client.Spec{Name: "embankment", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"})
	if err != nil {
		log.Fatal(err)
	}
	ref, err := store.AddReference(ctx, project, client.Reference{Material: "tan clayey sand", Standard: client.ASTMD698,
		Method: "A", Edition: 2012, MaxDryDensity: 116.0 * pcf, OptimumMoisture: 13.5})
	if err != nil {
		log.Fatal(err)
	}

	// Sand-cone readings: sand of 99.0 pcf, 7.00 lb used, 0.53 lb in the cone.
	cone := func(soilLb, w float64) client.Readings {
		return client.Readings{SandCone: &client.SandCone{SandDensity: 99.0 * pcf, SandUsed: 7.00 * pound,
			ConeCorrection: 0.53 * pound, SoilMass: soilLb * pound, Moisture: w}}
	}
	show := func(what string, r client.TestResult) {
		fmt.Printf("%-26s dry %.1f pcf  RC %.1f %%  %+.1f points  %s\n", what,
			r.Result.DryDensity/pcf, r.Result.RelativeCompaction, r.Result.MoistureDeviation, r.Result.Verdict)
	}
	at := func(station float64) client.TestInput {
		return client.TestInput{Project: project, ReferenceID: ref, SpecID: spec, Feature: "embankment", LiftNumber: 6,
			Location: client.Location{Station: station * foot}}
	}

	in := at(1210)
	in.Readings = cone(8.11, 12.0)
	a, _ := store.RecordTest(ctx, in)
	show("sta 12+10", a)

	in = at(1260)
	in.Readings = cone(7.60, 12.4)
	b, _ := store.RecordTest(ctx, in)
	show("sta 12+60", b)

	in = at(1310)
	in.Readings = cone(6.11, 12.6) // the soil mass was 8.11 lb, typed as 6.11
	c, _ := store.RecordTest(ctx, in)
	show("sta 13+10", c)

	fixed, _ := store.CorrectTest(ctx, project, c.TestID, "soil mass typed as 6.11 lb, weighed 8.11 lb",
		func(t *client.TestInput) { t.Readings.SandCone.SoilMass = 8.11 * pound })
	show("sta 13+10 corrected", fixed)
	fmt.Println("open failures:", len(store.OpenFailures(project)))

	// The contractor re-rolls the lift at 12+60; the retest takes its
	// location, lift, reference and spec from the failing test.
	re, _ := store.RecordRetest(ctx, project, b.TestID, client.RetestInput{Readings: cone(8.30, 12.9)})
	show("sta 12+60 retest", re)
	fmt.Println("open failures:", len(store.OpenFailures(project)))

	h, _ := store.Test(project, c.TestID)
	fmt.Println("revisions of sta 13+10:", len(h.Revisions))

	// Each dry density is soil mass / ((7.00 - 0.53) / 99.0 ft3) / (1 + w),
	// as ASTM D1556 relates them; RC is dry density / 116.0 pcf.

	// Output:
	// sta 12+10                  dry 110.8 pcf  RC 95.5 %  -1.5 points  pass
	// sta 12+60                  dry 103.5 pcf  RC 89.2 %  -1.1 points  fail
	// sta 13+10                  dry 83.0 pcf  RC 71.6 %  -0.9 points  fail
	// sta 13+10 corrected        dry 110.2 pcf  RC 95.0 %  -0.9 points  pass
	// open failures: 1
	// sta 12+60 retest           dry 112.5 pcf  RC 97.0 %  -0.6 points  pass
	// open failures: 0
	// revisions of sta 13+10: 2
}

// Record and grade on a device with no signal: a nuclear-gauge test in
// direct transmission, two readings taken 90 degrees apart, graded the
// moment it is recorded against the spec and reference the device holds.
// The steps show the arithmetic, SI inside.
func ExampleStore_RecordTest() {
	ctx := context.Background()
	dir, _ := os.MkdirTemp("", "tamp-example")
	defer os.RemoveAll(dir)

	store, err := client.Open(ctx, filepath.Join(dir, "tablet.db"), client.Options{User: "ines"})
	if err != nil {
		log.Fatal(err)
	}
	defer store.Close()
	project := store.NewID()
	spec, err := store.DefineSpec(ctx, project, client.Spec{Name: "subgrade fill", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"})
	if err != nil {
		log.Fatal(err)
	}
	ref, err := store.AddReference(ctx, project, client.Reference{Material: "olive sandy lean clay", Standard: client.ASTMD698,
		Method: "A", MaxDryDensity: 1900, OptimumMoisture: 12.0})
	if err != nil {
		log.Fatal(err)
	}

	r, err := store.RecordTest(ctx, client.TestInput{Project: project, SpecID: spec, ReferenceID: ref,
		Feature: "subgrade", LiftNumber: 3, LiftThickness: 0.3, Location: client.Location{Station: 1200, Offset: 4.5},
		Readings: client.Readings{Nuclear: &client.NuclearGauge{ProbeDepth: 0.2, Readings: []client.GaugeReading{
			{WetDensity: 2050, WaterPerVolume: 200}, {WetDensity: 2060, WaterPerVolume: 210}}}}})
	if err != nil {
		log.Fatal(err)
	}
	for _, st := range r.Steps {
		fmt.Printf("%-36s %8.1f  %s\n", st.Name, st.Value, st.Quantity)
	}
	fmt.Printf("RC %.1f %%, %+.1f points: %s\n", r.Result.RelativeCompaction, r.Result.MoistureDeviation, r.Result.Verdict)
	for _, f := range r.Result.Flags {
		fmt.Println("flag:", f.Code)
	}

	// Dry density = wet - water per volume = 2055 - 205 = 1850 kg/m3;
	// RC = 1850 / 1900 x 100 = 97.4 %; w = 205 / 1850 = 11.1 %, 0.9 points
	// dry of optimum.

	// Output:
	// probe depth                               0.2  depth
	// wet density, mean of two readings      2055.0  density
	// water per volume M                      205.0  density
	// gauge dry density = wet - M            1850.0  density
	// gauge moisture = M / dry                 11.1  percent
	// wet density                            2055.0  density
	// moisture                                 11.1  percent
	// dry density = wet / (1 + w)            1850.0  density
	// RC 97.4 %, -0.9 points: pass
	// flag: nuclear_moisture_uncorrected
}

// Record, grade and sync: an operator serves tamp in-process and sets a
// project up; QA's device defines the spec and reference; the inspector's
// tablet takes them, records a test with no signal, sees its result at once
// and syncs it; the office's laptop syncs and approves it. Only public
// packages: client on the devices, server and sqlitestore for the server.
func Example_recordGradeSync() {
	ctx := context.Background()
	dir, _ := os.MkdirTemp("", "tamp-example")
	defer os.RemoveAll(dir)

	// The server: the SQLite ledger store, served on loopback (tampd serves
	// TLS beyond it).
	ledgerDB, err := sqlitestore.Open(ctx, filepath.Join(dir, "ledger.db"), sqlitestore.Options{})
	if err != nil {
		log.Fatal(err)
	}
	defer ledgerDB.Close()
	srv := server.New(server.Options{Store: ledgerDB, Logger: slog.New(slog.DiscardHandler)})
	defer srv.Close()
	g := grpc.NewServer(srv.RequestCodec(), grpc.UnaryInterceptor(srv.UnaryInterceptor), grpc.StreamInterceptor(srv.StreamInterceptor))
	srv.Register(g)
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		log.Fatal(err)
	}
	go g.Serve(lis)
	defer g.GracefulStop()
	conn, err := client.Dial(lis.Addr().String(), client.DialOptions{Plaintext: true})
	if err != nil {
		log.Fatal(err)
	}
	defer conn.Close()

	// The operator's set-up: a project, its members, and a one-time code
	// that enrols each member's device.
	project, err := srv.CreateProject(ctx, "Cottonwood Bend frontage road")
	if err != nil {
		log.Fatal(err)
	}
	var stores []*client.Store
	defer func() {
		for _, s := range stores {
			s.Close()
		}
	}()
	device := func(name string, role server.Role) *client.Store {
		user, err := srv.AddUser(ctx, name, false)
		if err != nil {
			log.Fatal(err)
		}
		if err := srv.AddMember(ctx, project, user, role); err != nil {
			log.Fatal(err)
		}
		code, _, err := srv.IssueEnrollmentCode(ctx, user)
		if err != nil {
			log.Fatal(err)
		}
		s, err := client.Open(ctx, filepath.Join(dir, name+".db"), client.Options{})
		if err != nil {
			log.Fatal(err)
		}
		stores = append(stores, s)
		if err := s.Enroll(ctx, conn, code, name+"'s tablet"); err != nil {
			log.Fatal(err)
		}
		return s
	}
	qa, inspector, office := device("quinn", server.QA), device("ines", server.Inspector), device("otto", server.Office)
	sync := func(who string, s *client.Store) {
		rep, err := s.Sync(ctx, conn, project, client.SyncOptions{})
		if err != nil {
			log.Fatal(err)
		}
		fmt.Printf("%s synced: %d accepted\n", who, rep.Accepted)
	}

	// QA: the spec and the laboratory reference.
	spec, err := qa.DefineSpec(ctx, project, client.Spec{Name: "subgrade fill", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"})
	if err != nil {
		log.Fatal(err)
	}
	ref, err := qa.AddReference(ctx, project, client.Reference{Material: "olive sandy lean clay", Standard: client.ASTMD698,
		Method: "A", MaxDryDensity: 1900, OptimumMoisture: 12.0})
	if err != nil {
		log.Fatal(err)
	}
	sync("QA", qa)

	// The inspector: take the reference data, then record with no signal.
	sync("inspector", inspector)
	r, err := inspector.RecordTest(ctx, client.TestInput{Project: project, SpecID: spec, ReferenceID: ref,
		Feature: "subgrade", LiftNumber: 3, Location: client.Location{Station: 1200, Offset: 4.5},
		Readings: client.Readings{SandCone: &client.SandCone{SandDensity: 1400, SandUsed: 3.500, ConeCorrection: 1.600,
			SoilMass: 2.800, Moisture: 12.5}}})
	if err != nil {
		log.Fatal(err)
	}
	fmt.Printf("dry density %.0f kg/m3, RC %.1f %%: %s\n", r.Result.DryDensity, r.Result.RelativeCompaction, r.Result.Verdict)
	sync("inspector", inspector)

	// The office: review what came in.
	sync("office", office)
	queue := office.ReviewQueue(project, "")
	fmt.Println("tests to review:", len(queue))
	if err := office.ReviewTest(ctx, project, queue[0].ID, client.Approve, ""); err != nil {
		log.Fatal(err)
	}
	sync("office", office)
	sync("inspector", inspector)
	test, err := inspector.Test(project, r.TestID)
	if err != nil {
		log.Fatal(err)
	}
	fmt.Println("on the tablet:", test.ReviewStatus)

	// A server's refusal is matched by errors.Is, never by its text; a
	// *client.ServerError carries the reason, field and rule.
	spare, err := client.Open(ctx, filepath.Join(dir, "spare.db"), client.Options{})
	if err != nil {
		log.Fatal(err)
	}
	stores = append(stores, spare)
	err = spare.Enroll(ctx, conn, "a code nobody issued", "spare tablet")
	var se *client.ServerError
	if errors.Is(err, client.ErrCodeInvalid) && errors.As(err, &se) {
		fmt.Println("enrolment refused:", se.Reason)
	}

	// Hole = (3.500 - 1.600) kg / 1400 kg/m3; wet = 2.800 kg / hole =
	// 2063 kg/m3; dry = wet / 1.125 = 1834 kg/m3; RC = 1834 / 1900 = 96.5 %.

	// Output:
	// QA synced: 2 accepted
	// inspector synced: 0 accepted
	// dry density 1834 kg/m3, RC 96.5 %: pass
	// inspector synced: 1 accepted
	// office synced: 0 accepted
	// tests to review: 1
	// office synced: 1 accepted
	// inspector synced: 0 accepted
	// on the tablet: approved
	// enrolment refused: CODE_INVALID
}
