package sqlite

import (
	"context"
	"database/sql"
	"errors"
	"path/filepath"
	"sync"
	"testing"
	"testing/fstest"
	"time"
)

var testMigrations = fstest.MapFS{
	"0001_init.sql":  {Data: []byte(`CREATE TABLE a (id INTEGER PRIMARY KEY, v TEXT NOT NULL);`)},
	"0002_child.sql": {Data: []byte(`CREATE TABLE b (id INTEGER PRIMARY KEY, a_id INTEGER NOT NULL REFERENCES a(id));`)},
}

func open(t *testing.T, file string, opts Options) *DB {
	t.Helper()
	db, err := Open(context.Background(), file, opts, testMigrations)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	return db
}

func pragmas(t *testing.T, db *sql.DB) (map[string]int, string) {
	t.Helper()
	got := map[string]int{}
	for _, name := range []string{"busy_timeout", "foreign_keys", "synchronous"} {
		var v int
		if err := db.QueryRow("PRAGMA " + name).Scan(&v); err != nil {
			t.Fatal(err)
		}
		got[name] = v
	}
	var mode string
	if err := db.QueryRow("PRAGMA journal_mode").Scan(&mode); err != nil {
		t.Fatal(err)
	}
	return got, mode
}

// The per-connection pragmas are read back on both pools.
func TestPragmas(t *testing.T) {
	for _, sync := range []Synchronous{Full, Normal} {
		db := open(t, filepath.Join(t.TempDir(), "p.db"), Options{Synchronous: sync})
		want := map[string]int{"busy_timeout": 5000, "foreign_keys": 1, "synchronous": 2}
		if sync == Normal {
			want["synchronous"] = 1
		}
		for name, pool := range map[string]*sql.DB{"writer": db.Writer(), "reader": db.Reader()} {
			got, mode := pragmas(t, pool)
			if mode != "wal" {
				t.Errorf("%s journal_mode = %q, want wal", name, mode)
			}
			for k, v := range want {
				if got[k] != v {
					t.Errorf("%s %s: %s = %d, want %d", sync, name, k, got[k], v)
				}
			}
		}
	}
}

func TestMigrateFreshAndUpgrade(t *testing.T) {
	ctx := context.Background()
	file := filepath.Join(t.TempDir(), "m.db")
	// The previous release's schema: only the first migration.
	w, err := sql.Open("sqlite", DSN(file, Full, 5*time.Second, false))
	if err != nil {
		t.Fatal(err)
	}
	if err := Migrate(ctx, w, testMigrations, 1); err != nil {
		t.Fatal(err)
	}
	if v, _ := Version(ctx, w); v != 1 {
		t.Fatalf("version after migrating to 1 = %d", v)
	}
	if _, err := w.Exec(`INSERT INTO a(v) VALUES ('kept')`); err != nil {
		t.Fatal(err)
	}
	w.Close()
	db := open(t, file, Options{})
	if v, _ := Version(ctx, db.Writer()); v != 2 {
		t.Errorf("version after open = %d, want 2", v)
	}
	var got string
	if err := db.Reader().QueryRow(`SELECT v FROM a`).Scan(&got); err != nil || got != "kept" {
		t.Errorf("row from the old schema = %q, %v", got, err)
	}
	// Foreign keys hold on the writer.
	if _, err := db.Writer().Exec(`INSERT INTO b(a_id) VALUES (99)`); err == nil {
		t.Error("foreign key not enforced")
	}
	// A reader cannot write.
	if _, err := db.Reader().Exec(`INSERT INTO a(v) VALUES ('x')`); err == nil {
		t.Error("reader wrote")
	}
	db.Close()
	// A newer database than the program is refused.
	newer := fstest.MapFS{"0001_init.sql": testMigrations["0001_init.sql"]}
	if _, err := Open(ctx, file, Options{}, newer); !errors.Is(err, ErrSchemaNewer) {
		t.Errorf("newer schema: %v", err)
	}
	bad := fstest.MapFS{"0001_a.sql": {Data: []byte("CREATE TABLE x(i);")}, "0003_c.sql": {Data: []byte("SELECT 1;")}}
	if _, err := Open(ctx, filepath.Join(t.TempDir(), "g.db"), Options{}, bad); err == nil {
		t.Error("a gap in migration numbers accepted")
	}
}

// Concurrent writers serialise on the one writer connection without
// SQLITE_BUSY, while readers read.
func TestConcurrentWrites(t *testing.T) {
	db := open(t, filepath.Join(t.TempDir(), "c.db"), Options{Synchronous: Normal})
	ctx := context.Background()
	var wg sync.WaitGroup
	errs := make(chan error, 16)
	for g := range 8 {
		wg.Add(2)
		go func() {
			defer wg.Done()
			for range 25 {
				err := db.Tx(ctx, func(tx *sql.Tx) error {
					var n int
					if err := tx.QueryRow(`SELECT COUNT(*) FROM a`).Scan(&n); err != nil {
						return err
					}
					_, err := tx.Exec(`INSERT INTO a(v) VALUES (?)`, g)
					return err
				})
				if err != nil {
					errs <- err
					return
				}
			}
		}()
		go func() {
			defer wg.Done()
			for range 25 {
				var n int
				if err := db.Reader().QueryRow(`SELECT COUNT(*) FROM a`).Scan(&n); err != nil {
					errs <- err
					return
				}
			}
		}()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Error(err)
	}
	var n int
	db.Reader().QueryRow(`SELECT COUNT(*) FROM a`).Scan(&n)
	if n != 200 {
		t.Errorf("rows = %d, want 200", n)
	}
}
