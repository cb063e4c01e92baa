package ledger

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"fmt"
)

// Hash is a link of a project's hash chain.
type Hash [sha256.Size]byte

func (h Hash) String() string { return hex.EncodeToString(h[:]) }

// Genesis is h(0) of a project's chain: SHA-256 of a fixed label and the
// project id, so that no two projects' chains can be spliced together.
func Genesis(project string) Hash {
	return sha256.Sum256([]byte("tamp.v1 ledger chain\x00" + project))
}

// Link returns h(n) = SHA-256(h(n-1) || n || event bytes), n as eight
// big-endian bytes and event bytes the envelope encoding (Signed.Bytes).
func Link(prev Hash, n uint64, event []byte) Hash {
	h := sha256.New()
	h.Write(prev[:])
	var seq [8]byte
	binary.BigEndian.PutUint64(seq[:], n)
	h.Write(seq[:])
	h.Write(event)
	var out Hash
	h.Sum(out[:0])
	return out
}

// Checkpoint is a verified point of a chain: after Seq events of epoch
// Epoch the chain hash is Hash. Seq zero is the start, whose hash is
// Genesis(Project).
type Checkpoint struct {
	Project string
	Epoch   uint64
	Seq     uint64
	Hash    Hash
}

// Start returns the checkpoint before any event of a project's epoch.
func Start(project string, epoch uint64) Checkpoint {
	return Checkpoint{Project: project, Epoch: epoch, Hash: Genesis(project)}
}

// Entry is one event at its place in a chain.
type Entry struct {
	Seq   uint64
	Event []byte // envelope bytes
	Hash  Hash   // h(Seq)
	// SkewMicros is the pushing device's clock skew the server recorded
	// for the entry, when beyond the project's limit; not part of the chain.
	SkewMicros int64
}

// Log is a chain built in memory by appending: what a server does, and what
// tests use as one. It is not safe for concurrent use.
type Log struct {
	head    Checkpoint
	entries []Entry
}

// NewLog returns an empty log of a project's epoch.
func NewLog(project string, epoch uint64) *Log { return &Log{head: Start(project, epoch)} }

// Append adds event bytes to the chain and returns its entry.
func (l *Log) Append(event []byte) Entry {
	n := l.head.Seq + 1
	e := Entry{Seq: n, Event: bytes.Clone(event), Hash: Link(l.head.Hash, n, event)}
	l.entries = append(l.entries, e)
	l.head.Seq, l.head.Hash = n, e.Hash
	return e
}

// Head returns the log's last checkpoint.
func (l *Log) Head() Checkpoint { return l.head }

// After returns up to max entries after sequence seq (max <= 0: all).
func (l *Log) After(seq uint64, max int) []Entry {
	if seq >= uint64(len(l.entries)) {
		return nil
	}
	out := l.entries[seq:]
	if max > 0 && len(out) > max {
		out = out[:max]
	}
	return out
}

// Verifier checks chain entries as they arrive, starting from a checkpoint
// the holder trusts. It is not safe for concurrent use.
type Verifier struct {
	at Checkpoint
}

// NewVerifier returns a verifier that continues from cp.
func NewVerifier(cp Checkpoint) *Verifier { return &Verifier{at: cp} }

// At returns the last verified checkpoint.
func (v *Verifier) At() Checkpoint { return v.at }

// CheckHead compares the server's reported head with the verified point,
// before any entry is accepted. It returns ErrEpochRolledBack when the
// server's epoch is older, ErrRolledBack when the server holds fewer events
// than were verified, and ErrForked when it holds exactly as many with
// another hash. A newer epoch is not an error here: the caller starts
// verifying the new epoch from its start and re-pushes what is missing.
func (v *Verifier) CheckHead(server Checkpoint) error {
	switch {
	case server.Project != v.at.Project:
		return fmt.Errorf("%w: project %s, verified %s", ErrForked, server.Project, v.at.Project)
	case server.Epoch < v.at.Epoch:
		return fmt.Errorf("%w: server epoch %d, verified %d", ErrEpochRolledBack, server.Epoch, v.at.Epoch)
	case server.Epoch > v.at.Epoch:
		return nil
	case server.Seq < v.at.Seq:
		return fmt.Errorf("%w: server holds %d events, this device verified %d", ErrRolledBack, server.Seq, v.at.Seq)
	case server.Seq == v.at.Seq && server.Hash != v.at.Hash:
		return fmt.Errorf("%w: at event %d the server's hash is %s, verified %s", ErrForked, server.Seq, server.Hash, v.at.Hash)
	}
	return nil
}

// CheckAnchor compares the server's chain point at the verified sequence
// with the verified one. It returns ErrForked when the hashes differ: the
// server's history before that point was rewritten.
func (v *Verifier) CheckAnchor(anchor Checkpoint) error {
	if anchor.Epoch == v.at.Epoch && anchor.Seq == v.at.Seq && anchor.Hash != v.at.Hash {
		return fmt.Errorf("%w: at event %d the server's hash is %s, verified %s", ErrForked, anchor.Seq, anchor.Hash, v.at.Hash)
	}
	if anchor.Epoch == v.at.Epoch && anchor.Seq != v.at.Seq {
		return fmt.Errorf("%w: the server anchored event %d, not %d", ErrChainGap, anchor.Seq, v.at.Seq)
	}
	return nil
}

// Verify checks entries that continue the chain from the verified point and
// advances it. It returns ErrChainGap when an entry's sequence does not
// follow, and ErrChainBroken when its hash does not follow from the last
// verified hash and its bytes: an altered event, or a history rewritten
// before the verified point (the first entry after it then fails). On error
// the verified point stays at the last good entry.
func (v *Verifier) Verify(entries []Entry) error {
	for _, e := range entries {
		if e.Seq != v.at.Seq+1 {
			return fmt.Errorf("%w: expected event %d, got %d", ErrChainGap, v.at.Seq+1, e.Seq)
		}
		want := Link(v.at.Hash, e.Seq, e.Event)
		if want != e.Hash {
			return fmt.Errorf("%w: at event %d", ErrChainBroken, e.Seq)
		}
		v.at.Seq, v.at.Hash = e.Seq, e.Hash
	}
	return nil
}
