package client

import (
	"context"
	"database/sql"
	"path/filepath"
	"testing"
	"time"

	"tamp/internal/sqlite"
)

// A store made by the first release's schema opens under the current one
// with its identity and events intact.
func TestMigrateFromFirstSchema(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "old.db")
	w, err := sql.Open("sqlite", sqlite.DSN(path, sqlite.Full, 5*time.Second, false))
	if err != nil {
		t.Fatal(err)
	}
	if err := sqlite.Migrate(ctx, w, sub(migrationFiles), 1); err != nil {
		t.Fatal(err)
	}
	seed := make([]byte, 32)
	seed[0] = 9
	if _, err := w.Exec(`INSERT INTO device (id, device_id, private_key, user_id, last_seq, hlc_wall, hlc_logical)
		VALUES (1, '0190d3a0-0000-7000-8000-00000000000d', ?, 'ines', 41, 1700000000000000, 2)`, seed); err != nil {
		t.Fatal(err)
	}
	w.Close()
	s, err := Open(ctx, path, Options{})
	if err != nil {
		t.Fatalf("open a first-release store: %v", err)
	}
	defer s.Close()
	if s.DeviceID() != "0190d3a0-0000-7000-8000-00000000000d" || s.User() != "ines" || s.seq != 41 {
		t.Errorf("identity after migration: %s %s %d", s.DeviceID(), s.User(), s.seq)
	}
	v, _ := sqlite.Version(ctx, s.db.Writer())
	if v < 4 {
		t.Errorf("schema version %d after open", v)
	}
	if err := s.SetSetting(ctx, "server", "127.0.0.1:7420"); err != nil {
		t.Errorf("a table of a later migration: %v", err)
	}
}
