package ledger

import (
	"crypto/ed25519"
	"encoding/hex"
	"flag"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"
	"github.com/google/go-cmp/cmp/cmpopts"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/testing/protocmp"

	"tamp/internal/earthwork"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/qc"
	"tamp/internal/soil"
)

var update = flag.Bool("update", false, "rewrite the golden files in testdata/")

// everyKind returns one fully populated event of each kind.
func everyKind(f *fixture) []Kind {
	oven := 13.1
	ref := f.reference()
	spec := f.spec()
	spec.MoistureBasis, spec.SuspectCompaction, spec.VolumePerTest = qc.PercentOfOptimum, 104, 380
	gauge := &EquipmentRegistered{ID: f.id(true), Kind: NuclearGauge, Model: "MD-9", SerialNumber: "G-2231", CalibrationDue: "2027-03-31"}
	nuclear := f.test(ref.ID, spec.ID, 110, 12)
	nuclear.Content.Readings = Readings{Nuclear: &NuclearReadings{ProbeDepth: 0.2, Agreement: 30, CorrectionID: f.id(true), OvenMoisture: &oven,
		Counts: []soil.NuclearReading{{WetDensity: 2050, WaterPerVolume: 230}, {WetDensity: 2061, WaterPerVolume: 228}}}}
	nuclear.Content.Oversize = &soil.Oversize{Percent: 12, BulkGs: 2.64, Moisture: 1.5}
	nuclear.Content.Location.Position = &GeoPosition{Latitude: 39.7392, Longitude: -104.9903, Accuracy: 3.5}
	nuclear.Content.Location.Description = "north toe"
	nuclear.Content.EquipmentID, nuclear.Content.PlacementID, nuclear.Content.Remarks = gauge.ID, f.id(true), "after rain"
	nuclear.Content.DeviceResults = &Results{WetDensity: 2055, DryDensity: 1830, Moisture: 12.3, MaxDryDensity: 1890, OptimumMoisture: 12.9,
		RelativeCompaction: 96.8, MoistureDeviation: -0.6, Verdict: qc.Pass, Flags: []qc.Finding{{Code: qc.NuclearMoistureUncorrected, Message: "m"}}}
	nuclear.RetestOf = f.id(true)
	drive := f.test(ref.ID, spec.ID, 110, 12)
	drive.Content.Readings = Readings{DriveCylinder: &soil.DriveCylinder{Diameter: 0.1016, Length: 0.127, SoilMass: 2.15, Moisture: 15}}
	balloon := f.test(ref.ID, spec.ID, 110, 12)
	balloon.Content.Readings = Readings{RubberBalloon: &soil.RubberBalloon{InitialReading: 1.02e-3, FinalReading: 2.85e-3, SoilMass: 3.6, Moisture: 9}}
	wet := f.test(ref.ID, spec.ID, 110, 12)
	wet.Content.Readings = Readings{WetDensity: &soil.WetDensityTest{WetDensity: 2000, Moisture: 11}}
	return []Kind{
		&ProjectSetUp{Name: "Cedar Flats levee", Units: soil.SI, WaterDensity: 998.2, Shrinkage: earthwork.CompactedBasis,
			ClockSkewLimit: 10 * time.Minute, TimeZone: "America/Denver"},
		spec, ref, gauge,
		&StandardCountRecorded{EquipmentID: gauge.ID, Date: "2026-06-15", DensityCount: 2841, MoistureCount: 712, Accepted: true},
		&MoistureCorrectionSet{ID: f.id(true), EquipmentID: gauge.ID, ReferenceID: ref.ID, Correction: soil.MoistureCorrection{Kind: soil.Offset, Value: 1.4},
			Pairs: []soil.MoisturePair{{Gauge: 12.1, Oven: 13.5}, {Gauge: 11.0, Oven: 12.4}}},
		&BorrowSourceMeasured{ID: f.id(true), Name: "pit 2", BankTests: []Readings{sandCone(101.5, 9)}, LooseDryDensity: 1345, ReferenceID: ref.ID},
		&LiftPlacementRecorded{ID: f.id(true), Feature: "embankment", LiftNumber: 4, Stations: &StationRange{From: 380, To: 420, OffsetLeft: -8, OffsetRight: 8},
			Area: 640, Thickness: 0.2, CompactedVolume: 128, BorrowSourceID: f.id(true), PlacedOn: "2026-06-15"},
		&HaulRecorded{ID: f.id(true), BorrowSourceID: f.id(true), Loads: 14, LooseVolumePerLoad: 10.7, PlacementID: f.id(true), HauledOn: "2026-06-15"},
		nuclear, drive, balloon, wet,
		&TestCorrected{TestID: nuclear.TestID, Supersedes: f.id(true), Reason: "probe depth was 8 in", Content: wet.Content},
		&TestVoided{TestID: nuclear.TestID, Reason: "wrong lift"},
		&TestReviewed{TestID: nuclear.TestID, Revision: f.id(true), Decision: Return, Comment: "retest after rework"},
	}
}

