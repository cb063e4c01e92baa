package client

import (
	"context"
	"crypto/ed25519"
	"crypto/rand"
	"database/sql"
	"embed"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"slices"
	"strings"
	"sync"
	"time"

	"github.com/google/uuid"
	"google.golang.org/grpc/metadata"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/sqlite"
)

//go:embed migrations/*.sql
var migrationFiles embed.FS

func sub(f embed.FS) fs.FS {
	m, err := fs.Sub(f, "migrations")
	if err != nil {
		panic(err) // the directory is embedded above
	}
	return m
}

// Options configure Open.
type Options struct {
	// User is the user entries are signed for. It is kept in the store;
	// empty keeps the one stored.
	User string
	// Durability is how the store commits: DurabilityFull (the default)
	// survives power loss, which field devices suffer; DurabilityNormal is
	// faster and survives a crash of the program but not of the power.
	Durability Durability
	// Now is the clock (time.Now when nil); Rand the source of keys and ids
	// (crypto/rand when nil). Tests pin both.
	Now  func() time.Time
	Rand io.Reader
	// WaitLimit is how long an entry may wait for records the server lacks
	// before Status names it (default 24 hours).
	WaitLimit time.Duration
}

// Durability is how a store commits its writes.
type Durability string

// The durabilities.
const (
	// DurabilityFull: a write reported done is on disk and survives a power
	// cut (SQLite synchronous=FULL). The default.
	DurabilityFull Durability = "full"
	// DurabilityNormal: faster; a write survives a crash of the program but
	// may be lost in a power cut (SQLite synchronous=NORMAL in WAL mode).
	DurabilityNormal Durability = "normal"
)

func (d Durability) sqlite() (sqlite.Synchronous, error) {
	switch d {
	case "", DurabilityFull:
		return sqlite.Full, nil
	case DurabilityNormal:
		return sqlite.Normal, nil
	}
	return "", fmt.Errorf("client: open: durability must be %q or %q, not %q", DurabilityFull, DurabilityNormal, d)
}

// Store is a device's local store: its identity, every event it holds, and
// the project views computed from them. It is safe for concurrent use.
type Store struct {
	db        *sqlite.DB
	now       func() time.Time
	rand      io.Reader
	waitLimit time.Duration

	mu       sync.Mutex
	closed   bool
	deviceID string
	key      ed25519.PrivateKey
	user     string
	seq      uint64
	clock    *ledger.Clock
	views    map[string]*ledger.Projection
	enrolled []string
	stmts    *recordStatements // record's statements, prepared at its first use
	pulled   *pulledStatements // applyPulled's statements, prepared at its first use
}

// Open opens the store at path, creating it (and the device's key) on first
// use, migrating its schema, and rebuilding the project views from its
// events.
func Open(ctx context.Context, path string, opts Options) (*Store, error) {
	s := &Store{now: opts.Now, rand: opts.Rand, waitLimit: opts.WaitLimit, views: map[string]*ledger.Projection{}}
	if s.waitLimit <= 0 {
		s.waitLimit = 24 * time.Hour
	}
	if s.now == nil {
		s.now = time.Now
	}
	if s.rand == nil {
		s.rand = rand.Reader
	}
	sync, err := opts.Durability.sqlite()
	if err != nil {
		return nil, err
	}
	db, err := sqlite.Open(ctx, path, sqlite.Options{Synchronous: sync}, sub(migrationFiles))
	if err != nil {
		return nil, fmt.Errorf("client: open: %w", err)
	}
	s.db = db
	if err := s.loadIdentity(ctx, opts.User); err != nil {
		db.Close()
		return nil, err
	}
	if err := s.loadViews(ctx); err != nil {
		db.Close()
		return nil, err
	}
	return s, nil
}

// Close closes the store.
func (s *Store) Close() error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.closed {
		return nil
	}
	s.closed = true
	return s.db.Close()
}

// DeviceID returns the device's id.
func (s *Store) DeviceID() string { return s.deviceID }

// PublicKey returns the device's Ed25519 public key, which the server
// registers at enrolment.
func (s *Store) PublicKey() ed25519.PublicKey { return s.key.Public().(ed25519.PublicKey) }

// User returns the user entries are signed for.
func (s *Store) User() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.user
}

