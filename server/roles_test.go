package server_test

import (
	"context"
	"crypto/ed25519"
	"os"
	"slices"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/reflect/protoreflect"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/soil"
	"tamp/server"
)

// readmeEntryRoles reads the role table as the README states it (in its
// Security section): which roles may make each kind of entry. A kind with
// no roles is made by the server itself, never pushed by a member.
// (TestReadmeStatesTheRoleTables checks that the README states the
// server's table; this test checks the server against what it states.)
func readmeEntryRoles(t *testing.T) map[string][]server.Role {
	t.Helper()
	readme, err := os.ReadFile("../README.md")
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(string(readme), "\n")
	start := slices.Index(lines, "| entry | inspector | office | qa | admin |")
	if start < 0 || start+2 > len(lines) {
		t.Fatal("README.md has no role table headed | entry | inspector | office | qa | admin |")
	}
	out := map[string][]server.Role{}
	for _, line := range lines[start+2:] {
		if !strings.HasPrefix(line, "| `") {
			break
		}
		cells := strings.Split(strings.Trim(line, "| "), "|")
		if len(cells) != 1+len(allRoles) {
			t.Fatalf("README.md role table: %q has %d cells, want %d", line, len(cells), 1+len(allRoles))
		}
		_, rest, _ := strings.Cut(cells[0], "`")
		kind, _, _ := strings.Cut(rest, "`")
		roles := []server.Role{}
		for i, c := range cells[1:] {
			switch strings.TrimSpace(c) {
			case "yes":
				roles = append(roles, allRoles[i])
			case "-":
			default:
				t.Fatalf("README.md role table: %s: cell %q is neither yes nor -", kind, c)
			}
		}
		out[kind] = roles
	}
	if len(out) == 0 {
		t.Fatal("README.md's role table has no rows")
	}
	return out
}

var allRoles = []server.Role{server.Inspector, server.Office, server.QA, server.Admin}

