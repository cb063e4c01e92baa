package server

import (
	"compress/flate"
	"context"
	"crypto/ed25519"
	"crypto/rand"
	"crypto/sha256"
	"encoding/base64"
	"fmt"
	"io"
	"log/slog"
	"sync"
	"time"

	"github.com/google/uuid"
	"google.golang.org/grpc"
	"google.golang.org/grpc/encoding/gzip" // registers gzip: compressed requests are accepted and answered compressed
	healthpb "google.golang.org/grpc/health/grpc_health_v1"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
)

// The gzip the server answers compressed calls with runs at its fastest
// level: a pull of a whole project is compressed as it is sent, and at the
// default level compressing took as much of the server's CPU as reading
// the ledger, for a few percent fewer bytes (BenchmarkFirstSync: sync/raw
// 2.5 against 3.0; BenchmarkWire's push bytes 4 % more, where the device
// shares the process). grpc-go's level is the process's, set once at
// start.
func init() {
	if err := gzip.SetLevel(flate.BestSpeed); err != nil {
		panic(err) // BestSpeed is a valid level
	}
}

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
	// Shared says other servers append to the same store (several tampd on
	// one PostgreSQL database). A server then catches its projection up
	// from the store before it decides anything about a project, or
	// answers a report, and waits for its own writes before it does, so
	// it never decides on stale state; the store's conditional append on
	// the chain head serialises the decisions of all of them (a loser
	// answers "the ledger moved; push again" and reloads).
	Shared bool
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

// unauthenticated lists the methods callable without a token.
var unauthenticated = map[string]bool{
	pb.AdminService_EnrollDevice_FullMethodName: true,
	pb.AdminService_ResumeDevice_FullMethodName: true,
	"/grpc.health.v1.Health/Check":              true,
	"/grpc.health.v1.Health/Watch":              true,
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

// minVerifyPart is the fewest events verifyAll gives one core.
const minVerifyPart = 512

// maxChunkBytes bounds the events of one pulled chunk, well under the 4 MiB a
// gRPC client accepts by default.
const maxChunkBytes = 2 << 20
