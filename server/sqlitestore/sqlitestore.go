// Package sqlitestore is the SQLite store of the tamp server: the project
// ledgers and the devices, in one database file through modernc.org/sqlite
// (WAL, one writer connection, embedded migrations).
package sqlitestore

import (
	"context"
	"crypto/ed25519"
	"crypto/rand"
	"crypto/sha256"
	"database/sql"
	"embed"
	"errors"
	"fmt"
	"io/fs"
	"strings"
	"time"

	"tamp/internal/ledger"
	"tamp/internal/sqlite"
	"tamp/server"
)

//go:embed migrations/*.sql
var migrationFiles embed.FS

// insertRows is how many ledger rows one INSERT statement carries.
const insertRows = 64

// Store is a server.Store over one SQLite file. It is safe for concurrent use.
type Store struct {
	db *sqlite.DB

	// inserts holds the writer's prepared INSERTs of insertSizes[i] ledger
	// rows: parsing a statement of hundreds of parameters costs more than a
	// small batch's insert, so each size is prepared once, when the store
	// opens (the one writer connection cannot prepare during a transaction).
	inserts [len(insertSizes)]*sql.Stmt
}

// insertSizes are the row counts of the prepared INSERTs, largest first; a
// batch goes in as the fewest statements of these sizes.
var insertSizes = [...]int{insertRows, 16, 4, 1}

func (s *Store) prepare(ctx context.Context) error {
	for i, n := range insertSizes {
		q := `INSERT INTO ledger (project_id, seq, event_id, device_id, device_seq, kind, record_id, envelope, hash,
			clock_skew_micros, received_micros) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)` +
			strings.Repeat(", (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", n-1)
		st, err := s.db.Writer().PrepareContext(ctx, q)
		if err != nil {
			return fmt.Errorf("sqlitestore: prepare insert of %d rows: %w", n, err)
		}
		s.inserts[i] = st
	}
	return nil
}

var _ server.Store = (*Store)(nil)

func init() {
	// Tests and benchmarks of other packages reach the database under a
	// Store through sqlite.DBOf.
	sqlite.RegisterDBOf(func(v any) (*sqlite.DB, bool) {
		s, ok := v.(*Store)
		if !ok || s == nil {
			return nil, false
		}
		return s.db, true
	})
}

// Options configure Open. The zero value commits with SQLite's
// synchronous=FULL: a commit, and so a push, is on disk before it returns.
type Options struct {
	// SynchronousNormal commits with synchronous=NORMAL instead: no sync
	// of the disk at each commit, so faster; a commit survives a crash of
	// the process, but the last commits before a loss of power may be
	// lost.
	SynchronousNormal bool
}

// Open opens (creating) the store at path and brings its schema up to
// date.
func Open(ctx context.Context, path string, opts Options) (*Store, error) {
	m, err := fs.Sub(migrationFiles, "migrations")
	if err != nil {
		return nil, err
	}
	sync := sqlite.Full
	if opts.SynchronousNormal {
		sync = sqlite.Normal
	}
	db, err := sqlite.Open(ctx, path, sqlite.Options{Synchronous: sync, Readers: 8}, m)
	if err != nil {
		return nil, fmt.Errorf("sqlitestore: %w", err)
	}
	s := &Store{db: db}
	if err := s.prepare(ctx); err != nil {
		s.Close()
		return nil, err
	}
	return s, nil
}

// Close closes the store.
func (s *Store) Close() error {
	for _, st := range s.inserts {
		if st != nil {
			st.Close()
		}
	}
	return s.db.Close()
}

func (s *Store) CreateProject(ctx context.Context, id, name string, g server.Hash, now time.Time) error {
	_, err := s.db.Writer().ExecContext(ctx, `INSERT INTO projects (project_id, name, epoch, head_seq, head_hash, created_micros)
		VALUES (?, ?, 1, 0, ?, ?)`, id, name, g[:], now.UnixMicro())
	if err != nil {
		return fmt.Errorf("sqlitestore: create project %s: %w", id, fault(err))
	}
	return nil
}

