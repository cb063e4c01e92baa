package pgstore

import (
	"context"
	"embed"
	"errors"
	"fmt"
	"io/fs"
	"path"
	"slices"
	"strconv"
	"strings"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"
)

//go:embed migrations/*.sql
var migrationFiles embed.FS

// ErrSchemaNewer is returned (wrapped) by Open for a database whose schema
// a later version of tampd migrated: this one does not know it.
var ErrSchemaNewer = errors.New("pgstore: the database's schema is newer than this program's")

// migrationLock is the key of the advisory lock under which a process
// migrates, so that several tampd starting at once on one database migrate
// it once, in turn.
const migrationLock = 0x74616d70_0001 // "tamp", 1

type migration struct {
	version int
	name    string
	sql     string
}

// migrations returns the embedded migrations, numbered 1, 2, 3... with no
// gaps (NNNN_what.sql).
func migrations() ([]migration, error) {
	names, err := fs.Glob(migrationFiles, "migrations/*.sql")
	if err != nil {
		return nil, err
	}
	slices.Sort(names)
	out := make([]migration, 0, len(names))
	for i, name := range names {
		base := path.Base(name)
		num, _, ok := strings.Cut(base, "_")
		v, err := strconv.Atoi(num)
		if !ok || err != nil || v != i+1 {
			return nil, fmt.Errorf("pgstore: migration %s: want number %04d (migrations run 1, 2, 3... without gaps)", base, i+1)
		}
		b, err := migrationFiles.ReadFile(name)
		if err != nil {
			return nil, err
		}
		out = append(out, migration{version: v, name: base, sql: string(b)})
	}
	return out, nil
}

// migrate brings the database's schema up to date: each migration not yet
// in schema_migrations runs in a transaction of its own that records it,
// under an advisory lock.
func migrate(ctx context.Context, pool *pgxpool.Pool) error {
	ms, err := migrations()
	if err != nil {
		return err
	}
	// A schema up to date is read, not written: a store opens on a
	// database it may not write (a standby), to serve reads.
	at, err := schemaVersion(ctx, pool)
	if err != nil {
		return fmt.Errorf("pgstore: read the schema's version: %w", fault(err))
	}
	if at > len(ms) {
		return fmt.Errorf("pgstore: schema version %d, this program knows %d: %w", at, len(ms), ErrSchemaNewer)
	}
	if at == len(ms) {
		return nil
	}
	for {
		done, err := migrateOne(ctx, pool, ms)
		if err != nil {
			return err
		}
		if done {
			return nil
		}
	}
}

// schemaVersion returns the last migration schema_migrations records, 0
// when there is no such table.
func schemaVersion(ctx context.Context, pool *pgxpool.Pool) (int, error) {
	var exists bool
	if err := pool.QueryRow(ctx, `SELECT to_regclass('schema_migrations') IS NOT NULL`).Scan(&exists); err != nil || !exists {
		return 0, err
	}
	var at int
	err := pool.QueryRow(ctx, `SELECT COALESCE(max(version), 0) FROM schema_migrations`).Scan(&at)
	return at, err
}

// migrateOne runs the first migration the database lacks, and reports
// whether it lacked none.
func migrateOne(ctx context.Context, pool *pgxpool.Pool, ms []migration) (done bool, err error) {
	err = pgx.BeginFunc(ctx, pool, func(tx pgx.Tx) error {
		if _, err := tx.Exec(ctx, `SELECT pg_advisory_xact_lock($1)`, int64(migrationLock)); err != nil {
			return err
		}
		if _, err := tx.Exec(ctx, `CREATE TABLE IF NOT EXISTS schema_migrations (
			version    integer     PRIMARY KEY,
			name       text        NOT NULL,
			applied_at timestamptz NOT NULL DEFAULT now())`); err != nil {
			return err
		}
		var at int
		if err := tx.QueryRow(ctx, `SELECT COALESCE(max(version), 0) FROM schema_migrations`).Scan(&at); err != nil {
			return err
		}
		if at > len(ms) {
			return fmt.Errorf("schema version %d, this program knows %d: %w", at, len(ms), ErrSchemaNewer)
		}
		if at == len(ms) {
			done = true
			return nil
		}
		m := ms[at]
		if _, err := tx.Exec(ctx, m.sql); err != nil {
			return fmt.Errorf("migration %s: %w", m.name, err)
		}
		_, err := tx.Exec(ctx, `INSERT INTO schema_migrations (version, name) VALUES ($1, $2)`, m.version, m.name)
		return err
	})
	if err != nil {
		return false, fmt.Errorf("pgstore: migrate: %w", fault(err))
	}
	return done, nil
}
