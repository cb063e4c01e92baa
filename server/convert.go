package server

import (
	"context"

	"tamp/internal/ledger"
)

// This file is the one place where the Store's types (Hash, Checkpoint,
// Entry) become the ledger's and back: the Store interface names no type
// of the ledger, so a store outside this module can implement it, and the
// rest of the server works in the ledger's types through the store* calls
// below.

func storeHash(h ledger.Hash) Hash { return Hash(h) }

func ledgerHash(h Hash) ledger.Hash { return ledger.Hash(h) }

func storeCheckpoint(c ledger.Checkpoint) Checkpoint {
	return Checkpoint{Project: c.Project, Epoch: c.Epoch, Seq: c.Seq, Hash: storeHash(c.Hash)}
}

func ledgerCheckpoint(c Checkpoint) ledger.Checkpoint {
	return ledger.Checkpoint{Project: c.Project, Epoch: c.Epoch, Seq: c.Seq, Hash: ledgerHash(c.Hash)}
}

func ledgerEntries(es []Entry) []ledger.Entry {
	if es == nil {
		return nil
	}
	out := make([]ledger.Entry, len(es))
	for i, e := range es {
		out[i] = ledger.Entry{Seq: e.Seq, Event: e.Event, Hash: ledgerHash(e.Hash), SkewMicros: e.SkewMicros}
	}
	return out
}

// storeCreateProject creates a project's ledger, empty at epoch 1.
func (s *Server) storeCreateProject(ctx context.Context, id, name string) error {
	return s.opts.Store.CreateProject(ctx, id, name, storeHash(ledger.Genesis(id)), s.opts.Now())
}

// storeHead returns a project's chain head as the store holds it.
func (s *Server) storeHead(ctx context.Context, project string) (ledger.Checkpoint, error) {
	h, err := s.opts.Store.Head(ctx, project)
	return ledgerCheckpoint(h), err
}

// storeAfter returns up to limit stored entries after seq, in order.
func (s *Server) storeAfter(ctx context.Context, project string, seq uint64, limit int) ([]ledger.Entry, error) {
	es, err := s.opts.Store.After(ctx, project, seq, limit)
	return ledgerEntries(es), err
}

// storeHashAt returns h(seq) of a project's chain, and false when the
// ledger holds no entry seq; h(0) is the genesis hash.
func (s *Server) storeHashAt(ctx context.Context, project string, seq uint64) (ledger.Hash, bool, error) {
	if seq == 0 {
		return ledger.Genesis(project), true, nil
	}
	h, ok, err := s.opts.Store.HashAt(ctx, project, seq)
	return ledgerHash(h), ok, err
}

// storeAppend writes rows after head in one transaction.
func (s *Server) storeAppend(ctx context.Context, project string, head ledger.Checkpoint, rows []Row) error {
	return s.opts.Store.Append(ctx, project, storeCheckpoint(head), rows)
}

// storeReferenceData returns the stored entries of reference kinds, in
// order, as the store gives them (a pull sends them without decoding).
func (s *Server) storeReferenceData(ctx context.Context, project string) ([]Entry, error) {
	return s.opts.Store.ReferenceData(ctx, project)
}

// storeEntries returns up to limit stored entries after seq, in order, as
// the store gives them (a pull sends them without decoding).
func (s *Server) storeEntries(ctx context.Context, project string, seq uint64, limit int) ([]Entry, error) {
	return s.opts.Store.After(ctx, project, seq, limit)
}
