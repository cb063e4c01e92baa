package pgstore

import (
	"context"
	"crypto/rand"
	"errors"
	"fmt"
	"io"
	"net"
	"strings"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"tamp/server"
)

// fault wraps err with the server's storage fault it names, so that the
// server tells a database that cannot write (which it reports and waits
// out, probing) from a fault of its own:
//
//   - SQLSTATE 53100 disk_full: ErrStorageFull;
//   - 25006 read_only_sql_transaction (a hot standby, as after a failover
//     that left the connections on the old primary, or a database set
//     default_transaction_read_only): ErrStorageReadOnly;
//   - 58030 io_error, class 08 (connection exceptions), 57P01 to 57P03
//     (the server shutting down, crashed or starting), and a connection
//     that could not be made or was lost: ErrStorageIO, since for tampd its
//     storage failed to read or write.
//
// A cancelled call and other errors are returned as they are.
func fault(err error) error {
	if err == nil || errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return err
	}
	for _, f := range []error{server.ErrStorageFull, server.ErrStorageReadOnly, server.ErrStorageIO} {
		if errors.Is(err, f) {
			return err
		}
	}
	var f error
	var pe *pgconn.PgError
	var ce *pgconn.ConnectError
	var ne net.Error
	switch {
	case errors.As(err, &ce): // whatever the server said: for tampd the database is out of reach
		f = server.ErrStorageIO
	case errors.As(err, &pe):
		switch {
		case pe.Code == "53100":
			f = server.ErrStorageFull
		case pe.Code == "25006":
			f = server.ErrStorageReadOnly
		case pe.Code == "58030", strings.HasPrefix(pe.Code, "08"), pe.Code == "57P01", pe.Code == "57P02", pe.Code == "57P03":
			f = server.ErrStorageIO
		default:
			return err
		}
	case errors.As(err, &ne), errors.Is(err, io.EOF), errors.Is(err, io.ErrUnexpectedEOF), pgconn.SafeToRetry(err):
		f = server.ErrStorageIO
	default:
		return err
	}
	return fmt.Errorf("%w: %w", f, err)
}

// isUnique reports a unique violation (SQLSTATE 23505).
func isUnique(err error) bool {
	var pe *pgconn.PgError
	return errors.As(err, &pe) && pe.Code == "23505"
}

// isSerialization reports a serialization failure or deadlock (SQLSTATE
// 40001, 40P01): the transaction lost to a concurrent one.
func isSerialization(err error) bool {
	var pe *pgconn.PgError
	return errors.As(err, &pe) && (pe.Code == "40001" || pe.Code == "40P01")
}

// probeBytes is the size of the row a probe writes: about a batch of a few
// hundred events, so that a probe that succeeds says a push of that size
// can be stored.
const probeBytes = 64 << 10

// probeFiller is the probe row's bytes: random, so that PostgreSQL's
// compression of large values does not shrink them.
var probeFiller = func() []byte {
	b := make([]byte, probeBytes)
	_, _ = rand.Read(b) // crypto/rand's Read never fails (Go 1.24 and later)
	return b
}()

// Probe commits a write of a probeBytes row and its deletion. When the
// write fails for a storage fault it drops the pool's connections and
// tries once more on new ones: a connection left on a server that became a
// standby, or one the server closed, is of no use after the database
// writes again.
func (s *Store) Probe(ctx context.Context) error {
	err := s.probe(ctx)
	if errors.Is(err, server.ErrStorageReadOnly) || errors.Is(err, server.ErrStorageIO) {
		s.pool.Reset()
		err = s.probe(ctx)
	}
	return err
}

func (s *Store) probe(ctx context.Context) error {
	err := pgx.BeginFunc(ctx, s.pool, func(tx pgx.Tx) error {
		if _, err := tx.Exec(ctx, `INSERT INTO storage_probe (probe_id, filler) VALUES (1, $1)
			ON CONFLICT (probe_id) DO UPDATE SET filler = excluded.filler`, probeFiller); err != nil {
			return err
		}
		_, err := tx.Exec(ctx, `DELETE FROM storage_probe`)
		return err
	})
	if err != nil {
		return fmt.Errorf("pgstore: probe a write: %w", fault(err))
	}
	return nil
}
