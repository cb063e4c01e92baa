package server

import (
	"bytes"
	"cmp"
	"context"
	"crypto/ed25519"
	"crypto/rand"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/base64"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"runtime"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/google/uuid"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	_ "google.golang.org/grpc/encoding/gzip" // registers gzip: compressed requests are accepted and answered compressed
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/metadata"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
)

// Options configure a Server.
type Options struct {
	Store  Store
	Now    func() time.Time // time.Now when nil
	Rand   io.Reader        // crypto/rand when nil
	Logger *slog.Logger     // slog.Default() when nil
	// ChunkSize is the largest number of events in one pulled chunk
	// (default 500); MaxBatch the largest pushed batch (default 2000).
	ChunkSize int
	MaxBatch  int
	// ClockSkewLimit is the device clock skew beyond which a push's events
	// are flagged (default 5 minutes).
	ClockSkewLimit time.Duration
	// CodeLifetime is how long an enrolment code stays valid (default 24 h).
	CodeLifetime time.Duration
	// PushRate and PushBurst limit each device's pushes: PushRate a second
	// on average, PushBurst at once (defaults 20 and 60).
	PushRate  float64
	PushBurst int
	// EnrollAttemptRate and EnrollAttemptBurst limit the failed EnrollDevice
	// and ResumeDevice calls from one network address: EnrollAttemptBurst
	// at once, then EnrollAttemptRate a second (defaults 10 and 0.1, one
	// every ten seconds). See codes.go.
	EnrollAttemptRate  float64
	EnrollAttemptBurst int
	// StorageProbeInterval is how often a server whose store cannot write
	// tries a write again (default DefaultStorageProbeInterval).
	StorageProbeInterval time.Duration
}

// Server implements the sync and administration services over a Store. It
// keeps each project's projection in memory, loaded on first use, and
// serialises writes to one project. It is safe for concurrent use.
type Server struct {
	opts Options
	log  *slog.Logger

	mu       sync.Mutex
	projects map[string]*project
	keys     sync.Map // device id -> ed25519.PublicKey
	limits   *limiter
	attempts *attempts // failed enrolment attempts per address
	health   *storageHealth
	self     ownState     // the server's own signing identity
	requests requestCodec // see RequestCodec
}

// project is the server's state of one project's ledger. A push decides
// under mu (what to accept, at which sequence numbers, with which hashes)
// and applies what it accepts to view at once; it then takes write before
// releasing mu and writes its rows to the store, so that batches reach the
// store in the order they were decided while the next push decides. view,
// head and seqs may thus run ahead of the store by the batches being
// written. A failed write counts in failed: the next holder of mu reloads
// the state from the store, and every batch decided since the last load is
// given up, since its outcomes may rest on the batch that was not stored.
//
// Whatever changes the state holds mu's write side; a report only reads
// view, under mu's read side (see read), beside other reports.
type project struct {
	mu     sync.RWMutex
	view   *ledger.Projection
	head   ledger.Checkpoint // the chain head after the last decided batch
	seqs   map[string]uint64 // the sequence number of every decided event
	devs   *deviceSeqs       // each device's decided entries, and the gaps between them
	loaded bool
	seen   uint64 // failed when the state was loaded

	write  sync.Mutex
	failed atomic.Uint64 // writes that failed after their batch was decided
}

// fresh reports whether p's state is loaded and no write failed since.
func (p *project) fresh() bool { return p.loaded && p.failed.Load() == p.seen }

// New returns a server over opts.Store.
func New(opts Options) *Server {
	if opts.Now == nil {
		opts.Now = time.Now
	}
	if opts.Rand == nil {
		opts.Rand = rand.Reader
	}
	if opts.Logger == nil {
		opts.Logger = slog.Default()
	}
	if opts.ChunkSize <= 0 {
		opts.ChunkSize = 500
	}
	if opts.MaxBatch <= 0 {
		opts.MaxBatch = 2000
	}
	if opts.ClockSkewLimit <= 0 {
		opts.ClockSkewLimit = ledger.DefaultClockSkewLimit
	}
	if opts.CodeLifetime <= 0 {
		opts.CodeLifetime = 24 * time.Hour
	}
	if opts.PushRate <= 0 {
		opts.PushRate = 20
	}
	if opts.PushBurst <= 0 {
		opts.PushBurst = 60
	}
	if opts.EnrollAttemptRate <= 0 {
		opts.EnrollAttemptRate = 0.1
	}
	if opts.EnrollAttemptBurst <= 0 {
		opts.EnrollAttemptBurst = 10
	}
	if opts.StorageProbeInterval <= 0 {
		opts.StorageProbeInterval = DefaultStorageProbeInterval
	}
	s := &Server{opts: opts, log: opts.Logger, projects: map[string]*project{},
		limits:   &limiter{rate: opts.PushRate, burst: float64(opts.PushBurst), buckets: map[string]*bucket{}},
		attempts: newAttempts(opts.EnrollAttemptRate, opts.EnrollAttemptBurst)}
	s.health = newStorageHealth(func(ctx context.Context) error { return s.opts.Store.Probe(ctx) }, opts.StorageProbeInterval, opts.Logger)
	return s
}

