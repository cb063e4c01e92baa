package ledger

import (
	"slices"
	"testing"

	"github.com/google/go-cmp/cmp"
	"google.golang.org/protobuf/reflect/protoreflect"
	"google.golang.org/protobuf/testing/protocmp"

	pb "tamp/internal/gen/tamp/v1"
)

// One descriptor per field of the wire format's oneof kind, in its order,
// named as the field; each descriptor's zero value encodes to that field
// and decodes to its own type, and the lookups find it.
func TestKindsMatchTheWireFormat(t *testing.T) {
	oneof := (&pb.EventBody{}).ProtoReflect().Descriptor().Oneofs().ByName("kind")
	fields := oneof.Fields()
	ds := Kinds()
	if len(ds) != fields.Len() {
		t.Errorf("%d descriptors, the wire format's EventBody has %d kinds", len(ds), fields.Len())
	}
	for i := range fields.Len() {
		name := string(fields.Get(i).Name())
		d, ok := KindByName(name)
		if !ok {
			t.Errorf("the wire format's kind %s has no descriptor: add it to describeKinds in kinds.go", name)
			continue
		}
		if i < len(ds) && ds[i].Name != name {
			t.Errorf("descriptor %d is %s, the wire format's field %d is %s: keep them in the same order", i, ds[i].Name, i, name)
		}
		k := d.New()
		if k.KindName() != name {
			t.Errorf("descriptor %s makes a %T whose KindName is %s", name, k, k.KindName())
		}
		if got, ok := DescriptorOf(k); !ok || got.Name != name {
			t.Errorf("DescriptorOf(%T) = %s, %v; want %s", k, got.Name, ok, name)
		}
		b, err := ToProto(Event{ID: "e", Kind: k})
		if err != nil {
			t.Errorf("%s: ToProto of its zero value: %v", name, err)
			continue
		}
		if set := b.ProtoReflect().WhichOneof(oneof); set == nil || string(set.Name()) != name {
			t.Errorf("%s: its zero value encodes as the field %v", name, set)
		}
		back, err := FromProto(b)
		if err != nil {
			t.Errorf("%s: FromProto: %v", name, err)
			continue
		}
		if back.Kind == nil || back.Kind.KindName() != name {
			t.Errorf("%s: decodes as %T", name, back.Kind)
			continue
		}
		again, err := ToProto(back)
		if err != nil {
			t.Errorf("%s: ToProto again: %v", name, err)
			continue
		}
		if diff := cmp.Diff(b, again, protocmp.Transform()); diff != "" {
			t.Errorf("%s: proto -> domain -> proto (-want +got):\n%s", name, diff)
		}
	}
	for _, d := range ds {
		if fields.ByName(protoreflect.Name(d.Name)) == nil {
			t.Errorf("descriptor %s names no kind of the wire format", d.Name)
		}
	}
	if _, ok := DescriptorOf(nil); ok {
		t.Error("DescriptorOf(nil) found a descriptor")
	}
	if _, ok := KindByName("test_deleted"); ok {
		t.Error("KindByName found a kind the wire format lacks")
	}
}

