package server

import (
	"context"
	"fmt"
	"slices"
	"strings"
	"sync"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
)

func validRole(r Role) bool { return r == Inspector || r == Office || r == QA || r == Admin }

// entryRoles says which roles may make each kind of entry.
var entryRoles = map[string][]Role{
	"project_set_up":          {Admin},
	"spec_defined":            {QA},
	"reference_added":         {QA},
	"borrow_source_measured":  {QA},
	"moisture_correction_set": {QA},
	"equipment_registered":    {Office, QA},
	"standard_count_recorded": {Inspector, Office, QA},
	"lift_placement_recorded": {Office},
	"haul_recorded":           {Office},
	"test_recorded":           {Inspector},
	"test_corrected":          {Inspector},
	"test_voided":             {Inspector},
	"test_reviewed":           {Office, QA},
	"exception_accepted":      {QA},
}

// EntryRoles returns the roles that may make an entry of kind.
func EntryRoles(kind string) []Role { return slices.Clone(entryRoles[kind]) }

func denied(rule, detail string) *ledger.Rejection {
	return &ledger.Rejection{Reason: ledger.PermissionDenied, Field: rule, Detail: detail}
}

// authorizer checks pushed events, caching roles and devices for one push.
type authorizer struct {
	s       *Server
	ctx     context.Context
	project string
	view    *ledger.Projection
	roles   map[string]Role
	users   map[string]string // device id -> enrolled user
	authors map[string]string // test id -> author, for tests recorded earlier in the batch
}

func (s *Server) authorizer(ctx context.Context, project string, view *ledger.Projection) *authorizer {
	return &authorizer{s: s, ctx: ctx, project: project, view: view, roles: map[string]Role{}, users: map[string]string{}, authors: map[string]string{}}
}

func (a *authorizer) role(user string) (Role, error) {
	if r, ok := a.roles[user]; ok {
		return r, nil
	}
	r, err := a.s.opts.Store.Role(a.ctx, a.project, user)
	if err != nil {
		return "", err
	}
	a.roles[user] = r
	return r, nil
}

func (a *authorizer) deviceUser(device string) (string, error) {
	if u, ok := a.users[device]; ok {
		return u, nil
	}
	d, err := a.s.opts.Store.Device(a.ctx, device)
	if err != nil {
		return "", err
	}
	a.users[device] = d.UserID
	return d.UserID, nil
}

func (a *authorizer) testAuthor(id string) (string, bool) {
	if u, ok := a.authors[id]; ok {
		return u, true
	}
	if t, ok := a.view.Test(id); ok {
		return t.Author, true
	}
	return "", false
}

// check returns a PermissionDenied rejection naming the rule e breaks, or
// nil. Errors of the store are returned as err.
func (a *authorizer) check(e ledger.Event) (*ledger.Rejection, error) {
	user, err := a.deviceUser(e.Device)
	if err != nil {
		return nil, err
	}
	if user != e.Author {
		return denied("author_is_device_user", fmt.Sprintf("the entry's author %s is not the user device %s is enrolled for", e.Author, e.Device)), nil
	}
	role, err := a.role(e.Author)
	if err != nil {
		return nil, err
	}
	if role == "" {
		return denied("member_of_project", fmt.Sprintf("%s is not a member of project %s", e.Author, a.project)), nil
	}
	kind := e.Kind.KindName()
	if !slices.Contains(entryRoles[kind], role) {
		var names []string
		for _, r := range entryRoles[kind] {
			names = append(names, string(r))
		}
		return denied("role_may_make_entry", fmt.Sprintf("a member with the role %s may not make a %s entry (allowed: %s)", role, kind, strings.Join(names, ", "))), nil
	}
	switch k := e.Kind.(type) {
	case *ledger.TestRecorded:
		a.authors[k.TestID] = e.Author
	case *ledger.TestCorrected:
		if author, ok := a.testAuthor(k.TestID); ok && author != e.Author {
			return denied("own_tests_only", fmt.Sprintf("test %s was recorded by %s; only its author may correct it", k.TestID, author)), nil
		}
	case *ledger.TestVoided:
		if author, ok := a.testAuthor(k.TestID); ok && author != e.Author {
			return denied("own_tests_only", fmt.Sprintf("test %s was recorded by %s; only its author may void it", k.TestID, author)), nil
		}
	case *ledger.TestReviewed:
		if author, ok := a.testAuthor(k.TestID); ok && author == e.Author {
			return denied("no_self_review", fmt.Sprintf("%s recorded test %s and may not review it", e.Author, k.TestID)), nil
		}
	}
	return nil, nil
}