// Register registers the server's services (sync, administration and the
// ledger's read side) on g, and the standard health service, which reports
// the server and its writing services NOT_SERVING while the store cannot
// write.
func (s *Server) Register(g *grpc.Server) {
	healthpb.RegisterHealthServer(g, s.health.hs)
	pb.RegisterSyncServiceServer(g, &syncService{s: s})
	pb.RegisterAdminServiceServer(g, &adminService{s: s})
	pb.RegisterLedgerReadServiceServer(g, &readService{s: s})
}

// adminService implements the administration service.
type adminService struct {
	pb.UnimplementedAdminServiceServer
	s *Server
}

// syncService implements the sync service.
type syncService struct {
	pb.UnimplementedSyncServiceServer
	s *Server
}

func (x *syncService) Push(ctx context.Context, req *pb.PushRequest) (*pb.PushResponse, error) {
	return x.s.push(ctx, req)
}

func (x *syncService) Pull(req *pb.PullRequest, stream grpc.ServerStreamingServer[pb.PullResponse]) error {
	return x.s.pull(req, stream)
}

func (s *Server) newID() string {
	id, err := uuid.NewV7FromReader(s.opts.Rand)
	if err != nil {
		panic(fmt.Sprintf("server: new id: %v", err))
	}
	return id.String()
}

// secret returns 256 random bits in base64url: a bearer token, which a
// device keeps and nobody types (enrolment codes are newCode's).
func (s *Server) secret() string {
	b := make([]byte, 32)
	if _, err := io.ReadFull(s.opts.Rand, b); err != nil {
		panic(fmt.Sprintf("server: random: %v", err))
	}
	return base64.RawURLEncoding.EncodeToString(b)
}

func hash(secret string) []byte {
	h := sha256.Sum256([]byte(secret))
	return h[:]
}

// CreateProject creates a project ledger and returns its id.
func (s *Server) CreateProject(ctx context.Context, name string) (string, error) {
	id := s.newID()
	if err := s.storeCreateProject(ctx, id, name); err != nil {
		return "", err
	}
	return id, nil
}

// AddUser creates a user and returns its id.
func (s *Server) AddUser(ctx context.Context, name string, serverAdmin bool) (string, error) {
	id := s.newID()
	if err := s.opts.Store.AddUser(ctx, id, name, serverAdmin, s.opts.Now()); err != nil {
		return "", err
	}
	return id, nil
}

// AddMember gives a user a role on a project.
func (s *Server) AddMember(ctx context.Context, project, user string, role Role) error {
	if !validRole(role) {
		return fmt.Errorf("server: role %q: must be inspector, office, qa or admin", role)
	}
	if _, err := s.opts.Store.Head(ctx, project); err != nil {
		return err
	}
	if err := s.opts.Store.SetMember(ctx, project, user, role); err != nil {
		return err
	}
	return s.introduceDevices(ctx, project, user)
}

// Bootstrap creates the first administrator of an empty server and returns
// its id and a one-time enrolment code for its device. It refuses a server
// that already has users.
func (s *Server) Bootstrap(ctx context.Context, name string) (user, code string, expires time.Time, err error) {
	n, err := s.opts.Store.CountUsers(ctx)
	if err != nil {
		return "", "", time.Time{}, err
	}
	if n > 0 {
		return "", "", time.Time{}, fmt.Errorf("server: already initialised: %d users exist", n)
	}
	if user, err = s.AddUser(ctx, name, true); err != nil {
		return "", "", time.Time{}, err
	}
	if _, err = s.identity(ctx); err != nil { // the server's signing key, kept in the store from the start
		return "", "", time.Time{}, err
	}
	code, expires, err = s.IssueEnrollmentCode(ctx, user)
	return user, code, expires, err
}

// IssueEnrollmentCode returns a one-time code that enrols one device for
// user, valid for the server's code lifetime.
func (s *Server) IssueEnrollmentCode(ctx context.Context, user string) (string, time.Time, error) {
	return s.issueCode(ctx, user, s.opts.CodeLifetime)
}

// issueCode returns a one-time code that enrols one device for user, valid
// for life (see codes.go).
func (s *Server) issueCode(ctx context.Context, user string, life time.Duration) (string, time.Time, error) {
	code := s.newCode()
	exp := s.opts.Now().Add(life)
	if err := s.opts.Store.AddEnrollmentCode(ctx, hash(code), user, exp); err != nil {
		return "", time.Time{}, err
	}
	return code, exp, nil
}