// The descriptors' flags and roles, stated here as the store contract,
// the role table and the projection have them.
func TestKindDescriptorFlags(t *testing.T) {
	want := map[string]struct {
		creates, reference, serverMade bool
		roles                          []string
	}{
		"project_set_up":          {false, true, false, []string{"admin"}},
		"spec_defined":            {true, true, false, []string{"qa"}},
		"reference_added":         {true, true, false, []string{"qa"}},
		"equipment_registered":    {false, true, false, []string{"office", "qa"}},
		"standard_count_recorded": {false, true, false, []string{"inspector"}},
		"moisture_correction_set": {true, true, false, []string{"qa"}},
		"borrow_source_measured":  {true, false, false, []string{"qa"}},
		"lift_placement_recorded": {true, false, false, []string{"office"}},
		"haul_recorded":           {true, false, false, []string{"office"}},
		"test_recorded":           {true, false, false, []string{"inspector"}},
		"test_corrected":          {false, false, false, []string{"inspector"}},
		"test_voided":             {false, false, false, []string{"inspector"}},
		"test_reviewed":           {false, false, false, []string{"office", "qa"}},
		"exception_accepted":      {false, false, false, []string{"qa"}},
		"device_enrolled":         {false, false, true, nil},
		"device_revoked":          {false, false, true, nil},
	}
	for _, d := range Kinds() {
		w, ok := want[d.Name]
		if !ok {
			t.Errorf("%s: not in this test's table", d.Name)
			continue
		}
		if d.Creates != w.creates || d.Reference != w.reference || d.ServerMade != w.serverMade || !slices.Equal(d.Roles, w.roles) {
			t.Errorf("%s: creates %v reference %v server-made %v roles %v; want %v %v %v %v", d.Name,
				d.Creates, d.Reference, d.ServerMade, d.Roles, w.creates, w.reference, w.serverMade, w.roles)
		}
		if d.ServerMade != ServerMade(d.New()) || d.Creates != createsRecord(d.New()) {
			t.Errorf("%s: ServerMade or createsRecord disagrees with the descriptor", d.Name)
		}
	}
	d, _ := KindByName("test_reviewed")
	d.Roles[0] = "admin"
	if again, _ := KindByName("test_reviewed"); again.Roles[0] != "office" {
		t.Error("changing a returned descriptor's roles changed the table")
	}
}

// Record and Refs of fully populated events: the record each is about and
// the records it refers to, empty ids left out.
func TestKindRecordAndRefs(t *testing.T) {
	f := newFixture(t, 22)
	ref, spec := f.reference(), f.spec()
	test := f.test(ref.ID, spec.ID, 110, 12)
	corr, gauge := f.id(true), f.id(true)
	nuclear := f.test(ref.ID, spec.ID, 110, 12)
	nuclear.RetestOf = test.TestID
	nuclear.Content.EquipmentID = gauge
	nuclear.Content.Readings = Readings{Nuclear: &NuclearReadings{CorrectionID: corr}}
	rev, placement, borrow := f.id(true), f.id(true), f.id(true)
	for _, tc := range []struct {
		k      Kind
		record string
		refs   []string
	}{
		{&ProjectSetUp{Name: "Cedar Flats levee"}, "", nil},
		{spec, spec.ID, nil},
		{ref, ref.ID, nil},
		{&StandardCountRecorded{EquipmentID: gauge}, gauge, []string{gauge}},
		{&MoistureCorrectionSet{ID: corr, EquipmentID: gauge, ReferenceID: ref.ID}, corr, []string{gauge, ref.ID}},
		{&BorrowSourceMeasured{ID: borrow}, borrow, nil},
		{&LiftPlacementRecorded{ID: placement, BorrowSourceID: borrow}, placement, []string{borrow}},
		{&HaulRecorded{ID: rev, BorrowSourceID: borrow, PlacementID: placement}, rev, []string{borrow, placement}},
		{test, test.TestID, []string{ref.ID, spec.ID}},
		{nuclear, nuclear.TestID, []string{ref.ID, spec.ID, gauge, corr, test.TestID}},
		{&TestCorrected{TestID: test.TestID, Supersedes: rev, Content: test.Content}, test.TestID, []string{test.TestID, rev, ref.ID, spec.ID}},
		{&TestVoided{TestID: test.TestID}, test.TestID, []string{test.TestID}},
		{&TestReviewed{TestID: test.TestID, Revision: rev}, test.TestID, []string{test.TestID, rev}},
		{&ExceptionAccepted{TestID: test.TestID, Revision: rev}, test.TestID, []string{test.TestID, rev}},
		{&DeviceEnrolled{DeviceID: "d1"}, "d1", nil},
		{&DeviceRevoked{DeviceID: "d1"}, "d1", nil},
	} {
		d, _ := DescriptorOf(tc.k)
		if got := d.Record(tc.k); got != tc.record || RecordID(tc.k) != tc.record {
			t.Errorf("%s: Record %q, RecordID %q; want %q", tc.k.KindName(), got, RecordID(tc.k), tc.record)
		}
		if got := d.Refs(tc.k); !slices.Equal(got, tc.refs) {
			t.Errorf("%s: Refs %v; want %v", tc.k.KindName(), got, tc.refs)
		}
	}
}