func (s *Store) loadIdentity(ctx context.Context, user string) error {
	var seed []byte
	var wall int64
	var logical uint32
	err := s.db.Writer().QueryRowContext(ctx, `SELECT device_id, private_key, user_id, last_seq, hlc_wall, hlc_logical FROM device WHERE id = 1`).
		Scan(&s.deviceID, &seed, &s.user, &s.seq, &wall, &logical)
	switch {
	case errors.Is(err, sql.ErrNoRows):
		seed = make([]byte, ed25519.SeedSize)
		if _, err := io.ReadFull(s.rand, seed); err != nil {
			return fmt.Errorf("client: generate device key: %w", err)
		}
		id, err := uuid.NewV7FromReader(s.rand)
		if err != nil {
			return fmt.Errorf("client: generate device id: %w", err)
		}
		s.deviceID, s.user = id.String(), user
		if _, err := s.db.Writer().ExecContext(ctx, `INSERT INTO device (id, device_id, private_key, user_id, last_seq, hlc_wall, hlc_logical)
			VALUES (1, ?, ?, ?, 0, 0, 0)`, s.deviceID, seed, s.user); err != nil {
			return fmt.Errorf("client: store device identity: %w", err)
		}
	case err != nil:
		return fmt.Errorf("client: load device identity: %w", err)
	case user != "" && user != s.user:
		if _, err := s.db.Writer().ExecContext(ctx, `UPDATE device SET user_id = ? WHERE id = 1`, user); err != nil {
			return fmt.Errorf("client: set user: %w", err)
		}
		s.user = user
	}
	if len(seed) != ed25519.SeedSize {
		return fmt.Errorf("client: the stored device key is %d bytes, not %d", len(seed), ed25519.SeedSize)
	}
	s.key = ed25519.NewKeyFromSeed(seed)
	s.clock = ledger.NewClock(s.now, ledger.HLC{Wall: wall, Logical: logical})
	return nil
}

// loadBatch is how many stored events loadViews reads and decodes ahead
// of applying them, per hand-over between its two goroutines.
const loadBatch = 1024

// loadedBatch is a run of decoded stored events, or the error that ended
// the reading.
type loadedBatch struct {
	evs []ledger.Signed
	err error
}

// loadQuery reads the events loadViews applies.
const loadQuery = `SELECT body, signature FROM events
	WHERE status NOT IN ('rejected', 'discarded') ORDER BY project_id, hlc_wall, hlc_logical`

// loadViews rebuilds every project's view from the events held, leaving out
// events the server rejected and those the user discarded. One goroutine
// reads, decodes and validates the rows while this one applies them, so
// that on a device with two cores reading, decoding and validating cost
// next to nothing.
//
// Signatures are not verified again here, the device's own nor others'.
// Every row was verified before the store wrote it: the device's own
// entries it signed itself (record), pulled ones passed ledger.Open (or the
// batch verifier) and the chain check in pull. The SQLite file is the
// device's own: whoever can alter a row in it can as well read the
// device's private key from the device table and sign what they like, so a
// second check on open protects against nothing and took two thirds of the
// time of opening. Events are still validated as a push validates them: a
// stored entry today's rules refuse fails the open, as it always did.
func (s *Store) loadViews(ctx context.Context) error {
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	// In the order of the project index, which reads the rows as they lie
	// and sorts nothing: a view is the same whatever order its events come
	// in, and hybrid-time order within a project only spares it entries
	// that wait for records not yet applied. (Ordered by time across
	// projects, as before, SQLite sorted every row with its bytes in a
	// temporary tree before returning the first.)
	rows, err := s.db.Reader().QueryContext(ctx, loadQuery)
	if err != nil {
		return fmt.Errorf("client: load events: %w", err)
	}
	batches := make(chan loadedBatch, 4)
	go func() {
		defer close(batches)
		defer rows.Close()
		send := func(b loadedBatch) bool {
			select {
			case batches <- b:
				return true
			case <-ctx.Done():
				return false
			}
		}
		batch := make([]ledger.Signed, 0, loadBatch)
		for rows.Next() {
			var m pb.Event
			if err := rows.Scan(&m.Body, &m.Signature); err != nil {
				send(loadedBatch{err: fmt.Errorf("client: load events: %w", err)})
				return
			}
			// Decoded, not validated again: the store wrote only entries it
			// had validated (recorded here or pulled and checked), and a
			// rule checked anew by a later version could only make this
			// replica's view differ from the others'.
			sg, err := ledger.FromEnvelope(&m)
			if err != nil {
				send(loadedBatch{err: fmt.Errorf("client: stored event does not decode: %w", err)})
				return
			}
			if batch = append(batch, sg); len(batch) == loadBatch {
				if !send(loadedBatch{evs: batch}) {
					return
				}
				batch = make([]ledger.Signed, 0, loadBatch)
			}
		}
		if err := rows.Err(); err != nil {
			send(loadedBatch{err: fmt.Errorf("client: load events: %w", err)})
			return
		}
		if len(batch) > 0 {
			send(loadedBatch{evs: batch})
		}
	}()
	// On an error, stop the reader and wait for it to close the rows.
	fail := func(err error) error {
		cancel()
		for range batches {
		}
		return err
	}
	sizes, err := s.storedCounts(ctx)
	if err != nil {
		return fail(err)
	}
	views := map[string]*ledger.Projection{}
	var v *ledger.Projection
	for b := range batches {
		if b.err != nil {
			return fail(b.err)
		}
		for _, sg := range b.evs {
			if v == nil || v.Project() != sg.Event.Project {
				if v = views[sg.Event.Project]; v == nil {
					v = ledger.NewProjection(sg.Event.Project)
					v.Reserve(sizes[sg.Event.Project])
					views[sg.Event.Project] = v
				}
			}
			if _, err := v.ApplyValidated(sg); err != nil { // the store validated it when it wrote it
				return fail(fmt.Errorf("client: stored event %s: %w", sg.Event.ID, err))
			}
			s.clock.Observe(sg.Event.HLC)
		}
	}
	if err := ctx.Err(); err != nil { // the reader stopped early
		return fmt.Errorf("client: load events: %w", err)
	}
	s.views = views
	return nil
}

