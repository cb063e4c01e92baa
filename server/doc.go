// Package server is the tamp sync server: the gRPC sync and administration
// services over a Store of project ledgers (package sqlitestore is the
// embedded SQLite one).
//
// # Push
//
// A device pushes a batch of signed events. The server decodes each,
// verifies the signatures with the authoring devices' registered keys (in
// batches, under the ZIP 215 rules that package ledger uses everywhere),
// validates each event, authorises it by kind, author and project, and
// appends the accepted ones in one transaction,
// each with its project sequence number and chain hash
// h(n) = SHA-256(h(n-1) || n || event bytes), and the device's high-water
// mark. The reply gives every event's outcome: accepted with its sequence,
// already present (appending is idempotent on the event id), waiting (it
// refers to a record the server has not received; the device retries it),
// or rejected with a reason and the field at fault or, for a permission
// refusal, the rule broken. A rejected event never blocks the others. The
// server keeps each project's projection in memory and so recomputes every
// test's result from its raw readings as it arrives, flagging device
// results that disagree.
//
// Pushes to one project form a pipeline: verification runs outside any
// lock; a push then decides every outcome under the project's lock,
// applying what it accepts to the projection, and writes its rows while
// the next push decides. Writes keep the order of the decisions. A reply
// is sent only once its rows are stored; when a write fails, every batch
// decided after it is refused as Aborted and the projection is reloaded
// from the store, so nothing is acknowledged that the store does not hold.
//
// # Pull
//
// Pull streams a project's ledger after the device's cursor in bounded
// chunks, each with the chain hashes and the keys of the devices that signed
// its events. The first chunk carries the server's chain point at the
// cursor (the anchor), so a device detects a server restored from an older
// copy or a rewritten history before it takes anything. A first pull can
// ask for the reference data (set-up, specs, references, equipment) ahead of
// the history, so a new device can grade offline as soon as it has them.
//
// # Epochs
//
// A device sends the chain point it last verified with each push. When the
// server's ledger does not contain that point, the server opens a new
// epoch: devices that see it push back everything they hold, and verify
// the new epoch from its start, so no acknowledged event is lost.
//
// # Gaps in a device's entries
//
// Every entry names its device's previous entry in the same project
// (prev_device_seq; device sequence numbers count across all of a device's
// projects, so they skip within one). The server keeps, per project, the
// sequence numbers it holds of each device. When it accepts an entry whose
// predecessor it neither holds nor was offered, it logs the gap and lists
// it in every push reply (MissingEntries: the device, and the range of its
// numbers the ledger lacks) until the entry arrives or is offered; any
// device holding entries in that range pushes them. The knowledge is kept
// in memory and rebuilt when a project is loaded.
//
// # Clock skew
//
// Each push carries the device's clock. A difference from the server's
// beyond the project's limit (five minutes unless the set-up says otherwise)
// is logged, returned to the device, and recorded on every event of that
// push for review. An entry whose hybrid time or device time runs more than
// a day past the server's clock is rejected (ledger.CheckAhead), as is one
// that breaks a bound on new entries (ledger.Admit: physical bounds,
// finite numbers, clocks before 2000, fields this version does not know).
// An entry the ledger holds already is "already present" whatever it says.
//
// # Storage faults
//
// When the store cannot write (a full disk, a read-only data directory, an
// I/O error: the store wraps ErrStorageFull, ErrStorageReadOnly or
// ErrStorageIO), the call fails with Unavailable naming the cause, which
// devices retry, and the standard health service reports the server and
// its writing services NOT_SERVING (the read service stays SERVING). While
// the fault lasts a push first writes a probe (Store.Probe), and a
// background probe, stopped by Close, tries every StorageProbeInterval:
// the first write that succeeds turns health SERVING again, with no
// restart.
//
// # Bad requests
//
// A request that does not decode (malformed wire data, a string field that
// is not UTF-8) is refused with InvalidArgument naming the field, before
// authentication or any handler sees it: serve with RequestCodec beside
// UnaryInterceptor and StreamInterceptor. Names of projects, users and
// devices are listed in terminals, so they may hold no control characters
// (C0, DEL, C1, bidirectional controls, line and paragraph separators).
//
// # Errors
//
// Every status the server returns carries a google.rpc.ErrorInfo detail in
// the domain "tamp": a reason code in upper snake case (NOT_A_MEMBER,
// DEVICE_REVOKED, INVALID_ARGUMENT, STORAGE_FULL...), and in its metadata
// the request field ("field") and the rule ("rule") the refusal concerns.
// Clients branch on the reason, never on the message, which is for people.
// status.go holds the table of reasons and the gRPC code each is sent with;
// the interceptors give a status that gRPC or the health service made
// without a reason the one its code names, and answer any other error with
// Internal. A status gRPC makes before any interceptor runs (an unknown
// method, a message over the size limit) carries none.
//
// # Enrolment codes
//
// An enrolment code is typed by hand on a tablet, so it is 25 symbols of
// Crockford's base32 (digits and capitals without I, L, O and U) in five
// groups of five, XXXXX-XXXXX-XXXXX-XXXXX-XXXXX: 125 bits from the
// server's randomness. It is accepted in either case, with or without the
// dashes or spaces, with I or L for 1 and O for 0, and is brought back to
// its printed form before it is hashed; the store keeps only the SHA-256
// of the code as issued.
// A code enrols one device, once, and lapses after its lifetime (24 hours
// unless asked otherwise, 7 days at most). Codes of the earlier form (43
// characters of base64url) are hashed as given and keep working until
// they lapse. Bearer tokens are never typed and stay 256 bits.
//
// Guessing is limited where a code is checked: a failed EnrollDevice or
// ResumeDevice call (refused as Unauthenticated) counts against the
// caller's address, an IPv4 address or an IPv6 /64; each address may fail
// EnrollAttemptBurst times at once (10) and then EnrollAttemptRate times a
// second (one every 10 s); a call beyond that is refused with
// ResourceExhausted, reason RATE_LIMITED, rule enrolment_attempts, before
// its code is looked up. Calls that succeed count for nothing. At most 4096
// addresses are tracked and further ones share one bucket, so the bound
// holds however many addresses a guesser has. Behind a proxy that hides
// the caller's address, all callers share one bucket.
//
// How far that protects a code, with the defaults: a code lives at most
// 7 days, 604,800 s (2^19.2). One address may fail at most
// 10 + 0.1 x 604,800 = 60,490 times (2^15.9) in that time, and all
// addresses together at most 4,097 x 60,490 = 247,827,530 times (2^27.9).
// A guess hits one of L live codes with a chance of L / 2^125, so even
// with a million live codes (L = 2^20, far more than a server holds) the
// chance that any guess in a code's whole lifetime enrols a device is
// below 2^(27.9 + 20 - 125) = 2^-77 for all addresses together, and below
// 2^-89 for one. The length alone would hold without the limit: 100,000
// guesses a second for 7 days (2^35.8) give below 2^-69. A copy of the
// store holds only hashes: searching 2^125 codes at 2^40 SHA-256 a second
// takes about 10^18 years, and 7 days of it finds a given code with a
// chance below 2^-65.
//
// # Authority
//
// Two tables in authorize.go hold every rule of who may do what: entryRoles
// says which roles may make each kind of entry (a kind with none is the
// server's own), built from the Roles of the ledger's kind descriptors, and
// adminCalls who may make each administration call. No
// one decides on a test they recorded (no review, no accepted exception),
// whatever their role. An enrolment code lets its holder act as its user
// everywhere the user has a role, so a project administrator may issue one
// only for a user whose every role is on a project it administers, and
// never for a server administrator; adding an existing user from elsewhere
// is an invitation the user accepts from their own device, and a user's
// unused codes lapse when they join another project.
//
// The Store interface is narrow so that a PostgreSQL store can serve a
// deployment of several servers; the in-memory projections assume one server
// per project until then. It names only this package's types (Hash,
// Checkpoint, Entry, Row and the account types), so a store may live outside
// this module; the server hands it the genesis hash of a new project and
// computes h(0) itself.
//
// # Embedding
//
// A program serves tamp with New over a Store, Register on its own
// *grpc.Server built with RequestCodec, UnaryInterceptor and
// StreamInterceptor, CheckStorage before serving, and Close as it stops;
// Bootstrap, AddUser, AddMember, CreateProject and IssueEnrollmentCode set a
// server up without a device. The services' wire types are not part of this
// API: apps in other languages generate their own from proto/tamp/v1.
package server
