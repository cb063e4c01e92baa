// Package pgstore is the PostgreSQL store of the tamp server: the project
// ledgers and the devices in one PostgreSQL database through
// github.com/jackc/pgx/v5, with embedded migrations. Several tampd
// processes may share one database: every guarantee of server.Store holds
// across them, since each is kept by the database (a project's chain head
// is a row that an append updates only where it still holds the head the
// append follows; a code, an invitation and the server's identity are
// claimed by one statement's row lock or unique index).
package pgstore

import (
	"context"
	"crypto/ed25519"
	"errors"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"tamp/internal/ledger"
	"tamp/server"
)

// Store is a server.Store over a PostgreSQL database. It is safe for
// concurrent use, also by several processes on one database.
type Store struct {
	pool *pgxpool.Pool
}

var _ server.Store = (*Store)(nil)

// Options configure Open. The zero value is a pool of pgxpool's default
// size. Durability is the database's: with PostgreSQL's default
// synchronous_commit a commit, and so a push, is on disk (and, with
// synchronous replication, on the standbys it names) before it returns.
type Options struct {
	// MaxConns bounds the connections the store opens; 0 leaves pgxpool's
	// default (four, or the number of CPUs when more).
	MaxConns int32
}

// Open connects to the database named by dsn (a postgres:// URL or
// keyword=value pairs, as libpq reads them, including the PG* environment
// variables) and brings its schema up to date.
func Open(ctx context.Context, dsn string, opts Options) (*Store, error) {
	cfg, err := pgxpool.ParseConfig(dsn)
	if err != nil {
		return nil, fmt.Errorf("pgstore: %w", err)
	}
	if opts.MaxConns > 0 {
		cfg.MaxConns = opts.MaxConns
	}
	pool, err := pgxpool.NewWithConfig(ctx, cfg)
	if err != nil {
		return nil, fmt.Errorf("pgstore: %w", fault(err))
	}
	if err := migrate(ctx, pool); err != nil {
		pool.Close()
		return nil, err
	}
	return &Store{pool: pool}, nil
}

// Close closes the store's connections.
func (s *Store) Close() error {
	s.pool.Close()
	return nil
}

// referenceKinds are the kinds ReferenceData returns: those the ledger's
// descriptors mark as reference data.
var referenceKinds = ledger.KindNames(func(d ledger.KindDescriptor) bool { return d.Reference })

// querier is a pool or a transaction.
type querier interface {
	QueryRow(ctx context.Context, sql string, args ...any) pgx.Row
}

func (s *Store) CreateProject(ctx context.Context, id, name string, g server.Hash, now time.Time) error {
	_, err := s.pool.Exec(ctx, `INSERT INTO projects (project_id, name, epoch, head_seq, head_hash, created_at)
		VALUES ($1, $2, 1, 0, $3, $4)`, id, name, g[:], now)
	if err != nil {
		return fmt.Errorf("pgstore: create project %s: %w", id, fault(err))
	}
	return nil
}

func (s *Store) Head(ctx context.Context, project string) (server.Checkpoint, error) {
	return head(ctx, s.pool, project)
}

func head(ctx context.Context, q querier, project string) (server.Checkpoint, error) {
	cp := server.Checkpoint{Project: project}
	var h []byte
	err := q.QueryRow(ctx, `SELECT epoch, head_seq, head_hash FROM projects WHERE project_id = $1`, project).Scan(&cp.Epoch, &cp.Seq, &h)
	if errors.Is(err, pgx.ErrNoRows) {
		return cp, fmt.Errorf("pgstore: project %s: %w", project, server.ErrNoProject)
	}
	if err != nil {
		return cp, fmt.Errorf("pgstore: head of %s: %w", project, fault(err))
	}
	copy(cp.Hash[:], h)
	return cp, nil
}

