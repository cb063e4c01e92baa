package server

import (
	"context"
	"crypto/ed25519"
	"time"

	"tamp/internal/ledger"
)

// Store is what the server needs of its storage: the project ledgers and
// the devices. It is narrow so that a PostgreSQL store can stand beside the
// SQLite one (package sqlitestore) when a deployment outgrows one machine.
// Implementations return ErrNoProject, ErrNoDevice, ErrCodeInvalid and
// ErrConflict (wrapped) where those apply, and must be safe for concurrent use.
type Store interface {
	// CreateProject creates an empty ledger at epoch 1.
	CreateProject(ctx context.Context, id, name string, now time.Time) error
	// Head returns a project's chain head.
	Head(ctx context.Context, project string) (ledger.Checkpoint, error)
	// After returns up to limit entries after seq, in order.
	After(ctx context.Context, project string, seq uint64, limit int) ([]ledger.Entry, error)
	// HashAt returns h(seq) of a project's chain (seq 0: the genesis hash).
	HashAt(ctx context.Context, project string, seq uint64) (ledger.Hash, bool, error)
	// Sequences returns the sequence numbers of those of the events that
	// the ledger holds.
	Sequences(ctx context.Context, project string, eventIDs []string) (map[string]uint64, error)
	// Append adds rows after head in one transaction, failing with
	// ErrConflict when the ledger's head is no longer head.
	Append(ctx context.Context, project string, head ledger.Checkpoint, rows []Row) error
	// SetEpoch opens a new epoch of a project's ledger.
	SetEpoch(ctx context.Context, project string, epoch uint64) error
	// ClockSkews returns, for the events appended with a device clock skew
	// beyond the limit, the skew in microseconds, by event id.
	ClockSkews(ctx context.Context, project string) (map[string]int64, error)
	// ReferenceData returns the entries of reference kinds (set-up, specs,
	// references, equipment, corrections), in order.
	ReferenceData(ctx context.Context, project string) ([]ledger.Entry, error)

	// AddUser creates a user.
	AddUser(ctx context.Context, id, name string, now time.Time) error
	// AddEnrollmentCode stores the hash of a one-time code for a user's device.
	AddEnrollmentCode(ctx context.Context, codeHash []byte, user string, expires time.Time) error
	// Enroll uses up a code and registers the device with its token's hash.
	Enroll(ctx context.Context, codeHash []byte, d Device, tokenHash []byte, now time.Time) (Device, error)
	// DeviceByToken returns the device a token's hash belongs to.
	DeviceByToken(ctx context.Context, tokenHash []byte) (Device, error)
	// Device returns a device by id.
	Device(ctx context.Context, id string) (Device, error)
}

// Row is one event appended to a ledger, with its place in the chain.
type Row struct {
	Seq        uint64
	EventID    string
	DeviceID   string
	DeviceSeq  uint64
	Kind       string
	RecordID   string
	Envelope   []byte
	Hash       ledger.Hash
	SkewMicros int64 // the pushing device's clock skew, when beyond the limit
	Received   time.Time
}

// Device is an enrolled device.
type Device struct {
	ID        string
	UserID    string
	Name      string
	PublicKey ed25519.PublicKey
	Revoked   bool
}
