package client_test

import (
	"context"
	"database/sql"
	"fmt"
	"path/filepath"
	"strings"
	"testing"
	"testing/fstest"
	"time"

	"tamp/client"
	"tamp/internal/sqlite"
	"tamp/server"
)

// envelopeRow is an event row as a device stores it: its keys and the
// signed bytes.
type envelopeRow struct {
	id, project, device, kind, record string
	seq, wall, logical, serverSeq     int64
	body, sig                         []byte
}

// storedRows reads every event row of the device store at path.
func storedRows(tb testing.TB, path string) []envelopeRow {
	tb.Helper()
	db, err := sql.Open("sqlite", "file:"+path+"?mode=ro")
	if err != nil {
		tb.Fatal(err)
	}
	defer db.Close()
	rows, err := db.Query(`SELECT event_id, project_id, device_id, device_seq, kind, record_id, hlc_wall, hlc_logical,
		COALESCE(server_seq, 0), body, signature FROM events`)
	if err != nil {
		tb.Fatal(err)
	}
	defer rows.Close()
	var out []envelopeRow
	for rows.Next() {
		var r envelopeRow
		if err := rows.Scan(&r.id, &r.project, &r.device, &r.seq, &r.kind, &r.record, &r.wall, &r.logical, &r.serverSeq, &r.body, &r.sig); err != nil {
			tb.Fatal(err)
		}
		out = append(out, r)
	}
	if err := rows.Err(); err != nil {
		tb.Fatal(err)
	}
	return out
}

// rawTable is a fresh table of the event rows' columns, keyed as a
// device's events table.
var rawTable = fstest.MapFS{"0001_raw.sql": {Data: []byte(`CREATE TABLE raw_events (
	event_id TEXT PRIMARY KEY, project_id TEXT NOT NULL, device_id TEXT NOT NULL, device_seq INTEGER NOT NULL,
	kind TEXT NOT NULL, record_id TEXT NOT NULL, hlc_wall INTEGER NOT NULL, hlc_logical INTEGER NOT NULL,
	body BLOB NOT NULL, signature BLOB NOT NULL, server_seq INTEGER, UNIQUE (device_id, device_seq)) WITHOUT ROWID;`)}}

// rawInsert inserts rs into a fresh table of a fresh database under dir,
// with the durability a device store has by default, 500 rows (a pulled
// chunk) per transaction, each transaction one prepared multi-row insert
// of up to 100 rows at a time: the device's floor for storing a pull.
func rawInsert(tb testing.TB, dir string, rs []envelopeRow) time.Duration {
	tb.Helper()
	ctx := context.Background()
	start := time.Now()
	db, err := sqlite.Open(ctx, filepath.Join(dir, "raw.db"), sqlite.Options{Synchronous: sqlite.Full}, rawTable)
	if err != nil {
		tb.Fatal(err)
	}
	defer db.Close()
	const perStmt = 100
	stmtFor := func(n int) string {
		return `INSERT INTO raw_events VALUES ` + strings.TrimSuffix(strings.Repeat("(?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?), ", n), ", ")
	}
	full, err := db.Writer().PrepareContext(ctx, stmtFor(perStmt))
	if err != nil {
		tb.Fatal(err)
	}
	defer full.Close()
	args := make([]any, 0, 11*perStmt)
	for lo := 0; lo < len(rs); lo += 500 {
		chunk := rs[lo:min(len(rs), lo+500)]
		if err := db.Tx(ctx, func(tx *sql.Tx) error {
			for at := 0; at < len(chunk); at += perStmt {
				part := chunk[at:min(len(chunk), at+perStmt)]
				args = args[:0]
				for _, r := range part {
					args = append(args, r.id, r.project, r.device, r.seq, r.kind, r.record, r.wall, r.logical, r.body, r.sig, r.serverSeq)
				}
				var err error
				if len(part) == perStmt {
					_, err = tx.StmtContext(ctx, full).ExecContext(ctx, args...)
				} else {
					_, err = tx.ExecContext(ctx, stmtFor(len(part)), args...)
				}
				if err != nil {
					return err
				}
			}
			return nil
		}); err != nil {
			tb.Fatal(err)
		}
	}
	return time.Since(start)
}

// BenchmarkFirstSync has a new device sync a project of 100,000 entries
// from tampd in process over loopback gRPC (its first sync: it pulls and
// verifies the whole ledger, then pushes nothing) and, in the same
// iteration, inserts the rows it stored into a fresh SQLite table with
// the same durability (rawInsert): sync/raw is the first sync's time over
// the insert's. The server's project is filled once, by five crew devices
// of the benchmark's own.
func BenchmarkFirstSync(b *testing.B) {
	const held, crews = 100_000, 5
	ctx := context.Background()
	bs := startBenchServer(b)
	project, err := bs.srv.CreateProject(ctx, "Cottonwood Draw embankment")
	if err != nil {
		b.Fatal(err)
	}
	for c := range crews { // each within the server's burst of pushes
		newRawCrew(b, bs, project, fmt.Sprintf("crew%d", c)).push(b, bs.cc.Target(), project, held/crews)
	}
	var synced, raw time.Duration
	var rows int
	b.ResetTimer()
	for i := range b.N {
		b.StopTimer()
		dir := b.TempDir()
		s := bs.member(dir, fmt.Sprintf("ines%d", i), project, server.Inspector)
		b.StartTimer()
		start := time.Now()
		rep, err := s.Sync(ctx, bs.cc, project, client.SyncOptions{})
		if err != nil {
			b.Fatal(err)
		}
		synced += time.Since(start)
		b.StopTimer()
		if rep.Pulled < held {
			b.Fatalf("pulled %d entries, want at least %d", rep.Pulled, held)
		}
		if err := s.Close(); err != nil {
			b.Fatal(err)
		}
		rs := storedRows(b, filepath.Join(dir, fmt.Sprintf("ines%d.db", i)))
		rows = len(rs)
		b.StartTimer()
		raw += rawInsert(b, dir, rs)
	}
	b.StopTimer()
	b.ReportMetric(float64(synced)/float64(raw), "sync/raw")
	b.ReportMetric(float64(synced.Milliseconds())/float64(b.N), "sync-ms")
	b.ReportMetric(float64(raw.Milliseconds())/float64(b.N), "raw-ms")
	b.ReportMetric(float64(rows)*float64(b.N)/synced.Seconds(), "events/s")
}