func (s *Store) Head(ctx context.Context, project string) (server.Checkpoint, error) {
	return head(ctx, s.db.Reader(), project)
}

type queryer interface {
	QueryRowContext(ctx context.Context, query string, args ...any) *sql.Row
}

func head(ctx context.Context, q queryer, project string) (server.Checkpoint, error) {
	cp := server.Checkpoint{Project: project}
	var h []byte
	err := q.QueryRowContext(ctx, `SELECT epoch, head_seq, head_hash FROM projects WHERE project_id = ?`, project).Scan(&cp.Epoch, &cp.Seq, &h)
	if errors.Is(err, sql.ErrNoRows) {
		return cp, fmt.Errorf("sqlitestore: project %s: %w", project, server.ErrNoProject)
	}
	if err != nil {
		return cp, fmt.Errorf("sqlitestore: head of %s: %w", project, err)
	}
	copy(cp.Hash[:], h)
	return cp, nil
}

func (s *Store) After(ctx context.Context, project string, seq uint64, limit int) ([]server.Entry, error) {
	rows, err := s.db.Reader().QueryContext(ctx, `SELECT seq, envelope, hash, clock_skew_micros, device_id, device_seq FROM ledger WHERE project_id = ? AND seq > ? ORDER BY seq LIMIT ?`,
		project, seq, limit)
	if err != nil {
		return nil, fmt.Errorf("sqlitestore: read %s after %d: %w", project, seq, err)
	}
	return scanEntries(rows)
}

func scanEntries(rows *sql.Rows) ([]server.Entry, error) {
	defer rows.Close()
	var out []server.Entry
	for rows.Next() {
		var e server.Entry
		var h []byte
		if err := rows.Scan(&e.Seq, &e.Event, &h, &e.SkewMicros, &e.DeviceID, &e.DeviceSeq); err != nil {
			return nil, fmt.Errorf("sqlitestore: scan entry: %w", err)
		}
		copy(e.Hash[:], h)
		out = append(out, e)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("sqlitestore: scan entries: %w", err)
	}
	return out, nil
}

func (s *Store) HashAt(ctx context.Context, project string, seq uint64) (server.Hash, bool, error) {
	var h []byte
	err := s.db.Reader().QueryRowContext(ctx, `SELECT hash FROM ledger WHERE project_id = ? AND seq = ?`, project, seq).Scan(&h)
	if errors.Is(err, sql.ErrNoRows) {
		return server.Hash{}, false, nil
	}
	if err != nil {
		return server.Hash{}, false, fmt.Errorf("sqlitestore: hash at %d: %w", seq, err)
	}
	var out server.Hash
	copy(out[:], h)
	return out, true, nil
}

func (s *Store) Append(ctx context.Context, project string, h server.Checkpoint, rows []server.Row) error {
	if len(rows) == 0 {
		return nil
	}
	return fault(s.db.Tx(ctx, func(tx *sql.Tx) error {
		cur, err := head(ctx, tx, project)
		if err != nil {
			return err
		}
		if cur != h {
			return fmt.Errorf("sqlitestore: append to %s: head is %d/%d, expected %d/%d: %w", project, cur.Epoch, cur.Seq, h.Epoch, h.Seq, server.ErrConflict)
		}
		mark, err := tx.PrepareContext(ctx, `INSERT INTO device_marks (project_id, device_id, high_seq) VALUES (?, ?, ?)
			ON CONFLICT (project_id, device_id) DO UPDATE SET high_seq = max(high_seq, excluded.high_seq)`)
		if err != nil {
			return err
		}
		defer mark.Close()
		high := map[string]uint64{}
		args := make([]any, 0, insertRows*11)
		// Rows go in by statements of several rows: one statement a row
		// costs more in the driver than the insert itself.
		for start, size := 0, 0; start < len(rows); start += insertSizes[size] {
			for insertSizes[size] > len(rows)-start {
				size++
			}
			part := rows[start : start+insertSizes[size]]
			args = args[:0]
			for _, r := range part {
				args = append(args, project, r.Seq, r.EventID, r.DeviceID, r.DeviceSeq, r.Kind, r.RecordID,
					r.Envelope, r.Hash[:], r.SkewMicros, r.Received.UnixMicro())
				high[r.DeviceID] = max(high[r.DeviceID], r.DeviceSeq)
			}
			if _, err := tx.StmtContext(ctx, s.inserts[size]).ExecContext(ctx, args...); err != nil {
				return fmt.Errorf("sqlitestore: append at %d: %w", part[0].Seq, err)
			}
		}
		for dev, seq := range high {
			if _, err := mark.ExecContext(ctx, project, dev, seq); err != nil {
				return fmt.Errorf("sqlitestore: device mark: %w", err)
			}
		}
		last := rows[len(rows)-1]
		_, err = tx.ExecContext(ctx, `UPDATE projects SET head_seq = ?, head_hash = ? WHERE project_id = ?`, last.Seq, last.Hash[:], project)
		return err
	}))
}

