package cli

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"path/filepath"
	"time"

	"tamp/client"
	"tamp/internal/soil"
	"tamp/server"
)

// The invented project. Every name in the demo is made up: the valley, the
// dam, the crew, the laboratory samples and the equipment.
const (
	demoProjectName = "Quarrow Creek Dam, main embankment"
	demoSeed        = 20251021 // the readings' seed: the same invented day every run
)

// The demo's project works in US customary units; the store keeps SI and
// the demo converts at its edge, as an app does.
var demoUnits = soil.US

func demoPcf(v float64) float64 { return demoUnits.ToSI(soil.Density, v) }
func demoLb(v float64) float64  { return demoUnits.ToSI(soil.Mass, v) }
func demoFt(v float64) float64  { return demoUnits.ToSI(soil.Length, v) }
func demoIn(v float64) float64  { return demoUnits.ToSI(soil.Depth, v) }
func demoFt3(v float64) float64 { return demoUnits.ToSI(soil.SmallVolume, v) }
func demoYd3(v float64) float64 { return demoUnits.ToSI(soil.Volume, v) }

// demoRound rounds v to places decimals, as a reading is written down.
func demoRound(v float64, places int) float64 {
	s := math.Pow(10, float64(places))
	return math.Round(v*s) / s
}

// demoDay is the day being played: the server, the crew's devices, the
// records they made and the tests, by the names the story gives them.
type demoDay struct {
	cfg   demoConfig
	clock *demoClock
	srv   *demoServer
	dir   string
	p     *printer
	rng   *rand.Rand

	project                                            string
	devices                                            []*demoDevice
	admin, qa, office, ivo, maren, marenLaptop, tobias *demoDevice

	names map[string]string // user id -> the member's name
	specs map[string]string // spec id -> name

	specCore, specShell                    string
	refCore, refShell                      string
	gauge, coneM, coneT, volumeter, cylSet string
	correction                             string
	borrowA, borrowC                       string
	liftCore, liftUpstream, liftDownstrm   string
	placements                             map[string]client.Placement
	tests                                  map[string]string // story label -> test id
	labels                                 map[string]string // test id -> story label
	returned                               map[string]string // test id -> the office's comment
	conflictTest, laptopRevision           string
	skewSeen                               time.Duration
}

func (d *demoDay) play(ctx context.Context) (*demoSummary, error) {
	d.rng = rand.New(rand.NewPCG(demoSeed, demoSeed>>7))
	d.names, d.specs = map[string]string{}, map[string]string{}
	d.placements, d.tests, d.labels, d.returned = map[string]client.Placement{}, map[string]string{}, map[string]string{}, map[string]string{}
	d.intro()
	steps := []struct {
		name string
		run  func(context.Context) error
	}{
		{"set-up", d.setUp},
		{"QA's set-up", d.qaSetUp},
		{"the office's morning", d.officeMorning},
		{"the gauge's correction", d.qaCorrection},
		{"the morning sync", d.morningSync},
		{"the morning's tests", d.fieldMorning},
		{"the midday sync", d.middaySync},
		{"the afternoon", d.afternoon},
		{"the evening sync", d.eveningSync},
		{"the office's review", d.officeReview},
		{"the conflict's settling", d.settle},
		{"the last sync", d.lastSync},
		{"QA's reports", d.qaReports},
	}
	for _, s := range steps {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		if err := s.run(ctx); err != nil {
			return nil, fmt.Errorf("%s: %w", s.name, err)
		}
	}
	sum, err := d.summarize(ctx)
	if err != nil {
		return nil, fmt.Errorf("the summary: %w", err)
	}
	if d.cfg.out != "" {
		if sum.Kept, err = d.keep(ctx, sum); err != nil {
			return nil, fmt.Errorf("--out %s: %w", escape(d.cfg.out), err)
		}
	}
	d.printLedger(sum)
	return sum, nil
}

// enrol adds a member with a role (or takes an existing user), issues a
// one-time code and enrols a new device with it.
func (d *demoDay) enrol(ctx context.Context, person, what string, role server.Role, user, code string, skew time.Duration) (*demoDevice, error) {
	var err error
	if user == "" {
		if user, err = d.srv.srv.AddUser(ctx, person, false); err != nil {
			return nil, err
		}
		if err = d.srv.srv.AddMember(ctx, d.project, user, role); err != nil {
			return nil, err
		}
	}
	if code == "" {
		if code, _, err = d.srv.srv.IssueEnrollmentCode(ctx, user); err != nil {
			return nil, err
		}
	}
	dev := &demoDevice{person: person, what: what, role: role, user: user, skew: skew}
	dev.path = filepath.Join(d.dir, fmt.Sprintf("device-%d.db", len(d.devices)+1))
	now := d.clock.now
	if skew != 0 {
		now = func() time.Time { return d.clock.now().Add(skew) }
	}
	if dev.store, err = client.Open(ctx, dev.path, client.Options{Durability: client.DurabilityNormal, Now: now}); err != nil {
		return nil, err
	}
	d.devices = append(d.devices, dev)
	if err := dev.store.Enroll(ctx, d.srv.conn, code, dev.name()); err != nil {
		return nil, fmt.Errorf("enrol %s: %w", dev.name(), err)
	}
	d.names[user] = person
	return dev, nil
}