// Every (role, entry kind) cell of the role table, pushed as a real signed
// entry through a real server: the server allows exactly the documented
// cells, and refuses the others as role_may_make_entry (or, for a server
// administrator without a role on the project, member_of_project). A kind
// with no roles is the server's own: refused from every member.
func TestRoleTableCells(t *testing.T) {
	documentedEntryRoles := readmeEntryRoles(t)
	c := startCluster(t, t.TempDir())
	a := c.newProject("Quarry Road embankment")
	ctx := context.Background()
	adm := c.rawDevice(t, "Ada", map[string]server.Role{a: server.Admin}, false)
	qa := c.rawDevice(t, "Quinn", map[string]server.Role{a: server.QA}, false)
	insp := c.rawDevice(t, "Ines", map[string]server.Role{a: server.Inspector}, false)
	gauge, borrow := newV7(), newV7()
	shared := &ledger.TestRecorded{TestID: newV7(), Content: ledger.TestContent{Readings: sandCone(110, 12)}}
	var sharedRev string
	for _, ev := range []struct {
		d *rawDevice
		k ledger.Kind
	}{
		{adm, &ledger.ProjectSetUp{Name: "Quarry Road embankment", Units: soil.US}},
		{qa, &ledger.EquipmentRegistered{ID: gauge, Kind: ledger.NuclearGauge, SerialNumber: "G-7"}},
		{qa, &ledger.BorrowSourceMeasured{ID: borrow, Name: "north pit", BankTests: []ledger.Readings{sandCone(100, 9)}}},
		{insp, shared},
	} {
		s := ev.d.sign(t, a, ev.k)
		if o := ev.d.first(t, c, a, s); o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
			t.Fatalf("fixture %s: %v", ev.k.KindName(), o)
		}
		if ev.k == shared {
			sharedRev = s.Event.ID
		}
	}

	// Each member records two tests of their own as an inspector, then takes
	// their role: corrections and voids are tried on their own tests,
	// reviews and exceptions on another inspector's.
	type member struct {
		d          *rawDevice
		fix, void  string // own tests
		fixRev     string
		content    ledger.TestContent
		serverOnly bool // a server administrator with no role on the project
	}
	members := map[server.Role]*member{}
	for _, r := range allRoles {
		m := &member{d: c.rawDevice(t, "member "+string(r), map[string]server.Role{a: server.Inspector}, false),
			content: ledger.TestContent{Readings: sandCone(108, 12)}}
		m.fix, m.void = newV7(), newV7()
		fix := m.d.sign(t, a, &ledger.TestRecorded{TestID: m.fix, Content: m.content})
		void := m.d.sign(t, a, &ledger.TestRecorded{TestID: m.void, Content: m.content})
		resp, err := m.d.push(t, c, a, fix, void)
		if err != nil {
			t.Fatal(err)
		}
		for _, o := range resp.GetOutcomes() {
			if o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
				t.Fatalf("own test of %s: %v", r, o)
			}
		}
		m.fixRev = fix.Event.ID
		if err := c.srv.AddMember(ctx, a, m.d.user, r); err != nil {
			t.Fatal(err)
		}
		members[r] = m
	}
	root := &member{d: c.rawDevice(t, "Rosa root", nil, true), serverOnly: true}

	makers := map[string]func(m *member) ledger.Kind{
		"project_set_up": func(*member) ledger.Kind { return &ledger.ProjectSetUp{Name: "Quarry Road embankment", Units: soil.US} },
		"spec_defined": func(*member) ledger.Kind {
			return &ledger.SpecDefined{ID: newV7(), Name: "embankment", MinCompaction: "95"}
		},
		"reference_added": func(*member) ledger.Kind {
			return &ledger.ReferenceAdded{ID: newV7(), Procedure: soil.Procedure{Standard: soil.ASTMD698, Method: "A"}, MaxDryDensity: 1850, OptimumMoisture: 13}
		},
		"borrow_source_measured": func(*member) ledger.Kind {
			return &ledger.BorrowSourceMeasured{ID: newV7(), Name: "south pit", BankTests: []ledger.Readings{sandCone(100, 9)}}
		},
		"moisture_correction_set": func(*member) ledger.Kind {
			return &ledger.MoistureCorrectionSet{ID: newV7(), EquipmentID: gauge, ReferenceID: borrow, Correction: soil.MoistureCorrection{Kind: soil.Offset, Value: 1}}
		},
		"equipment_registered": func(*member) ledger.Kind {
			return &ledger.EquipmentRegistered{ID: newV7(), Kind: ledger.NuclearGauge, SerialNumber: "G-8"}
		},
		"standard_count_recorded": func(*member) ledger.Kind {
			return &ledger.StandardCountRecorded{EquipmentID: gauge, Date: "2026-10-05", DensityCount: 2800, MoistureCount: 700, Accepted: true}
		},
		"lift_placement_recorded": func(*member) ledger.Kind {
			return &ledger.LiftPlacementRecorded{ID: newV7(), Feature: "embankment", Thickness: 0.2, CompactedVolume: 100}
		},
		"haul_recorded": func(*member) ledger.Kind {
			return &ledger.HaulRecorded{ID: newV7(), BorrowSourceID: borrow, Loads: 3, LooseVolumePerLoad: 10}
		},
		"test_recorded": func(*member) ledger.Kind {
			return &ledger.TestRecorded{TestID: newV7(), Content: ledger.TestContent{Readings: sandCone(110, 12)}}
		},
		"test_corrected": func(m *member) ledger.Kind {
			if m.serverOnly {
				return &ledger.TestCorrected{TestID: shared.TestID, Supersedes: sharedRev, Reason: "typo", Content: shared.Content}
			}
			return &ledger.TestCorrected{TestID: m.fix, Supersedes: m.fixRev, Reason: "typo in the mass", Content: m.content}
		},
		"test_voided": func(m *member) ledger.Kind {
			if m.serverOnly {
				return &ledger.TestVoided{TestID: shared.TestID, Reason: "wrong lift"}
			}
			return &ledger.TestVoided{TestID: m.void, Reason: "wrong lift"}
		},
		"test_reviewed": func(*member) ledger.Kind {
			return &ledger.TestReviewed{TestID: shared.TestID, Revision: sharedRev, Decision: ledger.Approve}
		},
		"exception_accepted": func(*member) ledger.Kind {
			return &ledger.ExceptionAccepted{TestID: shared.TestID, Revision: sharedRev, Reason: "accepted by the engineer of record"}
		},
		"device_enrolled": func(m *member) ledger.Kind {
			pub, _, _ := ed25519.GenerateKey(nil)
			return &ledger.DeviceEnrolled{DeviceID: newV7(), UserID: m.d.user, PublicKey: pub, Name: "spare tablet", Enrolled: time.Now().UTC().Truncate(time.Microsecond)}
		},
		"device_revoked": func(*member) ledger.Kind {
			return &ledger.DeviceRevoked{DeviceID: insp.id, Effective: time.Now().UTC().Truncate(time.Microsecond), Reason: "tablet lost"}
		},
	}

	kinds := (&pb.EventBody{}).ProtoReflect().Descriptor().Oneofs().ByName("kind").Fields()
	for i := range kinds.Len() {
		kind := string(kinds.Get(i).Name())
		documented, ok := documentedEntryRoles[kind]
		if !ok {
			t.Errorf("entry kind %s is missing from the documented role table", kind)
			continue
		}
		if got := server.EntryRoles(kind); !sameRoles(got, documented) {
			t.Errorf("EntryRoles(%s) = %v, the documented table says %v", kind, got, documented)
		}
		make, ok := makers[kind]
		if !ok {
			t.Errorf("entry kind %s has no entry for this test to push", kind)
			continue
		}
		for _, r := range allRoles {
			t.Run(kind+"/"+string(r), func(t *testing.T) {
				m := members[r]
				want := slices.Contains(documented, r)
				o := m.d.first(t, c, a, m.d.sign(t, a, make(m)))
				got := o.GetStatus() == pb.PushStatus_PUSH_STATUS_ACCEPTED
				if got != want {
					t.Errorf("%s by a member with the role %s: %v %s, want allowed=%v", kind, r, o.GetStatus(), o.GetMessage(), want)
				}
				if !want && (o.GetReason() != pb.RejectReason_REJECT_REASON_PERMISSION_DENIED || o.GetRule() != refusal(documented, "role_may_make_entry")) {
					t.Errorf("%s by %s: refused for %v (rule %q), want permission denied (%s)", kind, r, o.GetReason(), o.GetRule(), refusal(documented, "role_may_make_entry"))
				}
			})
		}
		t.Run(kind+"/server administrator without a role", func(t *testing.T) {
			o := root.d.first(t, c, a, root.d.sign(t, a, make(root)))
			if o.GetReason() != pb.RejectReason_REJECT_REASON_PERMISSION_DENIED || o.GetRule() != refusal(documented, "member_of_project") {
				t.Errorf("%s by a server administrator with no role: %v %v (rule %q), want permission denied (%s)", kind, o.GetStatus(), o.GetReason(), o.GetRule(), refusal(documented, "member_of_project"))
			}
		})
	}
	for kind := range documentedEntryRoles {
		if kinds.ByName(protoreflect.Name(kind)) == nil {
			t.Errorf("the documented role table names %s, which the wire format lacks", kind)
		}
	}
}