func (s *Store) After(ctx context.Context, project string, seq uint64, limit int) ([]server.Entry, error) {
	if limit <= 0 {
		return nil, nil
	}
	rows, err := s.pool.Query(ctx, `SELECT seq, envelope, hash, clock_skew_micros, device_id, device_seq FROM ledger WHERE project_id = $1 AND seq > $2
		ORDER BY seq LIMIT $3`, project, seq, limit)
	if err != nil {
		return nil, fmt.Errorf("pgstore: read %s after %d: %w", project, seq, fault(err))
	}
	return scanEntries(rows)
}

func scanEntries(rows pgx.Rows) ([]server.Entry, error) {
	defer rows.Close()
	var out []server.Entry
	var h []byte
	for rows.Next() {
		var e server.Entry
		if err := rows.Scan(&e.Seq, &e.Event, &h, &e.SkewMicros, &e.DeviceID, &e.DeviceSeq); err != nil {
			return nil, fmt.Errorf("pgstore: scan entry: %w", fault(err))
		}
		copy(e.Hash[:], h)
		out = append(out, e)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("pgstore: scan entries: %w", fault(err))
	}
	return out, nil
}

func (s *Store) HashAt(ctx context.Context, project string, seq uint64) (server.Hash, bool, error) {
	var h []byte
	err := s.pool.QueryRow(ctx, `SELECT hash FROM ledger WHERE project_id = $1 AND seq = $2`, project, seq).Scan(&h)
	if errors.Is(err, pgx.ErrNoRows) {
		return server.Hash{}, false, nil
	}
	if err != nil {
		return server.Hash{}, false, fmt.Errorf("pgstore: hash at %d: %w", seq, fault(err))
	}
	var out server.Hash
	copy(out[:], h)
	return out, true, nil
}

// Append advances the project's head with a conditional UPDATE of its row
// (the head must still be h) and inserts the rows with one multi-row
// INSERT of arrays, in one transaction. The UPDATE goes first: it locks the
// project's row, so concurrent appends to one project, from any process,
// queue there, and each that follows finds the head moved and fails with
// ErrConflict before it writes a row. Nothing is acknowledged before the
// commit returns.
func (s *Store) Append(ctx context.Context, project string, h server.Checkpoint, rows []server.Row) error {
	if len(rows) == 0 {
		return nil
	}
	for i, r := range rows {
		if r.Seq != h.Seq+uint64(i)+1 {
			return fmt.Errorf("pgstore: append to %s: row %d has sequence number %d, not %d after the head", project, i, r.Seq, h.Seq+uint64(i)+1)
		}
	}
	last := rows[len(rows)-1]
	n := len(rows)
	var (
		seqs       = make([]int64, n)
		eventIDs   = make([]string, n)
		devices    = make([]string, n)
		deviceSeqs = make([]int64, n)
		kinds      = make([]string, n)
		records    = make([]string, n)
		envelopes  = make([][]byte, n)
		hashes     = make([][]byte, n)
		skews      = make([]int64, n)
		received   = make([]time.Time, n)
	)
	for i := range rows {
		r := &rows[i]
		seqs[i], eventIDs[i], devices[i], deviceSeqs[i] = int64(r.Seq), r.EventID, r.DeviceID, int64(r.DeviceSeq)
		kinds[i], records[i], envelopes[i], hashes[i] = r.Kind, r.RecordID, r.Envelope, r.Hash[:]
		skews[i], received[i] = r.SkewMicros, r.Received
	}
	err := pgx.BeginFunc(ctx, s.pool, func(tx pgx.Tx) error {
		moved := h.Project != project
		if !moved {
			tag, err := tx.Exec(ctx, `UPDATE projects SET head_seq = $5, head_hash = $6
				WHERE project_id = $1 AND epoch = $2 AND head_seq = $3 AND head_hash = $4`, project, h.Epoch, h.Seq, h.Hash[:], last.Seq, last.Hash[:])
			if err != nil {
				return err
			}
			moved = tag.RowsAffected() == 0
		}
		if moved {
			cur, err := head(ctx, tx, project)
			if err != nil {
				return err
			}
			return fmt.Errorf("pgstore: append to %s: head is %d/%d, expected %d/%d: %w", project, cur.Epoch, cur.Seq, h.Epoch, h.Seq, server.ErrConflict)
		}
		_, err := tx.Exec(ctx, `INSERT INTO ledger (project_id, seq, event_id, device_id, device_seq, kind, record_id, envelope, hash,
				clock_skew_micros, received_at)
			SELECT $1, * FROM unnest($2::bigint[], $3::text[], $4::text[], $5::bigint[], $6::text[], $7::text[], $8::bytea[], $9::bytea[],
				$10::bigint[], $11::timestamptz[])`,
			project, seqs, eventIDs, devices, deviceSeqs, kinds, records, envelopes, hashes, skews, received)
		if err != nil {
			if isUnique(err) { // an event id the ledger holds, or two rows of one
				return fmt.Errorf("pgstore: append to %s after %d: an event is in the ledger already: %w: %w", project, h.Seq, server.ErrConflict, err)
			}
			return fmt.Errorf("pgstore: append to %s at %d: %w", project, rows[0].Seq, err)
		}
		return nil
	})
	if err != nil {
		if isSerialization(err) {
			err = fmt.Errorf("%w: %w", server.ErrConflict, err)
		}
		return fault(err)
	}
	return nil
}

