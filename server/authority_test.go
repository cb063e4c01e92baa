package server_test

import (
	"context"
	"crypto/ed25519"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/server"
)

// wantDenied fails unless err is PermissionDenied naming rule.
func wantDenied(t *testing.T, what string, err error, rule string) {
	t.Helper()
	if _, _, r := reasonOf(err); status.Code(err) != codes.PermissionDenied || r != rule {
		t.Errorf("%s: %v, want PermissionDenied naming %s", what, err, rule)
	}
}

// A project administrator may issue enrolment codes only for users whose
// every role is on a project it administers, never for a server
// administrator, and adding an existing user from elsewhere does not make
// them a member: it cannot become anyone.
func TestProjectAdminCannotBecomeAnyone(t *testing.T) {
	c := startCluster(t, t.TempDir())
	ctx := context.Background()
	root := c.rawDevice(t, "Rosa root", nil, true)
	ac := pb.NewAdminServiceClient(c.conn(""))
	cp, err := ac.CreateProject(root.ctx(), &pb.CreateProjectRequest{Name: "Quarry Road embankment"})
	if err != nil {
		t.Fatal(err)
	}
	a := cp.GetProjectId() // root is its administrator
	b := c.newProject("Heron Slough levee")
	adam := c.rawDevice(t, "Adam admin", map[string]server.Role{a: server.Admin}, false)
	bea := c.rawDevice(t, "Bea of B", map[string]server.Role{b: server.Inspector}, false)
	cal := c.rawDevice(t, "Cal of A and B", map[string]server.Role{a: server.Inspector, b: server.Inspector}, false)
	dee := c.rawDevice(t, "Dee of A", map[string]server.Role{a: server.Inspector}, false)

	t.Run("code for a server administrator", func(t *testing.T) {
		// root holds the admin role on A, which adam administers too.
		_, err := ac.IssueEnrollmentCode(adam.ctx(), &pb.IssueEnrollmentCodeRequest{UserId: root.user})
		wantDenied(t, "project admin issues a code for the server administrator", err, "user_admin")
	})
	t.Run("code for a user with a role elsewhere", func(t *testing.T) {
		_, err := ac.IssueEnrollmentCode(adam.ctx(), &pb.IssueEnrollmentCodeRequest{UserId: cal.user})
		wantDenied(t, "project admin issues a code for a member of A and B", err, "user_admin")
	})
	t.Run("code for a user of another project", func(t *testing.T) {
		_, err := ac.IssueEnrollmentCode(adam.ctx(), &pb.IssueEnrollmentCodeRequest{UserId: bea.user})
		wantDenied(t, "project admin issues a code for a member of B only", err, "user_admin")
	})
	t.Run("code for a member of its own project only", func(t *testing.T) {
		if _, err := ac.IssueEnrollmentCode(adam.ctx(), &pb.IssueEnrollmentCodeRequest{UserId: dee.user}); err != nil {
			t.Errorf("project admin issues a code for a member of A only: %v", err)
		}
	})
	t.Run("server administrator issues any code", func(t *testing.T) {
		for _, u := range []string{root.user, cal.user, bea.user, adam.user} {
			if _, err := ac.IssueEnrollmentCode(root.ctx(), &pb.IssueEnrollmentCodeRequest{UserId: u}); err != nil {
				t.Errorf("server administrator issues a code for %s: %v", u, err)
			}
		}
	})
	t.Run("adding a user of another project is an invitation", func(t *testing.T) {
		resp, err := ac.AddMember(adam.ctx(), &pb.AddMemberRequest{ProjectId: a, UserId: bea.user, Role: pb.Role_ROLE_ADMIN})
		if err != nil {
			t.Fatalf("invite bea: %v", err)
		}
		if r, _ := c.store.Role(ctx, a, bea.user); r != "" {
			t.Errorf("bea holds the role %q on A before accepting", r)
		}
		if resp.GetInvitationId() == "" {
			t.Error("no invitation id returned for an existing user of another project")
		}
		// Still no code: bea's only role is on B.
		_, err = ac.IssueEnrollmentCode(adam.ctx(), &pb.IssueEnrollmentCodeRequest{UserId: bea.user})
		wantDenied(t, "code for an invited user", err, "user_admin")
		// And adam cannot write into B under any identity it holds.
		_, err = adam.push(t, c, b, adam.sign(t, b, &ledger.HaulRecorded{ID: newV7(), BorrowSourceID: newV7(), Loads: 1, LooseVolumePerLoad: 10}))
		wantDenied(t, "adam pushes to B", err, "member_of_project")
	})
	t.Run("adding the server administrator is an invitation", func(t *testing.T) {
		if _, err := ac.AddMember(adam.ctx(), &pb.AddMemberRequest{ProjectId: a, UserId: root.user, Role: pb.Role_ROLE_INSPECTOR}); err != nil {
			t.Fatal(err)
		}
		if r, _ := c.store.Role(ctx, a, root.user); r != server.Admin {
			t.Errorf("root's role on A is %q after a project admin's add, want admin until root accepts", r)
		}
	})
	t.Run("a new user is added at once", func(t *testing.T) {
		resp, err := ac.AddMember(adam.ctx(), &pb.AddMemberRequest{ProjectId: a, UserName: "Fay new", Role: pb.Role_ROLE_OFFICE})
		if err != nil {
			t.Fatal(err)
		}
		if r, _ := c.store.Role(ctx, a, resp.GetUserId()); r != server.Office || resp.GetInvitationId() != "" {
			t.Errorf("new user's role %q, invitation %q; want office at once", r, resp.GetInvitationId())
		}
		if _, err := ac.IssueEnrollmentCode(adam.ctx(), &pb.IssueEnrollmentCodeRequest{UserId: resp.GetUserId()}); err != nil {
			t.Errorf("code for the new user: %v", err)
		}
	})
	t.Run("a member's role changes at once", func(t *testing.T) {
		resp, err := ac.AddMember(adam.ctx(), &pb.AddMemberRequest{ProjectId: a, UserId: cal.user, Role: pb.Role_ROLE_QA})
		if err != nil {
			t.Fatal(err)
		}
		if r, _ := c.store.Role(ctx, a, cal.user); r != server.QA || resp.GetInvitationId() != "" {
			t.Errorf("cal's role on A %q, invitation %q; want qa at once", r, resp.GetInvitationId())
		}
		if r, _ := c.store.Role(ctx, b, cal.user); r != server.Inspector {
			t.Errorf("cal's role on B changed to %q", r)
		}
	})
	t.Run("a server administrator adds an existing user at once", func(t *testing.T) {
		resp, err := ac.AddMember(root.ctx(), &pb.AddMemberRequest{ProjectId: a, UserId: bea.user, Role: pb.Role_ROLE_INSPECTOR})
		if err != nil {
			t.Fatal(err)
		}
		if r, _ := c.store.Role(ctx, a, bea.user); r != server.Inspector || resp.GetInvitationId() != "" {
			t.Errorf("bea's role on A %q, invitation %q; want inspector at once", r, resp.GetInvitationId())
		}
	})
}