// sync syncs a device and refuses a rejected entry: the demo's entries are
// all within the rules.
func (d *demoDay) sync(ctx context.Context, dev *demoDevice) (client.SyncReport, error) {
	rep, err := dev.store.Sync(ctx, d.srv.conn, d.project, client.SyncOptions{})
	if err != nil {
		return rep, fmt.Errorf("sync %s: %w", dev.name(), err)
	}
	if rep.Rejected > 0 {
		rs, _ := dev.store.Rejected(ctx)
		return rep, fmt.Errorf("sync %s: the server refused %d entries: %+v", dev.name(), rep.Rejected, rs)
	}
	return rep, nil
}

func (d *demoDay) setUp(ctx context.Context) error {
	d.clock.at(6, 15)
	admin, code, _, err := d.srv.srv.Bootstrap(ctx, "Della Ferrow")
	if err != nil {
		return err
	}
	if d.project, err = d.srv.srv.CreateProject(ctx, demoProjectName); err != nil {
		return err
	}
	if err := d.srv.srv.AddMember(ctx, d.project, admin, server.Admin); err != nil {
		return err
	}
	if d.admin, err = d.enrol(ctx, "Della Ferrow", "laptop", server.Admin, admin, code, 0); err != nil {
		return err
	}
	crew := []struct {
		dev          **demoDevice
		person, what string
		role         server.Role
		skew         time.Duration
	}{
		{&d.qa, "Quentin Arlo", "laptop", server.QA, 0},
		{&d.office, "Odile Brandt", "desktop", server.Office, 0},
		{&d.ivo, "Ivo Santerre", "tablet", server.Inspector, 0},
		{&d.maren, "Maren Kell", "tablet", server.Inspector, 0},
		{&d.tobias, "Tobias Wren", "tablet", server.Inspector, time.Hour}, // its clock runs an hour fast
	}
	for _, m := range crew {
		d.clock.tick()
		if *m.dev, err = d.enrol(ctx, m.person, m.what, m.role, "", "", m.skew); err != nil {
			return err
		}
	}
	// Maren keeps a second device, a laptop in her truck: a second code
	// for the same member enrols it.
	if d.marenLaptop, err = d.enrol(ctx, "Maren Kell", "laptop", server.Inspector, d.maren.user, "", 0); err != nil {
		return err
	}
	d.clock.at(6, 25)
	if err := d.admin.store.SetUpProject(ctx, d.project, client.ProjectSetUp{Name: demoProjectName, Units: client.USCustomary,
		WaterDensity: demoPcf(62.4), Shrinkage: client.BankBasis, ClockSkewLimit: 5 * time.Minute, TimeZone: demoZone,
		// The embankment as designed (invented figures): each zone is fed
		// from the one borrow area its lifts come from.
		Features: []client.FeatureDesign{{Feature: "Zone 1 core", DesignVolume: demoYd3(38500), DesignShrinkagePercent: 10},
			{Feature: "Zone 2 shell, upstream", DesignVolume: demoYd3(52000), DesignShrinkagePercent: 8},
			{Feature: "Zone 2 shell, downstream", DesignVolume: demoYd3(47000), DesignShrinkagePercent: 8}}}); err != nil {
		return err
	}
	if _, err := d.sync(ctx, d.admin); err != nil {
		return err
	}
	d.printSetUp()
	return nil
}