// storedCounts returns the number of events each project holds, read
// from the project index alone: rejected and discarded entries count too,
// so each is a bound, which is what Reserve needs.
func (s *Store) storedCounts(ctx context.Context) (map[string]int, error) {
	rows, err := s.db.Reader().QueryContext(ctx, `SELECT project_id, COUNT(*) FROM events INDEXED BY events_by_project GROUP BY project_id`)
	if err != nil {
		return nil, fmt.Errorf("client: count events: %w", err)
	}
	defer rows.Close()
	counts := map[string]int{}
	for rows.Next() {
		var project string
		var n int
		if err := rows.Scan(&project, &n); err != nil {
			return nil, fmt.Errorf("client: count events: %w", err)
		}
		counts[project] = n
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("client: count events: %w", err)
	}
	return counts, nil
}

// view returns a project's view, creating an empty one. Call with s.mu held.
func (s *Store) view(project string) *ledger.Projection {
	v := s.views[project]
	if v == nil {
		v = ledger.NewProjection(project)
		s.views[project] = v
	}
	return v
}

// Projects returns the ids of the projects the device holds events of.
func (s *Store) Projects() []string {
	s.mu.Lock()
	defer s.mu.Unlock()
	var out []string
	for id, v := range s.views {
		if v.Len() > 0 {
			out = append(out, id)
		}
	}
	slices.Sort(out)
	return out
}

// NewID returns a new UUIDv7 for a record the caller is about to create.
func (s *Store) NewID() string {
	id, err := uuid.NewV7FromReader(s.rand)
	if err != nil {
		panic(fmt.Sprintf("client: new id: %v", err)) // the reader failed: nothing sound can follow
	}
	return id.String()
}

// recordEntry signs and stores one entry of kind k on project, in one
// transaction with the device's counters, and applies it to the project's
// view. It is the primitive under the typed methods of entries.go and
// tests.go. A kind that breaks a rule gets an *EntryError naming the field
// (ErrInvalid).
func (s *Store) recordEntry(ctx context.Context, project string, k ledger.Kind) (ledger.Signed, ledger.Outcome, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.record(ctx, project, k)
}

// recordStatements are record's statements, prepared once on the writer so
// that each entry does not parse them again.
type recordStatements struct {
	counters, insert *sql.Stmt
}