// EnrollDevice registers a device's key with a one-time code and returns
// its bearer token, of which the server keeps only the hash.
func (a *adminService) EnrollDevice(ctx context.Context, req *pb.EnrollDeviceRequest) (*pb.EnrollDeviceResponse, error) {
	if err := checkName("device_name", req.GetDeviceName()); err != nil {
		return nil, err
	}
	s := a.s
	if len(req.GetPublicKey()) != ed25519.PublicKeySize {
		return nil, statusError(codes.InvalidArgument, reasonInvalidArgument, "public_key", "", "must be a 32-byte Ed25519 key")
	}
	if _, err := uuid.Parse(req.GetDeviceId()); err != nil {
		return nil, statusError(codes.InvalidArgument, reasonInvalidArgument, "device_id", "", "must be a UUID")
	}
	token := s.secret()
	d, err := s.opts.Store.Enroll(ctx, hash(canonicalCode(req.GetCode())), Device{ID: req.GetDeviceId(), Name: req.GetDeviceName(), PublicKey: req.GetPublicKey()},
		hash(token), s.opts.Now())
	if err != nil {
		if errors.Is(err, ErrCodeInvalid) {
			return nil, statusError(codes.Unauthenticated, reasonCodeInvalid, "code", "", "the enrolment code is unknown, already used or expired")
		}
		if errors.Is(err, ErrDeviceExists) {
			return nil, statusError(codes.AlreadyExists, reasonDeviceExists, "device_id", "",
				fmt.Sprintf("device %s is enrolled already; a device enrols again under a new id and key", req.GetDeviceId()))
		}
		return nil, s.internal(ctx, "enrol", err)
	}
	cert, err := s.certificate(ctx, d, s.opts.Now())
	if err != nil {
		return nil, s.internal(ctx, "enrol", err)
	}
	s.log.InfoContext(ctx, "device enrolled", "device", d.ID, "user", d.UserID)
	projects, err := s.opts.Store.ProjectsOf(ctx, d.UserID)
	if err != nil {
		return nil, s.internal(ctx, "enrol", err)
	}
	// The device is enrolled and its code used up: an introduction that
	// fails here is made at the device's first push (ensureIntroduced), so
	// the enrolment is not refused for it.
	for _, p := range projects {
		if err := s.ensureIntroduced(ctx, p, d); err != nil {
			s.log.WarnContext(ctx, "introduce an enrolled device to a project; its first push will", "device", d.ID, "project", p, "err", err)
		}
	}
	return &pb.EnrollDeviceResponse{Token: token, UserId: d.UserID, ProjectIds: projects, Certificate: cert.Proto()}, nil
}

// internal logs err and returns a generic Internal status; a storage fault
// (a full disk, a read-only data directory) is no internal error: it
// becomes Unavailable naming the cause, and the server reports it in its
// health until the store writes again.
func (s *Server) internal(ctx context.Context, op string, err error) error {
	if st, ok := s.storageFault(ctx, op, err); ok {
		return st
	}
	s.log.ErrorContext(ctx, "internal error", "op", op, "err", err)
	return internalError()
}

type deviceKey struct{}

// deviceFrom returns the authenticated device of a call.
func deviceFrom(ctx context.Context) (Device, bool) {
	d, ok := ctx.Value(deviceKey{}).(Device)
	return d, ok
}

// unauthenticated lists the methods callable without a token.
var unauthenticated = map[string]bool{
	pb.AdminService_EnrollDevice_FullMethodName: true,
	pb.AdminService_ResumeDevice_FullMethodName: true,
	"/grpc.health.v1.Health/Check":              true,
	"/grpc.health.v1.Health/Watch":              true,
}

func (s *Server) authenticate(ctx context.Context, method string) (context.Context, error) {
	if unauthenticated[method] || strings.HasPrefix(method, "/grpc.reflection.") {
		return ctx, nil
	}
	md, _ := metadata.FromIncomingContext(ctx)
	vals := md.Get("authorization")
	if len(vals) != 1 || !strings.HasPrefix(vals[0], "Bearer ") {
		return nil, statusError(codes.Unauthenticated, reasonTokenRequired, "authorization", "", "a bearer token is required")
	}
	token := strings.TrimPrefix(vals[0], "Bearer ")
	th := hash(token)
	d, err := s.opts.Store.DeviceByToken(ctx, th)
	if errors.Is(err, ErrNoDevice) {
		return nil, statusError(codes.Unauthenticated, reasonTokenInvalid, "authorization", "", "the token is not valid")
	}
	if err != nil {
		return nil, s.internal(ctx, "authenticate", err)
	}
	// The index lookup compares hashes, not tokens; confirm the stored hash
	// in constant time all the same.
	if subtle.ConstantTimeCompare(d.TokenHash, th) != 1 {
		return nil, statusError(codes.Unauthenticated, reasonTokenInvalid, "authorization", "", "the token is not valid")
	}
	if d.Revoked {
		return nil, statusError(codes.Unauthenticated, reasonDeviceRevoked, "authorization", "", "this device was revoked")
	}
	if s.isOwnDevice(d.ID) { // the server's own device has no token; refuse one all the same
		return nil, statusError(codes.Unauthenticated, reasonTokenInvalid, "authorization", "", "the token is not valid")
	}
	return context.WithValue(ctx, deviceKey{}, d), nil
}

