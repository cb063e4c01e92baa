package client

import (
	"context"
	"database/sql"
	"flag"
	"os"
	"path/filepath"
	"runtime"
	"sync"
	"testing"
	"time"

	"github.com/google/uuid"

	"tamp/internal/ledger"
	"tamp/internal/soil"
)

var openMillion = flag.Bool("open-million", false, "BenchmarkOpen also times one open of a store of 1,000,000 events (slow to build)")

// ownStore builds, at path, a device store holding its own n tests of one
// project (after the project's set-up, a spec and a reference, recorded
// through the store), as a device holds them after syncing them: accepted
// and confirmed. The tests are sealed with the device's key on all cores
// and inserted in one transaction with the row record writes, which is
// much faster than recording them one by one; the rows are the same.
func ownStore(tb testing.TB, path string, n int) {
	tb.Helper()
	ctx := context.Background()
	// The tests are timed one a second up to now, the set-up, spec and
	// reference an hour before the first: a device's clock follows every
	// entry it holds, so a test it records is always later than the spec
	// and reference it names.
	start := time.Now().Add(-time.Duration(n) * time.Second)
	s, err := Open(ctx, path, Options{User: "ines", Durability: DurabilityNormal, Now: func() time.Time { return start.Add(-time.Hour) }})
	if err != nil {
		tb.Fatal(err)
	}
	defer s.Close()
	project, ref, spec := s.NewID(), s.NewID(), s.NewID()
	if err := s.SetUpProject(ctx, project, ProjectSetUp{Name: "bench", Units: USCustomary, TimeZone: "America/Denver"}); err != nil {
		tb.Fatal(err)
	}
	if _, err := s.DefineSpec(ctx, project, Spec{ID: spec, Name: "95", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"}); err != nil {
		tb.Fatal(err)
	}
	if _, err := s.AddReference(ctx, project, Reference{ID: ref, Standard: ASTMD698, Method: "A", MaxDryDensity: pcf(116), OptimumMoisture: 13.5}); err != nil {
		tb.Fatal(err)
	}
	first := s.seq
	const chunk = 20_000
	for lo := 0; lo < n; lo += chunk {
		hi := min(n, lo+chunk)
		evs := make([]ledger.Signed, hi-lo)
		var wg sync.WaitGroup
		var failed error
		var once sync.Once
		workers := runtime.GOMAXPROCS(0)
		for w := range workers {
			wg.Go(func() {
				for i := lo + w; i < hi; i += workers {
					seq := first + uint64(i) + 1
					at := start.Add(time.Duration(i) * time.Second).UTC().Truncate(time.Microsecond)
					wet, m := (118+float64(i%11))*soil.PoundPerCubicFoot, 11+float64(i%6)*0.4
					sg, err := ledger.Seal(ledger.Event{ID: uuid.Must(uuid.NewV7()).String(), Project: project, Author: s.user, Device: s.deviceID,
						DeviceSeq: seq, PrevDeviceSeq: seq - 1, HLC: ledger.HLC{Wall: at.UnixMicro()}, DeviceTime: at,
						Kind: &ledger.TestRecorded{TestID: uuid.Must(uuid.NewV7()).String(), Content: ledger.TestContent{
							Readings: ledger.Readings{Nuclear: &ledger.NuclearReadings{ProbeDepth: 0.2,
								Counts: []soil.NuclearReading{{WetDensity: wet, WaterPerVolume: wet * m / (100 + m)}}}},
							Feature: "embankment", LiftNumber: uint32(i/200 + 1), LiftThickness: 0.2, SpecID: spec, ReferenceID: ref,
							Location: ledger.Location{Station: float64(i%400) * 12.5}}}}, s.key)
					if err != nil {
						once.Do(func() { failed = err })
						return
					}
					evs[i-lo] = sg
				}
			})
		}
		wg.Wait()
		if failed != nil {
			tb.Fatal(failed)
		}
		if err := s.db.Tx(ctx, func(tx *sql.Tx) error {
			ins, err := tx.PrepareContext(ctx, `INSERT INTO events (event_id, project_id, device_id, device_seq, kind, record_id,
				hlc_wall, hlc_logical, body, signature, origin, status, server_seq, created_micros, confirmed)
				VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, 'local', 'accepted', ?, ?, 1)`)
			if err != nil {
				return err
			}
			defer ins.Close()
			for i, sg := range evs {
				e := sg.Event
				if _, err := ins.ExecContext(ctx, e.ID, project, e.Device, e.DeviceSeq, e.Kind.KindName(), ledger.RecordID(e.Kind),
					e.HLC.Wall, e.HLC.Logical, sg.Body, sg.Signature, lo+i+4, e.DeviceTime.UnixMicro()); err != nil {
					return err
				}
			}
			_, err = tx.ExecContext(ctx, `UPDATE device SET last_seq = ?, hlc_wall = ? WHERE id = 1`, first+uint64(hi), evs[len(evs)-1].Event.HLC.Wall)
			return err
		}); err != nil {
			tb.Fatal(err)
		}
	}
}

// rawRead reads every event row's body and signature from the store at
// path: the floor of any open that looks at every event.
func rawRead(tb testing.TB, path string) int {
	tb.Helper()
	ctx := context.Background()
	db, err := sql.Open("sqlite", "file:"+path+"?mode=ro")
	if err != nil {
		tb.Fatal(err)
	}
	defer db.Close()
	rows, err := db.QueryContext(ctx, `SELECT body, signature FROM events`)
	if err != nil {
		tb.Fatal(err)
	}
	defer rows.Close()
	n := 0
	for rows.Next() {
		var body, sig []byte
		if err := rows.Scan(&body, &sig); err != nil {
			tb.Fatal(err)
		}
		n++
	}
	if err := rows.Err(); err != nil {
		tb.Fatal(err)
	}
	return n
}

// BenchmarkOpen opens a device store holding its own 100,000 events (the
// views are built from them on open) and, in the same iteration, reads
// every event row's body and signature from the same file: open/raw is the
// open's time over the read's. store-bytes/event is the file's size (WAL
// checkpointed) over its events. With -open-million it also times one open
// of a store of 1,000,000 events (million-open-s, and million/100k).
func BenchmarkOpen(b *testing.B) {
	const events = 100_000
	ctx := context.Background()
	path := filepath.Join(b.TempDir(), "open.db")
	ownStore(b, path, events)
	fi, err := os.Stat(path)
	if err != nil {
		b.Fatal(err)
	}
	var opened, raw time.Duration
	var rows int
	b.ResetTimer()
	for i := range b.N {
		readFirst := i%2 == 1
		if readFirst {
			start := time.Now()
			rows = rawRead(b, path)
			raw += time.Since(start)
		}
		start := time.Now()
		s, err := Open(ctx, path, Options{})
		if err != nil {
			b.Fatal(err)
		}
		opened += time.Since(start)
		if got := s.views[s.Projects()[0]].Len(); got != events+3 {
			b.Fatalf("the view holds %d events, want %d", got, events+3)
		}
		s.Close()
		if !readFirst {
			start := time.Now()
			rows = rawRead(b, path)
			raw += time.Since(start)
		}
	}
	b.StopTimer()
	b.ReportMetric(float64(opened)/float64(raw), "open/raw")
	b.ReportMetric(float64(opened.Milliseconds())/float64(b.N), "open-ms")
	b.ReportMetric(float64(raw.Milliseconds())/float64(b.N), "raw-ms")
	b.ReportMetric(float64(fi.Size())/float64(rows), "store-bytes/event")
	if *openMillion && !testing.Short() {
		big := filepath.Join(b.TempDir(), "million.db")
		ownStore(b, big, 1_000_000)
		start := time.Now()
		s, err := Open(ctx, big, Options{})
		if err != nil {
			b.Fatal(err)
		}
		d := time.Since(start)
		s.Close()
		b.ReportMetric(d.Seconds(), "million-open-s")
		b.ReportMetric(float64(d)/(float64(opened)/float64(b.N)), "million/100k")
	}
}