// An enrolment code lasts the valid_seconds asked, within bounds; out of
// bounds is refused naming the field.
func TestEnrolmentCodeLifetime(t *testing.T) {
	now := time.Date(2026, 10, 5, 7, 0, 0, 0, time.UTC)
	clock := func() time.Time { return now }
	c := &cluster{tb: t, dir: t.TempDir(), now: clock}
	c.start("")
	root := c.rawDevice(t, "Rosa root", nil, true)
	user, err := c.srv.AddUser(context.Background(), "Gus", false)
	if err != nil {
		t.Fatal(err)
	}
	ac := pb.NewAdminServiceClient(c.conn(""))
	for _, tc := range []struct {
		seconds int64
		want    time.Duration
	}{
		{0, 24 * time.Hour},
		{1, time.Second},
		{600, 10 * time.Minute},
		{7 * 24 * 3600, 7 * 24 * time.Hour},
	} {
		r, err := ac.IssueEnrollmentCode(root.ctx(), &pb.IssueEnrollmentCodeRequest{UserId: user, ValidSeconds: tc.seconds})
		if err != nil {
			t.Fatalf("valid_seconds %d: %v", tc.seconds, err)
		}
		if got := time.UnixMicro(r.GetExpiresMicros()).Sub(now); got != tc.want {
			t.Errorf("valid_seconds %d: the code lasts %v, want %v", tc.seconds, got, tc.want)
		}
	}
	for _, bad := range []int64{-1, 7*24*3600 + 1, 1 << 40} {
		_, err := ac.IssueEnrollmentCode(root.ctx(), &pb.IssueEnrollmentCodeRequest{UserId: user, ValidSeconds: bad})
		if _, field, _ := reasonOf(err); status.Code(err) != codes.InvalidArgument || field != "valid_seconds" {
			t.Errorf("valid_seconds %d: %v, want InvalidArgument naming valid_seconds", bad, err)
		}
	}
	// A code asked for 60 seconds no longer enrols 61 seconds later.
	r, err := ac.IssueEnrollmentCode(root.ctx(), &pb.IssueEnrollmentCodeRequest{UserId: user, ValidSeconds: 60})
	if err != nil {
		t.Fatal(err)
	}
	now = now.Add(61 * time.Second)
	pub, _, _ := ed25519.GenerateKey(nil)
	_, err = ac.EnrollDevice(context.Background(), &pb.EnrollDeviceRequest{Code: r.GetCode(), DeviceId: newV7(), PublicKey: pub})
	if reason, _, _ := reasonOf(err); status.Code(err) != codes.Unauthenticated || reason != "CODE_INVALID" {
		t.Errorf("enrol with a 60-second code after 61 seconds: %v, want Unauthenticated (expired)", err)
	}
}