// UnaryInterceptor refuses a request RequestCodec could not decode,
// authenticates unary calls, and limits failed enrolment attempts (see
// codes.go). Every status a call ends with carries its reason (see
// status.go).
func (s *Server) UnaryInterceptor(ctx context.Context, req any, info *grpc.UnaryServerInfo, h grpc.UnaryHandler) (any, error) {
	if err := s.requests.refuse(req); err != nil {
		return nil, err
	}
	ctx, err := s.authenticate(ctx, info.FullMethod)
	if err != nil {
		return nil, err
	}
	resp, err := s.limitAttempts(ctx, req, info, h)
	return resp, s.detailed(ctx, err)
}

type authedStream struct {
	grpc.ServerStream
	ctx context.Context
}

func (a authedStream) Context() context.Context { return a.ctx }

// StreamInterceptor authenticates streaming calls, and refuses a request
// RequestCodec could not decode. Every status a call ends with carries its
// reason (see status.go).
func (s *Server) StreamInterceptor(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, h grpc.StreamHandler) error {
	ctx, err := s.authenticate(ss.Context(), info.FullMethod)
	if err != nil {
		return err
	}
	return s.detailed(ctx, h(srv, authedStream{s.requests.stream(ss), ctx}))
}

// projectOf returns a project's state, not loaded before first use.
func (s *Server) projectOf(id string) *project {
	s.mu.Lock()
	defer s.mu.Unlock()
	p := s.projects[id]
	if p == nil {
		p = &project{}
		s.projects[id] = p
	}
	return p
}

// lockProject returns a project's state with its mu held, loading it from
// the store on first use or after a failed write.
func (s *Server) lockProject(ctx context.Context, id string) (*project, error) {
	p := s.projectOf(id)
	p.mu.Lock()
	if p.fresh() {
		return p, nil
	}
	if err := s.load(ctx, p, id); err != nil {
		p.mu.Unlock()
		return nil, err
	}
	return p, nil
}

// load reads a project's state from the store, after the writes in flight.
func (s *Server) load(ctx context.Context, p *project, id string) error {
	p.write.Lock()
	defer p.write.Unlock()
	head, err := s.storeHead(ctx, id)
	if err != nil {
		return err
	}
	view := ledger.NewProjection(id)
	seqs := map[string]uint64{}
	devs := newDeviceSeqs()
	var seq uint64
	for {
		entries, err := s.storeAfter(ctx, id, seq, 1000)
		if err != nil {
			return err
		}
		for _, e := range entries {
			sg, err := ledger.Decode(e.Event)
			if err != nil {
				return fmt.Errorf("server: stored event %d of %s: %w", e.Seq, id, err)
			}
			if _, err := view.Apply(sg); err != nil {
				return fmt.Errorf("server: stored event %d of %s: %w", e.Seq, id, err)
			}
			seqs[sg.Event.ID] = e.Seq
			devs.hold(&sg.Event)
		}
		if len(entries) < 1000 {
			break
		}
		seq = entries[len(entries)-1].Seq
	}
	s.syncDevices(ctx, id, view)
	p.view, p.head, p.seqs, p.devs, p.loaded = view, head, seqs, devs, true
	p.seen = p.failed.Load()
	return nil
}

// inspect runs fn with a project's projection as the store holds it, under
// the project's lock.
func (s *Server) inspect(ctx context.Context, id string, fn func(*ledger.Projection)) error {
	p, err := s.lockProject(ctx, id)
	if err != nil {
		return err
	}
	defer p.mu.Unlock()
	// Wait for the batches being written, so that fn sees only what is
	// stored; reload if one of them failed.
	p.write.Lock()
	p.write.Unlock()
	if !p.fresh() {
		if err := s.load(ctx, p, id); err != nil {
			return err
		}
	}
	fn(p.view)
	return nil
}

// read runs fn with a project's projection as the store holds it, under
// the read side of the project's lock: reports run side by side, and a
// push waits only for those already running (a waiting push holds off new
// ones). fn must only read the projection.
func (s *Server) read(ctx context.Context, id string, fn func(*ledger.Projection)) error {
	p := s.projectOf(id)
	for {
		p.mu.RLock()
		if p.fresh() {
			// Wait for the batches being written, so that fn sees only what
			// is stored: no push decides while the read side is held.
			p.write.Lock()
			p.write.Unlock()
			if p.fresh() {
				defer p.mu.RUnlock()
				fn(p.view)
				return nil
			}
		}
		p.mu.RUnlock()
		// Not loaded, or a write failed: load under the write side, and read
		// again.
		p.mu.Lock()
		var err error
		if !p.fresh() {
			err = s.load(ctx, p, id)
		}
		p.mu.Unlock()
		if err != nil {
			return err
		}
	}
}

