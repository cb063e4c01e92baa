package pgtest

import (
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// The test server answers, and a database of a test's own is created,
// reachable and dropped at the end. .ci/run runs this test to tell whether
// the server answers when pg_isready is not installed.
func TestPostgresServerAnswers(t *testing.T) {
	var dsn, name string
	t.Run("database", func(t *testing.T) {
		dsn = NewDatabase(t)
		name = DatabaseOf(t, dsn)
		conn, err := pgx.Connect(t.Context(), dsn)
		if err != nil {
			t.Fatal(err)
		}
		defer conn.Close(t.Context())
		var got, version string
		if err := conn.QueryRow(t.Context(), "SELECT current_database(), version()").Scan(&got, &version); err != nil || got != name {
			t.Fatalf("connected to %q, %v; want %s", got, err, name)
		}
		t.Log(version)
	})
	if t.Skipped() || dsn == "" {
		return
	}
	conn, err := pgx.Connect(t.Context(), AdminDSN(t))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close(t.Context())
	var n int
	deadline := time.Now().Add(5 * time.Second)
	for {
		if err := conn.QueryRow(t.Context(), "SELECT count(*) FROM pg_database WHERE datname = $1", name).Scan(&n); err != nil {
			t.Fatal(err)
		}
		if n == 0 || time.Now().After(deadline) {
			break
		}
		time.Sleep(50 * time.Millisecond)
	}
	if n != 0 {
		t.Errorf("the test's database %s outlived the test", name)
	}
}

// A DSN names another database in either form.
func TestWithDatabase(t *testing.T) {
	for in, want := range map[string]string{
		"postgres://u@h:5432/postgres?sslmode=disable": "postgres://u@h:5432/other?sslmode=disable",
		"postgresql://u:pw@h/":                         "postgresql://u:pw@h/other",
		"host=h user=u dbname=postgres":                "host=h user=u dbname=postgres dbname=other",
	} {
		got := WithDatabase(t, in, "other")
		if got != want {
			t.Errorf("WithDatabase(%q) = %q, want %q", in, got, want)
		}
		if db := DatabaseOf(t, got); db != "other" {
			t.Errorf("DatabaseOf(%q) = %q", got, db)
		}
	}
}