// recordCountersQuery reads, inside record's transaction, what the next
// entry's numbers follow, from the store itself (another opener of the same
// file may have recorded since this one opened it), each through an index
// in a few page reads:
//   - the device's last sequence number: the greater of the device row's
//     (which re-enrolment and a restore's pulled entries move) and the
//     newest entry's under the device's id (record writes no device row, so
//     an entry costs one row and one index page fewer);
//   - the project's latest hybrid time, which the clock observes so that a
//     second opener's entries stay in order after the first's;
//   - the link to the device's previous entry in the project, which lets the
//     server find entries it lacks: entries the server refused are not in
//     its ledger, so the link skips them (walking the device's entries back
//     from the newest: a MAX with the status filter would read them all).
const recordCountersQuery = `SELECT MAX(d.last_seq, COALESCE((SELECT MAX(device_seq) FROM events WHERE device_id = ?2), 0)),
	d.hlc_wall, d.hlc_logical, COALESCE(l.hlc_wall, 0), COALESCE(l.hlc_logical, 0),
	COALESCE((SELECT device_seq FROM events WHERE project_id = ?1 AND device_id = ?2 AND status NOT IN ('rejected', 'discarded')
		ORDER BY device_seq DESC LIMIT 1), 0)
	FROM device AS d LEFT JOIN (SELECT hlc_wall, hlc_logical FROM events WHERE project_id = ?1
		ORDER BY hlc_wall DESC, hlc_logical DESC LIMIT 1) AS l
	WHERE d.id = 1`

// recordStmts returns record's statements, preparing them at the first
// call. Call with s.mu held.
func (s *Store) recordStmts(ctx context.Context) (*recordStatements, error) {
	if s.stmts != nil {
		return s.stmts, nil
	}
	counters, err := s.db.Writer().PrepareContext(ctx, recordCountersQuery)
	if err != nil {
		return nil, err
	}
	insert, err := s.db.Writer().PrepareContext(ctx, `INSERT INTO events (event_id, project_id, device_id, device_seq, kind, record_id,
			hlc_wall, hlc_logical, body, signature, origin, status, created_micros)
			VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, 'local', 'pending', ?)`)
	if err != nil {
		counters.Close()
		return nil, err
	}
	s.stmts = &recordStatements{counters: counters, insert: insert}
	return s.stmts, nil
}

// pulledRows is how many pulled events one prepared insert stores; 14
// parameters a row keeps it far below SQLite's limit on parameters.
const (
	pulledRows = 100
	pulledCols = 14
)

// pulledRow is one pulled event's row, a chain entry (server_seq set)
// confirmed; an event held already gets the server's number and
// confirmation (status, server_lacks, waiting_for), nothing else.
const (
	pulledInsert = `INSERT INTO events (event_id, project_id, device_id, device_seq, kind, record_id,
		hlc_wall, hlc_logical, body, signature, origin, status, server_seq, created_micros, confirmed, clock_skew_micros) VALUES `
	pulledRow    = `(?, ?, ?, ?, ?, ?, ?, ?, ?, ?, 'remote', 'accepted', ?, ?, ?, ?)`
	pulledUpsert = ` ON CONFLICT (event_id) DO UPDATE SET server_seq = COALESCE(excluded.server_seq, server_seq),
		clock_skew_micros = CASE WHEN excluded.clock_skew_micros != 0 THEN excluded.clock_skew_micros ELSE clock_skew_micros END,
		status = CASE WHEN status IN ('pending', 'waiting') THEN 'accepted' ELSE status END,
		confirmed = MAX(confirmed, excluded.confirmed),
		server_lacks = CASE WHEN excluded.confirmed = 1 THEN 0 ELSE server_lacks END,
		waiting_for = '', waiting_since_micros = 0`
)

// pulledStatements store pulled events: many stores pulledRows of them,
// one a single one.
type pulledStatements struct {
	many, one *sql.Stmt
}

// pulledStmts returns applyPulled's statements, preparing them on the
// writer at the first call. Call with s.mu held.
func (s *Store) pulledStmts(ctx context.Context) (*pulledStatements, error) {
	if s.pulled != nil {
		return s.pulled, nil
	}
	rows := strings.Repeat(pulledRow+", ", pulledRows-1) + pulledRow
	many, err := s.db.Writer().PrepareContext(ctx, pulledInsert+rows+pulledUpsert)
	if err != nil {
		return nil, err
	}
	one, err := s.db.Writer().PrepareContext(ctx, pulledInsert+pulledRow+pulledUpsert)
	if err != nil {
		many.Close()
		return nil, err
	}
	s.pulled = &pulledStatements{many: many, one: one}
	return s.pulled, nil
}

