package sqlitestore

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"io/fs"
	"iter"
	"os"
	"time"

	sqlitedrv "modernc.org/sqlite"
	sqlite3 "modernc.org/sqlite/lib"

	"tamp/internal/sqlite"
	"tamp/server"
)

// ErrInUse is returned (wrapped) by OpenReader when another process has the
// ledger open, as a tampd serving it.
var ErrInUse = errors.New("sqlitestore: the ledger is open in another process")

// Reader reads a whole SQLite ledger file, to copy it to another store,
// without changing it: its one connection refuses writes (query_only) and
// holds SQLite's exclusive lock from its first read until Close, so that
// no other process can open the ledger meanwhile and what it reads is one
// unchanging state. The one write SQLite itself may make is at Close, to a
// ledger a killed tampd left with commits still in its write-ahead log
// (ledger.db-wal): it folds them into ledger.db, as tampd's next start
// would; the rows are the same. It is not safe for concurrent use.
type Reader struct {
	db   *sql.DB
	conn *sql.Conn
}

// OpenReader opens the ledger file at path for reading. It fails, creating
// nothing, when there is no such file; with ErrInUse when another process
// has it open (tampd serve: stop it first); and when its schema is not the
// one this program's migrations make (an older one is brought up to date
// by starting tampd serve on it once).
func OpenReader(ctx context.Context, path string) (*Reader, error) {
	fi, err := os.Stat(path)
	if err != nil {
		return nil, fmt.Errorf("sqlitestore: %w", err)
	}
	if !fi.Mode().IsRegular() {
		return nil, fmt.Errorf("sqlitestore: %s is not a file", path)
	}
	// mode=rw: open, never create. locking_mode(EXCLUSIVE) takes the lock
	// at the first read and keeps it; with busy_timeout 0 a ledger that
	// another connection holds fails at once with SQLITE_BUSY.
	dsn := "file:" + path + "?mode=rw&_pragma=busy_timeout(0)&_pragma=locking_mode(EXCLUSIVE)&_pragma=query_only(1)"
	db, err := sql.Open("sqlite", dsn)
	if err != nil {
		return nil, fmt.Errorf("sqlitestore: open %s: %w", path, err)
	}
	db.SetMaxOpenConns(1)
	conn, err := db.Conn(ctx)
	if err != nil {
		db.Close()
		return nil, fmt.Errorf("sqlitestore: open %s: %w", path, err)
	}
	r := &Reader{db: db, conn: conn}
	var at int
	err = conn.QueryRowContext(ctx, `SELECT COALESCE(MAX(version), 0) FROM schema_migrations`).Scan(&at)
	var se *sqlitedrv.Error
	if errors.As(err, &se) && (se.Code()&0xff == sqlite3.SQLITE_BUSY || se.Code()&0xff == sqlite3.SQLITE_LOCKED) {
		r.Close()
		return nil, fmt.Errorf("sqlitestore: %s: %w (stop the tampd serving it first)", path, ErrInUse)
	}
	if err != nil {
		r.Close()
		return nil, fmt.Errorf("sqlitestore: %s: read its schema version (is it a tampd ledger?): %w", path, err)
	}
	names, err := fs.Glob(migrationFiles, "migrations/*.sql")
	if err != nil {
		r.Close()
		return nil, err
	}
	switch {
	case at > len(names):
		r.Close()
		return nil, fmt.Errorf("sqlitestore: %s: schema version %d, this program knows %d: %w", path, at, len(names), sqlite.ErrSchemaNewer)
	case at < len(names):
		r.Close()
		return nil, fmt.Errorf("sqlitestore: %s: schema version %d, this program's is %d: start this tampd serve on it once, to bring it up to date, and stop it", path, at, len(names))
	}
	return r, nil
}

// Close releases the ledger.
func (r *Reader) Close() error {
	return errors.Join(r.conn.Close(), r.db.Close())
}

