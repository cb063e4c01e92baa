// Package sqlite opens the SQLite databases of tamp's device store and
// server ledger through modernc.org/sqlite, with the settings both need: WAL,
// a busy timeout and foreign keys on every connection (set in the DSN, since
// a PRAGMA statement reaches only one pooled connection), one writer
// connection whose transactions begin IMMEDIATE, a separate pool of readers,
// and numbered schema migrations embedded in the binary and run on open.
package sqlite

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"io/fs"
	"net/url"
	"path"
	"slices"
	"strconv"
	"strings"
	"time"

	_ "modernc.org/sqlite" // the "sqlite" database/sql driver
)

// Synchronous is SQLite's durability setting in WAL mode.
type Synchronous string

// The settings tamp uses. FULL survives power loss: a committed transaction
// is on disk before the commit returns. NORMAL survives a process crash but
// may lose the last transactions on power loss; it is several times faster.
const (
	Full   Synchronous = "FULL"
	Normal Synchronous = "NORMAL"
)

// Options configure Open.
type Options struct {
	Synchronous Synchronous // zero means Full
	Readers     int         // size of the read pool; zero means 4
	BusyTimeout time.Duration
}

// DB is a database with one writer connection and a pool of readers. It is
// safe for concurrent use.
type DB struct {
	w, r *sql.DB
	path string
}

// DSN returns the data source name for path with per-connection pragmas.
func DSN(file string, sync Synchronous, busy time.Duration, readOnly bool) string {
	q := url.Values{}
	q.Add("_pragma", fmt.Sprintf("busy_timeout(%d)", busy.Milliseconds()))
	q.Add("_pragma", "journal_mode(WAL)")
	q.Add("_pragma", fmt.Sprintf("synchronous(%s)", sync))
	q.Add("_pragma", "foreign_keys(1)")
	if readOnly {
		q.Add("_pragma", "query_only(1)")
	} else {
		q.Set("_txlock", "immediate")
	}
	return "file:" + file + "?" + q.Encode()
}

// Open opens (creating if needed) the database at file and runs every
// migration of migrations not yet applied.
func Open(ctx context.Context, file string, opts Options, migrations fs.FS) (*DB, error) {
	if opts.Synchronous == "" {
		opts.Synchronous = Full
	}
	if opts.Synchronous != Full && opts.Synchronous != Normal {
		return nil, fmt.Errorf("sqlite: synchronous must be FULL or NORMAL, not %q", opts.Synchronous)
	}
	if opts.Readers <= 0 {
		opts.Readers = 4
	}
	if opts.BusyTimeout <= 0 {
		opts.BusyTimeout = 5 * time.Second
	}
	w, err := sql.Open("sqlite", DSN(file, opts.Synchronous, opts.BusyTimeout, false))
	if err != nil {
		return nil, fmt.Errorf("sqlite: open %s: %w", file, err)
	}
	w.SetMaxOpenConns(1)
	w.SetMaxIdleConns(1)
	w.SetConnMaxLifetime(0)
	if err := w.PingContext(ctx); err != nil {
		w.Close()
		return nil, fmt.Errorf("sqlite: open %s: %w", file, err)
	}
	before, err := versionIfAny(ctx, w)
	if err != nil {
		w.Close()
		return nil, fmt.Errorf("sqlite: open %s: %w", file, err)
	}
	if err := Migrate(ctx, w, migrations, -1); err != nil {
		w.Close()
		return nil, err
	}
	if after, err := Version(ctx, w); err == nil && before > 0 && after > before {
		if err := compact(ctx, w); err != nil {
			w.Close()
			return nil, err
		}
	}
	r, err := sql.Open("sqlite", DSN(file, opts.Synchronous, opts.BusyTimeout, true))
	if err != nil {
		w.Close()
		return nil, fmt.Errorf("sqlite: open %s: %w", file, err)
	}
	r.SetMaxOpenConns(opts.Readers)
	return &DB{w: w, r: r, path: file}, nil
}

// compactShare is the share of a database's pages that, free after an
// upgrade, makes Open compact the file.
const compactShare = 4 // a quarter

// compact rewrites the database file without its free pages (VACUUM) when
// at least a quarter of its pages are free: after an upgrade whose
// migration rebuilt a table, whose old pages SQLite keeps in the file for
// reuse, so that a device's store does not stay larger than a new one for
// months. It runs once, at the upgrade; an up-to-date database is never
// compacted on open.
func compact(ctx context.Context, w *sql.DB) error {
	var pages, free int64
	if err := w.QueryRowContext(ctx, `PRAGMA page_count`).Scan(&pages); err != nil {
		return fmt.Errorf("sqlite: page count: %w", err)
	}
	if err := w.QueryRowContext(ctx, `PRAGMA freelist_count`).Scan(&free); err != nil {
		return fmt.Errorf("sqlite: free pages: %w", err)
	}
	if pages == 0 || free*compactShare < pages {
		return nil
	}
	if _, err := w.ExecContext(ctx, `VACUUM`); err != nil {
		return fmt.Errorf("sqlite: compact after the upgrade: %w", err)
	}
	return nil
}