func (s *Server) key(ctx context.Context, device string) (ed25519.PublicKey, bool) {
	if k, ok := s.keys.Load(device); ok {
		return k.(ed25519.PublicKey), true
	}
	d, err := s.opts.Store.Device(ctx, device)
	if err != nil {
		return nil, false
	}
	s.keys.Store(device, d.PublicKey)
	return d.PublicKey, true
}

func projectErr(s *Server, ctx context.Context, id string, err error) error {
	if errors.Is(err, ErrNoProject) {
		return statusError(codes.NotFound, reasonNoProject, "project_id", "", fmt.Sprintf("no project %s on this server", id))
	}
	return s.internal(ctx, "load project", err)
}

// minVerifyPart is the fewest events verifyAll gives one core.
const minVerifyPart = 512

// decoded is one pushed event after decoding and verification.
type decoded struct {
	signed ledger.Signed
	err    error
	// refused is why the event may not join the ledger as a new entry
	// (ledger.Admit), nil when it may; an event the ledger holds already
	// is present whatever it says.
	refused error
}

// verifyAll decodes, verifies and validates events, checking signatures in
// batches on all cores. A batch is split only into parts of at least
// minVerifyPart events: the batch equation costs less per signature the
// more it holds, and concurrent pushes keep the cores busy anyway.
func (s *Server) verifyAll(ctx context.Context, events []*pb.Event) []decoded {
	out := make([]decoded, len(events))
	workers := min(runtime.GOMAXPROCS(0), max(1, len(events)/minVerifyPart))
	per := (len(events) + workers - 1) / workers
	inParts := func(fn func(lo, hi int)) {
		var wg sync.WaitGroup
		for lo := 0; lo < len(events); lo += per {
			wg.Add(1)
			go func() {
				defer wg.Done()
				fn(lo, min(len(events), lo+per))
			}()
		}
		wg.Wait()
	}
	inParts(func(lo, hi int) {
		for i := lo; i < hi; i++ {
			sg, err := ledger.FromEnvelope(events[i])
			out[i] = decoded{signed: sg, err: err}
		}
	})
	introduced := s.introducedKeys(ctx, out)
	keys := func(dev string) (ed25519.PublicKey, bool) {
		if k, ok := introduced[dev]; ok {
			return k, true
		}
		return s.key(ctx, dev)
	}
	inParts(func(lo, hi int) {
		good := make([]int, 0, hi-lo)
		signed := make([]ledger.Signed, 0, hi-lo)
		for i := lo; i < hi; i++ {
			if out[i].err == nil {
				good = append(good, i)
				signed = append(signed, out[i].signed)
			}
		}
		for j, err := range ledger.VerifyBatch(signed, keys) {
			i := good[j]
			if err == nil {
				err = ledger.Validate(out[i].signed.Event)
			}
			out[i].err = err
			if err == nil {
				out[i].refused = ledger.Admit(out[i].signed)
			}
		}
	})
	return out
}

// rejected is the outcome of an event refused by err: the reason, the field
// or the rule and the words of its *ledger.Rejection.
func rejected(id string, err error) *pb.PushOutcome {
	o := &pb.PushOutcome{EventId: id, Status: pb.PushStatus_PUSH_STATUS_REJECTED,
		Reason: pb.RejectReason_REJECT_REASON_MALFORMED, Message: "the event could not be read"}
	var r *ledger.Rejection
	if errors.As(err, &r) {
		o.Reason, o.Message = ledger.ReasonToProto(r.Reason), strings.TrimPrefix(r.Error(), "ledger: ")
		o.Field, o.Rule = r.FieldRule()
	}
	return o
}