func (s *Store) SetEpoch(ctx context.Context, project string, epoch uint64) error {
	tag, err := s.pool.Exec(ctx, `UPDATE projects SET epoch = $2 WHERE project_id = $1 AND epoch < $2`, project, epoch)
	if err != nil {
		return fmt.Errorf("pgstore: set epoch: %w", fault(err))
	}
	if tag.RowsAffected() == 0 {
		if _, err := s.Head(ctx, project); err != nil {
			return err
		}
		return fmt.Errorf("pgstore: set epoch %d of %s: %w", epoch, project, server.ErrConflict)
	}
	return nil
}

func (s *Store) ReferenceData(ctx context.Context, project string) ([]server.Entry, error) {
	rows, err := s.pool.Query(ctx, `SELECT seq, envelope, hash, clock_skew_micros, device_id, device_seq FROM ledger WHERE project_id = $1 AND kind = ANY ($2)
		ORDER BY seq`, project, referenceKinds)
	if err != nil {
		return nil, fmt.Errorf("pgstore: reference data: %w", fault(err))
	}
	return scanEntries(rows)
}

func (s *Store) ClockSkews(ctx context.Context, project string) (map[string]int64, error) {
	rows, err := s.pool.Query(ctx, `SELECT event_id, clock_skew_micros FROM ledger WHERE project_id = $1 AND clock_skew_micros <> 0`, project)
	if err != nil {
		return nil, fmt.Errorf("pgstore: clock skews: %w", fault(err))
	}
	defer rows.Close()
	out := map[string]int64{}
	var id string
	var skew int64
	_, err = pgx.ForEachRow(rows, []any{&id, &skew}, func() error { out[id] = skew; return nil })
	if err != nil {
		return nil, fmt.Errorf("pgstore: clock skews: %w", fault(err))
	}
	return out, nil
}

func (s *Store) AddUser(ctx context.Context, id, name string, serverAdmin bool, now time.Time) error {
	if _, err := s.pool.Exec(ctx, `INSERT INTO users (user_id, name, server_admin, created_at) VALUES ($1, $2, $3, $4)`,
		id, name, serverAdmin, now); err != nil {
		return fmt.Errorf("pgstore: add user: %w", fault(err))
	}
	return nil
}

