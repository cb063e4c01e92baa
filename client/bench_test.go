package client

import (
	"context"
	"database/sql"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"tamp/internal/sqlite"
)

// BenchmarkRecordTest measures record-a-test latency, from the call to the
// committed event and updated view, with both durability settings. In the
// same run, alternating with the records, it inserts and commits one row
// of the same size (the recorded event's own row, under a new id, with a
// prepared statement) into the events table of a fresh store on the same
// disk with the same durability:
// record/commit is the median record over the median insert and commit
// (see the README's Performance section for the target). It also reports
// the median and the 99th percentile of recording.
func BenchmarkRecordTest(b *testing.B) {
	for _, sync := range []Durability{DurabilityFull, DurabilityNormal} {
		b.Run(string(sync), func(b *testing.B) {
			ctx := context.Background()
			dir := b.TempDir()
			s, err := Open(ctx, filepath.Join(dir, "bench.db"), Options{User: "ines", Durability: sync})
			if err != nil {
				b.Fatal(err)
			}
			defer s.Close()
			mode, err := sync.sqlite()
			if err != nil {
				b.Fatal(err)
			}
			raw, err := sqlite.Open(ctx, filepath.Join(dir, "raw.db"), sqlite.Options{Synchronous: mode}, sub(migrationFiles))
			if err != nil {
				b.Fatal(err)
			}
			defer raw.Close()
			project := s.NewID()
			ref, spec := s.NewID(), s.NewID()
			if err := s.SetUpProject(ctx, project, ProjectSetUp{Name: "bench", Units: USCustomary, TimeZone: "America/Denver"}); err != nil {
				b.Fatal(err)
			}
			if _, err := s.DefineSpec(ctx, project, Spec{ID: spec, Name: "95", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"}); err != nil {
				b.Fatal(err)
			}
			if _, err := s.AddReference(ctx, project, Reference{ID: ref, Standard: ASTMD698, Method: "A", MaxDryDensity: pcf(116), OptimumMoisture: 13.5}); err != nil {
				b.Fatal(err)
			}
			ins, err := raw.Writer().PrepareContext(ctx, `INSERT INTO events (event_id, project_id, device_id, device_seq, kind, record_id,
				hlc_wall, hlc_logical, body, signature, origin, status, created_micros)
				VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, 'local', 'pending', ?)`)
			if err != nil {
				b.Fatal(err)
			}
			defer ins.Close()
			type row struct {
				project, device, kind, record string
				wall, logical                 int64
				body, sig                     []byte
			}
			var r row
			rawSeq := 0
			insert := func() time.Duration { // one insert and commit of r, under a new id
				rawSeq++
				start := time.Now()
				if err := raw.Tx(ctx, func(tx *sql.Tx) error {
					_, err := tx.StmtContext(ctx, ins).ExecContext(ctx, s.NewID(), r.project, r.device, rawSeq, r.kind, r.record, r.wall, r.logical,
						r.body, r.sig, time.Now().UnixMicro())
					return err
				}); err != nil {
					b.Fatal(err)
				}
				return time.Since(start)
			}
			lat := make([]time.Duration, 0, b.N)
			base := make([]time.Duration, 0, b.N)
			b.ResetTimer()
			for i := range b.N {
				insertFirst := i%2 == 1 // r holds the row of the record before
				if insertFirst {
					b.StopTimer()
					base = append(base, insert())
					b.StartTimer()
				}
				start := time.Now()
				res, err := s.RecordTest(ctx, TestInput{Project: project, Readings: sandCone(100+float64(i%20), 12),
					ReferenceID: ref, SpecID: spec})
				if err != nil {
					b.Fatal(err)
				}
				lat = append(lat, time.Since(start))
				b.StopTimer()
				if err := s.db.Reader().QueryRowContext(ctx, `SELECT project_id, device_id, kind, record_id, hlc_wall, hlc_logical, body, signature
					FROM events WHERE event_id = ?`, res.EventID).Scan(&r.project, &r.device, &r.kind, &r.record, &r.wall, &r.logical, &r.body, &r.sig); err != nil {
					b.Fatal(err)
				}
				if !insertFirst {
					base = append(base, insert())
				}
				b.StartTimer()
			}
			b.StopTimer()
			slices.Sort(lat)
			slices.Sort(base)
			b.ReportMetric(float64(lat[len(lat)/2].Microseconds())/1000, "p50-ms")
			b.ReportMetric(float64(lat[len(lat)*99/100].Microseconds())/1000, "p99-ms")
			b.ReportMetric(float64(lat[len(lat)/2])/float64(base[len(base)/2]), "record/commit")
		})
	}
}