func (s *Store) SetEpoch(ctx context.Context, project string, epoch uint64) error {
	res, err := s.db.Writer().ExecContext(ctx, `UPDATE projects SET epoch = ? WHERE project_id = ? AND epoch < ?`, epoch, project, epoch)
	if err != nil {
		return fmt.Errorf("sqlitestore: set epoch: %w", fault(err))
	}
	if n, _ := res.RowsAffected(); n == 0 {
		return fmt.Errorf("sqlitestore: set epoch %d of %s: %w", epoch, project, server.ErrConflict)
	}
	return nil
}

// referenceKinds are the names of the kinds ReferenceData returns, those
// the ledger's descriptors mark as reference data, and referenceDataSQL its
// query, with one parameter for the project and one for each kind.
var (
	referenceKinds   = referenceKindArgs()
	referenceDataSQL = `SELECT seq, envelope, hash, clock_skew_micros, device_id, device_seq FROM ledger WHERE project_id = ?
		AND kind IN (?` + strings.Repeat(", ?", len(referenceKinds)-1) + `) ORDER BY seq`
)

func referenceKindArgs() []any {
	var out []any
	for _, name := range ledger.KindNames(func(d ledger.KindDescriptor) bool { return d.Reference }) {
		out = append(out, name)
	}
	return out
}

func (s *Store) ReferenceData(ctx context.Context, project string) ([]server.Entry, error) {
	rows, err := s.db.Reader().QueryContext(ctx, referenceDataSQL, append([]any{project}, referenceKinds...)...)
	if err != nil {
		return nil, fmt.Errorf("sqlitestore: reference data: %w", err)
	}
	return scanEntries(rows)
}

func (s *Store) ClockSkews(ctx context.Context, project string) (map[string]int64, error) {
	rows, err := s.db.Reader().QueryContext(ctx, `SELECT event_id, clock_skew_micros FROM ledger WHERE project_id = ? AND clock_skew_micros != 0`, project)
	if err != nil {
		return nil, fmt.Errorf("sqlitestore: clock skews: %w", err)
	}
	defer rows.Close()
	out := map[string]int64{}
	for rows.Next() {
		var id string
		var skew int64
		if err := rows.Scan(&id, &skew); err != nil {
			return nil, fmt.Errorf("sqlitestore: clock skews: %w", err)
		}
		out[id] = skew
	}
	return out, rows.Err()
}

func (s *Store) AddUser(ctx context.Context, id, name string, serverAdmin bool, now time.Time) error {
	if _, err := s.db.Writer().ExecContext(ctx, `INSERT INTO users (user_id, name, server_admin, created_micros) VALUES (?, ?, ?, ?)`,
		id, name, serverAdmin, now.UnixMicro()); err != nil {
		return fmt.Errorf("sqlitestore: add user: %w", fault(err))
	}
	return nil
}