func (d *demoDay) qaSetUp(ctx context.Context) error {
	d.clock.at(6, 30)
	qa := d.qa.store
	if _, err := d.sync(ctx, d.qa); err != nil {
		return err
	}
	var err error
	core := client.Spec{Name: "Zone 1 core", MinCompaction: "98", MoistureBasis: client.PointsOfOptimum,
		MoistureLow: "0", MoistureHigh: "3", VolumePerTest: demoYd3(150)}
	shell := client.Spec{Name: "Zone 2 shell", MinCompaction: "95", MoistureBasis: client.PointsOfOptimum,
		MoistureLow: "-2", MoistureHigh: "2", VolumePerTest: demoYd3(250)}
	if d.specCore, err = qa.DefineSpec(ctx, d.project, core); err != nil {
		return err
	}
	if d.specShell, err = qa.DefineSpec(ctx, d.project, shell); err != nil {
		return err
	}
	d.specs[d.specCore], d.specs[d.specShell] = core.Name, shell.Name

	// The core's reference is fitted to the laboratory's five points; the
	// shell's is the laboratory's reported maximum and optimum.
	var points []client.CurvePoint
	for _, pt := range [][2]float64{{12.2, 103.8}, {14.1, 107.4}, {16.0, 109.5}, {18.2, 108.1}, {20.1, 104.9}} {
		points = append(points, client.CurvePoint{Moisture: pt[0], DryDensity: demoPcf(pt[1])})
	}
	coreRef := client.Reference{Material: "brown lean clay, Zone 1 core", LabSampleID: "QV-L-114", Standard: client.ASTMD698,
		Method: "A", Edition: 2012, Points: points, SpecificGravity: 2.70}
	shellRef := client.Reference{Material: "sandy gravel, Zone 2 shell", LabSampleID: "QV-L-121", Standard: client.ASTMD698,
		Method: "C", Edition: 2012, MaxDryDensity: demoPcf(128.6), OptimumMoisture: 8.4, SpecificGravity: 2.68}
	if d.refCore, err = qa.AddReference(ctx, d.project, coreRef); err != nil {
		return err
	}
	if d.refShell, err = qa.AddReference(ctx, d.project, shellRef); err != nil {
		return err
	}

	// The borrow areas, with the bank tests QA's crew took there.
	var bankA, bankC []client.Readings
	for _, b := range [][2]float64{{95.2, 18.9}, {96.4, 19.4}, {94.8, 18.6}} {
		bankA = append(bankA, d.cylinder(b[0], b[1]))
	}
	for _, b := range [][2]float64{{117.6, 4.8}, {118.9, 5.3}, {116.8, 5.1}} {
		bankC = append(bankC, d.sandCone(b[0], b[1], 94.8, 3.38))
	}
	if d.borrowA, err = qa.MeasureBorrowSource(ctx, d.project, client.BorrowSource{Name: "Borrow Area A (core clay)",
		BankTests: bankA, LooseDryDensity: demoPcf(81.5), ReferenceID: d.refCore}); err != nil {
		return err
	}
	if d.borrowC, err = qa.MeasureBorrowSource(ctx, d.project, client.BorrowSource{Name: "Borrow Area C (shell sand and gravel)",
		BankTests: bankC, LooseDryDensity: demoPcf(100.5), ReferenceID: d.refShell}); err != nil {
		return err
	}
	if _, err := d.sync(ctx, d.qa); err != nil {
		return err
	}
	d.printQASetUp()
	return nil
}

func (d *demoDay) officeMorning(ctx context.Context) error {
	d.clock.at(6, 40)
	of := d.office.store
	if _, err := d.sync(ctx, d.office); err != nil {
		return err
	}
	due := func(days int) string {
		t, _ := time.ParseInLocation(time.DateOnly, d.cfg.day, d.cfg.loc)
		return t.AddDate(0, 0, days).Format(time.DateOnly)
	}
	var err error
	for _, e := range []struct {
		id *string
		eq client.Equipment
	}{
		{&d.gauge, client.Equipment{Kind: client.NuclearGaugeEquipment, Model: "moisture-density gauge MDG-12", SerialNumber: "QV-4471", CalibrationDue: due(152)}},
		{&d.coneM, client.Equipment{Kind: client.SandConeApparatus, Model: "6 in sand cone", SerialNumber: "QV-SC-02", CalibrationDue: due(40)}},
		{&d.coneT, client.Equipment{Kind: client.SandConeApparatus, Model: "6 in sand cone", SerialNumber: "QV-SC-05", CalibrationDue: due(40)}},
		{&d.volumeter, client.Equipment{Kind: client.RubberBalloonApparatus, Model: "balloon volumeter", SerialNumber: "QV-RB-01", CalibrationDue: due(75)}},
		{&d.cylSet, client.Equipment{Kind: client.DriveCylinderSet, Model: "4 in drive cylinders", SerialNumber: "QV-DC-03", CalibrationDue: due(200)}},
	} {
		if *e.id, err = of.RegisterEquipment(ctx, d.project, e.eq); err != nil {
			return err
		}
	}
	// The day's lifts, laid out by the grade foreman: the core from
	// Borrow Area A, the shells from Borrow Area C.
	for _, pl := range []struct {
		id *string
		p  client.Placement
	}{
		{&d.liftCore, client.Placement{Feature: "Zone 1 core", LiftNumber: 14, Stations: &client.StationRange{From: demoFt(1000), To: demoFt(1400),
			OffsetLeft: -demoFt(30), OffsetRight: demoFt(30)}, Area: demoFt(400) * demoFt(60), Thickness: demoIn(8), BorrowSourceID: d.borrowA}},
		{&d.liftUpstream, client.Placement{Feature: "Zone 2 shell, upstream", LiftNumber: 9, Stations: &client.StationRange{From: demoFt(1000), To: demoFt(1600)},
			Area: demoFt(600) * demoFt(45), Thickness: demoIn(12), BorrowSourceID: d.borrowC}},
		{&d.liftDownstrm, client.Placement{Feature: "Zone 2 shell, downstream", LiftNumber: 9, Stations: &client.StationRange{From: demoFt(1000), To: demoFt(1500)},
			Area: demoFt(500) * demoFt(50), Thickness: demoIn(12), BorrowSourceID: d.borrowC}},
	} {
		p := pl.p
		p.CompactedVolume, p.PlacedOn = p.Area*p.Thickness, d.cfg.day
		if *pl.id, err = of.RecordPlacement(ctx, d.project, p); err != nil {
			return err
		}
		p.ID = *pl.id
		d.placements[p.ID] = p
	}
	if _, err := d.sync(ctx, d.office); err != nil {
		return err
	}
	d.printOfficeMorning()
	return nil
}

