package server

import (
	"context"
	"crypto/ed25519"
	"encoding/hex"
	"time"
)

// Store is what the server needs of its storage: the project ledgers and
// the devices. It is narrow so that a PostgreSQL store can stand beside the
// SQLite one (package sqlitestore) when a deployment outgrows one machine.
// Implementations return ErrNoProject, ErrNoDevice, ErrCodeInvalid and
// ErrConflict (wrapped) where those apply, wrap ErrStorageFull,
// ErrStorageReadOnly or ErrStorageIO into the error of any call that failed
// because the storage could not write or read, and must be safe for
// concurrent use.
type Store interface {
	// Probe commits a small write, to tell whether the store can write now
	// (after a storage fault). It returns the storage fault, wrapped, when
	// it cannot, and recovers what a fault left unusable (a connection
	// opened read-only) before it reports one.
	Probe(ctx context.Context) error
	// CreateProject creates an empty ledger at epoch 1, whose head is
	// genesis (h(0), which the server computes) at sequence 0.
	CreateProject(ctx context.Context, id, name string, genesis Hash, now time.Time) error
	// Head returns a project's chain head.
	Head(ctx context.Context, project string) (Checkpoint, error)
	// After returns up to limit entries after seq, in order.
	After(ctx context.Context, project string, seq uint64, limit int) ([]Entry, error)
	// HashAt returns h(seq) of a project's chain for seq 1 and later, and
	// false when the ledger holds no entry seq.
	HashAt(ctx context.Context, project string, seq uint64) (Hash, bool, error)
	// Append adds rows after head in one transaction, failing with
	// ErrConflict when the ledger's head is no longer head.
	Append(ctx context.Context, project string, head Checkpoint, rows []Row) error
	// SetEpoch opens a new epoch of a project's ledger.
	SetEpoch(ctx context.Context, project string, epoch uint64) error
	// ClockSkews returns, for the events appended with a device clock skew
	// beyond the limit, the skew in microseconds, by event id.
	ClockSkews(ctx context.Context, project string) (map[string]int64, error)
	// ReferenceData returns the entries of reference kinds (set-up, specs,
	// references, equipment, corrections), in order.
	ReferenceData(ctx context.Context, project string) ([]Entry, error)

	// AddUser creates a user; a server administrator may create projects
	// and manage all of them.
	AddUser(ctx context.Context, id, name string, serverAdmin bool, now time.Time) error
	// User returns a user.
	User(ctx context.Context, id string) (User, error)
	// CountUsers returns how many users exist.
	CountUsers(ctx context.Context) (int, error)
	// SetMember gives a user a role on a project (replacing any other).
	SetMember(ctx context.Context, project, user string, role Role) error
	// Role returns a user's role on a project, or "" when not a member.
	Role(ctx context.Context, project, user string) (Role, error)
	// Members lists a project's members.
	Members(ctx context.Context, project string) ([]Member, error)
	// Devices lists devices, of one user or (user "") all.
	Devices(ctx context.Context, user string) ([]Device, error)
	// Revoke revokes a device.
	Revoke(ctx context.Context, device string, now time.Time) error
	// ProjectsOf lists the projects a user is a member of.
	ProjectsOf(ctx context.Context, user string) ([]string, error)
	// AddEnrollmentCode stores the hash of a one-time code for a user's device.
	AddEnrollmentCode(ctx context.Context, codeHash []byte, user string, expires time.Time) error
	// Enroll uses up a code and registers the device with its token's hash;
	// ErrDeviceExists when the device id is enrolled already.
	Enroll(ctx context.Context, codeHash []byte, d Device, tokenHash []byte, now time.Time) (Device, error)
	// DeviceByToken returns the device a token's hash belongs to.
	DeviceByToken(ctx context.Context, tokenHash []byte) (Device, error)
	// Device returns a device by id.
	Device(ctx context.Context, id string) (Device, error)

	// Invite records a pending invitation of inv.User to inv.Project or,
	// when one is pending already, gives it inv's role, inviter and time;
	// it returns the pending invitation's id.
	Invite(ctx context.Context, inv Invitation) (string, error)
	// Invitation returns a pending invitation by id, or ErrNoInvitation.
	Invitation(ctx context.Context, id string) (Invitation, error)
	// Invitations lists a user's pending invitations, oldest first, with
	// the names of their projects and inviters.
	Invitations(ctx context.Context, user string) ([]Invitation, error)
	// ResolveInvitation closes a pending invitation: accepted, it makes the
	// user a member with the invitation's role in the same transaction. It
	// returns ErrNoInvitation when the invitation is not pending.
	ResolveInvitation(ctx context.Context, id string, accept bool, now time.Time) (Invitation, error)
	// DropEnrollmentCodes voids a user's unused enrolment codes.
	DropEnrollmentCodes(ctx context.Context, user string) error

	// ServerIdentity returns the server's own signing identity, storing
	// fresh() (with a user and a device row for it, which CountUsers does not
	// count) when there is none yet.
	ServerIdentity(ctx context.Context, fresh func() Identity) (Identity, error)
	// RegisterDevice adds a device the ledger or a certificate vouches for
	// (after a restore from an older copy), and its user when missing. It
	// returns false, changing nothing, when the device is known already.
	RegisterDevice(ctx context.Context, d Device, userName string, now time.Time) (bool, error)
	// SetToken replaces a device's token hash.
	SetToken(ctx context.Context, device string, tokenHash []byte) error
}

