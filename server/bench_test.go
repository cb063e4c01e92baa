package server_test

import (
	"context"
	"database/sql"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"tamp/internal/daemon"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/pgtest"
	"tamp/server"
	"tamp/server/sqlitestore"
)

const (
	benchBatch   = 500 // events a push
	benchDevices = 4   // devices pushing at once
	benchRounds  = 4   // times push and raw runs alternate
)

// BenchmarkPush measures push throughput in events per second through the
// real gRPC path (decode, signature check, validation, authorisation,
// projection, append with the hash chain), and in the same run the raw
// insert rate of the same rows in batches of the same size, and reports
// their ratio. A crew's devices push at once, as at day's end; push and raw
// runs alternate, so that both see the machine alike. On SQLite both
// stores commit as tampd does by default (synchronous=FULL) or as with
// --synchronous-normal, the raw rows going into a fresh store's ledger
// table; on PostgreSQL (TAMP_TEST_POSTGRES, see internal/pgtest) the raw
// rows are copied (COPY) into a fresh table like the ledger's, with its
// indexes, in the same database. The process collects garbage as tampd's
// does.
func BenchmarkPush(b *testing.B) {
	defer debug.SetGCPercent(daemon.TuneGC())
	for _, mode := range []struct {
		name string
		opts sqlitestore.Options
	}{{"full", sqlitestore.Options{}}, {"normal", sqlitestore.Options{SynchronousNormal: true}}} {
		b.Run("sync="+mode.name, func(b *testing.B) {
			benchmarkPush(b, startClusterSync(b, b.TempDir(), mode.opts), sqliteRaw(b, mode.opts))
		})
	}
	b.Run("postgres", func(b *testing.B) {
		dsn := pgtest.NewDatabase(b)
		benchmarkPush(b, startPostgresClusterOn(b, dsn), postgresRaw(b, dsn))
	})
}

// rawInsert inserts a batch of events straight into a ledger table, at
// sequence numbers from first, in one transaction.
type rawInsert func(ctx context.Context, project string, first uint64, events []ledger.Signed) error

// sqliteRaw inserts into a fresh SQLite store's ledger table, row by row
// with a prepared statement.
func sqliteRaw(b *testing.B, mode sqlitestore.Options) rawInsert {
	raw, err := sqlitestore.Open(context.Background(), filepath.Join(b.TempDir(), "raw.db"), mode)
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { raw.Close() })
	rawDB := storeDB(b, raw)
	return func(ctx context.Context, project string, first uint64, events []ledger.Signed) error {
		if _, err := raw.Head(ctx, project); err != nil {
			if err := raw.CreateProject(ctx, project, "bench", server.Hash(ledger.Genesis(project)), time.Now()); err != nil {
				return err
			}
		}
		return rawDB.Tx(ctx, func(tx *sql.Tx) error {
			ins, err := tx.Prepare(`INSERT INTO ledger (project_id, seq, event_id, device_id, device_seq, kind, record_id, envelope, hash, received_micros)
				VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`)
			if err != nil {
				return err
			}
			defer ins.Close()
			for i, s := range events {
				var h ledger.Hash
				if _, err := ins.Exec(project, first+uint64(i), s.Event.ID, s.Event.Device, s.Event.DeviceSeq, "test_recorded", ledger.RecordID(s.Event.Kind), s.Bytes(), h[:], 0); err != nil {
					return err
				}
			}
			return nil
		})
	}
}