func (d *demoDay) qaCorrection(ctx context.Context) error {
	d.clock.at(6, 45)
	if _, err := d.sync(ctx, d.qa); err != nil {
		return err
	}
	// Three oven-dry comparisons on the core clay: the gauge reads 0.6
	// points wet on this material.
	var err error
	if d.correction, err = d.qa.store.SetMoistureCorrection(ctx, d.project, client.MoistureCorrection{EquipmentID: d.gauge,
		ReferenceID: d.refCore, Kind: client.OffsetCorrection, Value: -0.6,
		Pairs: []client.MoisturePair{{Gauge: 17.9, Oven: 17.2}, {Gauge: 16.8, Oven: 16.3}, {Gauge: 18.6, Oven: 18.0}}}); err != nil {
		return err
	}
	if _, err := d.sync(ctx, d.qa); err != nil {
		return err
	}
	d.p.f("06:45  Quentin sets the gauge's moisture correction for the core clay: %+.1f points, from three oven-dry comparisons.\n\n", -0.6)
	return nil
}

func (d *demoDay) morningSync(ctx context.Context) error {
	d.clock.at(6, 50)
	d.p.f("06:50  Before leaving the site office the inspectors' devices sync and take the project's records down:\n")
	t := newDemoTable(d.p, "DEVICE", "PULLED", "VERIFIED TO ENTRY")
	for _, dev := range []*demoDevice{d.ivo, d.maren, d.marenLaptop, d.tobias} {
		d.clock.tick()
		rep, err := d.sync(ctx, dev)
		if err != nil {
			return err
		}
		t.row(dev.name(), fmt.Sprint(rep.Pulled), fmt.Sprint(rep.Head.Seq))
	}
	t.flush()
	// The gauge's daily standard count, before its first test.
	d.clock.at(6, 58)
	if err := d.ivo.store.RecordStandardCount(ctx, d.project, client.StandardCount{EquipmentID: d.gauge, Date: d.cfg.day,
		DensityCount: 2811, MoistureCount: 689, Accepted: true}); err != nil {
		return err
	}
	for _, e := range d.ivo.store.Equipment(d.project) {
		for _, c := range e.Counts {
			state := "accepted"
			if !c.Accepted {
				state = "not accepted"
			}
			d.p.f("\n06:58  Ivo takes gauge %s's daily standard count on the reference block: density %.0f, moisture %.0f, %s.\n",
				escape(e.SerialNumber), c.DensityCount, c.MoistureCount, state)
		}
	}
	d.p.f("       (The gauge is a licensed radioactive source; its use, transport and storage follow the licensee's\n")
	d.p.f("       radiation-safety programme, outside tamp.)\n\n")
	return nil
}

// The readings. Each test is planned as the dry density (pcf) and moisture
// (percent) the fill has; the readings an inspector would write down are
// worked back from them, with the hole, the second gauge reading and the
// like drawn from the seeded generator, and rounded as they are read.

// nuclear is a direct-transmission gauge test at 6 in, two readings 90
// degrees apart, on the core clay with QA's correction (the gauge reads
// 0.6 points wet).
func (d *demoDay) nuclear(dry, w float64) client.Readings {
	wg := w + 0.6
	wet := dry * (1 + w/100)
	reading := func(wet float64) client.GaugeReading {
		wet = demoRound(wet, 1)
		return client.GaugeReading{WetDensity: demoPcf(wet), WaterPerVolume: demoPcf(demoRound(wet*wg/(100+wg), 1))}
	}
	spread := 0.2 + 0.6*d.rng.Float64()
	return client.Readings{Nuclear: &client.NuclearGauge{ProbeDepth: demoIn(6), CorrectionID: d.correction,
		Readings: []client.GaugeReading{reading(wet + spread/2), reading(wet - spread/2)}}}
}