func (s *Store) User(ctx context.Context, id string) (server.User, error) {
	u := server.User{ID: id}
	err := s.pool.QueryRow(ctx, `SELECT name, server_admin FROM users WHERE user_id = $1`, id).Scan(&u.Name, &u.ServerAdmin)
	if errors.Is(err, pgx.ErrNoRows) {
		return u, fmt.Errorf("pgstore: user %s: %w", id, server.ErrNoUser)
	}
	if err != nil {
		return u, fmt.Errorf("pgstore: user %s: %w", id, fault(err))
	}
	return u, nil
}

func (s *Store) CountUsers(ctx context.Context) (int, error) {
	var n int
	if err := s.pool.QueryRow(ctx, `SELECT count(*) FROM users WHERE user_id NOT IN (SELECT user_id FROM server_identity)`).Scan(&n); err != nil {
		return 0, fmt.Errorf("pgstore: count users: %w", fault(err))
	}
	return n, nil
}

func (s *Store) SetMember(ctx context.Context, project, user string, role server.Role) error {
	if _, err := s.pool.Exec(ctx, `INSERT INTO members (project_id, user_id, role) VALUES ($1, $2, $3)
		ON CONFLICT (project_id, user_id) DO UPDATE SET role = excluded.role`, project, user, string(role)); err != nil {
		return fmt.Errorf("pgstore: set member: %w", fault(err))
	}
	return nil
}

func (s *Store) Role(ctx context.Context, project, user string) (server.Role, error) {
	var r string
	err := s.pool.QueryRow(ctx, `SELECT role FROM members WHERE project_id = $1 AND user_id = $2`, project, user).Scan(&r)
	if errors.Is(err, pgx.ErrNoRows) {
		return "", nil
	}
	if err != nil {
		return "", fmt.Errorf("pgstore: role: %w", fault(err))
	}
	return server.Role(r), nil
}

func (s *Store) Members(ctx context.Context, project string) ([]server.Member, error) {
	rows, err := s.pool.Query(ctx, `SELECT u.user_id, u.name, u.server_admin, m.role FROM members m JOIN users u USING (user_id)
		WHERE m.project_id = $1 ORDER BY u.name COLLATE "C", u.user_id COLLATE "C"`, project)
	if err != nil {
		return nil, fmt.Errorf("pgstore: members: %w", fault(err))
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (server.Member, error) {
		var m server.Member
		err := r.Scan(&m.ID, &m.Name, &m.ServerAdmin, &m.Role)
		return m, err
	})
	if err != nil {
		return nil, fmt.Errorf("pgstore: members: %w", fault(err))
	}
	return out, nil
}

func (s *Store) Devices(ctx context.Context, user string) ([]server.Device, error) {
	rows, err := s.pool.Query(ctx, `SELECT device_id, user_id, name, public_key, revoked_at IS NOT NULL FROM devices
		WHERE $1 = '' OR user_id = $1 ORDER BY enrolled_at, device_id COLLATE "C"`, user)
	if err != nil {
		return nil, fmt.Errorf("pgstore: devices: %w", fault(err))
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (server.Device, error) {
		var d server.Device
		var key []byte
		err := r.Scan(&d.ID, &d.UserID, &d.Name, &key, &d.Revoked)
		d.PublicKey = key
		return d, err
	})
	if err != nil {
		return nil, fmt.Errorf("pgstore: devices: %w", fault(err))
	}
	return out, nil
}

func (s *Store) Revoke(ctx context.Context, device string, now time.Time) error {
	tag, err := s.pool.Exec(ctx, `UPDATE devices SET revoked_at = COALESCE(revoked_at, $2) WHERE device_id = $1`, device, now)
	if err != nil {
		return fmt.Errorf("pgstore: revoke: %w", fault(err))
	}
	if tag.RowsAffected() == 0 {
		return fmt.Errorf("pgstore: revoke %s: %w", device, server.ErrNoDevice)
	}
	return nil
}