// requireMember fails unless the calling device's user may use the project.
func (s *Server) requireMember(ctx context.Context, project string) (Device, error) {
	d, ok := DeviceFrom(ctx)
	if !ok {
		return d, status.Error(codes.Unauthenticated, "authorization: a bearer token is required")
	}
	u, err := s.opts.Store.User(ctx, d.UserID)
	if err != nil {
		return d, s.internal(ctx, "user", err)
	}
	if u.ServerAdmin {
		return d, nil
	}
	r, err := s.opts.Store.Role(ctx, project, d.UserID)
	if err != nil {
		return d, s.internal(ctx, "role", err)
	}
	if r == "" {
		return d, status.Errorf(codes.PermissionDenied, "member_of_project: %s is not a member of project %s", d.UserID, project)
	}
	return d, nil
}

// limiter is a token bucket per device: rate pushes a second, up to burst.
type limiter struct {
	mu      sync.Mutex
	rate    float64
	burst   float64
	buckets map[string]*bucket
}

type bucket struct {
	tokens float64
	at     time.Time
}

func (l *limiter) allow(device string, now time.Time) bool {
	l.mu.Lock()
	defer l.mu.Unlock()
	b := l.buckets[device]
	if b == nil {
		b = &bucket{tokens: l.burst, at: now}
		l.buckets[device] = b
	}
	b.tokens = min(l.burst, b.tokens+now.Sub(b.at).Seconds()*l.rate)
	b.at = now
	if b.tokens < 1 {
		return false
	}
	b.tokens--
	return true
}

// The administration calls.

func (a *adminService) caller(ctx context.Context) (Device, User, error) {
	d, ok := DeviceFrom(ctx)
	if !ok {
		return d, User{}, status.Error(codes.Unauthenticated, "authorization: a bearer token is required")
	}
	u, err := a.s.opts.Store.User(ctx, d.UserID)
	if err != nil {
		return d, u, a.s.internal(ctx, "user", err)
	}
	return d, u, nil
}

// projectAdmin fails unless the caller is a server administrator or an
// administrator of project.
func (a *adminService) projectAdmin(ctx context.Context, project string) (User, error) {
	_, u, err := a.caller(ctx)
	if err != nil || u.ServerAdmin {
		return u, err
	}
	r, err := a.s.opts.Store.Role(ctx, project, u.ID)
	if err != nil {
		return u, a.s.internal(ctx, "role", err)
	}
	if r != Admin {
		return u, status.Errorf(codes.PermissionDenied, "project_admin: only an administrator of project %s may do this", project)
	}
	return u, nil
}

func (a *adminService) CreateProject(ctx context.Context, req *pb.CreateProjectRequest) (*pb.CreateProjectResponse, error) {
	_, u, err := a.caller(ctx)
	if err != nil {
		return nil, err
	}
	if !u.ServerAdmin {
		return nil, status.Error(codes.PermissionDenied, "server_admin: only a server administrator may create projects")
	}
	if strings.TrimSpace(req.GetName()) == "" {
		return nil, status.Error(codes.InvalidArgument, "name: is required")
	}
	id, err := a.s.CreateProject(ctx, req.GetName())
	if err != nil {
		return nil, a.s.internal(ctx, "create project", err)
	}
	if err := a.s.opts.Store.SetMember(ctx, id, u.ID, Admin); err != nil {
		return nil, a.s.internal(ctx, "create project", err)
	}
	return &pb.CreateProjectResponse{ProjectId: id}, nil
}

var rolesFromProto = map[pb.Role]Role{pb.Role_ROLE_INSPECTOR: Inspector, pb.Role_ROLE_OFFICE: Office, pb.Role_ROLE_QA: QA, pb.Role_ROLE_ADMIN: Admin}

func roleToProto(r Role) pb.Role {
	for p, x := range rolesFromProto {
		if x == r {
			return p
		}
	}
	return pb.Role_ROLE_UNSPECIFIED
}

func (a *adminService) AddMember(ctx context.Context, req *pb.AddMemberRequest) (*pb.AddMemberResponse, error) {
	if _, err := a.projectAdmin(ctx, req.GetProjectId()); err != nil {
		return nil, err
	}
	role, ok := rolesFromProto[req.GetRole()]
	if !ok {
		return nil, status.Error(codes.InvalidArgument, "role: must be inspector, office, qa or admin")
	}
	if _, err := a.s.opts.Store.Head(ctx, req.GetProjectId()); err != nil {
		return nil, projectErr(a.s, ctx, req.GetProjectId(), err)
	}
	user := req.GetUserId()
	switch {
	case user == "" && strings.TrimSpace(req.GetUserName()) == "":
		return nil, status.Error(codes.InvalidArgument, "user_id: give a user id, or a user_name for a new user")
	case user == "":
		id, err := a.s.AddUser(ctx, req.GetUserName(), false)
		if err != nil {
			return nil, a.s.internal(ctx, "add user", err)
		}
		user = id
	default:
		if _, err := a.s.opts.Store.User(ctx, user); err != nil {
			return nil, status.Errorf(codes.NotFound, "user_id: no user %s", user)
		}
	}
	if err := a.s.opts.Store.SetMember(ctx, req.GetProjectId(), user, role); err != nil {
		return nil, a.s.internal(ctx, "add member", err)
	}
	return &pb.AddMemberResponse{UserId: user}, nil
}

