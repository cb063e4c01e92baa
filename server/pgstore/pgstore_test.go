package pgstore_test

import (
	"context"
	"crypto/ed25519"
	"crypto/rand"
	"errors"
	"fmt"
	"sync"
	"testing"
	"time"

	"tamp/internal/ledger"
	"tamp/internal/pgtest"
	"tamp/server"
	"tamp/server/pgstore"
	"tamp/server/storetest"
)

// open opens a store on dsn, closed when t ends.
func open(t *testing.T, dsn string) *pgstore.Store {
	t.Helper()
	s, err := pgstore.Open(t.Context(), dsn, pgstore.Options{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}

// The PostgreSQL store keeps server.Store's contract, each subtest on a
// database of its own.
func TestPostgresConformance(t *testing.T) {
	storetest.Run(t, func(t *testing.T) server.Store { return open(t, pgtest.NewDatabase(t)) })
}

// Opening migrates once: a second store, and stores opened at once, find
// the schema up to date; a schema newer than the program's is refused.
func TestPostgresMigrations(t *testing.T) {
	dsn := pgtest.NewDatabase(t)
	var wg sync.WaitGroup
	errs := make([]error, 4)
	for i := range errs {
		wg.Go(func() {
			s, err := pgstore.Open(context.Background(), dsn, pgstore.Options{MaxConns: 2})
			if err == nil {
				s.Close()
			}
			errs[i] = err
		})
	}
	wg.Wait()
	for i, err := range errs {
		if err != nil {
			t.Errorf("open %d of 4 at once: %v", i, err)
		}
	}
	s := open(t, dsn)
	must(t, s.CreateProject(t.Context(), "p", "pad", server.Hash{}, time.Now()))
	pgtest.Exec(t, dsn, `DO $$ BEGIN IF (SELECT count(*) FROM schema_migrations) <> 1 OR (SELECT max(version) FROM schema_migrations) <> 1
		THEN RAISE EXCEPTION 'schema_migrations holds other than migration 1 once'; END IF; END $$`)
	pgtest.Exec(t, dsn, `INSERT INTO schema_migrations (version, name) VALUES (99, '0099_later.sql')`)
	if _, err := pgstore.Open(t.Context(), dsn, pgstore.Options{}); !errors.Is(err, pgstore.ErrSchemaNewer) {
		t.Errorf("open a database of a later schema: %v, want ErrSchemaNewer", err)
	}
}

func must(t *testing.T, err error) {
	t.Helper()
	if err != nil {
		t.Fatal(err)
	}
}

// Two stores on one database, as two tampd processes: of appends racing
// after one head through either, exactly one wins; the server's identity
// is created once.
func TestPostgresTwoStoresOneDatabase(t *testing.T) {
	dsn := pgtest.NewDatabase(t)
	a, b := open(t, dsn), open(t, dsn)
	ctx := t.Context()
	const p = "0190d3a0-0000-7000-8000-0000000000aa"
	must(t, a.CreateProject(ctx, p, "pad", server.Hash(ledger.Genesis(p)), time.Now()))
	h, err := b.Head(ctx, p)
	must(t, err)
	var chain []server.Row
	for round := range 10 {
		batches := [][]server.Row{rows(h, 5, fmt.Sprint("a", round)), rows(h, 7, fmt.Sprint("b", round))}
		errs := make([]error, 2)
		var wg sync.WaitGroup
		for i, s := range []*pgstore.Store{a, b} {
			wg.Go(func() { errs[i] = s.Append(ctx, p, h, batches[i]) })
		}
		wg.Wait()
		won := -1
		for i, err := range errs {
			switch {
			case err == nil && won >= 0:
				t.Fatalf("round %d: both stores appended after one head", round)
			case err == nil:
				won = i
			case !errors.Is(err, server.ErrConflict):
				t.Fatalf("round %d: %v, want ErrConflict", round, err)
			}
		}
		if won < 0 {
			t.Fatalf("round %d: neither append succeeded: %v", round, errs)
		}
		chain = append(chain, batches[won]...)
		last := batches[won][len(batches[won])-1]
		h.Seq, h.Hash = last.Seq, last.Hash
	}
	got, err := a.After(ctx, p, 0, 1000)
	must(t, err)
	if len(got) != len(chain) {
		t.Fatalf("%d entries, want %d", len(got), len(chain))
	}
	for i, e := range got {
		if e.Seq != chain[i].Seq || e.Hash != chain[i].Hash {
			t.Fatalf("entry %d: seq %d, want %d", i, e.Seq, chain[i].Seq)
		}
	}
	ids := make([]server.Identity, 2)
	var wg sync.WaitGroup
	for i, s := range []*pgstore.Store{a, b} {
		wg.Go(func() {
			id, err := s.ServerIdentity(ctx, func() server.Identity { return identity(i) })
			if err != nil {
				t.Error(err)
			}
			ids[i] = id
		})
	}
	wg.Wait()
	if ids[0].DeviceID != ids[1].DeviceID || !ids[0].Key.Equal(ids[1].Key) {
		t.Errorf("two stores created two identities: %s and %s", ids[0].DeviceID, ids[1].DeviceID)
	}
}

func rows(h server.Checkpoint, n int, tag string) []server.Row {
	out := make([]server.Row, n)
	prev := ledger.Hash(h.Hash)
	for i := range out {
		seq := h.Seq + uint64(i) + 1
		env := []byte(fmt.Sprintf("%s-%d", tag, i))
		prev = ledger.Link(prev, seq, env)
		out[i] = server.Row{Seq: seq, EventID: string(env), DeviceID: "d-" + tag, DeviceSeq: uint64(i + 1), Kind: "test_recorded",
			Envelope: env, Hash: server.Hash(prev), Received: time.Now()}
	}
	return out
}

// A database that may not be written (as a standby after a failover) is
// ErrStorageReadOnly, for writes and the probe; once it may again, the
// probe recovers the store's connections, opened read-only, and writes.
func TestPostgresReadOnlyDatabaseIsAStorageFault(t *testing.T) {
	dsn := pgtest.NewDatabase(t)
	admin := pgtest.AdminDSN(t)
	s := open(t, dsn)
	ctx := t.Context()
	must(t, s.AddUser(ctx, "u1", "Ona", false, time.Now()))
	name := pgtest.DatabaseOf(t, dsn)
	pgtest.Exec(t, admin, "ALTER DATABASE "+name+" SET default_transaction_read_only = on")
	ro := open(t, dsn) // its connections start read-only
	if err := ro.AddUser(ctx, "u2", "Pim", false, time.Now()); !errors.Is(err, server.ErrStorageReadOnly) {
		t.Errorf("add a user to a read-only database: %v, want ErrStorageReadOnly", err)
	}
	if err := ro.Probe(ctx); !errors.Is(err, server.ErrStorageReadOnly) {
		t.Errorf("probe of a read-only database: %v, want ErrStorageReadOnly", err)
	}
	if u, err := ro.User(ctx, "u1"); err != nil || u.Name != "Ona" {
		t.Errorf("read a read-only database: %+v, %v", u, err)
	}
	pgtest.Exec(t, admin, "ALTER DATABASE "+name+" RESET default_transaction_read_only")
	if err := ro.Probe(ctx); err != nil {
		t.Fatalf("probe once the database may be written: %v", err)
	}
	if err := ro.AddUser(ctx, "u2", "Pim", false, time.Now()); err != nil {
		t.Errorf("add a user after the probe: %v", err)
	}
}

// A database that goes away is ErrStorageIO; the probe writes again once
// it is back.
func TestPostgresLostConnectionIsAStorageFault(t *testing.T) {
	dsn := pgtest.NewDatabase(t)
	admin := pgtest.AdminDSN(t)
	s := open(t, dsn)
	ctx := t.Context()
	must(t, s.Probe(ctx))
	name := pgtest.DatabaseOf(t, dsn)
	// Refuse new connections and end the store's.
	pgtest.Exec(t, admin, "ALTER DATABASE "+name+" WITH ALLOW_CONNECTIONS false")
	pgtest.Exec(t, admin, "SELECT pg_terminate_backend(pid) FROM pg_stat_activity WHERE datname = '"+name+"' AND pid <> pg_backend_pid()")
	err := s.AddUser(ctx, "u1", "Ona", false, time.Now())
	if err == nil {
		err = s.AddUser(ctx, "u1b", "Ona", false, time.Now()) // a connection the pool had not yet seen closed
	}
	if !errors.Is(err, server.ErrStorageIO) {
		t.Errorf("write with the database gone: %v, want ErrStorageIO", err)
	}
	if err := s.Probe(ctx); !errors.Is(err, server.ErrStorageIO) {
		t.Errorf("probe with the database gone: %v, want ErrStorageIO", err)
	}
	pgtest.Exec(t, admin, "ALTER DATABASE "+name+" WITH ALLOW_CONNECTIONS true")
	if err := s.Probe(ctx); err != nil {
		t.Fatalf("probe once the database is back: %v", err)
	}
	if err := s.AddUser(ctx, "u2", "Pim", false, time.Now()); err != nil {
		t.Errorf("write once the database is back: %v", err)
	}
}

// identity is a fresh identity of the server, told apart by i.
func identity(i int) server.Identity {
	pub, priv, err := ed25519.GenerateKey(rand.Reader)
	if err != nil {
		panic(err)
	}
	return server.Identity{DeviceID: fmt.Sprintf("srv-%d-%x", i, pub[:4]), UserID: fmt.Sprintf("srv-user-%d-%x", i, pub[:4]), Key: priv}
}
