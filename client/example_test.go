package client_test

import (
	"context"
	"fmt"
	"log"
	"os"
	"path/filepath"

	"tamp/client"
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