func TestProtoRoundTrip(t *testing.T) {
	f := newFixture(t, 20)
	kinds := append(everyKind(f), &ExceptionAccepted{TestID: f.id(true), Revision: f.id(true), Reason: "accepted by the engineer of record, memo 14"})
	for _, k := range kinds {
		t.Run(k.KindName(), func(t *testing.T) {
			s := f.emit("ann", k)
			var b pb.EventBody
			if err := proto.Unmarshal(s.Body, &b); err != nil {
				t.Fatal(err)
			}
			back, err := FromProto(&b)
			if err != nil {
				t.Fatal(err)
			}
			if diff := cmp.Diff(s.Event, back, cmpopts.EquateEmpty()); diff != "" {
				t.Errorf("domain -> proto -> domain (-want +got):\n%s", diff)
			}
			again, err := ToProto(back)
			if err != nil {
				t.Fatal(err)
			}
			if diff := cmp.Diff(&b, again, protocmp.Transform()); diff != "" {
				t.Errorf("proto -> domain -> proto (-want +got):\n%s", diff)
			}
		})
	}
}

// TestGoldenCanonicalBytes fails when the canonical bytes of an event
// change: signatures and chains of stored ledgers rest on them. After a
// deliberate change of the format, run go test -run Golden -update.
func TestGoldenCanonicalBytes(t *testing.T) {
	f := newFixture(t, 21)
	kinds := everyKind(f)
	for _, c := range []struct {
		name string
		kind Kind
	}{{"project_set_up", kinds[0]}, {"reference_added", kinds[2]}, {"test_recorded_nuclear", kinds[9]}, {"test_corrected", kinds[13]}} {
		s := f.emit("ann", c.kind)
		got := hex.EncodeToString(s.Bytes()) + "\n"
		path := filepath.Join("testdata", c.name+".hex")
		if *update {
			if err := os.MkdirAll("testdata", 0o755); err != nil {
				t.Fatal(err)
			}
			if err := os.WriteFile(path, []byte(got), 0o644); err != nil {
				t.Fatal(err)
			}
			continue
		}
		want, err := os.ReadFile(path)
		if err != nil {
			t.Fatalf("%v (run go test -run Golden -update to create it)", err)
		}
		if got != string(want) {
			t.Errorf("%s: canonical bytes changed:\n got %s\nwant %s", c.name, strings.TrimSpace(got), strings.TrimSpace(string(want)))
		}
		// The golden bytes still decode and verify.
		raw, _ := hex.DecodeString(strings.TrimSpace(string(want)))
		d, err := Decode(raw)
		if err != nil {
			t.Fatalf("%s: golden bytes do not decode: %v", c.name, err)
		}
		if err := d.Verify(f.device("ann").key.Public().(ed25519.PublicKey)); err != nil {
			t.Errorf("%s: golden signature: %v", c.name, err)
		}
	}
}

func TestReasonRoundTrip(t *testing.T) {
	for r := Malformed; r <= PermissionDenied; r++ {
		p := ReasonToProto(r)
		if p == pb.RejectReason_REJECT_REASON_UNSPECIFIED || ReasonFromProto(p) != r {
			t.Errorf("reason %s -> %v -> %s", r, p, ReasonFromProto(p))
		}
	}
}
