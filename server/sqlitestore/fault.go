package sqlitestore

import (
	"context"
	"database/sql"
	"errors"
	"fmt"

	sqlitedrv "modernc.org/sqlite"
	sqlite3 "modernc.org/sqlite/lib"

	"tamp/server"
)

// fault wraps err with the server's storage fault its SQLite result code
// names, so that the server tells a full disk or a read-only data directory
// (which it reports and waits out) from a fault of its own. The primary
// result code decides (an extended code carries it in its low byte):
//
//   - SQLITE_FULL: ErrStorageFull (SQLite reports a write refused for want
//     of space, ENOSPC or a quota, so);
//   - SQLITE_READONLY (any extended code), SQLITE_PERM and SQLITE_CANTOPEN:
//     ErrStorageReadOnly (a database file SQLite could only open read-only,
//     a file it may not write, or one it could not create beside the
//     database, as in a directory the server may not write);
//   - SQLITE_IOERR (any extended code): ErrStorageIO.
//
// Other errors are returned as they are.
func fault(err error) error {
	var e *sqlitedrv.Error
	if err == nil || !errors.As(err, &e) {
		return err
	}
	var f error
	switch e.Code() & 0xff {
	case sqlite3.SQLITE_FULL:
		f = server.ErrStorageFull
	case sqlite3.SQLITE_READONLY, sqlite3.SQLITE_PERM, sqlite3.SQLITE_CANTOPEN:
		f = server.ErrStorageReadOnly
	case sqlite3.SQLITE_IOERR:
		f = server.ErrStorageIO
	default:
		return err
	}
	return fmt.Errorf("%w: %w", f, err)
}

// probeBytes is the size of the row a probe writes: about a batch of a few
// hundred events, so that a probe that succeeds says a push of that size
// can be stored.
const probeBytes = 64 << 10

// Probe commits a write of a probeBytes row and its deletion. When the
// write is refused as read-only it drops the writer's connection and tries
// once more on a new one: SQLite opens a database file it may not write
// read-only, and that connection stays read-only after the file becomes
// writable again.
func (s *Store) Probe(ctx context.Context) error {
	err := s.probe(ctx)
	if errors.Is(err, server.ErrStorageReadOnly) {
		w := s.db.Writer()
		w.SetMaxIdleConns(0) // closes the idle connection
		w.SetMaxIdleConns(1)
		err = s.probe(ctx)
	}
	return err
}

func (s *Store) probe(ctx context.Context) error {
	err := s.db.Tx(ctx, func(tx *sql.Tx) error {
		if _, err := tx.ExecContext(ctx, `INSERT INTO storage_probe (probe_id, filler) VALUES (1, zeroblob(?))
			ON CONFLICT (probe_id) DO UPDATE SET filler = excluded.filler`, probeBytes); err != nil {
			return err
		}
		_, err := tx.ExecContext(ctx, `DELETE FROM storage_probe`)
		return err
	})
	if err != nil {
		return fmt.Errorf("sqlitestore: probe a write: %w", fault(err))
	}
	return nil
}