// push appends a batch of events to a project's ledger.
func (s *Server) push(ctx context.Context, req *pb.PushRequest) (*pb.PushResponse, error) {
	if n := len(req.GetEvents()); n > s.opts.MaxBatch {
		return nil, statusError(codes.ResourceExhausted, reasonBatchTooLarge, "events", "",
			fmt.Sprintf("a batch holds at most %d events, not %d", s.opts.MaxBatch, n))
	}
	dev, own := deviceFrom(ctx)
	own = own && s.isOwnDevice(dev.ID) // the server's own entries: no membership, no rate limit
	if !own {
		var err error
		if dev, err = s.requireMember(ctx, req.GetProjectId()); err != nil {
			return nil, err
		}
		if err := s.ensureIntroduced(ctx, req.GetProjectId(), dev); err != nil {
			return nil, projectErr(s, ctx, req.GetProjectId(), err)
		}
	}
	if !own && !s.limits.allow(dev.ID, s.opts.Now()) {
		return nil, statusError(codes.ResourceExhausted, reasonRateLimited, "", "push_rate",
			fmt.Sprintf("device %s pushes faster than %.0f batches a second; slow down", dev.ID, s.opts.PushRate))
	}
	if err := s.writable(ctx); err != nil {
		return nil, err
	}
	now := s.opts.Now()
	var skew int64
	if t := req.GetDeviceTimeMicros(); t != 0 {
		skew = t - now.UnixMicro()
	}
	items := s.verifyAll(ctx, req.GetEvents())

	p, err := s.lockProject(ctx, req.GetProjectId())
	if err != nil {
		return nil, projectErr(s, ctx, req.GetProjectId(), err)
	}
	gen := p.seen
	resp, head, rows, err := s.decide(ctx, p, req, items, now, skew)
	if err != nil {
		p.mu.Unlock()
		return nil, err
	}
	// Write while the next push decides: take write before letting go of
	// mu, so batches reach the store in the order they were decided. If a
	// write failed since this batch's state was loaded, its outcomes may
	// rest on that batch (already present, at sequence numbers that were
	// not stored): it is given up whole, so nothing unstored is
	// acknowledged, even with no rows to write.
	p.write.Lock()
	p.mu.Unlock()
	if p.failed.Load() != gen {
		err = ErrConflict
	} else if err = s.storeAppend(ctx, req.GetProjectId(), head, rows); err != nil {
		p.failed.Add(1) // the decided batch is applied to the view, not stored
	}
	p.write.Unlock()
	if err != nil {
		if errors.Is(err, ErrConflict) {
			return nil, statusError(codes.Aborted, reasonLedgerMoved, "", "", "the ledger moved during the push; push again")
		}
		return nil, s.internal(ctx, "append", err)
	}
	s.deviceEffects(ctx, req.GetProjectId(), rows)
	s.log.InfoContext(ctx, "push", "project", req.GetProjectId(), "events", len(items), "accepted", len(rows), "head", resp.GetHead().GetSequence())
	return resp, nil
}

// decide settles each event of a push, under p.mu: it gives the accepted
// ones their sequence numbers and chain hashes and applies them to the
// view. It returns the response, the head the rows follow, and the rows to
// write; p.head becomes the head after them.
func (s *Server) decide(ctx context.Context, p *project, req *pb.PushRequest, items []decoded, now time.Time, skew int64) (*pb.PushResponse, ledger.Checkpoint, []Row, error) {
	head, err := s.checkVerified(ctx, p, req.GetVerified())
	if err != nil {
		return nil, head, nil, s.internal(ctx, "epoch", err)
	}
	limit := s.skewLimit(p).Microseconds()
	skewed := skew > limit || -skew > limit
	resp := &pb.PushResponse{ClockSkewMicros: skew, Outcomes: make([]*pb.PushOutcome, 0, len(items))}
	rows := make([]Row, 0, len(items))
	slab := make([]pb.PushOutcome, len(items)) // the accepted events' outcomes, in one allocation
	next := head
	gaps := 0 // gaps in device sequences the accepted entries opened
	own, err := s.identity(ctx)
	if err != nil {
		return nil, head, nil, s.internal(ctx, "identity", err)
	}
	auth := s.authorizer(ctx, req.GetProjectId(), p.view)
	for _, it := range items { // devices this batch introduces, signed by the server's own key
		if k, ok := it.signed.Event.Kind.(*ledger.DeviceEnrolled); ok && it.err == nil && s.isOwnDevice(it.signed.Event.Device) {
			auth.users[k.DeviceID] = k.UserID
		}
	}
	for i, it := range items {
		id := ""
		if it.err == nil {
			id = it.signed.Event.ID
		} else if sg, err := ledger.FromEnvelope(req.GetEvents()[i]); err == nil {
			id = sg.Event.ID
		}
		if it.err != nil {
			resp.Outcomes = append(resp.Outcomes, rejected(id, it.err))
			continue
		}
		e := it.signed.Event
		if e.Project != req.GetProjectId() {
			resp.Outcomes = append(resp.Outcomes, rejected(id, &ledger.Rejection{Reason: ledger.WrongProject, Field: "project_id",
				Detail: "the event belongs to project " + e.Project}))
			continue
		}
		if seq, held := p.seqs[id]; held {
			if held, ok := p.view.Event(id); !ok || !bytes.Equal(held.Body, it.signed.Body) {
				resp.Outcomes = append(resp.Outcomes, rejected(id, &ledger.Rejection{Reason: ledger.ConflictingID, Field: "event_id",
					Detail: "the ledger holds event " + id + " with other content"}))
				continue
			}
			resp.Outcomes = append(resp.Outcomes, &pb.PushOutcome{EventId: id, Status: pb.PushStatus_PUSH_STATUS_ALREADY_PRESENT, Sequence: seq})
			continue
		}
		if refused := cmp.Or(it.refused, ledger.CheckAhead(e, now)); refused != nil { // bounds of a new entry, and its clock against ours
			resp.Outcomes = append(resp.Outcomes, rejected(id, refused))
			continue
		}
		deny := checkOwnEntry(own, e)
		var err error
		if deny == nil && !ledger.ServerMade(e.Kind) {
			deny, err = auth.check(e)
		}
		if err == nil && deny == nil {
			deny = cmp.Or(p.view.SignedAfterRevocation(&e), p.view.Claimed(&e))
		}
		if err != nil {
			p.unapply(rows)
			return nil, head, nil, s.internal(ctx, "authorize", err)
		}
		if deny != nil {
			p.devs.offer(&e)
			resp.Outcomes = append(resp.Outcomes, rejected(id, deny))
			continue
		}
		if waiting := p.view.Missing(&e); len(waiting) > 0 {
			p.devs.offer(&e)
			resp.Outcomes = append(resp.Outcomes, &pb.PushOutcome{EventId: id, Status: pb.PushStatus_PUSH_STATUS_WAITING, WaitingFor: waiting,
				Message: "refers to records the server has not received yet: " + strings.Join(waiting, ", ")})
			continue
		}
		if _, err := p.view.ApplyValidated(it.signed); err != nil {
			p.unapply(rows)
			return nil, head, nil, s.internal(ctx, "apply", err)
		}
		env := it.signed.Bytes()
		next.Seq++
		next.Hash = ledger.Link(next.Hash, next.Seq, env)
		row := Row{Seq: next.Seq, EventID: id, DeviceID: e.Device, DeviceSeq: e.DeviceSeq, Kind: e.Kind.KindName(),
			RecordID: ledger.RecordID(e.Kind), Envelope: env, Hash: storeHash(next.Hash), Received: now}
		if skewed {
			row.SkewMicros = skew
		}
		rows = append(rows, row)
		p.seqs[id] = next.Seq
		if p.devs.hold(&e) {
			gaps++
		}
		o := &slab[i]
		o.EventId, o.Status, o.Sequence = id, pb.PushStatus_PUSH_STATUS_ACCEPTED, next.Seq
		resp.Outcomes = append(resp.Outcomes, o)
	}
	if skewed && len(rows) > 0 {
		s.log.WarnContext(ctx, "device clock skew beyond the limit", "project", req.GetProjectId(), "skew", time.Duration(skew)*time.Microsecond,
			"events", len(rows))
	}
	resp.Missing = p.devs.missing()
	if gaps > 0 && len(resp.Missing) > 0 {
		s.log.WarnContext(ctx, "the ledger lacks entries that pushed entries follow; asking devices for them", "project", req.GetProjectId(),
			"missing", missingAttr(resp.Missing))
	}
	resp.Head = ledger.CheckpointToProto(next)
	p.head = next
	return resp, head, rows, nil
}