// Writer returns the single writer connection's handle.
func (db *DB) Writer() *sql.DB { return db.w }

// Reader returns the read pool.
func (db *DB) Reader() *sql.DB { return db.r }

// Path returns the database file's path.
func (db *DB) Path() string { return db.path }

// Close closes both pools.
func (db *DB) Close() error {
	return errors.Join(db.r.Close(), db.w.Close())
}

// Tx runs fn in a write transaction (BEGIN IMMEDIATE), committing when fn
// returns nil and rolling back otherwise.
func (db *DB) Tx(ctx context.Context, fn func(*sql.Tx) error) error {
	tx, err := db.w.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("sqlite: begin: %w", err)
	}
	if err := fn(tx); err != nil {
		return errors.Join(err, rollback(tx))
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("sqlite: commit: %w", err)
	}
	return nil
}

func rollback(tx *sql.Tx) error {
	if err := tx.Rollback(); err != nil && !errors.Is(err, sql.ErrTxDone) {
		return fmt.Errorf("sqlite: rollback: %w", err)
	}
	return nil
}

// migration is one numbered schema step.
type migration struct {
	version int
	name    string
	sql     string
}

func load(migrations fs.FS) ([]migration, error) {
	names, err := fs.Glob(migrations, "*.sql")
	if err != nil {
		return nil, fmt.Errorf("sqlite: list migrations: %w", err)
	}
	var out []migration
	for _, n := range names {
		num, _, ok := strings.Cut(path.Base(n), "_")
		v, err := strconv.Atoi(num)
		if !ok || err != nil || v <= 0 {
			return nil, fmt.Errorf("sqlite: migration %q is not named NNNN_name.sql", n)
		}
		b, err := fs.ReadFile(migrations, n)
		if err != nil {
			return nil, fmt.Errorf("sqlite: read migration %s: %w", n, err)
		}
		out = append(out, migration{v, n, string(b)})
	}
	slices.SortFunc(out, func(a, b migration) int { return a.version - b.version })
	for i, m := range out {
		if m.version != i+1 {
			return nil, fmt.Errorf("sqlite: migrations must be numbered 1, 2, ... without gaps; found %s at place %d", m.name, i+1)
		}
	}
	return out, nil
}

// Migrate applies, each in its own transaction, the migrations of
// migrations above the database's version, up to version upTo (-1: all).
func Migrate(ctx context.Context, w *sql.DB, migrations fs.FS, upTo int) error {
	ms, err := load(migrations)
	if err != nil {
		return err
	}
	if _, err := w.ExecContext(ctx, `CREATE TABLE IF NOT EXISTS schema_migrations (
		version INTEGER PRIMARY KEY, name TEXT NOT NULL, applied_micros INTEGER NOT NULL)`); err != nil {
		return fmt.Errorf("sqlite: create schema_migrations: %w", err)
	}
	current, err := Version(ctx, w)
	if err != nil {
		return err
	}
	if current > len(ms) {
		return fmt.Errorf("%w: the database is at schema version %d, this program's is %d", ErrSchemaNewer, current, len(ms))
	}
	for _, m := range ms[current:] {
		if upTo >= 0 && m.version > upTo {
			break
		}
		tx, err := w.BeginTx(ctx, nil)
		if err != nil {
			return fmt.Errorf("sqlite: migration %s: %w", m.name, err)
		}
		if _, err := tx.ExecContext(ctx, m.sql); err != nil {
			return errors.Join(fmt.Errorf("sqlite: migration %s: %w", m.name, err), rollback(tx))
		}
		if _, err := tx.ExecContext(ctx, `INSERT INTO schema_migrations(version, name, applied_micros) VALUES (?, ?, ?)`,
			m.version, m.name, time.Now().UnixMicro()); err != nil {
			return errors.Join(fmt.Errorf("sqlite: migration %s: %w", m.name, err), rollback(tx))
		}
		if err := tx.Commit(); err != nil {
			return fmt.Errorf("sqlite: migration %s: %w", m.name, err)
		}
	}
	return nil
}

// versionIfAny is Version, 0 for a database that has never been migrated.
func versionIfAny(ctx context.Context, db *sql.DB) (int, error) {
	var tables int
	if err := db.QueryRowContext(ctx, `SELECT COUNT(*) FROM sqlite_master WHERE name = 'schema_migrations'`).Scan(&tables); err != nil || tables == 0 {
		return 0, err
	}
	return Version(ctx, db)
}

// Version returns the database's schema version (0 before any migration).
func Version(ctx context.Context, db *sql.DB) (int, error) {
	var v int
	if err := db.QueryRowContext(ctx, `SELECT COALESCE(MAX(version), 0) FROM schema_migrations`).Scan(&v); err != nil {
		return 0, fmt.Errorf("sqlite: schema version: %w", err)
	}
	return v, nil
}
