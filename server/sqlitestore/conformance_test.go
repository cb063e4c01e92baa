package sqlitestore_test

import (
	"path/filepath"
	"testing"

	"tamp/server"
	"tamp/server/sqlitestore"
	"tamp/server/storetest"
)

// The SQLite store keeps server.Store's contract, on a real file.
func TestConformance(t *testing.T) {
	storetest.Run(t, func(t *testing.T) server.Store {
		s, err := sqlitestore.Open(t.Context(), filepath.Join(t.TempDir(), "ledger.db"), sqlitestore.Options{SynchronousNormal: true})
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { s.Close() })
		return s
	})
}