// sandCone is a 6 in sand-cone test with calibrated sand of sand pcf and a
// cone correction of cone lb.
func (d *demoDay) sandCone(dry, w, sand, cone float64) client.Readings {
	hole := 0.075 + 0.02*d.rng.Float64() // ft3
	return client.Readings{SandCone: &client.SandCone{SandDensity: demoPcf(sand), SandUsed: demoLb(demoRound(hole*sand+cone, 2)),
		ConeCorrection: demoLb(cone), SoilMass: demoLb(demoRound(dry*(1+w/100)*hole, 2)), Moisture: w}}
}

// balloon is a rubber-balloon test: the volumeter's readings before and
// after the hole is dug, ft3.
func (d *demoDay) balloon(dry, w float64) client.Readings {
	start := demoRound(0.010+0.004*d.rng.Float64(), 4)
	hole := demoRound(0.065+0.015*d.rng.Float64(), 4)
	return client.Readings{RubberBalloon: &client.RubberBalloon{InitialReading: demoFt3(start), FinalReading: demoFt3(start + hole),
		SoilMass: demoLb(demoRound(dry*(1+w/100)*hole, 2)), Moisture: w}}
}

// cylinder is a drive-cylinder test with a 4.00 in by 5.00 in cylinder.
func (d *demoDay) cylinder(dry, w float64) client.Readings {
	vol := math.Pi * 4 * 4 / 4 * 5 / 1728 // ft3
	return client.Readings{DriveCylinder: &client.DriveCylinder{Diameter: demoIn(4), Length: demoIn(5),
		SoilMass: demoLb(demoRound(dry*(1+w/100)*vol, 2)), Moisture: w}}
}

// demoAt is a test's location on the embankment's axis: station and offset
// in feet (negative offsets upstream, to the left), at the lift's surface.
func demoAt(station, offset, elevation float64) client.Location {
	return client.Location{Station: demoFt(station), Offset: demoFt(offset), Elevation: demoFt(elevation)}
}

func (d *demoDay) core(station, offset float64, r client.Readings, eq string) client.TestInput {
	return client.TestInput{Project: d.project, Readings: r, Location: demoAt(station, offset, 4512.0), PlacementID: d.liftCore,
		Feature: "Zone 1 core", LiftNumber: 14, LiftThickness: demoIn(8), ReferenceID: d.refCore, SpecID: d.specCore, EquipmentID: eq}
}

func (d *demoDay) shell(lift string, station, offset float64, r client.Readings, eq string) client.TestInput {
	feature := d.placements[lift].Feature
	return client.TestInput{Project: d.project, Readings: r, Location: demoAt(station, offset, 4511.5), PlacementID: lift,
		Feature: feature, LiftNumber: 9, LiftThickness: demoIn(12), ReferenceID: d.refShell, SpecID: d.specShell, EquipmentID: eq}
}

// record records a test on a device, keeps it by its label and prints its
// row.
func (d *demoDay) record(ctx context.Context, t *demoTable, dev *demoDevice, label string, in client.TestInput) (client.TestResult, error) {
	r, err := dev.store.RecordTest(ctx, in)
	if err != nil {
		return r, fmt.Errorf("%s records %s: %w", dev.name(), label, err)
	}
	d.tests[label], d.labels[r.TestID] = r.TestID, label
	return r, d.testRow(t, dev, r.TestID, "")
}

func (d *demoDay) retest(ctx context.Context, t *demoTable, dev *demoDevice, label, of string, in client.RetestInput) error {
	r, err := dev.store.RecordRetest(ctx, d.project, d.tests[of], in)
	if err != nil {
		return fmt.Errorf("%s retests %s: %w", dev.name(), of, err)
	}
	d.tests[label], d.labels[r.TestID] = r.TestID, label
	return d.testRow(t, dev, r.TestID, "retest of "+of)
}