// refusal is the rule a refused entry of a kind allowed to roles breaks:
// rule, or server_entries_only when no role may make it.
func refusal(roles []server.Role, rule string) string {
	if len(roles) == 0 {
		return "server_entries_only"
	}
	return rule
}

func sameRoles(a, b []server.Role) bool {
	a, b = slices.Clone(a), slices.Clone(b)
	slices.Sort(a)
	slices.Sort(b)
	return slices.Equal(a, b)
}

// adminCase is one administration call made by each kind of caller.
type adminCase struct {
	method  string
	allowed []string // the callers that may make it
	// call makes the call as the device of caller who; for who == "self",
	// as the device of the user the call concerns, which call creates.
	call func(t *testing.T, who string) error
}

// The callers of the administration calls: a server administrator with no
// role on the project, the project's members by role, an administrator of
// another project, and the user the call concerns.
var adminCallers = []string{"server admin", "admin", "qa", "office", "inspector", "other project's admin", "self"}

// Every administration call by every kind of caller, through a real
// server, against the documented table of who may make it.
func TestAdminCallTable(t *testing.T) {
	c := startCluster(t, t.TempDir())
	a := c.newProject("Quarry Road embankment")
	b := c.newProject("Heron Slough levee")
	ctx := context.Background()
	devs := map[string]*rawDevice{
		"server admin":          c.rawDevice(t, "Rosa root", nil, true),
		"other project's admin": c.rawDevice(t, "Otto", map[string]server.Role{b: server.Admin}, false),
	}
	for _, r := range allRoles {
		devs[string(r)] = c.rawDevice(t, "member "+string(r), map[string]server.Role{a: r}, false)
	}
	ac := pb.NewAdminServiceClient(c.conn(""))
	// caller returns the device that calls as who; self is the device of
	// the user the call concerns.
	caller := func(who string, self *rawDevice) *rawDevice {
		if who == "self" {
			return self
		}
		return devs[who]
	}
	// inspectorOfA is a new user who is an inspector of A only, with a device.
	inspectorOfA := func(t *testing.T) *rawDevice {
		return c.rawDevice(t, "Ivy", map[string]server.Role{a: server.Inspector}, false)
	}
	// invitee is a new user, an inspector of B, whom A's administrator
	// invites to A.
	invitee := func(t *testing.T) (*rawDevice, string) {
		d := c.rawDevice(t, "Val", map[string]server.Role{b: server.Inspector}, false)
		resp, err := ac.AddMember(devs["admin"].ctx(), &pb.AddMemberRequest{ProjectId: a, UserId: d.user, Role: pb.Role_ROLE_INSPECTOR})
		if err != nil || resp.GetInvitationId() == "" {
			t.Fatalf("invite: %v, %v", resp, err)
		}
		return d, resp.GetInvitationId()
	}
	cases := []adminCase{
		{pb.AdminService_CreateProject_FullMethodName, []string{"server admin"}, func(t *testing.T, who string) error {
			_, err := ac.CreateProject(caller(who, inspectorOfA(t)).ctx(), &pb.CreateProjectRequest{Name: "Cedar Bench pad"})
			return err
		}},
		{pb.AdminService_AddMember_FullMethodName, []string{"server admin", "admin"}, func(t *testing.T, who string) error {
			_, err := ac.AddMember(caller(who, inspectorOfA(t)).ctx(), &pb.AddMemberRequest{ProjectId: a, UserName: "Nell new", Role: pb.Role_ROLE_INSPECTOR})
			return err
		}},
		{pb.AdminService_ListMembers_FullMethodName, []string{"server admin", "admin", "qa", "office", "inspector", "self"}, func(t *testing.T, who string) error {
			_, err := ac.ListMembers(caller(who, inspectorOfA(t)).ctx(), &pb.ListMembersRequest{ProjectId: a})
			return err
		}},
		{pb.AdminService_IssueEnrollmentCode_FullMethodName, []string{"server admin", "admin"}, func(t *testing.T, who string) error {
			self := inspectorOfA(t)
			_, err := ac.IssueEnrollmentCode(caller(who, self).ctx(), &pb.IssueEnrollmentCodeRequest{UserId: self.user})
			return err
		}},
		{pb.AdminService_EnrollDevice_FullMethodName, adminCallers, func(t *testing.T, who string) error {
			self := inspectorOfA(t)
			code, _, err := c.srv.IssueEnrollmentCode(ctx, self.user)
			if err != nil {
				t.Fatal(err)
			}
			pub, _, _ := ed25519.GenerateKey(nil)
			_, err = ac.EnrollDevice(caller(who, self).ctx(), &pb.EnrollDeviceRequest{Code: code, DeviceId: newV7(), PublicKey: pub})
			return err
		}},
		{pb.AdminService_ResumeDevice_FullMethodName, adminCallers, func(t *testing.T, who string) error {
			// The certificate and the proof authorise a resume; the caller's
			// token, if any, plays no part.
			self := inspectorOfA(t)
			code, _, err := c.srv.IssueEnrollmentCode(ctx, self.user)
			if err != nil {
				t.Fatal(err)
			}
			pub, key, _ := ed25519.GenerateKey(nil)
			dev := newV7()
			enrolled, err := ac.EnrollDevice(ctx, &pb.EnrollDeviceRequest{Code: code, DeviceId: dev, PublicKey: pub})
			if err != nil {
				t.Fatal(err)
			}
			micros := time.Now().UnixMicro()
			_, err = ac.ResumeDevice(caller(who, self).ctx(), &pb.ResumeDeviceRequest{Certificate: enrolled.GetCertificate(), ProofMicros: micros,
				Proof: ed25519.Sign(key, ledger.ResumeProof(certSigner(t, enrolled.GetCertificate()), dev, micros))})
			return err
		}},
		{pb.AdminService_RevokeDevice_FullMethodName, []string{"server admin", "self"}, func(t *testing.T, who string) error {
			self := inspectorOfA(t)
			_, err := ac.RevokeDevice(caller(who, self).ctx(), &pb.RevokeDeviceRequest{DeviceId: self.id, Reason: "tablet lost"})
			return err
		}},
		{pb.AdminService_ListDevices_FullMethodName, []string{"server admin", "self"}, func(t *testing.T, who string) error {
			self := inspectorOfA(t)
			_, err := ac.ListDevices(caller(who, self).ctx(), &pb.ListDevicesRequest{UserId: self.user})
			return err
		}},
		{pb.AdminService_ListInvitations_FullMethodName, adminCallers, func(t *testing.T, who string) error {
			_, err := ac.ListInvitations(caller(who, inspectorOfA(t)).ctx(), &pb.ListInvitationsRequest{})
			return err
		}},
		{pb.AdminService_AcceptInvitation_FullMethodName, []string{"self"}, func(t *testing.T, who string) error {
			self, inv := invitee(t)
			_, err := ac.AcceptInvitation(caller(who, self).ctx(), &pb.AcceptInvitationRequest{InvitationId: inv})
			return err
		}},
		{pb.AdminService_DeclineInvitation_FullMethodName, []string{"self"}, func(t *testing.T, who string) error {
			self, inv := invitee(t)
			_, err := ac.DeclineInvitation(caller(who, self).ctx(), &pb.DeclineInvitationRequest{InvitationId: inv})
			return err
		}},
	}
	byMethod := map[string]adminCase{}
	for _, k := range cases {
		byMethod[k.method] = k
	}
	methods := pb.File_tamp_v1_admin_proto.Services().ByName("AdminService").Methods()
	for i := range methods.Len() {
		name := "/tamp.v1.AdminService/" + string(methods.Get(i).Name())
		k, ok := byMethod[name]
		if !ok {
			t.Errorf("administration call %s is missing from the documented table", name)
			continue
		}
		for _, who := range adminCallers {
			t.Run(string(methods.Get(i).Name())+"/"+who, func(t *testing.T) {
				want := slices.Contains(k.allowed, who)
				err := k.call(t, who)
				if want != (err == nil) {
					t.Errorf("%s by %s: %v, want allowed=%v", name, who, err, want)
				}
				if err != nil && status.Code(err) != codes.PermissionDenied {
					t.Errorf("%s by %s: code %v, want PermissionDenied", name, who, status.Code(err))
				}
			})
		}
	}
	// Listing every device is a server administrator's alone.
	for who, d := range devs {
		_, err := ac.ListDevices(d.ctx(), &pb.ListDevicesRequest{})
		if (who == "server admin") != (err == nil) {
			t.Errorf("list all devices by %s: %v", who, err)
		}
	}
}