// Identity is the server's own signing identity: a device of its own, with
// a user of its own, whose key signs the entries the server makes.
type Identity struct {
	DeviceID string
	UserID   string
	Key      ed25519.PrivateKey
}

// Hash is a SHA-256 hash of a project's chain: h(n) = SHA-256(h(n-1) || n
// || event bytes), h(0) a hash of the project's id.
type Hash [32]byte

// String returns the hash in hexadecimal.
func (h Hash) String() string { return hex.EncodeToString(h[:]) }

// Checkpoint is a point of a project's chain: after Seq entries of epoch
// Epoch, the chain's hash is Hash.
type Checkpoint struct {
	Project string
	Epoch   uint64
	Seq     uint64
	Hash    Hash
}

// Entry is one stored event at its place in a project's chain.
type Entry struct {
	Seq   uint64
	Event []byte // the envelope's bytes, exactly as signed and pushed
	Hash  Hash   // h(Seq)
	// SkewMicros is the pushing device's clock skew when the entry was
	// appended, when beyond the project's limit (Row.SkewMicros); zero
	// otherwise. It is not part of the chain.
	SkewMicros int64
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
	Hash       Hash
	SkewMicros int64 // the pushing device's clock skew, when beyond the limit
	Received   time.Time
}

// User is a person with an account.
type User struct {
	ID          string
	Name        string
	ServerAdmin bool
}

// Role is what a member may do on a project.
type Role string

// The roles.
const (
	Inspector Role = "inspector" // records, corrects and voids their own tests, logs retests and equipment checks
	Office    Role = "office"    // records placements and hauls, registers equipment, reviews tests
	QA        Role = "qa"        // defines specs, references, borrow sources and corrections; reviews; audits
	Admin     Role = "admin"     // manages membership and devices, sets the project up
)

// Member is a user's role on a project.
type Member struct {
	User
	Role Role
}

// Device is an enrolled device.
type Device struct {
	ID        string
	UserID    string
	Name      string
	PublicKey ed25519.PublicKey
	TokenHash []byte // SHA-256 of the bearer token
	Revoked   bool
}

// Invitation is an invitation of an existing user to a project, made by
// one of its administrators; the user becomes a member only by accepting.
type Invitation struct {
	ID          string
	Project     string
	ProjectName string // filled by Invitations
	User        string
	Role        Role
	InvitedBy   string
	InviterName string // filled by Invitations
	Created     time.Time
}
