package server

import (
	"context"
	"errors"
	"fmt"
	"sync"
	"sync/atomic"

	"google.golang.org/grpc/codes"

	"tamp/internal/ledger"
)

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
		if err := s.catchUp(ctx, p, id); err != nil {
			p.mu.Unlock()
			return nil, err
		}
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
	view.Reserve(int(head.Seq))
	seqs := make(map[string]uint64, head.Seq)
	devs := newDeviceSeqs()
	if err := s.storedEvents(ctx, id, 0, head.Seq, func(seq uint64, sg ledger.Signed) error {
		if _, err := view.ApplyValidated(sg); err != nil {
			return fmt.Errorf("server: stored event %d of %s: %w", seq, id, err)
		}
		seqs[sg.Event.ID] = seq
		devs.hold(&sg.Event)
		return nil
	}); err != nil {
		return err
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
	if s.opts.Shared { // catching up changes the state: the write side
		return s.inspect(ctx, id, fn)
	}
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

func projectErr(s *Server, ctx context.Context, id string, err error) error {
	if errors.Is(err, ErrNoProject) {
		return statusError(codes.NotFound, reasonNoProject, "project_id", "", fmt.Sprintf("no project %s on this server", id))
	}
	return s.internal(ctx, "load project", err)
}

// catchUp brings a loaded project's state up to the store's head when
// other servers share the store (Options.Shared), under p.mu's write side:
// it waits for this server's own writes, then applies what the others
// appended after this state's head, or reloads when this head is not on
// the store's chain (another epoch, a failed write).
func (s *Server) catchUp(ctx context.Context, p *project, id string) error {
	if !s.opts.Shared {
		return nil
	}
	p.write.Lock()
	head, err := s.storeHead(ctx, id)
	if err != nil {
		p.write.Unlock()
		return err
	}
	if head.Epoch == p.head.Epoch && head.Seq == p.head.Seq && head.Hash == p.head.Hash {
		p.write.Unlock()
		return nil
	}
	if head.Epoch == p.head.Epoch && head.Seq > p.head.Seq {
		if h, ok, err := s.storeHashAt(ctx, id, p.head.Seq); err == nil && ok && h == p.head.Hash {
			err := s.applyStored(ctx, p, id, head)
			p.write.Unlock()
			if err == nil {
				return nil
			}
			s.log.WarnContext(ctx, "catching up from the shared store failed; reloading", "project", id, "err", err)
			return s.load(ctx, p, id)
		}
	}
	p.write.Unlock()
	return s.load(ctx, p, id)
}

// applyStored applies the stored entries after p.head up to head to p's
// state.
func (s *Server) applyStored(ctx context.Context, p *project, id string, head ledger.Checkpoint) error {
	if err := s.storedEvents(ctx, id, p.head.Seq, head.Seq, func(seq uint64, sg ledger.Signed) error {
		if _, err := p.view.ApplyValidated(sg); err != nil {
			return fmt.Errorf("server: stored event %d of %s: %w", seq, id, err)
		}
		p.seqs[sg.Event.ID] = seq
		p.devs.hold(&sg.Event)
		return nil
	}); err != nil {
		return err
	}
	p.head = head
	s.syncDevices(ctx, id, p.view)
	return nil
}

// storedChunk is a run of stored events, decoded, or the error that ended
// the reading.
type storedChunk struct {
	seqs []uint64
	evs  []ledger.Signed
	err  error
}

// storedEvents calls fn, in order, with each stored event of a project
// after seq up to to, decoded. Three goroutines share the work: one reads
// chunks of entries from the store, one decodes them, and this one calls
// fn, so that loading a project costs about what its slowest stage costs
// rather than the three together. Events are not validated again: the
// ledger holds only events a push validated when it admitted them (a
// server restored from a copy holds a copy of such a ledger, and what it
// lost comes back through pushes), and a rule checked anew by a later
// version could only make the server's state differ from the devices'.
// An event that does not decode is an error.
func (s *Server) storedEvents(ctx context.Context, id string, seq, to uint64, fn func(uint64, ledger.Signed) error) error {
	const chunk = 1000
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	type read struct {
		entries []ledger.Entry
		err     error
	}
	reads := make(chan read, 2)
	go func() { // reads
		defer close(reads)
		for seq < to {
			entries, err := s.storeAfter(ctx, id, seq, min(chunk, int(to-seq)))
			if err == nil && len(entries) == 0 {
				err = fmt.Errorf("server: the store's head of %s is %d, but it holds entries only to %d", id, to, seq)
			}
			select {
			case reads <- read{entries, err}:
			case <-ctx.Done():
				return
			}
			if err != nil {
				return
			}
			seq = entries[len(entries)-1].Seq
		}
	}()
	chunks := make(chan storedChunk, 2)
	go func() { // decodes (the ledger holds only events it validated when admitting them)
		defer close(chunks)
		for r := range reads {
			c := storedChunk{err: r.err}
			if r.err == nil {
				c.seqs, c.evs = make([]uint64, 0, len(r.entries)), make([]ledger.Signed, 0, len(r.entries))
				for _, e := range r.entries {
					sg, err := ledger.Decode(e.Event)
					if err != nil {
						c = storedChunk{err: fmt.Errorf("server: stored event %d of %s: %w", e.Seq, id, err)}
						break
					}
					c.seqs, c.evs = append(c.seqs, e.Seq), append(c.evs, sg)
				}
			}
			select {
			case chunks <- c:
			case <-ctx.Done():
				for range reads { // let the reader see the cancel and close
				}
				return
			}
			if c.err != nil {
				cancel()
				for range reads {
				}
				return
			}
		}
	}()
	for c := range chunks {
		if c.err != nil {
			return c.err
		}
		for i, sg := range c.evs {
			if err := fn(c.seqs[i], sg); err != nil {
				cancel()
				for range chunks { // let the others see the cancel and close
				}
				return err
			}
		}
	}
	return ctx.Err()
}