// postgresRaw copies into raw_ledger, a table like the ledger's (its
// columns, keys and indexes, no foreign key) in the database dsn names.
func postgresRaw(b *testing.B, dsn string) rawInsert {
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, dsn)
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { conn.Close(context.Background()) })
	if _, err := conn.Exec(ctx, `CREATE TABLE raw_ledger (LIKE ledger INCLUDING ALL)`); err != nil {
		b.Fatal(err)
	}
	cols := []string{"project_id", "seq", "event_id", "device_id", "device_seq", "kind", "record_id", "envelope", "hash", "received_at"}
	return func(ctx context.Context, project string, first uint64, events []ledger.Signed) error {
		return pgx.BeginFunc(ctx, conn, func(tx pgx.Tx) error {
			now := time.Now()
			var h ledger.Hash
			_, err := tx.CopyFrom(ctx, pgx.Identifier{"raw_ledger"}, cols, pgx.CopyFromSlice(len(events), func(i int) ([]any, error) {
				s := events[i]
				return []any{project, int64(first) + int64(i), s.Event.ID, s.Event.Device, int64(s.Event.DeviceSeq), "test_recorded",
					ledger.RecordID(s.Event.Kind), s.Bytes(), h[:], now}, nil
			}))
			return err
		})
	}
}

func benchmarkPush(b *testing.B, c *cluster, raw rawInsert) {
	ctx := context.Background()
	project, _ := c.srv.CreateProject(ctx, "bench")
	type batch struct {
		device int
		events []ledger.Signed
	}
	var devices []*rawDevice
	for range benchDevices {
		devices = append(devices, c.rawDevice(b, "bench", map[string]server.Role{project: server.Inspector}, false))
	}
	// Sign every event before the clock starts; the devices take turns.
	batches := make([]batch, b.N)
	for i := range batches {
		batches[i] = batch{device: i % benchDevices, events: devices[i%benchDevices].tests(b, project, benchBatch)}
	}
	sc := pb.NewSyncServiceClient(c.conn(""))
	push := func(round []batch) {
		var wg sync.WaitGroup
		for d := range benchDevices {
			wg.Add(1)
			go func() {
				defer wg.Done()
				for _, bt := range round {
					if bt.device != d {
						continue
					}
					r, err := sc.Push(devices[d].ctx(), pushRequest(project, bt.events))
					if err != nil {
						b.Error(err)
						return
					}
					if n := len(r.GetOutcomes()); n != benchBatch || r.GetOutcomes()[0].GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
						b.Errorf("outcomes: %d, first %v", n, r.GetOutcomes()[0])
						return
					}
				}
			}()
		}
		wg.Wait()
	}
	var n uint64 // raw rows inserted
	insert := func(round []batch) {
		for _, bt := range round {
			if err := raw(ctx, project, n+1, bt.events); err != nil {
				b.Fatal(err)
			}
			n += uint64(len(bt.events))
		}
	}
	if err := raw(ctx, project, 1, nil); err != nil { // creates the raw project before the clock starts
		b.Fatal(err)
	}
	b.ResetTimer()
	var pushWall, pushCPU, rawWall time.Duration
	var pushAlloc uint64
	var ms runtime.MemStats
	per := (b.N + benchRounds - 1) / benchRounds
	for lo := 0; lo < b.N; lo += per {
		round := batches[lo:min(b.N, lo+per)]
		runtime.ReadMemStats(&ms)
		alloc := ms.TotalAlloc
		start, cpu := time.Now(), cpuTime()
		push(round)
		pushWall += time.Since(start)
		pushCPU += cpuTime() - cpu
		runtime.ReadMemStats(&ms)
		pushAlloc += ms.TotalAlloc - alloc
		start = time.Now()
		insert(round)
		rawWall += time.Since(start)
	}
	b.StopTimer()
	events := float64(b.N * benchBatch)
	pushRate, rawRate := events/pushWall.Seconds(), events/rawWall.Seconds()
	b.ReportMetric(pushRate, "push-events/s")
	b.ReportMetric(rawRate, "raw-rows/s")
	b.ReportMetric(pushRate/rawRate, "push/raw")
	b.ReportMetric(float64(pushCPU.Microseconds())/events, "cpu-us/event")
	b.ReportMetric(pushCPU.Seconds()/pushWall.Seconds(), "cores")
	b.ReportMetric(float64(pushAlloc)/events, "alloc-B/event")
}

// cpuTime returns the CPU time the process has used, user and system.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
