package client

import (
	"context"
	"path/filepath"
	"slices"
	"testing"
	"time"
)

// BenchmarkRecordTest measures record-a-test latency, from the call to the
// committed event and updated view, with both durability settings. It
// reports the median and the 99th percentile.
func BenchmarkRecordTest(b *testing.B) {
	for _, sync := range []Durability{DurabilityFull, DurabilityNormal} {
		b.Run(string(sync), func(b *testing.B) {
			ctx := context.Background()
			s, err := Open(ctx, filepath.Join(b.TempDir(), "bench.db"), Options{User: "ines", Durability: sync})
			if err != nil {
				b.Fatal(err)
			}
			defer s.Close()
			project := s.NewID()
			ref, spec := s.NewID(), s.NewID()
			if err := s.SetUpProject(ctx, project, ProjectSetUp{Name: "bench", Units: USCustomary}); err != nil {
				b.Fatal(err)
			}
			if _, err := s.DefineSpec(ctx, project, Spec{ID: spec, Name: "95", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"}); err != nil {
				b.Fatal(err)
			}
			if _, err := s.AddReference(ctx, project, Reference{ID: ref, Standard: ASTMD698, Method: "A", MaxDryDensity: pcf(116), OptimumMoisture: 13.5}); err != nil {
				b.Fatal(err)
			}
			lat := make([]time.Duration, 0, b.N)
			b.ResetTimer()
			for i := range b.N {
				start := time.Now()
				if _, err := s.RecordTest(ctx, TestInput{Project: project, Readings: sandCone(100+float64(i%20), 12),
					ReferenceID: ref, SpecID: spec}); err != nil {
					b.Fatal(err)
				}
				lat = append(lat, time.Since(start))
			}
			b.StopTimer()
			slices.Sort(lat)
			b.ReportMetric(float64(lat[len(lat)/2].Microseconds())/1000, "p50-ms")
			b.ReportMetric(float64(lat[len(lat)*99/100].Microseconds())/1000, "p99-ms")
		})
	}
}

// BenchmarkOpen measures opening a store that holds 5,000 tests: the views
// are rebuilt from the events on open.
func BenchmarkOpen(b *testing.B) {
	ctx := context.Background()
	path := filepath.Join(b.TempDir(), "open.db")
	s, err := Open(ctx, path, Options{User: "ines", Durability: DurabilityNormal})
	if err != nil {
		b.Fatal(err)
	}
	project := s.NewID()
	for i := range 5000 {
		if _, err := s.RecordTest(ctx, TestInput{Project: project, Readings: sandCone(100+float64(i%20), 12)}); err != nil {
			b.Fatal(err)
		}
	}
	s.Close()
	b.ResetTimer()
	for range b.N {
		s, err := Open(ctx, path, Options{})
		if err != nil {
			b.Fatal(err)
		}
		s.Close()
	}
}