// Dump returns everything the store keeps besides the ledgers' rows, and
// each project's count of rows. It leaves out what no other store keeps:
// the device marks (the highest sequence number accepted of each device
// and project, which the ledger's rows hold) and the storage probe's row
// (empty between probes).
func (r *Reader) Dump(ctx context.Context) (server.Dump, error) {
	var d server.Dump
	err := r.each(ctx, `SELECT p.project_id, p.name, p.epoch, p.head_seq, p.head_hash, p.created_micros,
			(SELECT COUNT(*) FROM ledger l WHERE l.project_id = p.project_id)
		FROM projects p ORDER BY p.project_id`, func(rows *sql.Rows) error {
		var p server.DumpProject
		var h []byte
		var created int64
		if err := rows.Scan(&p.Head.Project, &p.Name, &p.Head.Epoch, &p.Head.Seq, &h, &created, &p.Rows); err != nil {
			return err
		}
		copy(p.Head.Hash[:], h)
		p.Created = time.UnixMicro(created)
		d.Projects = append(d.Projects, p)
		return nil
	})
	if err != nil {
		return d, fmt.Errorf("sqlitestore: read the projects: %w", err)
	}
	err = r.each(ctx, `SELECT user_id, name, server_admin, created_micros FROM users ORDER BY user_id`, func(rows *sql.Rows) error {
		var u server.DumpUser
		var created int64
		if err := rows.Scan(&u.ID, &u.Name, &u.ServerAdmin, &created); err != nil {
			return err
		}
		u.Created = time.UnixMicro(created)
		d.Users = append(d.Users, u)
		return nil
	})
	if err != nil {
		return d, fmt.Errorf("sqlitestore: read the users: %w", err)
	}
	err = r.each(ctx, `SELECT device_id, user_id, name, public_key, token_hash, enrolled_micros, revoked_micros FROM devices ORDER BY device_id`,
		func(rows *sql.Rows) error {
			var v server.DumpDevice
			var key []byte
			var enrolled int64
			var revoked sql.NullInt64
			if err := rows.Scan(&v.ID, &v.UserID, &v.Name, &key, &v.TokenHash, &enrolled, &revoked); err != nil {
				return err
			}
			v.PublicKey, v.Enrolled = key, time.UnixMicro(enrolled)
			if revoked.Valid {
				v.Revoked, v.RevokedAt = true, time.UnixMicro(revoked.Int64)
			}
			d.Devices = append(d.Devices, v)
			return nil
		})
	if err != nil {
		return d, fmt.Errorf("sqlitestore: read the devices: %w", err)
	}
	err = r.each(ctx, `SELECT code_hash, user_id, expires_micros, used_micros FROM enrollment_codes ORDER BY code_hash`, func(rows *sql.Rows) error {
		var c server.DumpCode
		var expires int64
		var used sql.NullInt64
		if err := rows.Scan(&c.Hash, &c.User, &expires, &used); err != nil {
			return err
		}
		c.Expires = time.UnixMicro(expires)
		if used.Valid {
			c.Used = time.UnixMicro(used.Int64)
		}
		d.Codes = append(d.Codes, c)
		return nil
	})
	if err != nil {
		return d, fmt.Errorf("sqlitestore: read the enrolment codes: %w", err)
	}
	err = r.each(ctx, `SELECT project_id, user_id, role FROM members ORDER BY project_id, user_id`, func(rows *sql.Rows) error {
		var m server.DumpMember
		if err := rows.Scan(&m.Project, &m.User, &m.Role); err != nil {
			return err
		}
		d.Members = append(d.Members, m)
		return nil
	})
	if err != nil {
		return d, fmt.Errorf("sqlitestore: read the members: %w", err)
	}
	err = r.each(ctx, `SELECT invitation_id, project_id, user_id, role, invited_by, created_micros, state, resolved_micros
		FROM invitations ORDER BY created_micros, invitation_id`, func(rows *sql.Rows) error {
		var inv server.DumpInvitation
		var created int64
		var resolved sql.NullInt64
		if err := rows.Scan(&inv.ID, &inv.Project, &inv.User, &inv.Role, &inv.InvitedBy, &created, &inv.State, &resolved); err != nil {
			return err
		}
		inv.Created = time.UnixMicro(created)
		if resolved.Valid {
			inv.Resolved = time.UnixMicro(resolved.Int64)
		}
		d.Invitations = append(d.Invitations, inv)
		return nil
	})
	if err != nil {
		return d, fmt.Errorf("sqlitestore: read the invitations: %w", err)
	}
	var id server.DumpIdentity
	err = r.conn.QueryRowContext(ctx, `SELECT device_id, user_id, private_key FROM server_identity WHERE id = 1`).Scan(&id.DeviceID, &id.UserID, &id.Seed)
	switch {
	case err == nil:
		d.Identity = &id
	case !errors.Is(err, sql.ErrNoRows):
		return d, fmt.Errorf("sqlitestore: read the server's identity: %w", err)
	}
	return d, nil
}

// each runs query and calls fn on each row.
func (r *Reader) each(ctx context.Context, query string, fn func(*sql.Rows) error) error {
	rows, err := r.conn.QueryContext(ctx, query)
	if err != nil {
		return err
	}
	defer rows.Close()
	for rows.Next() {
		if err := fn(rows); err != nil {
			return err
		}
	}
	return rows.Err()
}

// Ledger returns a project's ledger rows in order of sequence number, read
// as they are consumed. An error ends the sequence.
func (r *Reader) Ledger(ctx context.Context, project string) iter.Seq2[server.Row, error] {
	return func(yield func(server.Row, error) bool) {
		rows, err := r.conn.QueryContext(ctx, `SELECT seq, event_id, device_id, device_seq, kind, record_id, envelope, hash,
			clock_skew_micros, received_micros FROM ledger WHERE project_id = ? ORDER BY seq`, project)
		if err != nil {
			yield(server.Row{}, fmt.Errorf("sqlitestore: read the ledger of %s: %w", project, err))
			return
		}
		defer rows.Close()
		for rows.Next() {
			var row server.Row
			var h []byte
			var received int64
			if err := rows.Scan(&row.Seq, &row.EventID, &row.DeviceID, &row.DeviceSeq, &row.Kind, &row.RecordID, &row.Envelope, &h,
				&row.SkewMicros, &received); err != nil {
				yield(server.Row{}, fmt.Errorf("sqlitestore: read the ledger of %s: %w", project, err))
				return
			}
			copy(row.Hash[:], h)
			row.Received = time.UnixMicro(received)
			if !yield(row, nil) {
				return
			}
		}
		if err := rows.Err(); err != nil {
			yield(server.Row{}, fmt.Errorf("sqlitestore: read the ledger of %s: %w", project, err))
		}
	}
}