func (s *Store) ProjectsOf(ctx context.Context, user string) ([]string, error) {
	rows, err := s.pool.Query(ctx, `SELECT project_id FROM members WHERE user_id = $1 ORDER BY project_id COLLATE "C"`, user)
	if err != nil {
		return nil, fmt.Errorf("pgstore: projects of %s: %w", user, fault(err))
	}
	out, err := pgx.CollectRows(rows, pgx.RowTo[string])
	if err != nil {
		return nil, fmt.Errorf("pgstore: projects of %s: %w", user, fault(err))
	}
	return out, nil
}

func (s *Store) AddEnrollmentCode(ctx context.Context, codeHash []byte, user string, expires time.Time) error {
	if _, err := s.pool.Exec(ctx, `INSERT INTO enrollment_codes (code_hash, user_id, expires_at) VALUES ($1, $2, $3)`,
		codeHash, user, expires); err != nil {
		return fmt.Errorf("pgstore: add enrolment code: %w", fault(err))
	}
	return nil
}

// Enroll claims the code with a conditional UPDATE: of concurrent
// enrolments with one code, the first takes the row's lock and the others,
// once it commits, find the code used.
func (s *Store) Enroll(ctx context.Context, codeHash []byte, d server.Device, tokenHash []byte, now time.Time) (server.Device, error) {
	err := pgx.BeginFunc(ctx, s.pool, func(tx pgx.Tx) error {
		err := tx.QueryRow(ctx, `UPDATE enrollment_codes SET used_at = $2 WHERE code_hash = $1 AND used_at IS NULL AND expires_at > $2
			RETURNING user_id`, codeHash, now).Scan(&d.UserID)
		if errors.Is(err, pgx.ErrNoRows) {
			return server.ErrCodeInvalid
		}
		if err != nil {
			return err
		}
		tag, err := tx.Exec(ctx, `INSERT INTO devices (device_id, user_id, name, public_key, token_hash, enrolled_at) VALUES ($1, $2, $3, $4, $5, $6)
			ON CONFLICT (device_id) DO NOTHING`, d.ID, d.UserID, d.Name, []byte(d.PublicKey), tokenHash, now)
		if err != nil {
			return err
		}
		if tag.RowsAffected() == 0 {
			return server.ErrDeviceExists // the code's use rolls back with the transaction
		}
		return nil
	})
	if err != nil {
		return server.Device{}, fmt.Errorf("pgstore: enrol %s: %w", d.ID, fault(err))
	}
	return d, nil
}

func (s *Store) device(ctx context.Context, where string, arg any) (server.Device, error) {
	var d server.Device
	var key []byte
	err := s.pool.QueryRow(ctx, `SELECT device_id, user_id, name, public_key, token_hash, revoked_at IS NOT NULL FROM devices WHERE `+where, arg).
		Scan(&d.ID, &d.UserID, &d.Name, &key, &d.TokenHash, &d.Revoked)
	if errors.Is(err, pgx.ErrNoRows) {
		return d, server.ErrNoDevice
	}
	if err != nil {
		return d, fmt.Errorf("pgstore: device: %w", fault(err))
	}
	d.PublicKey = key
	return d, nil
}

func (s *Store) DeviceByToken(ctx context.Context, tokenHash []byte) (server.Device, error) {
	if len(tokenHash) == 0 {
		return server.Device{}, server.ErrNoDevice
	}
	return s.device(ctx, "token_hash = $1", tokenHash)
}

func (s *Store) Device(ctx context.Context, id string) (server.Device, error) {
	return s.device(ctx, "device_id = $1", id)
}

