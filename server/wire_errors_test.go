package server_test

import (
	"context"
	"errors"
	"io"
	"net"
	"os"
	"path/filepath"
	"slices"
	"sync/atomic"
	"testing"
	"time"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/emptypb"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/server"
)

// These tests make real calls through package client to a real server on
// 127.0.0.1 and check that each of the server's refusals comes back as the
// client's error for it: errors.Is matches its sentinel, and errors.As gives
// the reason, the field and the rule the server sent.

// serverSentinels are client's errors for a server's refusals.
var serverSentinels = []error{client.ErrRevoked, client.ErrUnauthenticated, client.ErrCodeInvalid, client.ErrNotMember,
	client.ErrPermissionDenied, client.ErrInvalidArgument, client.ErrDeviceExists, client.ErrNotFound, client.ErrRateLimited,
	client.ErrBatchTooLarge, client.ErrServerStorage, client.ErrUnavailable, client.ErrServerInternal}

// wantServerError checks that err, from a call made through package client,
// is a *client.ServerError with reason, field and rule, that errors.Is
// matches it to each of targets, and to no other of serverSentinels.
func wantServerError(t *testing.T, call string, err error, reason, field, rule string, targets ...error) {
	t.Helper()
	if err == nil {
		t.Errorf("%s: no error, want %v", call, targets)
		return
	}
	for _, s := range serverSentinels {
		if want := slices.Contains(targets, s); errors.Is(err, s) != want {
			t.Errorf("%s: %v; errors.Is(err, %q) = %v, want %v", call, err, s, !want, want)
		}
	}
	var se *client.ServerError
	if !errors.As(err, &se) {
		t.Errorf("%s: %v (%T) holds no *client.ServerError", call, err, err)
		return
	}
	if se.Reason != reason || se.Field != field || se.Rule != rule {
		t.Errorf("%s: reason %q, field %q, rule %q; want %q, %q, %q", call, se.Reason, se.Field, se.Rule, reason, field, rule)
	}
}

// noSleep is the options of a sync that retries without waiting.
var noSleep = client.SyncOptions{Sleep: func(time.Duration) {}}

// dial returns a connection from client.Dial to addr.
func dial(t *testing.T, addr string) *grpc.ClientConn {
	t.Helper()
	cc, err := client.Dial(addr, client.DialOptions{Plaintext: true})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { cc.Close() })
	return cc
}