// No one decides on their own test, by any entry kind: a member promoted
// to QA neither reviews nor accepts an exception on a test they recorded.
func TestNoDecisionOnOwnTest(t *testing.T) {
	c := startCluster(t, t.TempDir())
	a := c.newProject("Quarry Road embankment")
	ctx := context.Background()
	kim := c.rawDevice(t, "Kim", map[string]server.Role{a: server.Inspector}, false)
	qa := c.rawDevice(t, "Quinn", map[string]server.Role{a: server.QA}, false)
	rec := kim.sign(t, a, &ledger.TestRecorded{TestID: newV7(), Content: ledger.TestContent{Readings: sandCone(90, 12)}})
	if o := kim.first(t, c, a, rec); o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
		t.Fatal(o)
	}
	test := rec.Event.Kind.(*ledger.TestRecorded).TestID
	if err := c.srv.AddMember(ctx, a, kim.user, server.QA); err != nil {
		t.Fatal(err)
	}
	for _, k := range []ledger.Kind{
		&ledger.ExceptionAccepted{TestID: test, Revision: rec.Event.ID, Reason: "within the engineer's tolerance"},
		&ledger.TestReviewed{TestID: test, Revision: rec.Event.ID, Decision: ledger.Approve},
	} {
		o := kim.first(t, c, a, kim.sign(t, a, k))
		if o.GetReason() != pb.RejectReason_REJECT_REASON_PERMISSION_DENIED || o.GetRule() != "no_self_review" {
			t.Errorf("%s by the test's own author: %v %v rule %q, want permission denied (no_self_review)", k.KindName(), o.GetStatus(), o.GetReason(), o.GetRule())
		}
		if o := qa.first(t, c, a, qa.sign(t, a, k)); o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
			t.Errorf("%s by another QA member: %v %s", k.KindName(), o.GetStatus(), o.GetMessage())
		}
	}
}