func (s *Store) User(ctx context.Context, id string) (server.User, error) {
	u := server.User{ID: id}
	err := s.db.Reader().QueryRowContext(ctx, `SELECT name, server_admin FROM users WHERE user_id = ?`, id).Scan(&u.Name, &u.ServerAdmin)
	if errors.Is(err, sql.ErrNoRows) {
		return u, fmt.Errorf("sqlitestore: user %s: %w", id, server.ErrNoUser)
	}
	if err != nil {
		return u, fmt.Errorf("sqlitestore: user %s: %w", id, err)
	}
	return u, nil
}

func (s *Store) CountUsers(ctx context.Context) (int, error) {
	var n int
	if err := s.db.Reader().QueryRowContext(ctx, `SELECT COUNT(*) FROM users WHERE user_id NOT IN (SELECT user_id FROM server_identity)`).Scan(&n); err != nil {
		return 0, fmt.Errorf("sqlitestore: count users: %w", err)
	}
	return n, nil
}

func (s *Store) SetMember(ctx context.Context, project, user string, role server.Role) error {
	if _, err := s.db.Writer().ExecContext(ctx, `INSERT INTO members (project_id, user_id, role) VALUES (?, ?, ?)
		ON CONFLICT (project_id, user_id) DO UPDATE SET role = excluded.role`, project, user, string(role)); err != nil {
		return fmt.Errorf("sqlitestore: set member: %w", fault(err))
	}
	return nil
}

func (s *Store) Role(ctx context.Context, project, user string) (server.Role, error) {
	var r string
	err := s.db.Reader().QueryRowContext(ctx, `SELECT role FROM members WHERE project_id = ? AND user_id = ?`, project, user).Scan(&r)
	if errors.Is(err, sql.ErrNoRows) {
		return "", nil
	}
	if err != nil {
		return "", fmt.Errorf("sqlitestore: role: %w", err)
	}
	return server.Role(r), nil
}

func (s *Store) Members(ctx context.Context, project string) ([]server.Member, error) {
	rows, err := s.db.Reader().QueryContext(ctx, `SELECT u.user_id, u.name, u.server_admin, m.role FROM members m JOIN users u USING (user_id)
		WHERE m.project_id = ? ORDER BY u.name, u.user_id`, project)
	if err != nil {
		return nil, fmt.Errorf("sqlitestore: members: %w", err)
	}
	defer rows.Close()
	var out []server.Member
	for rows.Next() {
		var m server.Member
		var role string
		if err := rows.Scan(&m.ID, &m.Name, &m.ServerAdmin, &role); err != nil {
			return nil, fmt.Errorf("sqlitestore: members: %w", err)
		}
		m.Role = server.Role(role)
		out = append(out, m)
	}
	return out, rows.Err()
}

func (s *Store) Devices(ctx context.Context, user string) ([]server.Device, error) {
	rows, err := s.db.Reader().QueryContext(ctx, `SELECT device_id, user_id, name, public_key, revoked_micros FROM devices
		WHERE ? = '' OR user_id = ? ORDER BY enrolled_micros, device_id`, user, user)
	if err != nil {
		return nil, fmt.Errorf("sqlitestore: devices: %w", err)
	}
	defer rows.Close()
	var out []server.Device
	for rows.Next() {
		var d server.Device
		var key []byte
		var revoked sql.NullInt64
		if err := rows.Scan(&d.ID, &d.UserID, &d.Name, &key, &revoked); err != nil {
			return nil, fmt.Errorf("sqlitestore: devices: %w", err)
		}
		d.PublicKey, d.Revoked = key, revoked.Valid
		out = append(out, d)
	}
	return out, rows.Err()
}

func (s *Store) Revoke(ctx context.Context, device string, now time.Time) error {
	res, err := s.db.Writer().ExecContext(ctx, `UPDATE devices SET revoked_micros = COALESCE(revoked_micros, ?) WHERE device_id = ?`, now.UnixMicro(), device)
	if err != nil {
		return fmt.Errorf("sqlitestore: revoke: %w", fault(err))
	}
	if n, _ := res.RowsAffected(); n == 0 {
		return fmt.Errorf("sqlitestore: revoke %s: %w", device, server.ErrNoDevice)
	}
	return nil
}