func (d *demoDay) fieldMorning(ctx context.Context) error {
	d.p.f("In the field, with no signal, each device grades its tests the moment they are recorded, against the\n")
	d.p.f("reference and specification of the lift as the device holds them. Times are each device's clock. Tests\n")
	d.p.f("C are on the core lift, U on the upstream shell, D on the downstream shell; R marks a retest.\n\n")
	t := newDemoTable(d.p, demoTestHeader...)
	type step struct {
		hh, mm int
		run    func() error
	}
	rec := func(dev *demoDevice, label string, in client.TestInput) func() error {
		return func() error { _, err := d.record(ctx, t, dev, label, in); return err }
	}
	var typo client.TestResult
	steps := []step{
		{7, 25, rec(d.ivo, "C1", d.core(1050, -12, d.nuclear(108.9, 17.4), d.gauge))},
		{7, 40, rec(d.maren, "U1", d.shell(d.liftUpstream, 1080, -65, d.sandCone(125.6, 8.1, 94.8, 3.42), d.coneM))},
		{7, 50, rec(d.ivo, "C2", d.core(1125, 5, d.nuclear(108.2, 18.1), d.gauge))},
		{8, 5, func() error {
			// Tobias keys the cylinder's soil as 3.53 lb; the balance read 4.53.
			in := d.core(1160, 20, d.cylinder(107.9, 17.9), d.cylSet)
			in.Readings.DriveCylinder.SoilMass -= demoLb(1)
			var err error
			typo, err = d.record(ctx, t, d.tobias, "C3", in)
			return err
		}},
		{8, 8, func() error {
			r, err := d.tobias.store.CorrectTest(ctx, d.project, typo.TestID, "soil mass keyed as 3.53 lb; the balance read 4.53 lb",
				func(in *client.TestInput) { in.Readings.DriveCylinder.SoilMass += demoLb(1) })
			if err != nil {
				return err
			}
			return d.testRow(t, d.tobias, r.TestID, "corrected: soil mass keyed 3.53 lb, weighed 4.53 lb")
		}},
		{8, 20, rec(d.ivo, "C4", d.core(1210, -8, d.nuclear(105.1, 17.8), d.gauge))},
		{8, 30, rec(d.maren, "U2", d.shell(d.liftUpstream, 1240, -15, d.sandCone(124.2, 7.2, 94.8, 3.42), d.coneM))},
		{8, 40, rec(d.tobias, "C5", d.core(1340, -3, d.cylinder(108.6, 17.0), d.cylSet))},
		{8, 55, rec(d.ivo, "C6", d.core(1300, 15, d.nuclear(109.3, 16.9), d.gauge))},
		{9, 20, rec(d.maren, "U3", d.shell(d.liftUpstream, 1390, -70, d.balloon(119.6, 8.9), d.volumeter))},
		{9, 30, rec(d.ivo, "C7", d.core(1375, -10, d.nuclear(108.4, 15.1), d.gauge))},
		{9, 45, rec(d.tobias, "D1", d.shell(d.liftDownstrm, 1040, 60, d.sandCone(124.9, 8.8, 94.8, 3.38), d.coneT))},
		{10, 5, func() error {
			// Four more passes of the sheepsfoot where C4 failed.
			return d.retest(ctx, t, d.ivo, "C4R", "C4", client.RetestInput{Readings: d.nuclear(108.6, 17.6), EquipmentID: d.gauge,
				Remarks: "four more passes of the sheepsfoot roller"})
		}},
		{10, 15, rec(d.maren, "U4", d.shell(d.liftUpstream, 1520, -60, d.balloon(126.3, 9.2), d.volumeter))},
		{10, 30, rec(d.tobias, "D2", d.shell(d.liftDownstrm, 1220, 70, d.sandCone(123.8, 7.6, 94.8, 3.38), d.coneT))},
		{11, 10, func() error {
			// C7 was too dry: the water truck, a disc, and the roller again.
			loc := demoAt(1380, -10, 4512.0)
			return d.retest(ctx, t, d.ivo, "C7R", "C7", client.RetestInput{Readings: d.nuclear(108.0, 17.3), Location: &loc,
				EquipmentID: d.gauge, Remarks: "watered, disced and re-rolled"})
		}},
		{11, 20, func() error {
			return d.retest(ctx, t, d.maren, "U3R", "U3", client.RetestInput{Readings: d.balloon(124.7, 8.6), EquipmentID: d.volumeter,
				Remarks: "re-rolled, two passes of the smooth drum"})
		}},
	}
	for _, s := range steps {
		d.clock.at(s.hh, s.mm)
		if err := s.run(); err != nil {
			return err
		}
	}
	t.flush()
	d.p.f("\nTobias's tablet clock runs an hour fast: its times read an hour late. The failures at C4, C7 and U3 were\n")
	d.p.f("reworked by the contractor and retested; C3's typing error was corrected at once, with its reason.\n\n")
	return nil
}

func (d *demoDay) middaySync(ctx context.Context) error {
	d.clock.at(12, 5)
	d.p.f("12:05  Lunch at the site office, where there is a signal. Every device syncs:\n")
	t := newDemoTable(d.p, "DEVICE", "ACCEPTED", "PULLED", "VERIFIED TO ENTRY", "CLOCK")
	for _, dev := range []*demoDevice{d.ivo, d.maren, d.tobias, d.marenLaptop, d.office, d.qa} {
		d.clock.tick()
		rep, err := d.sync(ctx, dev)
		if err != nil {
			return err
		}
		clock := "in step"
		if rep.ClockSkew.Abs() > 5*time.Minute {
			clock = fmt.Sprintf("%s ahead of the server", demoDuration(rep.ClockSkew))
			if dev == d.tobias {
				d.skewSeen = rep.ClockSkew
			}
		}
		t.row(dev.name(), fmt.Sprint(rep.Accepted), fmt.Sprint(rep.Pulled), fmt.Sprint(rep.Head.Seq), clock)
	}
	t.flush()
	skews, err := d.srv.ledger.ClockSkews(ctx, d.project)
	if err != nil {
		return err
	}
	d.p.f("\nThe server measured Tobias's tablet clock %s ahead, beyond the project's 5-minute limit, and flagged\n", demoDuration(d.skewSeen))
	d.p.f("the %d entries it pushed. They keep the time the tablet showed and are ordered by their hybrid time.\n\n", len(skews))
	return nil
}