// openStore opens a new device store.
func openStore(t *testing.T, path string) *client.Store {
	t.Helper()
	s, err := client.Open(context.Background(), path, client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

// enrolmentCode adds a user (a server administrator when admin) and returns
// a code that enrols a device for them.
func enrolmentCode(t *testing.T, c *cluster, name string, admin bool) string {
	t.Helper()
	ctx := context.Background()
	user, err := c.srv.AddUser(ctx, name, admin)
	if err != nil {
		t.Fatal(err)
	}
	code, _, err := c.srv.IssueEnrollmentCode(ctx, user)
	if err != nil {
		t.Fatal(err)
	}
	return code
}

func TestErrRevokedCrossesTheWire(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Larkspur Bench cut")
	ann := c.device("ann", server.Inspector)
	syncOK(t, ann, c.conn(""), project)
	root := c.rawDevice(t, "root", nil, true)
	if _, err := pb.NewAdminServiceClient(c.conn("")).RevokeDevice(root.ctx(), &pb.RevokeDeviceRequest{DeviceId: ann.DeviceID()}); err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	_, err := ann.Sync(ctx, c.conn(""), project, noSleep)
	wantServerError(t, "sync", err, "DEVICE_REVOKED", "authorization", "", client.ErrRevoked)
	_, err = ann.Export(ctx, c.conn(""), project, io.Discard)
	wantServerError(t, "export", err, "DEVICE_REVOKED", "authorization", "", client.ErrRevoked)
	err = ann.Resume(ctx, c.conn(""))
	wantServerError(t, "resume", err, "DEVICE_REVOKED", "certificate", "", client.ErrRevoked)
}

func TestErrUnauthenticatedCrossesTheWire(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Larkspur Bench cut")
	ann := c.device("ann", server.Inspector)
	other := startCluster(t, t.TempDir()) // never enrolled ann's device
	ctx := context.Background()
	_, err := ann.Export(ctx, other.conn(""), project, io.Discard)
	wantServerError(t, "export to another server", err, "TOKEN_INVALID", "authorization", "", client.ErrUnauthenticated)
	err = ann.Resume(ctx, other.conn(""))
	wantServerError(t, "resume with another server", err, "CERTIFICATE_INVALID", "certificate", "", client.ErrUnauthenticated)
	_, err = ann.Sync(ctx, other.conn(""), project, noSleep)
	wantServerError(t, "sync with another server", err, "TOKEN_INVALID", "authorization", "", client.ErrUnauthenticated)
}

func TestErrCodeInvalidCrossesTheWire(t *testing.T) {
	c := startCluster(t, t.TempDir())
	s := openStore(t, filepath.Join(t.TempDir(), "tablet.db"))
	err := s.Enroll(context.Background(), c.conn(""), "not-a-code-anyone-issued", "Bo's tablet")
	wantServerError(t, "enrol with an unknown code", err, "CODE_INVALID", "code", "", client.ErrCodeInvalid)
}

func TestErrNotMemberCrossesTheWire(t *testing.T) {
	c := startCluster(t, t.TempDir())
	c.newProject("Larkspur Bench cut")
	ann := c.device("ann", server.Inspector)
	elsewhere := c.newProject("Coyote Draw culvert")
	_, err := ann.Sync(context.Background(), c.conn(""), elsewhere, noSleep)
	wantServerError(t, "sync of a project the user is no member of", err, "NOT_A_MEMBER", "", "member_of_project",
		client.ErrNotMember, client.ErrPermissionDenied)
}

func TestErrPermissionDeniedCrossesTheWire(t *testing.T) {
	c := startCluster(t, t.TempDir())
	c.newProject("Larkspur Bench cut")
	ann := c.device("ann", server.Inspector)
	ctx, err := ann.CallContext(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	_, err = pb.NewAdminServiceClient(dial(t, c.addr)).CreateProject(ctx, &pb.CreateProjectRequest{Name: "Ann's own"})
	wantServerError(t, "an inspector creates a project", err, "PERMISSION_DENIED", "", "server_admin", client.ErrPermissionDenied)
}

func TestErrInvalidArgumentCrossesTheWire(t *testing.T) {
	c := startCluster(t, t.TempDir())
	s := openStore(t, filepath.Join(t.TempDir(), "tablet.db"))
	err := s.Enroll(context.Background(), c.conn(""), enrolmentCode(t, c, "bo", false), "Bo's tablet\x1b[2J")
	wantServerError(t, "enrol a device whose name holds a control character", err, "INVALID_ARGUMENT", "device_name", "no_control_characters",
		client.ErrInvalidArgument)
}

func TestErrDeviceExistsCrossesTheWire(t *testing.T) {
	c := startCluster(t, t.TempDir())
	dir := t.TempDir()
	first := filepath.Join(dir, "first.db")
	s, err := client.Open(context.Background(), first, client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(first)
	if err != nil {
		t.Fatal(err)
	}
	clone := filepath.Join(dir, "clone.db") // the same device id and key
	if err := os.WriteFile(clone, b, 0o600); err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	if err := openStore(t, first).Enroll(ctx, c.conn(""), enrolmentCode(t, c, "bo", false), "Bo's tablet"); err != nil {
		t.Fatal(err)
	}
	err = openStore(t, clone).Enroll(ctx, c.conn(""), enrolmentCode(t, c, "cy", false), "Cy's tablet")
	wantServerError(t, "enrol a device id enrolled already", err, "DEVICE_EXISTS", "device_id", "", client.ErrDeviceExists)
}

func TestErrNotFoundCrossesTheWire(t *testing.T) {
	c := startCluster(t, t.TempDir())
	root := openStore(t, filepath.Join(t.TempDir(), "root.db"))
	ctx := context.Background()
	if err := root.Enroll(ctx, c.conn(""), enrolmentCode(t, c, "root", true), "server room laptop"); err != nil {
		t.Fatal(err)
	}
	const missing = "01890000-0000-7000-8000-000000000000"
	_, err := root.Export(ctx, c.conn(""), missing, io.Discard)
	wantServerError(t, "export of a project the server does not hold", err, "NO_PROJECT", "project_id", "", client.ErrNotFound)
	_, err = root.Sync(ctx, c.conn(""), missing, noSleep)
	wantServerError(t, "sync of a project the server does not hold", err, "NO_PROJECT", "project_id", "", client.ErrNotFound)
}

func TestErrRateLimitedCrossesTheWire(t *testing.T) {
	at := time.Now() // the server's clock stands still: no push is earned back
	c := &cluster{tb: t, dir: t.TempDir(), rate: 1, now: func() time.Time { return at }}
	c.start("")
	project := c.newProject("Larkspur Bench cut")
	ann := c.device("ann", server.Inspector)
	syncOK(t, ann, c.conn(""), project) // its one push
	_, err := ann.Sync(context.Background(), c.conn(""), project, noSleep)
	wantServerError(t, "a push beyond the device's rate", err, "RATE_LIMITED", "", "push_rate", client.ErrRateLimited)
}

func TestErrBatchTooLargeCrossesTheWire(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Larkspur Bench cut")
	ann := c.device("ann", server.Inspector)
	ctx, err := ann.CallContext(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	req := &pb.PushRequest{ProjectId: project}
	for range 2001 { // the server takes 2000 at most; it counts them before it reads them
		req.Events = append(req.Events, &pb.Event{})
	}
	_, err = pb.NewSyncServiceClient(dial(t, c.addr)).Push(ctx, req)
	wantServerError(t, "a push of 2001 events", err, "BATCH_TOO_LARGE", "events", "", client.ErrBatchTooLarge)
}

func TestErrServerStorageCrossesTheWire(t *testing.T) {
	c := startCluster(t, t.TempDir())
	code := enrolmentCode(t, c, "bo", false)
	c.stop()
	setReadOnly(c.dir, true)
	t.Cleanup(func() { setReadOnly(c.dir, false) })
	c.start("")
	s := openStore(t, filepath.Join(t.TempDir(), "tablet.db"))
	err := s.Enroll(context.Background(), c.conn(""), code, "Bo's tablet")
	wantServerError(t, "enrol while the server's data directory is read-only", err, "STORAGE_READ_ONLY", "", "",
		client.ErrServerStorage, client.ErrUnavailable)
}

func TestErrUnavailableCrossesTheWire(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Larkspur Bench cut")
	ann := c.device("ann", server.Inspector)
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	gone := lis.Addr().String()
	lis.Close() // nothing listens there now
	ctx := context.Background()
	_, err = ann.Export(ctx, c.conn(gone), project, io.Discard)
	wantServerError(t, "export to an address nothing listens on", err, "", "", "", client.ErrUnavailable)
	_, err = ann.Sync(ctx, c.conn(gone), project, noSleep)
	wantServerError(t, "sync with an address nothing listens on", err, "", "", "", client.ErrUnavailable)
}

// tokenFault fails every lookup of a token while on.
type tokenFault struct {
	server.Store
	on atomic.Bool
}

func (f *tokenFault) DeviceByToken(ctx context.Context, tokenHash []byte) (server.Device, error) {
	if f.on.Load() {
		return server.Device{}, errors.New("the token index does not read")
	}
	return f.Store.DeviceByToken(ctx, tokenHash)
}

func TestErrServerInternalCrossesTheWire(t *testing.T) {
	f := &tokenFault{}
	c := &cluster{tb: t, dir: t.TempDir(), wrap: func(s server.Store) server.Store { f.Store = s; return f }}
	c.start("")
	project := c.newProject("Larkspur Bench cut")
	ann := c.device("ann", server.Inspector)
	f.on.Store(true)
	_, err := ann.Export(context.Background(), c.conn(""), project, io.Discard)
	wantServerError(t, "export while the server fails", err, "INTERNAL", "", "", client.ErrServerInternal)
}

// Every reason in the server's table of reasons crosses the wire, in a
// unary call and in a stream, with its field and rule, and matches the
// client errors this table expects of it.
func TestEveryReasonCrossesTheWire(t *testing.T) {
	want := map[string][]error{
		"INVALID_ARGUMENT":    {client.ErrInvalidArgument},
		"TOKEN_REQUIRED":      {client.ErrUnauthenticated},
		"TOKEN_INVALID":       {client.ErrUnauthenticated},
		"DEVICE_REVOKED":      {client.ErrRevoked},
		"CODE_INVALID":        {client.ErrCodeInvalid},
		"CERTIFICATE_INVALID": {client.ErrUnauthenticated},
		"PROOF_INVALID":       {client.ErrUnauthenticated},
		"NOT_A_MEMBER":        {client.ErrNotMember, client.ErrPermissionDenied},
		"PERMISSION_DENIED":   {client.ErrPermissionDenied},
		"DEVICE_EXISTS":       {client.ErrDeviceExists},
		"NO_PROJECT":          {client.ErrNotFound},
		"NO_USER":             {client.ErrNotFound},
		"NO_DEVICE":           {client.ErrNotFound},
		"NO_INVITATION":       {client.ErrNotFound},
		"INVITATION_LAPSED":   nil,
		"RATE_LIMITED":        {client.ErrRateLimited},
		"BATCH_TOO_LARGE":     {client.ErrBatchTooLarge},
		"STORAGE_FULL":        {client.ErrServerStorage, client.ErrUnavailable},
		"STORAGE_READ_ONLY":   {client.ErrServerStorage, client.ErrUnavailable},
		"STORAGE_IO":          {client.ErrServerStorage, client.ErrUnavailable},
		"LEDGER_MOVED":        nil,
		"INTERNAL":            {client.ErrServerInternal},
		"CANCELLED":           {context.Canceled},
		"DEADLINE_EXCEEDED":   {context.DeadlineExceeded},
	}
	reasons := server.ReasonCodes()
	for reason := range reasons {
		if _, ok := want[reason]; !ok {
			t.Errorf("the server sends reason %s, which this test does not know: say which client errors it matches", reason)
		}
	}
	for reason := range want {
		if _, ok := reasons[reason]; !ok {
			t.Errorf("reason %s is not in the server's table of reasons", reason)
		}
	}

	var reply atomic.Value // the status error the fake service answers with
	g := grpc.NewServer(grpc.UnknownServiceHandler(func(any, grpc.ServerStream) error { return reply.Load().(error) }))
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	done := make(chan struct{})
	go func() { defer close(done); _ = g.Serve(lis) }()
	t.Cleanup(func() { g.Stop(); <-done })
	cc := dial(t, lis.Addr().String())
	ctx := context.Background()
	for reason, cs := range reasons {
		for _, code := range cs {
			reply.Store(server.StatusError(code, reason, "some_field", "some_rule", "refused"))
			unary := cc.Invoke(ctx, "/tamp.test.v1.Nothing/Call", &emptypb.Empty{}, &emptypb.Empty{})
			stream, err := cc.NewStream(ctx, &grpc.StreamDesc{ServerStreams: true}, "/tamp.test.v1.Nothing/Stream")
			if err == nil {
				if err = stream.SendMsg(&emptypb.Empty{}); err == nil {
					err = stream.RecvMsg(&emptypb.Empty{})
				}
			}
			for call, err := range map[string]error{"unary": unary, "stream": err} {
				checkReason(t, reason+" "+code.String()+" "+call, err, code, reason, want[reason])
			}
		}
	}
}

func checkReason(t *testing.T, what string, err error, code codes.Code, reason string, targets []error) {
	t.Helper()
	var se *client.ServerError
	if !errors.As(err, &se) {
		t.Errorf("%s: %v (%T) is no *client.ServerError", what, err, err)
		return
	}
	if se.Code != code || se.Reason != reason || se.Field != "some_field" || se.Rule != "some_rule" {
		t.Errorf("%s: %v %q field %q rule %q, want %v %q some_field some_rule", what, se.Code, se.Reason, se.Field, se.Rule, code, reason)
	}
	for _, target := range append(slices.Clone(serverSentinels), context.Canceled, context.DeadlineExceeded) {
		if want := slices.Contains(targets, target); errors.Is(err, target) != want {
			t.Errorf("%s: errors.Is(err, %q) = %v, want %v", what, target, !want, want)
		}
	}
}

// reasonOf returns the reason, field and rule of the server's ErrorInfo
// detail of a status error, for the tests that call the server directly.
func reasonOf(err error) (reason, field, rule string) {
	for _, d := range status.Convert(err).Details() {
		if info, ok := d.(*errdetails.ErrorInfo); ok && info.GetDomain() == "tamp" {
			return info.GetReason(), info.GetMetadata()["field"], info.GetMetadata()["rule"]
		}
	}
	return "", "", ""
}
