package sqlite

import (
	"context"
	"database/sql"
	"errors"
	"os"
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

// An upgrade whose migration rebuilds a table leaves the old table's pages
// free in the file; Open compacts the file once, then, and never a file
// that is up to date.
func TestOpenCompactsAfterARebuildingUpgrade(t *testing.T) {
	ctx := context.Background()
	file := filepath.Join(t.TempDir(), "upgrade.db")
	v1 := fstest.MapFS{"0001_init.sql": {Data: []byte(`CREATE TABLE a (id TEXT PRIMARY KEY, v BLOB NOT NULL) WITHOUT ROWID;`)}}
	db, err := Open(ctx, file, Options{}, v1)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.Writer().ExecContext(ctx, `WITH RECURSIVE n(i) AS (SELECT 1 UNION ALL SELECT i + 1 FROM n WHERE i < 20000)
		INSERT INTO a SELECT printf('%08d', i), randomblob(300) FROM n`); err != nil {
		t.Fatal(err)
	}
	db.Close()
	stats := func(db *DB) (pages, free int64) {
		t.Helper()
		if err := db.Writer().QueryRow(`PRAGMA page_count`).Scan(&pages); err != nil {
			t.Fatal(err)
		}
		if err := db.Writer().QueryRow(`PRAGMA freelist_count`).Scan(&free); err != nil {
			t.Fatal(err)
		}
		return pages, free
	}
	v2 := fstest.MapFS{
		"0001_init.sql": v1["0001_init.sql"],
		"0002_rebuild.sql": {Data: []byte(`CREATE TABLE a_new (id TEXT NOT NULL UNIQUE, v BLOB NOT NULL);
			INSERT INTO a_new SELECT id, v FROM a; DROP TABLE a; ALTER TABLE a_new RENAME TO a;`)},
	}
	// What the upgrade leaves without compaction: the migration alone.
	plain := filepath.Join(t.TempDir(), "plain.db")
	copyFile(t, file, plain)
	w, err := sql.Open("sqlite", DSN(plain, Full, time.Second, false))
	if err != nil {
		t.Fatal(err)
	}
	if err := Migrate(ctx, w, v2, -1); err != nil {
		t.Fatal(err)
	}
	var plainFree int64
	if err := w.QueryRow(`PRAGMA freelist_count`).Scan(&plainFree); err != nil {
		t.Fatal(err)
	}
	w.Close()

	db, err = Open(ctx, file, Options{}, v2)
	if err != nil {
		t.Fatal(err)
	}
	pages, free := stats(db)
	var rows int
	if err := db.Reader().QueryRow(`SELECT COUNT(*) FROM a`).Scan(&rows); err != nil || rows != 20000 {
		t.Fatalf("after the upgrade the table holds %d rows (%v), want 20000", rows, err)
	}
	db.Close()
	if plainFree*4 < pages {
		t.Fatalf("the rebuild alone left %d free pages; the test needs it to leave many", plainFree)
	}
	if free*20 > pages {
		t.Errorf("after the upgrade %d of %d pages are free; Open should have compacted the file (the migration alone leaves %d free)", free, pages, plainFree)
	}
	// An up-to-date file is not compacted: pages freed since stay free.
	db, err = Open(ctx, file, Options{}, v2)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.Writer().ExecContext(ctx, `DELETE FROM a WHERE id > '00010000'`); err != nil {
		t.Fatal(err)
	}
	db.Close()
	db, err = Open(ctx, file, Options{}, v2)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	if _, free := stats(db); free == 0 {
		t.Error("opening an up-to-date file compacted it")
	}
}

func copyFile(t *testing.T, from, to string) {
	t.Helper()
	b, err := os.ReadFile(from)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(to, b, 0o600); err != nil {
		t.Fatal(err)
	}
}