func (d *demoDay) afternoon(ctx context.Context) error {
	d.p.f("Afternoon, offline again.\n")
	t := newDemoTable(d.p, demoTestHeader...)
	u2 := d.tests["U2"]
	d.clock.at(13, 10)
	// The oven moisture of U2 came back from the field lab; Maren enters it
	// on her tablet.
	onTablet, err := d.maren.store.CorrectTest(ctx, d.project, u2, "oven-dry moisture 7.9 % replaces the field moisture 7.2 %",
		func(in *client.TestInput) { in.Readings.SandCone.Moisture = 7.9 })
	if err != nil {
		return err
	}
	if err := d.testRow(t, d.maren, onTablet.TestID, "corrected on her tablet: oven moisture 7.9 %"); err != nil {
		return err
	}
	d.clock.at(13, 25)
	// In the truck, transcribing her field sheet, she finds the offset
	// keyed as 15 ft L (inside the core) and corrects it on the laptop,
	// which has not seen the tablet's correction.
	onLaptop, err := d.marenLaptop.store.CorrectTest(ctx, d.project, u2, "offset keyed as 15 ft L; the field sheet says 55 ft L",
		func(in *client.TestInput) { in.Location.Offset = demoFt(-55) })
	if err != nil {
		return err
	}
	if err := d.testRow(t, d.marenLaptop, onLaptop.TestID, "corrected on her laptop: offset 55 ft L"); err != nil {
		return err
	}
	d.conflictTest, d.laptopRevision = u2, onLaptop.EventID
	d.clock.at(14, 30)
	if _, err := d.record(ctx, t, d.tobias, "D3", d.shell(d.liftDownstrm, 1410, 55, d.sandCone(118.3, 9.4, 94.8, 3.38), d.coneT)); err != nil {
		return err
	}
	t.flush()
	d.p.f("\nD3 fails; the contractor will re-roll that area in the morning, so it stays an open failure tonight.\n\n")
	return nil
}

func (d *demoDay) eveningSync(ctx context.Context) error {
	d.clock.at(16, 30)
	d.p.f("16:30  Back at the site office, every device syncs again:\n")
	t := newDemoTable(d.p, "DEVICE", "ACCEPTED", "PULLED", "VERIFIED TO ENTRY", "CONFLICTS SEEN")
	for _, dev := range []*demoDevice{d.ivo, d.tobias, d.maren, d.marenLaptop, d.office, d.qa, d.admin} {
		d.clock.tick()
		rep, err := d.sync(ctx, dev)
		if err != nil {
			return err
		}
		t.row(dev.name(), fmt.Sprint(rep.Accepted), fmt.Sprint(rep.Pulled), fmt.Sprint(rep.Head.Seq), fmt.Sprint(len(dev.store.Conflicts(d.project))))
	}
	t.flush()
	conflicts := d.office.store.Conflicts(d.project)
	if len(conflicts) == 0 {
		return fmt.Errorf("the two corrections of %s were not seen as concurrent", d.labels[d.conflictTest])
	}
	for _, c := range conflicts {
		d.p.f("\nConflict surfaced: %s (%s) holds two corrections of the same revision, made apart on Maren's tablet and\n",
			escape(d.labels[c.ID]), escape(demoWhere(c.Content)))
		d.p.f("laptop. Both stay in its history; the later in hybrid time stands, and the test is flagged for review:\n")
		rt := newDemoTable(d.p, "REVISION", "BY", "REASON", "MOISTURE", "OFFSET", "")
		for i, rv := range c.Revisions {
			mark := ""
			if rv.EventID == c.Current {
				mark = "stands"
			}
			rt.row(fmt.Sprint(i+1), d.who(rv.Author), demoOr(rv.Reason, "(recorded)"),
				demoValue(demoMoisture(rv.Content), 1, "%"), demoU.offset(rv.Content.Location.Offset), mark)
		}
		rt.flush()
	}
	d.p.f("\n")
	return nil
}

