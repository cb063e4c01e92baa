package server

import (
	"context"
	"crypto/ed25519"
	"encoding/hex"
	"time"
)

// Store is what the server needs of its storage: the project ledgers and
// the devices. It is narrow so that stores of different engines stand
// behind one server: package sqlitestore (one SQLite file, the default) and
// package pgstore (PostgreSQL, which several tampd may share). The
// conformance suite in package storetest holds a store to the contract
// below; every store runs it.
//
// Common to all methods:
//
//   - A store is safe for concurrent use, from several goroutines and, for
//     a store several processes share, from several processes.
//   - A method that writes does all of its writes or none: one that fails
//     leaves the store as it was.
//   - Nothing is reported written before it is committed: once a write
//     returns nil, a later read (of any caller) sees it, and it survives a
//     crash of the process by the store's own durability setting.
//   - The sentinel errors (ErrNoProject, ErrNoDevice, ErrNoUser,
//     ErrCodeInvalid, ErrConflict, ErrDeviceExists, ErrNoInvitation) are
//     returned wrapped, where a method says so; callers test them with
//     errors.Is.
//   - A call that failed because the storage could not write or read
//     wraps ErrStorageFull, ErrStorageReadOnly or ErrStorageIO into its
//     error: the server then reports NOT_SERVING and probes (Probe) until
//     a write succeeds. Other errors are the store's own.
//   - Times are kept to the microsecond.
//
// The server decides what enters a ledger (which events, their sequence
// numbers and chain hashes); the store keeps the rows it is given, checks
// that each append follows the head it was decided on, and holds each
// event once.
type Store interface {
	// Probe commits a small write (and removes it again), to tell whether
	// the store can write now. It returns the storage fault, wrapped, when
	// it cannot, and recovers what a fault left unusable (a connection
	// opened read-only) before it reports one. It leaves nothing any other
	// method reads.
	Probe(ctx context.Context) error

	// CreateProject creates an empty ledger at epoch 1, whose head is
	// genesis (h(0), which the server computes) at sequence 0. It fails
	// (with an error of the store's own) when the id is taken, leaving
	// that project as it was.
	CreateProject(ctx context.Context, id, name string, genesis Hash, now time.Time) error
	// Head returns a project's chain head as committed: its Project, its
	// epoch, the sequence number of its last entry (0 when empty) and
	// h(Seq). ErrNoProject when there is no such project.
	Head(ctx context.Context, project string) (Checkpoint, error)
	// After returns up to limit entries after seq, in order of sequence
	// number with no gaps, each with its event bytes exactly as appended,
	// its hash and its skew; none for limit 0 or seq at or past the head.
	After(ctx context.Context, project string, seq uint64, limit int) ([]Entry, error)
	// HashAt returns h(seq) of a project's chain for seq 1 and later, and
	// false (and no error) when the ledger holds no entry seq, as for 0,
	// a seq past the head, or an unknown project.
	HashAt(ctx context.Context, project string, seq uint64) (Hash, bool, error)
	// Append adds rows after head in one transaction: rows are the entries
	// head.Seq+1, head.Seq+2, ... in order, and the project's head becomes
	// the last row's sequence number and hash, committed with the rows.
	// Guarantees:
	//
	//   - one chain per project: Append fails with ErrConflict, changing
	//     nothing, unless head (epoch, sequence number and hash) is the
	//     project's head when the transaction commits; of concurrent
	//     appends after one head, from any goroutine or process, exactly
	//     one succeeds and the others fail with ErrConflict, so an
	//     acknowledged Append retried after one head fails too;
	//   - each event once: a row whose event id the ledger holds already,
	//     or that two rows share, fails the whole Append and changes
	//     nothing (the server answers a pushed event it holds "already
	//     present" from its own state, and so never appends one again;
	//     the store is the last guard against an event stored twice);
	//   - ErrNoProject when there is no such project;
	//   - no rows: nothing to do, and nil, whatever head says.
	Append(ctx context.Context, project string, head Checkpoint, rows []Row) error
	// SetEpoch opens a new epoch of a project's ledger: epoch must be above
	// the current one (ErrConflict otherwise, changing nothing). The
	// entries and the head's sequence number and hash stay; an Append
	// after a head of the old epoch fails with ErrConflict.
	SetEpoch(ctx context.Context, project string, epoch uint64) error
	// ClockSkews returns, for the events appended with a device clock skew
	// beyond the limit (a non-zero Row.SkewMicros), the skew in
	// microseconds, by event id; events without one are left out.
	ClockSkews(ctx context.Context, project string) (map[string]int64, error)
	// ReferenceData returns the entries of reference kinds, in order of
	// sequence number: the rows whose Kind the ledger's kind descriptors
	// mark as Reference (ledger.KindDescriptor; the set-up, specs,
	// references, equipment, standard counts and moisture corrections: the
	// records that grade and check the tests, which a new device pulls
	// first).
	ReferenceData(ctx context.Context, project string) ([]Entry, error)

	// AddUser creates a user; a server administrator may create projects
	// and manage all of them. It fails (with an error of the store's own)
	// when the id is taken.
	AddUser(ctx context.Context, id, name string, serverAdmin bool, now time.Time) error
	// User returns a user; ErrNoUser when there is none by that id.
	User(ctx context.Context, id string) (User, error)
	// CountUsers returns how many users exist, leaving out the server's
	// own (ServerIdentity).
	CountUsers(ctx context.Context) (int, error)
	// SetMember gives an existing user a role on an existing project,
	// replacing any other role the user held there.
	SetMember(ctx context.Context, project, user string, role Role) error
	// Role returns a user's role on a project, or "" (and no error) when
	// not a member.
	Role(ctx context.Context, project, user string) (Role, error)
	// Members lists a project's members with their users' names and
	// administrator flags, by name, then user id (in byte order).
	Members(ctx context.Context, project string) ([]Member, error)
	// Devices lists devices, of one user or (user "") all, in order of
	// enrolment, then device id. TokenHash may be left empty.
	Devices(ctx context.Context, user string) ([]Device, error)
	// Revoke revokes a device; revoking it again changes nothing.
	// ErrNoDevice when there is no such device.
	Revoke(ctx context.Context, device string, now time.Time) error
	// ProjectsOf lists the projects a user is a member of, by project id.
	ProjectsOf(ctx context.Context, user string) ([]string, error)
	// AddEnrollmentCode stores the hash of a one-time code for a user's
	// device, valid while now is before expires.
	AddEnrollmentCode(ctx context.Context, codeHash []byte, user string, expires time.Time) error
	// Enroll uses up a code and registers the device (d's id, name and key)
	// for the code's user with its token's hash, in one transaction, and
	// returns d with UserID set. A code enrols one device only, also under
	// concurrent calls: ErrCodeInvalid when it is unknown, used, voided or
	// expired at now. ErrDeviceExists when the device id is enrolled
	// already; the code then stays unused.
	Enroll(ctx context.Context, codeHash []byte, d Device, tokenHash []byte, now time.Time) (Device, error)
	// DeviceByToken returns the device a token's hash belongs to, revoked
	// or not, with its TokenHash; ErrNoDevice when none.
	DeviceByToken(ctx context.Context, tokenHash []byte) (Device, error)
	// Device returns a device by id, with its TokenHash; ErrNoDevice when
	// none.
	Device(ctx context.Context, id string) (Device, error)

	// Invite records a pending invitation of inv.User to inv.Project or,
	// when one is pending already, gives it inv's role, inviter and time
	// (there is at most one pending invitation of a user to a project,
	// also under concurrent calls); it returns the pending invitation's
	// id.
	Invite(ctx context.Context, inv Invitation) (string, error)
	// Invitation returns a pending invitation by id (with the names of its
	// project and inviter), or ErrNoInvitation.
	Invitation(ctx context.Context, id string) (Invitation, error)
	// Invitations lists a user's pending invitations, oldest first, with
	// the names of their projects and inviters.
	Invitations(ctx context.Context, user string) ([]Invitation, error)
	// ResolveInvitation closes a pending invitation: accepted, it makes the
	// user a member with the invitation's role in the same transaction
	// (replacing any role held); declined, membership is untouched. It
	// returns the invitation, and ErrNoInvitation when it is not pending:
	// of concurrent calls on one invitation exactly one succeeds.
	ResolveInvitation(ctx context.Context, id string, accept bool, now time.Time) (Invitation, error)
	// DropEnrollmentCodes voids a user's unused enrolment codes; devices
	// enrolled with used ones stay.
	DropEnrollmentCodes(ctx context.Context, user string) error

	// ServerIdentity returns the server's own signing identity, storing
	// fresh() (with a user and a device row for it, which CountUsers does not
	// count) when there is none yet. It is created once: later calls, and
	// concurrent first calls (of several processes on one store too),
	// return the identity stored first.
	ServerIdentity(ctx context.Context, fresh func() Identity) (Identity, error)
	// RegisterDevice adds a device the ledger or a certificate vouches for
	// (after a restore from an older copy), revoked when d.Revoked, and its
	// user (named userName, no administrator) when missing. With no
	// d.TokenHash no token finds the device until SetToken gives it one. It
	// returns false, changing nothing, when the device is known already.
	RegisterDevice(ctx context.Context, d Device, userName string, now time.Time) (bool, error)
	// SetToken replaces a device's token hash: the old token no longer
	// finds it. ErrNoDevice when there is no such device.
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
	// DeviceID and DeviceSeq are the signing device and its number for the
	// event, as the append's Row gave them: what a pull needs of an entry
	// without decoding its envelope.
	DeviceID  string
	DeviceSeq uint64
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