func (s *Store) ProjectsOf(ctx context.Context, user string) ([]string, error) {
	rows, err := s.db.Reader().QueryContext(ctx, `SELECT project_id FROM members WHERE user_id = ? ORDER BY project_id`, user)
	if err != nil {
		return nil, fmt.Errorf("sqlitestore: projects of %s: %w", user, err)
	}
	defer rows.Close()
	var out []string
	for rows.Next() {
		var id string
		if err := rows.Scan(&id); err != nil {
			return nil, fmt.Errorf("sqlitestore: projects of %s: %w", user, err)
		}
		out = append(out, id)
	}
	return out, rows.Err()
}

func (s *Store) AddEnrollmentCode(ctx context.Context, codeHash []byte, user string, expires time.Time) error {
	if _, err := s.db.Writer().ExecContext(ctx, `INSERT INTO enrollment_codes (code_hash, user_id, expires_micros) VALUES (?, ?, ?)`,
		codeHash, user, expires.UnixMicro()); err != nil {
		return fmt.Errorf("sqlitestore: add enrolment code: %w", fault(err))
	}
	return nil
}

func (s *Store) Enroll(ctx context.Context, codeHash []byte, d server.Device, tokenHash []byte, now time.Time) (server.Device, error) {
	err := s.db.Tx(ctx, func(tx *sql.Tx) error {
		res, err := tx.ExecContext(ctx, `UPDATE enrollment_codes SET used_micros = ? WHERE code_hash = ? AND used_micros IS NULL AND expires_micros > ?`,
			now.UnixMicro(), codeHash, now.UnixMicro())
		if err != nil {
			return err
		}
		if n, _ := res.RowsAffected(); n == 0 {
			return server.ErrCodeInvalid
		}
		if err := tx.QueryRowContext(ctx, `SELECT user_id FROM enrollment_codes WHERE code_hash = ?`, codeHash).Scan(&d.UserID); err != nil {
			return err
		}
		var n int
		if err := tx.QueryRowContext(ctx, `SELECT COUNT(*) FROM devices WHERE device_id = ?`, d.ID).Scan(&n); err != nil {
			return err
		}
		if n > 0 {
			return server.ErrDeviceExists
		}
		_, err = tx.ExecContext(ctx, `INSERT INTO devices (device_id, user_id, name, public_key, token_hash, enrolled_micros) VALUES (?, ?, ?, ?, ?, ?)`,
			d.ID, d.UserID, d.Name, []byte(d.PublicKey), tokenHash, now.UnixMicro())
		return err
	})
	if err != nil {
		return server.Device{}, fmt.Errorf("sqlitestore: enrol %s: %w", d.ID, fault(err))
	}
	return d, nil
}

func (s *Store) device(ctx context.Context, where string, arg any) (server.Device, error) {
	var d server.Device
	var key []byte
	var revoked sql.NullInt64
	err := s.db.Reader().QueryRowContext(ctx, `SELECT device_id, user_id, name, public_key, token_hash, revoked_micros FROM devices WHERE `+where, arg).
		Scan(&d.ID, &d.UserID, &d.Name, &key, &d.TokenHash, &revoked)
	if errors.Is(err, sql.ErrNoRows) {
		return d, server.ErrNoDevice
	}
	if err != nil {
		return d, fmt.Errorf("sqlitestore: device: %w", err)
	}
	d.PublicKey, d.Revoked = key, revoked.Valid
	return d, nil
}

func (s *Store) DeviceByToken(ctx context.Context, tokenHash []byte) (server.Device, error) {
	return s.device(ctx, "token_hash = ?", tokenHash)
}

func (s *Store) Device(ctx context.Context, id string) (server.Device, error) {
	return s.device(ctx, "device_id = ?", id)
}