func (d *demoDay) officeReview(ctx context.Context) error {
	d.clock.at(16, 45)
	of := d.office.store
	// The day's hauls, from the haul tickets: 14 yd3 loose a load.
	for _, h := range []client.Haul{
		{BorrowSourceID: d.borrowA, PlacementID: d.liftCore, Loads: 56, LooseVolumePerLoad: demoYd3(14)},
		{BorrowSourceID: d.borrowC, PlacementID: d.liftUpstream, Loads: 88, LooseVolumePerLoad: demoYd3(14)},
		{BorrowSourceID: d.borrowC, PlacementID: d.liftDownstrm, Loads: 82, LooseVolumePerLoad: demoYd3(14)},
	} {
		h.HauledOn = d.cfg.day
		if _, err := of.RecordHaul(ctx, d.project, h); err != nil {
			return err
		}
	}
	d.p.f("16:45  Odile records the day's hauls from the haul tickets and reviews the day's tests:\n")
	names := map[string]string{}
	for _, b := range of.BorrowSources(d.project) {
		names[b.ID] = b.Name
	}
	ht := newDemoTable(d.p, "HAULED FROM", "TO LIFT", "LOADS", "LOOSE VOLUME")
	for _, h := range of.Hauls(d.project) {
		ht.row(names[h.BorrowSourceID], demoLift(d.placements[h.PlacementID]), fmt.Sprint(h.Loads),
			demoU.show(soil.Volume, float64(h.Loads)*h.LooseVolumePerLoad))
	}
	ht.flush()
	d.p.f("\n")
	d.clock.at(16, 55)
	d.returned[d.tests["D1"]] = "the tablet's clock read an hour fast; confirm the test time from the field sheet"
	standing, lacking := "tablet's", "the offset"
	if c, err := of.Test(d.project, d.conflictTest); err != nil {
		return err
	} else if c.Current == d.laptopRevision {
		standing, lacking = "laptop's", "the oven moisture"
	}
	d.returned[d.conflictTest] = fmt.Sprintf("two corrections made apart on your tablet and laptop: the %s stands without %s; enter one revision with both",
		standing, lacking)
	queue := of.ReviewQueue(d.project, "")
	t := newDemoTable(d.p, "TEST", "WHERE", "BY", "RESULT", "DECISION")
	for _, q := range queue {
		decision, comment := client.Approve, ""
		switch {
		case d.returned[q.ID] != "":
			decision, comment = client.Return, d.returned[q.ID]
		case q.Result.Verdict == client.Fail && len(q.Retests) == 0:
			t.row(d.labels[q.ID], demoWhere(q.Content), d.who(q.Author), demoVerdictText(q.Result), "left for the retest")
			continue
		}
		d.clock.tick()
		if err := of.ReviewTest(ctx, d.project, q.ID, decision, comment); err != nil {
			return err
		}
		word := "approved"
		if decision == client.Return {
			word = "returned: " + comment
		}
		t.row(d.labels[q.ID], demoWhere(q.Content), d.who(q.Author), demoVerdictText(q.Result), word)
	}
	t.flush()
	if _, err := d.sync(ctx, d.office); err != nil {
		return err
	}
	d.p.f("\nFailing tests are approved as records once a passing retest closes them; no one reviews a test they recorded.\n\n")
	return nil
}

func (d *demoDay) settle(ctx context.Context) error {
	d.clock.at(17, 5)
	if _, err := d.sync(ctx, d.maren); err != nil {
		return err
	}
	t, err := d.maren.store.Test(d.project, d.conflictTest)
	if err != nil {
		return err
	}
	d.p.f("17:05  Maren's tablet syncs and shows %s %s, with the office's comment. She enters one revision with both changes:\n",
		escape(d.labels[d.conflictTest]), t.ReviewStatus)
	r, err := d.maren.store.CorrectTest(ctx, d.project, d.conflictTest, "settles the tablet's and the laptop's corrections: oven moisture 7.9 %, offset 55 ft L",
		func(in *client.TestInput) { in.Readings.SandCone.Moisture, in.Location.Offset = 7.9, demoFt(-55) })
	if err != nil {
		return err
	}
	tb := newDemoTable(d.p, demoTestHeader...)
	if err := d.testRow(tb, d.maren, r.TestID, "settled revision"); err != nil {
		return err
	}
	tb.flush()
	if _, err := d.sync(ctx, d.maren); err != nil {
		return err
	}
	d.clock.at(17, 15)
	if _, err := d.sync(ctx, d.office); err != nil {
		return err
	}
	if err := d.office.store.ReviewTest(ctx, d.project, d.conflictTest, client.Approve, ""); err != nil {
		return err
	}
	if _, err := d.sync(ctx, d.office); err != nil {
		return err
	}
	d.p.f("\n17:15  Odile approves the settled revision. The conflict stays in the test's history for the audit.\n\n")
	return nil
}

// lastSync brings every device to the server's head: a first round pushes
// what is left, a second pulls what the first round pushed.
func (d *demoDay) lastSync(ctx context.Context) error {
	d.clock.at(17, 30)
	for range 2 {
		for _, dev := range d.devices {
			d.clock.tick()
			if _, err := d.sync(ctx, dev); err != nil {
				return err
			}
		}
	}
	return nil
}

// who names a user by the member's name.
func (d *demoDay) who(user string) string {
	if n, ok := d.names[user]; ok {
		return n
	}
	return user
}
