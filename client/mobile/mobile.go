package mobile

import (
	"context"
	"encoding/json"
	"fmt"
	"sync"
	"time"

	"tamp/client"
)

// SchemaVersion is the version of the JSON the facade reads and writes.
const SchemaVersion = "tamp.mobile/1"

// Clock is the app's clock, for apps that pin time (nil means the
// system's).
type Clock interface {
	// NowMicros returns the time in microseconds since 1970-01-01 UTC.
	NowMicros() int64
}

// SyncProgress receives a sync's progress, after every pushed batch and
// pulled chunk.
type SyncProgress interface {
	// OnProgress reports a phase ("push" or "pull"), the entries sent or
	// received so far in it, their bytes, and the entries to push (zero
	// when unknown).
	OnProgress(phase string, entries, bytes, total int64)
}

// Cancel stops the calls it is passed to, from another thread. The zero
// value is not usable: make one with NewCancel. A Cancel is spent once
// cancelled.
type Cancel struct {
	ctx    context.Context
	cancel context.CancelFunc
}

// NewCancel returns a Cancel for one or more calls.
func NewCancel() *Cancel {
	ctx, cancel := context.WithCancel(context.Background())
	return &Cancel{ctx: ctx, cancel: cancel}
}

// Cancel stops the calls in progress that were given c, and any later.
func (c *Cancel) Cancel() { c.cancel() }

func (c *Cancel) context() context.Context {
	if c == nil {
		return context.Background()
	}
	return c.ctx
}

// Store is a device's store, open. It is safe for use from several
// threads.
type Store struct {
	s *client.Store

	mu    sync.Mutex
	conns map[string]*connection // by address and CA file
}

// Open opens the store at path (a file in the app's own directory),
// creating it and the device's key on first use. clock may be nil.
func Open(path string, clock Clock) (*Store, error) {
	opts := client.Options{}
	if clock != nil {
		opts.Now = func() time.Time { return time.UnixMicro(clock.NowMicros()) }
	}
	s, err := client.Open(context.Background(), path, opts)
	if err != nil {
		return nil, wrap(err)
	}
	return &Store{s: s, conns: map[string]*connection{}}, nil
}

// Close closes the store and its connections.
func (s *Store) Close() error {
	s.mu.Lock()
	for _, c := range s.conns {
		c.close()
	}
	s.conns = map[string]*connection{}
	s.mu.Unlock()
	return wrap(s.s.Close())
}

// DeviceID returns the device's id.
func (s *Store) DeviceID() string { return s.s.DeviceID() }

// User returns the user the device is enrolled for ("" before enrolment).
func (s *Store) User() string { return s.s.User() }

// NewID returns a new id for a record the app is about to create.
func (s *Store) NewID() string { return s.s.NewID() }

// Projects returns the ids of the projects the device holds, as
// {"schema", "projects": [...]}.
func (s *Store) Projects() (string, error) {
	ps, err := s.s.KnownProjects(context.Background())
	if err != nil {
		return "", wrap(err)
	}
	return out("projects", ps)
}

// out marshals v as the payload name of a versioned object.
func out(name string, v any) (string, error) {
	b, err := json.Marshal(map[string]any{"schema": SchemaVersion, name: v})
	if err != nil {
		return "", wrap(err)
	}
	return string(b), nil
}

// in unmarshals an input's JSON, refusing unknown fields so that a typo in
// a field name is not silently dropped.
func in(what, text string, v any) error {
	dec := json.NewDecoder(bytesReader(text))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		return &Error{Reason: ReasonInvalidJSON, Field: what, Message: fmt.Sprintf("%s: %v", what, err)}
	}
	return nil
}