func (s *Store) ServerIdentity(ctx context.Context, fresh func() server.Identity) (server.Identity, error) {
	var id server.Identity
	err := s.db.Tx(ctx, func(tx *sql.Tx) error {
		var seed []byte
		err := tx.QueryRowContext(ctx, `SELECT device_id, user_id, private_key FROM server_identity WHERE id = 1`).Scan(&id.DeviceID, &id.UserID, &seed)
		if err == nil {
			id.Key = ed25519.NewKeyFromSeed(seed)
			return nil
		}
		if !errors.Is(err, sql.ErrNoRows) {
			return err
		}
		id = fresh()
		now := time.Now().UnixMicro()
		if _, err := tx.ExecContext(ctx, `INSERT INTO users (user_id, name, server_admin, created_micros) VALUES (?, 'tampd', 0, ?)`, id.UserID, now); err != nil {
			return err
		}
		th := sha256.Sum256(standIn())
		if _, err := tx.ExecContext(ctx, `INSERT INTO devices (device_id, user_id, name, public_key, token_hash, enrolled_micros) VALUES (?, ?, 'tampd', ?, ?, ?)`,
			id.DeviceID, id.UserID, []byte(id.Key.Public().(ed25519.PublicKey)), th[:], now); err != nil {
			return err
		}
		_, err = tx.ExecContext(ctx, `INSERT INTO server_identity (id, device_id, user_id, private_key) VALUES (1, ?, ?, ?)`, id.DeviceID, id.UserID, id.Key.Seed())
		return err
	})
	if err != nil {
		return server.Identity{}, fmt.Errorf("sqlitestore: server identity: %w", fault(err))
	}
	return id, nil
}

func (s *Store) RegisterDevice(ctx context.Context, d server.Device, userName string, now time.Time) (bool, error) {
	created := false
	err := s.db.Tx(ctx, func(tx *sql.Tx) error {
		var n int
		if err := tx.QueryRowContext(ctx, `SELECT COUNT(*) FROM devices WHERE device_id = ?`, d.ID).Scan(&n); err != nil || n > 0 {
			return err
		}
		if _, err := tx.ExecContext(ctx, `INSERT INTO users (user_id, name, server_admin, created_micros) VALUES (?, ?, 0, ?)
			ON CONFLICT (user_id) DO NOTHING`, d.UserID, userName, now.UnixMicro()); err != nil {
			return err
		}
		th := d.TokenHash
		if len(th) == 0 { // no token until the device proves its key
			h := sha256.Sum256(standIn())
			th = h[:]
		}
		var revoked any
		if d.Revoked {
			revoked = now.UnixMicro()
		}
		if _, err := tx.ExecContext(ctx, `INSERT INTO devices (device_id, user_id, name, public_key, token_hash, enrolled_micros, revoked_micros)
			VALUES (?, ?, ?, ?, ?, ?, ?)`, d.ID, d.UserID, d.Name, []byte(d.PublicKey), th, now.UnixMicro(), revoked); err != nil {
			return err
		}
		created = true
		return nil
	})
	if err != nil {
		return false, fmt.Errorf("sqlitestore: register device %s: %w", d.ID, fault(err))
	}
	return created, nil
}

func (s *Store) SetToken(ctx context.Context, device string, tokenHash []byte) error {
	res, err := s.db.Writer().ExecContext(ctx, `UPDATE devices SET token_hash = ? WHERE device_id = ?`, tokenHash, device)
	if err != nil {
		return fmt.Errorf("sqlitestore: set token of %s: %w", device, fault(err))
	}
	if n, _ := res.RowsAffected(); n == 0 {
		return fmt.Errorf("sqlitestore: set token of %s: %w", device, server.ErrNoDevice)
	}
	return nil
}

// standIn returns 32 random bytes, whose hash stands in the token column of
// a device that has no token: nobody knows a token that hashes to it.
func standIn() []byte {
	b := make([]byte, 32)
	if _, err := rand.Read(b); err != nil {
		panic(fmt.Sprintf("sqlitestore: random: %v", err))
	}
	return b
}