// unapply marks p's state for reloading when a push fails after applying
// rows to its view, before they were written.
func (p *project) unapply(rows []Row) {
	if len(rows) > 0 {
		p.failed.Add(1)
	}
}

func (s *Server) skewLimit(p *project) time.Duration {
	if su := p.view.SetUp(); su != nil && su.ClockSkewLimit > 0 {
		return su.ClockSkewLimit
	}
	return s.opts.ClockSkewLimit
}

// checkVerified opens a new epoch when a device has verified a point that
// this ledger does not contain: the ledger was restored from an older copy
// or rewritten, and devices must re-push what it lost.
//
// The point a device verified was pulled, so it is stored; the new epoch
// is set once the batches being written are in.
func (s *Server) checkVerified(ctx context.Context, p *project, v *pb.Checkpoint) (ledger.Checkpoint, error) {
	head := p.head
	if v == nil || v.GetSequence() == 0 {
		return head, nil
	}
	cp := ledger.CheckpointFromProto(v)
	lost := false
	switch {
	case cp.Epoch > head.Epoch:
		lost = true
	case cp.Epoch == head.Epoch:
		h, ok, err := s.storeHashAt(ctx, head.Project, cp.Seq)
		if err != nil {
			return head, err
		}
		lost = !ok || h != cp.Hash
	}
	if !lost {
		return head, nil
	}
	epoch := max(head.Epoch, cp.Epoch) + 1
	p.write.Lock()
	err := s.opts.Store.SetEpoch(ctx, head.Project, epoch)
	p.write.Unlock()
	if err != nil {
		return head, err
	}
	s.log.WarnContext(ctx, "a device verified a point this ledger lacks: opening a new epoch", "project", head.Project,
		"device_seq", cp.Seq, "ledger_seq", head.Seq, "epoch", epoch)
	head.Epoch = epoch
	p.head.Epoch = epoch
	return head, nil
}