// ServerIdentity stores a fresh identity in a transaction that inserts the
// one server_identity row first: of concurrent first calls (of any
// process) one commits it, and the others wait on its unique index, fail,
// and read the identity it stored.
func (s *Store) ServerIdentity(ctx context.Context, fresh func() server.Identity) (server.Identity, error) {
	for attempt := 0; ; attempt++ {
		var id server.Identity
		err := pgx.BeginFunc(ctx, s.pool, func(tx pgx.Tx) error {
			var seed []byte
			err := tx.QueryRow(ctx, `SELECT device_id, user_id, private_key FROM server_identity WHERE id = 1`).Scan(&id.DeviceID, &id.UserID, &seed)
			if err == nil {
				id.Key = ed25519.NewKeyFromSeed(seed)
				return nil
			}
			if !errors.Is(err, pgx.ErrNoRows) {
				return err
			}
			id = fresh()
			if _, err := tx.Exec(ctx, `INSERT INTO server_identity (id, device_id, user_id, private_key) VALUES (1, $1, $2, $3)`,
				id.DeviceID, id.UserID, id.Key.Seed()); err != nil {
				return err
			}
			now := time.Now()
			if _, err := tx.Exec(ctx, `INSERT INTO users (user_id, name, server_admin, created_at) VALUES ($1, 'tampd', false, $2)`, id.UserID, now); err != nil {
				return err
			}
			_, err = tx.Exec(ctx, `INSERT INTO devices (device_id, user_id, name, public_key, enrolled_at) VALUES ($1, $2, 'tampd', $3, $4)`,
				id.DeviceID, id.UserID, []byte(id.Key.Public().(ed25519.PublicKey)), now)
			return err
		})
		if err != nil && isUnique(err) && attempt < 3 {
			continue // another caller stored one first
		}
		if err != nil {
			return server.Identity{}, fmt.Errorf("pgstore: server identity: %w", fault(err))
		}
		return id, nil
	}
}

func (s *Store) RegisterDevice(ctx context.Context, d server.Device, userName string, now time.Time) (bool, error) {
	created := false
	err := pgx.BeginFunc(ctx, s.pool, func(tx pgx.Tx) error {
		var known bool
		if err := tx.QueryRow(ctx, `SELECT EXISTS (SELECT 1 FROM devices WHERE device_id = $1)`, d.ID).Scan(&known); err != nil || known {
			return err
		}
		if _, err := tx.Exec(ctx, `INSERT INTO users (user_id, name, server_admin, created_at) VALUES ($1, $2, false, $3)
			ON CONFLICT (user_id) DO NOTHING`, d.UserID, userName, now); err != nil {
			return err
		}
		var token []byte // NULL, no token, until the device proves its key
		if len(d.TokenHash) > 0 {
			token = d.TokenHash
		}
		var revoked *time.Time
		if d.Revoked {
			revoked = &now
		}
		tag, err := tx.Exec(ctx, `INSERT INTO devices (device_id, user_id, name, public_key, token_hash, enrolled_at, revoked_at)
			VALUES ($1, $2, $3, $4, $5, $6, $7) ON CONFLICT (device_id) DO NOTHING`, d.ID, d.UserID, d.Name, []byte(d.PublicKey), token, now, revoked)
		if err != nil {
			return err
		}
		if tag.RowsAffected() == 0 { // registered meanwhile by another caller: leave its user as it was
			return errKnown
		}
		created = true
		return nil
	})
	if errors.Is(err, errKnown) {
		return false, nil
	}
	if err != nil {
		return false, fmt.Errorf("pgstore: register device %s: %w", d.ID, fault(err))
	}
	return created, nil
}

// errKnown rolls back a RegisterDevice that found the device registered.
var errKnown = errors.New("pgstore: the device is known")

func (s *Store) SetToken(ctx context.Context, device string, tokenHash []byte) error {
	tag, err := s.pool.Exec(ctx, `UPDATE devices SET token_hash = $2 WHERE device_id = $1`, device, tokenHash)
	if err != nil {
		return fmt.Errorf("pgstore: set token of %s: %w", device, fault(err))
	}
	if tag.RowsAffected() == 0 {
		return fmt.Errorf("pgstore: set token of %s: %w", device, server.ErrNoDevice)
	}
	return nil
}
