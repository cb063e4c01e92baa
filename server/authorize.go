package server

import (
	"context"
	"errors"
	"fmt"
	"slices"
	"strings"
	"sync"
	"time"

	"google.golang.org/grpc/codes"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
)

func validRole(r Role) bool { return r == Inspector || r == Office || r == QA || r == Admin }

// entryRoles is the role table: which roles may make each kind of entry,
// by kind name, built from the ledger's kind descriptors (their Roles). It
// is the one place the server's entry rules by role live (rules beyond
// roles are in authorizer.check); the README states it as a table, and a
// test pushes every (role, kind) cell through a server. A kind with no
// roles is made by the server itself and is never accepted from a member's
// device.
var entryRoles = func() map[string][]Role {
	m := map[string][]Role{}
	for _, d := range ledger.Kinds() {
		roles := []Role{}
		for _, r := range d.Roles {
			if !validRole(Role(r)) {
				panic(fmt.Sprintf("server: the ledger gives kind %s the unknown role %q", d.Name, r))
			}
			roles = append(roles, Role(r))
		}
		m[d.Name] = roles
	}
	return m
}()

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

// deviceUser returns the user a device is enrolled for: from the device
// table, or from a device_enrolled entry earlier in the batch (a device
// relaying, to a server restored from an older copy, the introduction and
// the entries of a device it lost). It returns "" with a nil error for a
// device neither knows. A device the table says is revoked, of which the
// project's ledger holds no revocation, counts as unknown here: its
// entries are refused rather than let into a project its revocation never
// reached.
func (a *authorizer) deviceUser(device string) (string, error) {
	if u, ok := a.users[device]; ok {
		return u, nil
	}
	d, err := a.s.opts.Store.Device(a.ctx, device)
	if errors.Is(err, ErrNoDevice) {
		return "", nil
	}
	if err != nil {
		return "", err
	}
	if dv, ok := a.view.Device(device); d.Revoked && (!ok || dv.Revoked == nil) {
		return "", nil
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
	if user == "" {
		return denied("enrolled_device", fmt.Sprintf("device %s is not enrolled on this server, or was revoked", e.Device)), nil
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
		allowed := "none: the server itself makes it"
		if len(entryRoles[kind]) > 0 {
			var names []string
			for _, r := range entryRoles[kind] {
				names = append(names, string(r))
			}
			allowed = strings.Join(names, ", ")
		}
		return denied("role_may_make_entry", fmt.Sprintf("a member with the role %s may not make a %s entry (allowed: %s)", role, kind, allowed)), nil
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
		return a.notOwnTest(e.Author, k.TestID, "review it")
	case *ledger.ExceptionAccepted:
		return a.notOwnTest(e.Author, k.TestID, "accept an exception on it")
	}
	return nil, nil
}

// notOwnTest refuses a decision on a test (a review, an accepted exception)
// by the member who recorded it: no one decides on their own test,
// whatever their role.
func (a *authorizer) notOwnTest(author, test, decision string) (*ledger.Rejection, error) {
	if recorder, ok := a.testAuthor(test); ok && recorder == author {
		return denied("no_self_review", fmt.Sprintf("%s recorded test %s and may not %s", author, test, decision)), nil
	}
	return nil, nil
}

// requireMember fails unless the calling device's user may use the project.
func (s *Server) requireMember(ctx context.Context, project string) (Device, error) {
	d, ok := deviceFrom(ctx)
	if !ok {
		return d, statusError(codes.Unauthenticated, reasonTokenRequired, "authorization", "", "a bearer token is required")
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
		return d, statusError(codes.PermissionDenied, reasonNotAMember, "", "member_of_project", fmt.Sprintf("%s is not a member of project %s", d.UserID, project))
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
	d, ok := deviceFrom(ctx)
	if !ok {
		return d, User{}, statusError(codes.Unauthenticated, reasonTokenRequired, "authorization", "", "a bearer token is required")
	}
	u, err := a.s.opts.Store.User(ctx, d.UserID)
	if err != nil {
		return d, u, a.s.internal(ctx, "user", err)
	}
	return d, u, nil
}

// access is who may make an administration call.
type access int

// The kinds of access of the administration calls.
const (
	// serverAdmins: server administrators only.
	serverAdmins access = iota + 1
	// projectAdmins: a server administrator, or an administrator of the
	// request's project.
	projectAdmins
	// projectMembers: a server administrator, or a member of the request's
	// project in any role.
	projectMembers
	// userAdmins: a server administrator, or an administrator of every
	// project on which the request's user holds a role (the user holds at
	// least one, and is not a server administrator).
	userAdmins
	// ownOrServerAdmin: the user the request concerns, or a server
	// administrator.
	ownOrServerAdmin
	// own: the user the request concerns, from any of their devices.
	own
	// codeHolders: whoever holds a valid one-time code; no token is needed.
	codeHolders
	// certificateHolders: a device proving its enrolment with the
	// certificate the server gave it and its key; no token is needed.
	certificateHolders
)

// adminCall is the rule of one administration call.
type adminCall struct {
	access access
	action string // what the call does, as refusals say it: "create projects"
}

// adminCalls is the table of who may make each administration call. The
// handlers consult it through allow; the README states it, and a test
// makes every call as every kind of caller.
var adminCalls = map[string]adminCall{
	pb.AdminService_CreateProject_FullMethodName:       {serverAdmins, "create projects"},
	pb.AdminService_AddMember_FullMethodName:           {projectAdmins, "add members"},
	pb.AdminService_ListMembers_FullMethodName:         {projectMembers, "list its members"},
	pb.AdminService_IssueEnrollmentCode_FullMethodName: {userAdmins, "issue enrolment codes"},
	pb.AdminService_EnrollDevice_FullMethodName:        {codeHolders, "enrol devices"},
	pb.AdminService_ResumeDevice_FullMethodName:        {certificateHolders, "resume devices"},
	pb.AdminService_RevokeDevice_FullMethodName:        {ownOrServerAdmin, "revoke devices"},
	pb.AdminService_ListDevices_FullMethodName:         {ownOrServerAdmin, "list devices"},
	pb.AdminService_ListInvitations_FullMethodName:     {own, "list invitations"},
	pb.AdminService_AcceptInvitation_FullMethodName:    {own, "accept invitations"},
	pb.AdminService_DeclineInvitation_FullMethodName:   {own, "decline invitations"},
}

// target is what an administration call concerns.
type target struct {
	project string // for projectAdmins and projectMembers
	user    string // for userAdmins, ownOrServerAdmin and own
}

// allow returns the calling user when the table of administration calls
// lets them make method on t, and otherwise a PermissionDenied status
// naming the rule (Unauthenticated without a token).
func (a *adminService) allow(ctx context.Context, method string, t target) (User, error) {
	call, ok := adminCalls[method]
	if !ok {
		return User{}, statusError(codes.PermissionDenied, reasonPermissionDenied, "", "admin_call",
			fmt.Sprintf("%s has no rule in the table of administration calls; nobody may make it", method))
	}
	if call.access == codeHolders || call.access == certificateHolders {
		return User{}, nil
	}
	_, u, err := a.caller(ctx)
	if err != nil {
		return u, err
	}
	switch call.access {
	case serverAdmins:
		if u.ServerAdmin {
			return u, nil
		}
		return u, statusError(codes.PermissionDenied, reasonPermissionDenied, "", "server_admin", "only a server administrator may "+call.action)
	case projectAdmins, projectMembers:
		if u.ServerAdmin {
			return u, nil
		}
		r, err := a.s.opts.Store.Role(ctx, t.project, u.ID)
		if err != nil {
			return u, a.s.internal(ctx, "role", err)
		}
		switch {
		case r == Admin, r != "" && call.access == projectMembers:
			return u, nil
		case call.access == projectMembers:
			return u, statusError(codes.PermissionDenied, reasonNotAMember, "", "member_of_project", fmt.Sprintf("%s is not a member of project %s", u.ID, t.project))
		}
		return u, statusError(codes.PermissionDenied, reasonPermissionDenied, "", "project_admin",
			fmt.Sprintf("only a server administrator or an administrator of project %s may %s", t.project, call.action))
	case userAdmins:
		why, err := a.s.actsFor(ctx, u, t.user)
		if err != nil {
			return u, a.s.internal(ctx, "roles", err)
		}
		if why != "" {
			return u, statusError(codes.PermissionDenied, reasonPermissionDenied, "", "user_admin",
				fmt.Sprintf("only a server administrator, or an administrator of every project on which a user holds a role, may %s for them: %s", call.action, why))
		}
		return u, nil
	case ownOrServerAdmin:
		if u.ServerAdmin || t.user == u.ID {
			return u, nil
		}
		return u, statusError(codes.PermissionDenied, reasonPermissionDenied, "", "own_user", "only a server administrator or the user concerned may "+call.action)
	case own:
		if t.user == u.ID {
			return u, nil
		}
		return u, statusError(codes.PermissionDenied, reasonPermissionDenied, "", "own_user", "only the user concerned may "+call.action)
	}
	return u, statusError(codes.PermissionDenied, reasonPermissionDenied, "", "admin_call", method+" has an unknown rule; nobody may make it")
}

// actsFor returns why caller may not act for user (issue their enrolment
// codes, or make them a member without their consent), or "" when it may.
// A server administrator may act for anyone. Anyone else may act only for a
// user who is not a server administrator and whose every role, of at least
// one, is on a project caller administers: an enrolment code lets its
// holder act as the user everywhere the user has a role.
func (s *Server) actsFor(ctx context.Context, caller User, user string) (string, error) {
	if caller.ServerAdmin {
		return "", nil
	}
	u, err := s.opts.Store.User(ctx, user)
	if errors.Is(err, ErrNoUser) {
		return fmt.Sprintf("%s holds no role on any project", user), nil
	}
	if err != nil {
		return "", err
	}
	if u.ServerAdmin {
		return fmt.Sprintf("%s is a server administrator", user), nil
	}
	projects, err := s.opts.Store.ProjectsOf(ctx, user)
	if err != nil {
		return "", err
	}
	if len(projects) == 0 {
		return fmt.Sprintf("%s holds no role on any project", user), nil
	}
	for _, p := range projects {
		r, err := s.opts.Store.Role(ctx, p, caller.ID)
		if err != nil {
			return "", err
		}
		if r != Admin {
			return fmt.Sprintf("%s holds a role on a project you do not administer", user), nil
		}
	}
	return "", nil
}

func (a *adminService) CreateProject(ctx context.Context, req *pb.CreateProjectRequest) (*pb.CreateProjectResponse, error) {
	if err := checkName("name", req.GetName()); err != nil {
		return nil, err
	}
	u, err := a.allow(ctx, pb.AdminService_CreateProject_FullMethodName, target{})
	if err != nil {
		return nil, err
	}
	if strings.TrimSpace(req.GetName()) == "" {
		return nil, statusError(codes.InvalidArgument, reasonInvalidArgument, "name", "", "is required")
	}
	id, err := a.s.CreateProject(ctx, req.GetName())
	if err != nil {
		return nil, a.s.internal(ctx, "create project", err)
	}
	if err := a.s.AddMember(ctx, id, u.ID, Admin); err != nil {
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

// AddMember gives a user a role on a project. A new user (by name) is added
// at once. An existing user is added at once by a server administrator, or
// when the caller may act for them (see actsFor), or to change the role of
// a member of the project who is not a server administrator; anyone else is
// invited, and becomes a member only by accepting.
func (a *adminService) AddMember(ctx context.Context, req *pb.AddMemberRequest) (*pb.AddMemberResponse, error) {
	if err := checkName("user_name", req.GetUserName()); err != nil {
		return nil, err
	}
	u, err := a.allow(ctx, pb.AdminService_AddMember_FullMethodName, target{project: req.GetProjectId()})
	if err != nil {
		return nil, err
	}
	role, ok := rolesFromProto[req.GetRole()]
	if !ok {
		return nil, statusError(codes.InvalidArgument, reasonInvalidArgument, "role", "", "must be inspector, office, qa or admin")
	}
	project := req.GetProjectId()
	if _, err := a.s.opts.Store.Head(ctx, project); err != nil {
		return nil, projectErr(a.s, ctx, project, err)
	}
	user := req.GetUserId()
	switch {
	case user == "" && strings.TrimSpace(req.GetUserName()) == "":
		return nil, statusError(codes.InvalidArgument, reasonInvalidArgument, "user_id", "", "give a user id, or a user_name for a new user")
	case user == "":
		id, err := a.s.AddUser(ctx, req.GetUserName(), false)
		if err != nil {
			return nil, a.s.internal(ctx, "add user", err)
		}
		if err := a.s.AddMember(ctx, project, id, role); err != nil {
			return nil, a.s.internal(ctx, "add member", err)
		}
		return &pb.AddMemberResponse{UserId: id}, nil
	}
	existing, err := a.s.opts.Store.User(ctx, user)
	if errors.Is(err, ErrNoUser) {
		return nil, statusError(codes.NotFound, reasonNoUser, "user_id", "", "no user "+user)
	}
	if err != nil {
		return nil, a.s.internal(ctx, "user", err)
	}
	prev, err := a.s.opts.Store.Role(ctx, project, user)
	if err != nil {
		return nil, a.s.internal(ctx, "role", err)
	}
	direct := u.ServerAdmin || (prev != "" && !existing.ServerAdmin)
	if !direct {
		why, err := a.s.actsFor(ctx, u, user)
		if err != nil {
			return nil, a.s.internal(ctx, "roles", err)
		}
		direct = why == ""
	}
	if !direct {
		id, err := a.s.opts.Store.Invite(ctx, Invitation{ID: a.s.newID(), Project: project, User: user, Role: role, InvitedBy: u.ID, Created: a.s.opts.Now()})
		if err != nil {
			return nil, a.s.internal(ctx, "invite", err)
		}
		a.s.log.InfoContext(ctx, "user invited", "project", project, "user", user, "role", role, "by", u.ID)
		return &pb.AddMemberResponse{UserId: user, InvitationId: id}, nil
	}
	if err := a.s.AddMember(ctx, project, user, role); err != nil {
		return nil, a.s.internal(ctx, "add member", err)
	}
	if prev == "" {
		if err := a.s.joined(ctx, user); err != nil {
			return nil, err
		}
	}
	return &pb.AddMemberResponse{UserId: user}, nil
}

// joined voids the unused enrolment codes of a user who has just gained a
// role on another project: a code issued while the user's roles lay within
// its issuer's projects must not reach the new one.
func (s *Server) joined(ctx context.Context, user string) error {
	if err := s.opts.Store.DropEnrollmentCodes(ctx, user); err != nil {
		return s.internal(ctx, "void enrolment codes", err)
	}
	return nil
}

func (a *adminService) ListMembers(ctx context.Context, req *pb.ListMembersRequest) (*pb.ListMembersResponse, error) {
	if _, err := a.allow(ctx, pb.AdminService_ListMembers_FullMethodName, target{project: req.GetProjectId()}); err != nil {
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

// MaxCodeLifetime is the longest an enrolment code may be asked to last.
const MaxCodeLifetime = 7 * 24 * time.Hour

// codeLifetime returns how long a code asked for seconds lasts: def for 0,
// and an InvalidArgument status outside 1 s to MaxCodeLifetime.
func codeLifetime(seconds int64, def time.Duration) (time.Duration, error) {
	most := int64(MaxCodeLifetime / time.Second)
	switch {
	case seconds == 0:
		return def, nil
	case seconds < 0 || seconds > most:
		return 0, statusError(codes.InvalidArgument, reasonInvalidArgument, "valid_seconds", "",
			fmt.Sprintf("must be from 1 to %d (7 days), or 0 for the server's default; got %d", most, seconds))
	}
	return time.Duration(seconds) * time.Second, nil
}

func (a *adminService) IssueEnrollmentCode(ctx context.Context, req *pb.IssueEnrollmentCodeRequest) (*pb.IssueEnrollmentCodeResponse, error) {
	if _, err := a.allow(ctx, pb.AdminService_IssueEnrollmentCode_FullMethodName, target{user: req.GetUserId()}); err != nil {
		return nil, err
	}
	life, err := codeLifetime(req.GetValidSeconds(), a.s.opts.CodeLifetime)
	if err != nil {
		return nil, err
	}
	if _, err := a.s.opts.Store.User(ctx, req.GetUserId()); err != nil {
		return nil, statusError(codes.NotFound, reasonNoUser, "user_id", "", "no user "+req.GetUserId())
	}
	code, exp, err := a.s.issueCode(ctx, req.GetUserId(), life)
	if err != nil {
		return nil, a.s.internal(ctx, "issue code", err)
	}
	return &pb.IssueEnrollmentCodeResponse{Code: code, ExpiresMicros: exp.UnixMicro()}, nil
}

func (a *adminService) RevokeDevice(ctx context.Context, req *pb.RevokeDeviceRequest) (*pb.RevokeDeviceResponse, error) {
	if _, _, err := a.caller(ctx); err != nil {
		return nil, err
	}
	d, err := a.s.opts.Store.Device(ctx, req.GetDeviceId())
	if errors.Is(err, ErrNoDevice) || a.s.isOwnDevice(req.GetDeviceId()) {
		return nil, statusError(codes.NotFound, reasonNoDevice, "device_id", "", "no device "+req.GetDeviceId())
	}
	if err != nil {
		return nil, a.s.internal(ctx, "revoke", err)
	}
	u, err := a.allow(ctx, pb.AdminService_RevokeDevice_FullMethodName, target{user: d.UserID})
	if err != nil {
		return nil, err
	}
	now := a.s.opts.Now()
	if err := a.s.opts.Store.Revoke(ctx, d.ID, now); err != nil {
		return nil, a.s.internal(ctx, "revoke", err)
	}
	if err := a.s.revokeEverywhere(ctx, d, u.ID, req.GetReason(), now); err != nil {
		return nil, a.s.internal(ctx, "revoke", err)
	}
	a.s.log.WarnContext(ctx, "device revoked", "device", d.ID, "by", u.ID, "reason", req.GetReason())
	return &pb.RevokeDeviceResponse{RevokedMicros: now.UnixMicro()}, nil
}

func (a *adminService) ListDevices(ctx context.Context, req *pb.ListDevicesRequest) (*pb.ListDevicesResponse, error) {
	if _, err := a.allow(ctx, pb.AdminService_ListDevices_FullMethodName, target{user: req.GetUserId()}); err != nil {
		return nil, err
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
