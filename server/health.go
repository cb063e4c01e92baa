package server

import (
	"context"
	"errors"
	"log/slog"
	"strings"
	"sync"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/health"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"

	pb "tamp/internal/gen/tamp/v1"
)

// Storage faults: the store cannot write for a reason outside the server,
// which the operator clears (frees space, makes the data directory
// writable) and the server then notices by itself. A Store wraps one of
// them into the error of a call that failed so.
var (
	// ErrStorageFull: the disk holding the data directory is full.
	ErrStorageFull = errors.New("server: the server's disk is full")
	// ErrStorageReadOnly: the data directory or its files may not be
	// written, or a file beside the database could not be created.
	ErrStorageReadOnly = errors.New("server: the server's data directory is read-only")
	// ErrStorageIO: the disk failed to read or write.
	ErrStorageIO = errors.New("server: the server's storage failed to read or write (an I/O error)")
)

var storageFaults = []error{ErrStorageFull, ErrStorageReadOnly, ErrStorageIO}

// storageCause returns the storage fault in err's chain, if any.
func storageCause(err error) (error, bool) {
	for _, f := range storageFaults {
		if errors.Is(err, f) {
			return f, true
		}
	}
	return nil, false
}

// DefaultStorageProbeInterval is how often a server whose store cannot
// write tries a write again (Options.StorageProbeInterval).
const DefaultStorageProbeInterval = time.Second

// writeServices are the services that write; they, and the server as a
// whole (""), are NOT_SERVING while the store cannot write. The read
// service stays SERVING.
var writeServices = []string{"", pb.SyncService_ServiceDesc.ServiceName, pb.AdminService_ServiceDesc.ServiceName}

// storageHealth is whether the store can write, reported by the standard
// health service. A storage fault turns it NOT_SERVING and starts a probe
// that writes every interval until a write succeeds; a push while it is
// NOT_SERVING probes first. It is safe for concurrent use.
type storageHealth struct {
	hs       *health.Server
	probe    func(context.Context) error
	interval time.Duration
	log      *slog.Logger

	mu      sync.Mutex
	cause   error // the storage fault, nil while the store writes
	probing bool  // the background probe runs
	closed  bool
	stop    chan struct{}
	wg      sync.WaitGroup
}

func newStorageHealth(probe func(context.Context) error, interval time.Duration, log *slog.Logger) *storageHealth {
	h := &storageHealth{hs: health.NewServer(), probe: probe, interval: interval, log: log, stop: make(chan struct{})}
	for _, svc := range writeServices {
		h.hs.SetServingStatus(svc, healthpb.HealthCheckResponse_SERVING)
	}
	h.hs.SetServingStatus(pb.LedgerReadService_ServiceDesc.ServiceName, healthpb.HealthCheckResponse_SERVING)
	return h
}

// faulted reports the store's fault, or nil.
func (h *storageHealth) faulted() error {
	h.mu.Lock()
	defer h.mu.Unlock()
	return h.cause
}

// fail records a storage fault, err its detail: health turns NOT_SERVING
// and the background probe starts, unless it runs already or h is closed.
func (h *storageHealth) fail(ctx context.Context, op string, cause, err error) {
	h.mu.Lock()
	defer h.mu.Unlock()
	if h.cause == nil {
		h.log.ErrorContext(ctx, "the store cannot write: health is NOT_SERVING until a write succeeds", "op", op, "err", err)
		for _, svc := range writeServices {
			h.hs.SetServingStatus(svc, healthpb.HealthCheckResponse_NOT_SERVING)
		}
	} else {
		h.log.WarnContext(ctx, "the store still cannot write", "op", op, "err", err)
	}
	h.cause = cause
	if !h.probing && !h.closed {
		h.probing = true
		h.wg.Add(1)
		go h.run()
	}
}

// healed records that the store wrote again.
func (h *storageHealth) healed(ctx context.Context) {
	h.mu.Lock()
	defer h.mu.Unlock()
	if h.cause == nil {
		return
	}
	h.cause = nil
	h.log.InfoContext(ctx, "the store writes again: health is SERVING")
	for _, svc := range writeServices {
		h.hs.SetServingStatus(svc, healthpb.HealthCheckResponse_SERVING)
	}
}

// check writes a probe: it records the outcome and returns the probe's
// error.
func (h *storageHealth) check(ctx context.Context) error {
	err := h.probe(ctx)
	if err == nil {
		h.healed(ctx)
		return nil
	}
	if cause, ok := storageCause(err); ok {
		h.fail(ctx, "probe", cause, err)
	}
	return err
}

// run probes every interval until a probe succeeds or h closes.
func (h *storageHealth) run() {
	defer h.wg.Done()
	t := time.NewTicker(h.interval)
	defer t.Stop()
	for {
		select {
		case <-h.stop:
			return
		case <-t.C:
		}
		ctx, cancel := context.WithTimeout(context.Background(), h.interval+10*time.Second)
		err := h.check(ctx)
		cancel()
		h.mu.Lock()
		if err == nil || h.cause == nil {
			h.probing = false
			h.mu.Unlock()
			return
		}
		h.mu.Unlock()
	}
}

// close stops the probe and turns every service NOT_SERVING for good.
func (h *storageHealth) close() {
	h.mu.Lock()
	if !h.closed {
		h.closed = true
		close(h.stop)
	}
	h.mu.Unlock()
	h.wg.Wait()
	h.hs.Shutdown()
}

// storageFault answers a call whose store call failed with a storage fault:
// it records the fault and returns Unavailable naming the cause, which the
// device retries. ok is false when err is no storage fault.
func (s *Server) storageFault(ctx context.Context, op string, err error) (st error, ok bool) {
	cause, ok := storageCause(err)
	if !ok {
		return nil, false
	}
	s.health.fail(ctx, op, cause, err)
	return unavailable(cause), true
}

// unavailable returns the Unavailable status of a storage fault, naming it.
func unavailable(cause error) error {
	msg := strings.TrimPrefix(cause.Error(), "server: ") +
		"; nothing of this call was stored: try again later (the server resumes by itself once its operator clears the fault)"
	switch cause {
	case ErrStorageFull:
		return statusError(codes.Unavailable, reasonStorageFull, "", "", msg)
	case ErrStorageReadOnly:
		return statusError(codes.Unavailable, reasonStorageReadOnly, "", "", msg)
	}
	return statusError(codes.Unavailable, reasonStorageIO, "", "", msg)
}

// writable returns nil when the store can write: at once while no storage
// fault is known, and otherwise after a probe write succeeds. It returns
// Unavailable naming the cause while the fault lasts.
func (s *Server) writable(ctx context.Context) error {
	if s.health.faulted() == nil {
		return nil
	}
	err := s.health.check(ctx)
	if err == nil {
		return nil
	}
	if cause, ok := storageCause(err); ok {
		return unavailable(cause)
	}
	return s.internal(ctx, "probe the store", err)
}

// CheckStorage writes a probe to the store now, as tampd does when it
// starts. A storage fault is no error here: the server logs it, reports
// NOT_SERVING, serves reads and probes in the background until a write
// succeeds. It returns the probe's error when it failed otherwise.
func (s *Server) CheckStorage(ctx context.Context) error {
	err := s.health.check(ctx)
	if _, ok := storageCause(err); ok {
		return nil
	}
	return err
}

// Close stops the background probe, if one runs, and reports every service
// NOT_SERVING. Call it once the gRPC server has stopped (or as it begins a
// graceful stop).
func (s *Server) Close() error {
	s.health.close()
	return nil
}