// pull streams a project's ledger after the request's cursor.
func (s *Server) pull(req *pb.PullRequest, stream grpc.ServerStreamingServer[pb.PullResponse]) error {
	ctx := stream.Context()
	d, err := s.requireMember(ctx, req.GetProjectId())
	if err != nil {
		return err
	}
	own := "" // the device whose events go as their device sequence numbers
	if req.GetOmitOwnEvents() {
		own = d.ID
	}
	head, err := s.storeHead(ctx, req.GetProjectId())
	if err != nil {
		return projectErr(s, ctx, req.GetProjectId(), err)
	}
	cursor := req.GetAfter().GetSequence()
	if req.GetAfter().GetEpoch() != head.Epoch {
		cursor = min(cursor, head.Seq) // the device decides what a new epoch means; anchor where it can compare
	}
	at := min(cursor, head.Seq)
	h, _, err := s.storeHashAt(ctx, req.GetProjectId(), at)
	if err != nil {
		return s.internal(ctx, "anchor", err)
	}
	anchor := ledger.CheckpointToProto(ledger.Checkpoint{Project: head.Project, Epoch: head.Epoch, Seq: at, Hash: h})
	chunk := s.opts.ChunkSize
	if m := int(req.GetMaxEvents()); m > 0 && m < chunk {
		chunk = m
	}
	if req.GetReferenceDataFirst() && cursor == 0 {
		ref, err := s.storeReferenceData(ctx, req.GetProjectId())
		if err != nil {
			return s.internal(ctx, "reference data", err)
		}
		for start := 0; start < len(ref); {
			part := bounded(ref[start:min(len(ref), start+chunk)])
			start += len(part)
			w, keys, err := s.wire(ctx, part, own)
			if err != nil {
				return s.internal(ctx, "reference data", err)
			}
			if err := stream.Send(&pb.PullResponse{Entries: w, DeviceKeys: keys, ReferenceData: true, Anchor: anchor}); err != nil {
				return err
			}
		}
	}
	first := true
	for cursor < head.Seq || first {
		entries, err := s.storeAfter(ctx, req.GetProjectId(), cursor, min(chunk, int(head.Seq-cursor)))
		if err != nil {
			return s.internal(ctx, "read ledger", err)
		}
		entries = bounded(entries)
		w, keys, err := s.wire(ctx, entries, own)
		if err != nil {
			return s.internal(ctx, "read ledger", err)
		}
		resp := &pb.PullResponse{Entries: w, DeviceKeys: keys,
			Head: ledger.CheckpointToProto(ledger.Checkpoint{Project: head.Project, Epoch: head.Epoch, Seq: at, Hash: h})}
		if len(entries) > 0 {
			last := entries[len(entries)-1]
			cursor = last.Seq
			resp.Head = ledger.CheckpointToProto(ledger.Checkpoint{Project: head.Project, Epoch: head.Epoch, Seq: last.Seq, Hash: last.Hash})
		}
		if first {
			resp.Anchor = anchor
			first = false
		}
		if err := stream.Send(resp); err != nil {
			return err
		}
		if len(entries) == 0 {
			break
		}
	}
	return nil
}

// maxChunkBytes bounds the events of one pulled chunk, well under the 4 MiB a
// gRPC client accepts by default.
const maxChunkBytes = 2 << 20

// bounded returns the longest prefix of es (at least one entry) whose
// events fit in maxChunkBytes.
func bounded(es []ledger.Entry) []ledger.Entry {
	total := 0
	for i, e := range es {
		total += len(e.Event)
		if total > maxChunkBytes && i > 0 {
			return es[:i]
		}
	}
	return es
}

// wire decodes stored entries once each into their wire form, with the keys
// of the devices that signed them. A stored event that does not decode is
// an error: leaving it out would break the chain the device verifies. An
// event device own signed goes as its device sequence number alone, without
// its hash (the device holds the event and computes the hash; the next hash
// sent, a later entry's or the chunk's head, confirms it); own empty sends
// every event.
func (s *Server) wire(ctx context.Context, es []ledger.Entry, own string) ([]*pb.LedgerEntry, map[string][]byte, error) {
	out := make([]*pb.LedgerEntry, 0, len(es))
	keys := map[string][]byte{}
	for _, e := range es {
		sg, err := ledger.Decode(e.Event)
		if err != nil {
			return nil, nil, fmt.Errorf("server: stored event %d: %w", e.Seq, err)
		}
		if own != "" && sg.Event.Device == own {
			out = append(out, &pb.LedgerEntry{Sequence: e.Seq, OwnDeviceSeq: sg.Event.DeviceSeq, ClockSkewMicros: e.SkewMicros})
			continue
		}
		out = append(out, &pb.LedgerEntry{Sequence: e.Seq, Event: sg.Proto(), Hash: e.Hash[:], ClockSkewMicros: e.SkewMicros})
		if _, ok := keys[sg.Event.Device]; !ok {
			if k, ok := s.key(ctx, sg.Event.Device); ok {
				keys[sg.Event.Device] = k
			}
		}
	}
	return out, keys, nil
}