func (a *adminService) ListMembers(ctx context.Context, req *pb.ListMembersRequest) (*pb.ListMembersResponse, error) {
	if _, err := a.s.requireMember(ctx, req.GetProjectId()); err != nil {
		return nil, err
	}
	ms, err := a.s.opts.Store.Members(ctx, req.GetProjectId())
	if err != nil {
		return nil, a.s.internal(ctx, "list members", err)
	}
	resp := &pb.ListMembersResponse{}
	for _, m := range ms {
		resp.Members = append(resp.Members, &pb.Member{UserId: m.ID, UserName: m.Name, Role: roleToProto(m.Role)})
	}
	return resp, nil
}

func (a *adminService) IssueEnrollmentCode(ctx context.Context, req *pb.IssueEnrollmentCodeRequest) (*pb.IssueEnrollmentCodeResponse, error) {
	_, u, err := a.caller(ctx)
	if err != nil {
		return nil, err
	}
	if !u.ServerAdmin {
		// A project administrator may issue codes to the members of their projects.
		projects, err := a.s.opts.Store.ProjectsOf(ctx, req.GetUserId())
		if err != nil {
			return nil, a.s.internal(ctx, "issue code", err)
		}
		ok := false
		for _, p := range projects {
			if r, err := a.s.opts.Store.Role(ctx, p, u.ID); err == nil && r == Admin {
				ok = true
			}
		}
		if !ok {
			return nil, status.Error(codes.PermissionDenied, "project_admin: only a server administrator, or an administrator of a project the user is a member of, may issue an enrolment code")
		}
	}
	if _, err := a.s.opts.Store.User(ctx, req.GetUserId()); err != nil {
		return nil, status.Errorf(codes.NotFound, "user_id: no user %s", req.GetUserId())
	}
	code, exp, err := a.s.IssueEnrollmentCode(ctx, req.GetUserId())
	if err != nil {
		return nil, a.s.internal(ctx, "issue code", err)
	}
	return &pb.IssueEnrollmentCodeResponse{Code: code, ExpiresMicros: exp.UnixMicro()}, nil
}

func (a *adminService) RevokeDevice(ctx context.Context, req *pb.RevokeDeviceRequest) (*pb.RevokeDeviceResponse, error) {
	_, u, err := a.caller(ctx)
	if err != nil {
		return nil, err
	}
	d, err := a.s.opts.Store.Device(ctx, req.GetDeviceId())
	if err != nil {
		return nil, status.Errorf(codes.NotFound, "device_id: no device %s", req.GetDeviceId())
	}
	if !u.ServerAdmin && d.UserID != u.ID {
		return nil, status.Error(codes.PermissionDenied, "own_device: only a server administrator or the device's own user may revoke it")
	}
	now := a.s.opts.Now()
	if err := a.s.opts.Store.Revoke(ctx, d.ID, now); err != nil {
		return nil, a.s.internal(ctx, "revoke", err)
	}
	a.s.log.WarnContext(ctx, "device revoked", "device", d.ID, "by", u.ID, "reason", req.GetReason())
	return &pb.RevokeDeviceResponse{RevokedMicros: now.UnixMicro()}, nil
}

func (a *adminService) ListDevices(ctx context.Context, req *pb.ListDevicesRequest) (*pb.ListDevicesResponse, error) {
	_, u, err := a.caller(ctx)
	if err != nil {
		return nil, err
	}
	if !u.ServerAdmin && req.GetUserId() != u.ID {
		return nil, status.Error(codes.PermissionDenied, "own_devices: only a server administrator may list other users' devices")
	}
	ds, err := a.s.opts.Store.Devices(ctx, req.GetUserId())
	if err != nil {
		return nil, a.s.internal(ctx, "list devices", err)
	}
	resp := &pb.ListDevicesResponse{}
	for _, d := range ds {
		resp.Devices = append(resp.Devices, &pb.Device{DeviceId: d.ID, DeviceName: d.Name, UserId: d.UserID, PublicKey: d.PublicKey, Revoked: d.Revoked})
	}
	return resp, nil
}
