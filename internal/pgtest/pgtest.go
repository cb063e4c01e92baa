// Package pgtest gives a test a PostgreSQL database of its own, created on
// the server TAMP_TEST_POSTGRES names and dropped when the test ends, so
// that tests never see each other's rows.
//
// Without TAMP_TEST_POSTGRES the server at 127.0.0.1:5432 is used (as
// DefaultDSN) when one answers there; when none does the test is skipped
// with a message saying how to run it, unless TAMP_CI is set: in CI the
// PostgreSQL tests never skip.
package pgtest

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"net"
	"net/url"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// Env is the variable naming the test server: a DSN (URL or keyword=value)
// of a role that may create databases, as the local one below.
const Env = "TAMP_TEST_POSTGRES"

// DefaultDSN is the server tests use when Env is unset and it answers.
const DefaultDSN = "postgres://postgres@127.0.0.1:5432/postgres?sslmode=disable"

// AdminDSN returns the DSN of the test server, or skips tb (fails it under
// TAMP_CI) when Env is unset and nothing answers at 127.0.0.1:5432.
func AdminDSN(tb testing.TB) string {
	tb.Helper()
	if dsn := os.Getenv(Env); dsn != "" {
		return dsn
	}
	c, err := net.DialTimeout("tcp", "127.0.0.1:5432", 2*time.Second)
	if err == nil {
		c.Close()
		return DefaultDSN
	}
	msg := "no PostgreSQL server: " + Env + " is unset and nothing answers at 127.0.0.1:5432 (" + err.Error() + "); " +
		"run a server there with trust authentication for user postgres, or set " + Env +
		"=postgres://USER@HOST:5432/postgres?sslmode=disable (a role that may CREATE DATABASE), then go test -run Postgres ./..."
	if os.Getenv("TAMP_CI") != "" {
		tb.Fatal("TAMP_CI is set, so the PostgreSQL tests may not skip: " + msg)
	}
	tb.Skip(msg)
	return ""
}

// NewDatabase creates an empty database on the test server and returns
// its DSN; the database is dropped (with any connections left) when tb
// ends.
func NewDatabase(tb testing.TB) string {
	tb.Helper()
	admin := AdminDSN(tb)
	b := make([]byte, 6)
	_, _ = rand.Read(b)
	name := "tamp_test_" + hex.EncodeToString(b)
	Exec(tb, admin, "CREATE DATABASE "+name)
	tb.Cleanup(func() { Exec(tb, admin, "DROP DATABASE IF EXISTS "+name+" WITH (FORCE)") })
	return WithDatabase(tb, admin, name)
}

// WithDatabase returns dsn naming database name instead of its own.
func WithDatabase(tb testing.TB, dsn, name string) string {
	tb.Helper()
	if strings.HasPrefix(dsn, "postgres://") || strings.HasPrefix(dsn, "postgresql://") {
		u, err := url.Parse(dsn)
		if err != nil {
			tb.Fatalf("%s: %v", Env, err)
		}
		u.Path = "/" + name
		return u.String()
	}
	return dsn + " dbname=" + name // keyword=value: the last of a keyword counts
}

// DatabaseOf returns the name of the database dsn names.
func DatabaseOf(tb testing.TB, dsn string) string {
	tb.Helper()
	cfg, err := pgx.ParseConfig(dsn)
	if err != nil {
		tb.Fatal(err)
	}
	return cfg.Database
}

// Exec runs statements on the database dsn names, on a connection of its
// own.
func Exec(tb testing.TB, dsn, sql string) {
	tb.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	conn, err := pgx.Connect(ctx, dsn)
	if err != nil {
		tb.Fatalf("connect to the test PostgreSQL server (%s): %v", Env, err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, sql); err != nil {
		tb.Fatalf("%s: %v", sql, err)
	}
}