// record is recordEntry with s.mu held.
func (s *Store) record(ctx context.Context, project string, k ledger.Kind) (ledger.Signed, ledger.Outcome, error) {
	if s.closed {
		return ledger.Signed{}, ledger.Outcome{}, ErrClosed
	}
	if s.user == "" {
		return ledger.Signed{}, ledger.Outcome{}, ErrNoUser
	}
	if err := s.notOwnTest(project, k); err != nil {
		return ledger.Signed{}, ledger.Outcome{}, err
	}
	// The sequence number is taken inside the write transaction, from the
	// store itself: another opener of the same file (the review page beside
	// a command) may have recorded since this one opened it.
	var e ledger.Event
	var signed ledger.Signed
	var refusal error // the entry's own fault, returned as it is
	st, err := s.recordStmts(ctx)
	if err != nil {
		return ledger.Signed{}, ledger.Outcome{}, fmt.Errorf("client: record %s: %w", k.KindName(), err)
	}
	err = s.db.Tx(ctx, func(tx *sql.Tx) error {
		var last, prev uint64 // the device's last number, and its last in the project the server may hold
		var device, latest ledger.HLC
		if err := tx.StmtContext(ctx, st.counters).QueryRowContext(ctx, project, s.deviceID).
			Scan(&last, &device.Wall, &device.Logical, &latest.Wall, &latest.Logical, &prev); err != nil {
			return err
		}
		s.clock.Observe(device)
		s.clock.Observe(latest)
		now := s.now().UTC().Truncate(time.Microsecond)
		e = ledger.Event{ID: s.NewID(), Project: project, Author: s.user, Device: s.deviceID, DeviceSeq: max(s.seq, last) + 1, PrevDeviceSeq: prev,
			HLC: s.clock.Now(), DeviceTime: now, Kind: k}
		var err error
		if signed, err = ledger.Seal(e, s.key); err != nil {
			refusal = refused(err)
			return refusal
		}
		e = signed.Event // as every replica decodes it from the signed bytes
		if taken := s.view(project).Claimed(&e); taken != nil {
			refusal = refused(taken)
			return refusal
		}
		if _, err := tx.StmtContext(ctx, st.insert).ExecContext(ctx, e.ID, project, s.deviceID, e.DeviceSeq, k.KindName(), ledger.RecordID(k),
			e.HLC.Wall, e.HLC.Logical, signed.Body, signed.Signature, now.UnixMicro()); err != nil {
			return err
		}
		return nil
	})
	if refusal != nil {
		return ledger.Signed{}, ledger.Outcome{}, refusal
	}
	if err != nil {
		return ledger.Signed{}, ledger.Outcome{}, fmt.Errorf("client: record %s: %w", k.KindName(), err)
	}
	s.seq = e.DeviceSeq
	out, err := s.view(project).ApplyValidated(signed) // Seal validated the event as decoded
	if err != nil {                                    // its id is new: this is a bug, and the event is stored
		return signed, out, fmt.Errorf("client: apply %s: %w", e.ID, err)
	}
	return signed, out, nil
}

// Setting returns a stored setting ("" when unset).
func (s *Store) Setting(ctx context.Context, key string) (string, error) {
	var v string
	err := s.db.Reader().QueryRowContext(ctx, `SELECT value FROM settings WHERE key = ?`, key).Scan(&v)
	if errors.Is(err, sql.ErrNoRows) {
		return "", nil
	}
	if err != nil {
		return "", fmt.Errorf("client: setting %s: %w", key, err)
	}
	return v, nil
}

// SetSetting stores a setting.
func (s *Store) SetSetting(ctx context.Context, key, value string) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if _, err := s.db.Writer().ExecContext(ctx, `INSERT INTO settings (key, value) VALUES (?, ?)
		ON CONFLICT (key) DO UPDATE SET value = excluded.value`, key, value); err != nil {
		return fmt.Errorf("client: set %s: %w", key, err)
	}
	return nil
}

// CallContext returns ctx carrying the device's bearer token, for calls of
// the server's services that the store does not wrap (administration).
func (s *Store) CallContext(ctx context.Context) (context.Context, error) {
	token, err := s.token(ctx)
	if err != nil {
		return nil, err
	}
	if token == "" {
		return nil, fmt.Errorf("client: the device is not enrolled")
	}
	return metadata.AppendToOutgoingContext(ctx, "authorization", "Bearer "+token), nil
}
