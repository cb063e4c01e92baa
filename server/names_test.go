package server_test

import (
	"context"
	"crypto/ed25519"
	"testing"

	"github.com/google/uuid"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	pb "tamp/internal/gen/tamp/v1"
)

// TestNamesWithControlCharactersRefused: a project, user or device name
// holding a control character (which could forge lines or drive a
// terminal where names are listed) is refused with InvalidArgument naming
// the field, and nothing is used up: the same enrolment code then enrols
// the device under a clean name. Names in any script are accepted.
func TestNamesWithControlCharactersRefused(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Quarry Road embankment")
	root := c.rawDevice(t, "root", nil, true)
	ac := pb.NewAdminServiceClient(c.conn(""))
	refused := func(t *testing.T, err error, field string) {
		t.Helper()
		if reason, f, rule := reasonOf(err); status.Code(err) != codes.InvalidArgument || reason != "INVALID_ARGUMENT" || f != field ||
			rule != "no_control_characters" {
			t.Errorf("%v, want InvalidArgument naming %s", err, field)
		}
	}
	for _, bad := range []string{"levee\nffffffff\tadmin", "\x1b[2Jlevee", "levee\u202egnp", "levee\u0085", "levee\x7f"} {
		_, err := ac.CreateProject(root.ctx(), &pb.CreateProjectRequest{Name: bad})
		refused(t, err, "name")
		_, err = ac.AddMember(root.ctx(), &pb.AddMemberRequest{ProjectId: project, UserName: bad, Role: pb.Role_ROLE_INSPECTOR})
		refused(t, err, "user_name")
	}
	if _, err := ac.CreateProject(root.ctx(), &pb.CreateProjectRequest{Name: "Digue de la Rivière Ñandú — 北堤"}); err != nil {
		t.Errorf("a name with accents and CJK: %v", err)
	}
	resp, err := ac.AddMember(root.ctx(), &pb.AddMemberRequest{ProjectId: project, UserName: "Zoë Ångström", Role: pb.Role_ROLE_INSPECTOR})
	if err != nil {
		t.Fatalf("a user name with accents: %v", err)
	}

	code, _, err := c.srv.IssueEnrollmentCode(context.Background(), resp.GetUserId())
	if err != nil {
		t.Fatal(err)
	}
	pub, _, err := ed25519.GenerateKey(nil)
	if err != nil {
		t.Fatal(err)
	}
	req := &pb.EnrollDeviceRequest{Code: code, DeviceId: uuid.Must(uuid.NewV7()).String(), PublicKey: pub, DeviceName: "tablet 3\n\x1b]0;owned\x07"}
	_, err = ac.EnrollDevice(context.Background(), req)
	refused(t, err, "device_name")
	req.DeviceName = "tablet 3"
	if _, err := ac.EnrollDevice(context.Background(), req); err != nil {
		t.Errorf("enrolling with the same code and a clean name: %v", err)
	}
	devices, err := ac.ListDevices(root.ctx(), &pb.ListDevicesRequest{UserId: resp.GetUserId()})
	if err != nil {
		t.Fatal(err)
	}
	if len(devices.GetDevices()) != 1 || devices.GetDevices()[0].GetDeviceName() != "tablet 3" {
		t.Errorf("devices = %v, want the one named tablet 3", devices.GetDevices())
	}
}