// An invited user sees the invitation on their own device and becomes a
// member only by accepting it; nobody else may accept or decline it for
// them, and a declined invitation leaves no role.
func TestInvitationAccepted(t *testing.T) {
	c := startCluster(t, t.TempDir())
	ctx := context.Background()
	a := c.newProject("Quarry Road embankment")
	b := c.newProject("Heron Slough levee")
	ac := pb.NewAdminServiceClient(c.conn(""))
	adam := c.rawDevice(t, "Adam admin", map[string]server.Role{a: server.Admin}, false)
	bea := c.rawDevice(t, "Bea of B", map[string]server.Role{b: server.Inspector}, false)
	eve := c.rawDevice(t, "Eve of B", map[string]server.Role{b: server.Office}, false)
	root := c.rawDevice(t, "Rosa root", nil, true)

	resp, err := ac.AddMember(adam.ctx(), &pb.AddMemberRequest{ProjectId: a, UserId: bea.user, Role: pb.Role_ROLE_INSPECTOR})
	if err != nil || resp.GetInvitationId() == "" {
		t.Fatalf("invite bea: %v, %v", resp, err)
	}
	inv := resp.GetInvitationId()
	list, err := ac.ListInvitations(bea.ctx(), &pb.ListInvitationsRequest{})
	if err != nil {
		t.Fatal(err)
	}
	if got := list.GetInvitations(); len(got) != 1 || got[0].GetInvitationId() != inv || got[0].GetProjectId() != a ||
		got[0].GetProjectName() != "Quarry Road embankment" || got[0].GetRole() != pb.Role_ROLE_INSPECTOR ||
		got[0].GetInvitedBy() != adam.user || got[0].GetInvitedByName() != "Adam admin" {
		t.Errorf("bea's invitations: %v", got)
	}
	if list, _ := ac.ListInvitations(eve.ctx(), &pb.ListInvitationsRequest{}); len(list.GetInvitations()) != 0 {
		t.Errorf("eve sees invitations not hers: %v", list.GetInvitations())
	}
	// Before accepting, bea may not write to A.
	_, err = bea.push(t, c, a, bea.tests(t, a, 1)...)
	wantDenied(t, "bea pushes to A before accepting", err, "member_of_project")
	for who, d := range map[string]*rawDevice{"the inviter": adam, "another user": eve, "a server administrator": root} {
		_, err := ac.AcceptInvitation(d.ctx(), &pb.AcceptInvitationRequest{InvitationId: inv})
		wantDenied(t, "accepting bea's invitation as "+who, err, "own_user")
		_, err = ac.DeclineInvitation(d.ctx(), &pb.DeclineInvitationRequest{InvitationId: inv})
		wantDenied(t, "declining bea's invitation as "+who, err, "own_user")
	}
	acc, err := ac.AcceptInvitation(bea.ctx(), &pb.AcceptInvitationRequest{InvitationId: inv})
	if err != nil || acc.GetProjectId() != a || acc.GetRole() != pb.Role_ROLE_INSPECTOR {
		t.Fatalf("bea accepts: %v, %v", acc, err)
	}
	if r, _ := c.store.Role(ctx, a, bea.user); r != server.Inspector {
		t.Errorf("bea's role on A after accepting: %q", r)
	}
	if o := bea.first(t, c, a, bea.tests(t, a, 1)...); o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
		t.Errorf("bea's test on A after accepting: %v", o)
	}
	if _, err := ac.AcceptInvitation(bea.ctx(), &pb.AcceptInvitationRequest{InvitationId: inv}); status.Code(err) != codes.NotFound {
		t.Errorf("accepting twice: %v, want NotFound", err)
	}
	// Still no code for bea from adam: she holds a role on B.
	_, err = ac.IssueEnrollmentCode(adam.ctx(), &pb.IssueEnrollmentCodeRequest{UserId: bea.user})
	wantDenied(t, "code for bea after she joined A", err, "user_admin")

	resp, err = ac.AddMember(adam.ctx(), &pb.AddMemberRequest{ProjectId: a, UserId: eve.user, Role: pb.Role_ROLE_OFFICE})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := ac.DeclineInvitation(eve.ctx(), &pb.DeclineInvitationRequest{InvitationId: resp.GetInvitationId()}); err != nil {
		t.Fatal(err)
	}
	if r, _ := c.store.Role(ctx, a, eve.user); r != "" {
		t.Errorf("eve holds %q on A after declining", r)
	}
	if _, err := ac.AcceptInvitation(eve.ctx(), &pb.AcceptInvitationRequest{InvitationId: resp.GetInvitationId()}); status.Code(err) != codes.NotFound {
		t.Errorf("accepting a declined invitation: %v, want NotFound", err)
	}

	// An invitation whose maker no longer administers the project lapses.
	resp, err = ac.AddMember(adam.ctx(), &pb.AddMemberRequest{ProjectId: a, UserId: eve.user, Role: pb.Role_ROLE_OFFICE})
	if err != nil {
		t.Fatal(err)
	}
	if err := c.srv.AddMember(ctx, a, adam.user, server.Office); err != nil {
		t.Fatal(err)
	}
	if _, err := ac.AcceptInvitation(eve.ctx(), &pb.AcceptInvitationRequest{InvitationId: resp.GetInvitationId()}); status.Code(err) != codes.FailedPrecondition {
		t.Errorf("accepting the invitation of a former administrator: %v, want FailedPrecondition", err)
	}
	if r, _ := c.store.Role(ctx, a, eve.user); r != "" {
		t.Errorf("eve holds %q on A", r)
	}
}

// A code a project administrator issued while the user's roles lay within
// its projects lapses when the user joins another project: it must not
// reach the new one.
func TestCodeLapsesWhenUserJoinsAnotherProject(t *testing.T) {
	c := startCluster(t, t.TempDir())
	a := c.newProject("Quarry Road embankment")
	b := c.newProject("Heron Slough levee")
	ac := pb.NewAdminServiceClient(c.conn(""))
	adam := c.rawDevice(t, "Adam admin", map[string]server.Role{a: server.Admin}, false)
	otto := c.rawDevice(t, "Otto admin", map[string]server.Role{b: server.Admin}, false)
	dee := c.rawDevice(t, "Dee of A", map[string]server.Role{a: server.Inspector}, false)
	code, err := ac.IssueEnrollmentCode(adam.ctx(), &pb.IssueEnrollmentCodeRequest{UserId: dee.user})
	if err != nil {
		t.Fatal(err)
	}
	resp, err := ac.AddMember(otto.ctx(), &pb.AddMemberRequest{ProjectId: b, UserId: dee.user, Role: pb.Role_ROLE_INSPECTOR})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := ac.AcceptInvitation(dee.ctx(), &pb.AcceptInvitationRequest{InvitationId: resp.GetInvitationId()}); err != nil {
		t.Fatal(err)
	}
	pub, _, _ := ed25519.GenerateKey(nil)
	_, err = ac.EnrollDevice(context.Background(), &pb.EnrollDeviceRequest{Code: code.GetCode(), DeviceId: newV7(), PublicKey: pub})
	if status.Code(err) != codes.Unauthenticated {
		t.Errorf("enrol with adam's code for dee after she joined B: %v, want Unauthenticated", err)
	}
}
