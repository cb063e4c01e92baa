package server_test

import (
	"context"
	"flag"
	"os"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"runtime/pprof"
	"slices"
	"sync"
	"testing"
	"time"

	"tamp/internal/daemon"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/soil"
	"tamp/server"
	"tamp/server/sqlitestore"
)

// Sizes of the project-scale benchmarks; -short scales them down.
var (
	crowdDevices    = flag.Int("crowd-devices", 50, "BenchmarkCrowd: devices pushing at once (10 with -short)")
	projectionTests = flag.Int("projection-tests", 1_000_000, "BenchmarkProjection: tests in the project (200,000 with -short)")
)

const (
	crowdBatches = 10  // pushes a device makes
	crowdBatch   = 500 // tests a push
	// crowdRate is the per-device push rate and burst the crowd's server
	// allows: far above the 10 pushes a device makes, so that the limit
	// never throttles the crowd.
	crowdRate = 1000
)

// BenchmarkCrowd measures a crowd of devices pushing at once over loopback
// gRPC, as a project's inspectors do at day's end: each device, on its own
// connection, pushes 10 batches of 500 signed tests one after the other,
// all devices starting together. In the same run the same rows are inserted
// raw into a fresh store's ledger table in batches of the same size (as in
// BenchmarkPush), and it reports crowd/raw, the crowd's event throughput
// over the raw insert rate, and p99/p50 of the latency of single pushes
// (how far the slowest devices wait behind the others). The server's
// per-device push limit (Options.PushRate, PushBurst) is set to
// crowdRate, so that it does not throttle the crowd. Stores commit as
// tampd's does by default (synchronous=FULL) and as with
// --synchronous-normal. Its ns/op counts the crowd and the raw inserts.
func BenchmarkCrowd(b *testing.B) {
	defer debug.SetGCPercent(daemon.TuneGC())
	devices := *crowdDevices
	if testing.Short() {
		devices = min(devices, 10)
	}
	for _, mode := range []struct {
		name string
		opts sqlitestore.Options
	}{{"full", sqlitestore.Options{}}, {"normal", sqlitestore.Options{SynchronousNormal: true}}} {
		b.Run("sync="+mode.name, func(b *testing.B) {
			c := &cluster{tb: b, dir: b.TempDir(), storage: mode.opts, rate: crowdRate}
			c.start("")
			benchmarkCrowd(b, c, sqliteRaw(b, mode.opts), devices)
		})
	}
}

func benchmarkCrowd(b *testing.B, c *cluster, raw rawInsert, n int) {
	ctx := context.Background()
	project := c.newProject("crowd")
	devices := make([]*rawDevice, n)
	clients := make([]pb.SyncServiceClient, n)
	for i := range devices {
		devices[i] = c.rawDevice(b, "crowd", map[string]server.Role{project: server.Inspector}, false)
		clients[i] = pb.NewSyncServiceClient(c.conn(""))
	}
	if err := raw(ctx, project, 1, nil); err != nil { // creates the raw project before the clock starts
		b.Fatal(err)
	}
	var rawRows uint64
	var crowdWall, crowdCPU, rawWall time.Duration
	var latencies []time.Duration
	b.ResetTimer()
	for range b.N {
		b.StopTimer()
		// Each device signs its batches before the clock starts, two at a
		// time (one a core).
		batches := make([][][]ledger.Signed, n)
		var wg sync.WaitGroup
		work := make(chan int)
		for range runtime.GOMAXPROCS(0) {
			wg.Add(1)
			go func() {
				defer wg.Done()
				for d := range work {
					for range crowdBatches {
						batches[d] = append(batches[d], devices[d].tests(b, project, crowdBatch))
					}
				}
			}()
		}
		for d := range n {
			work <- d
		}
		close(work)
		wg.Wait()
		// Every device's connection is up before the crowd starts.
		for d := range n {
			if _, err := clients[d].Push(devices[d].ctx(), pushRequest(project, nil)); err != nil {
				b.Fatal(err)
			}
		}
		runtime.GC()
		b.StartTimer()

		lat := make([][]time.Duration, n)
		startLine := make(chan struct{})
		for d := range n {
			wg.Add(1)
			go func() {
				defer wg.Done()
				<-startLine
				for _, events := range batches[d] {
					t0 := time.Now()
					r, err := clients[d].Push(devices[d].ctx(), pushRequest(project, events))
					lat[d] = append(lat[d], time.Since(t0))
					if err != nil {
						b.Error(err)
						return
					}
					if k := len(r.GetOutcomes()); k != len(events) || r.GetOutcomes()[0].GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
						b.Errorf("outcomes: %d, first %v", k, r.GetOutcomes()[0])
						return
					}
				}
			}()
		}
		start, cpu := time.Now(), cpuTime()
		close(startLine)
		wg.Wait()
		crowdWall += time.Since(start)
		crowdCPU += cpuTime() - cpu
		for _, l := range lat {
			latencies = append(latencies, l...)
		}

		start = time.Now()
		for d := range n {
			for _, events := range batches[d] {
				if err := raw(ctx, project, rawRows+1, events); err != nil {
					b.Fatal(err)
				}
				rawRows += uint64(len(events))
			}
		}
		rawWall += time.Since(start)
	}
	b.StopTimer()
	events := float64(b.N * n * crowdBatches * crowdBatch)
	crowdRate, rawRate := events/crowdWall.Seconds(), events/rawWall.Seconds()
	slices.Sort(latencies)
	p50, p99 := latencies[len(latencies)/2], latencies[len(latencies)*99/100]
	b.ReportMetric(crowdRate, "crowd-events/s")
	b.ReportMetric(rawRate, "raw-rows/s")
	b.ReportMetric(crowdRate/rawRate, "crowd/raw")
	b.ReportMetric(float64(p50.Microseconds())/1000, "p50-ms")
	b.ReportMetric(float64(p99.Microseconds())/1000, "p99-ms")
	b.ReportMetric(p99.Seconds()/p50.Seconds(), "p99/p50")
	b.ReportMetric(float64(crowdCPU.Microseconds())/events, "cpu-us/event")
}

// BenchmarkProjection measures the server's memory and restart at project
// scale. It builds, once and before the clock starts, a project of
// -projection-tests tests (1,000,000; 200,000 with -short) graded against
// one spec and one reference, signed by two inspectors' devices and written
// straight into the store's ledger in chained batches, as a server appends
// pushed tests (a push of them all would take minutes here). The clock then runs from the start of a server over that store to
// its answer to a device's first push (which loads the project), and it
// reports restart-s, those seconds, and heap/disk: the server's live heap
// after the load and a garbage collection (above the process's live heap
// before the start) over the bytes of the signed envelopes the ledger
// holds. The store commits as tampd's does by default.
func BenchmarkProjection(b *testing.B) {
	defer debug.SetGCPercent(daemon.TuneGC())
	total := *projectionTests
	if testing.Short() {
		total = min(total, 200_000)
	}
	ctx := context.Background()
	c := &cluster{tb: b, dir: b.TempDir(), rate: crowdRate}
	c.start("")
	project := c.newProject("projection")
	admin := c.rawDevice(b, "admin", map[string]server.Role{project: server.Admin}, false)
	qa := c.rawDevice(b, "quinn", map[string]server.Role{project: server.QA}, false)
	spec, ref := newV7(), newV7()
	for _, p := range []struct {
		d      *rawDevice
		events []ledger.Signed
	}{
		{admin, []ledger.Signed{admin.sign(b, project, &ledger.ProjectSetUp{Name: "Juniper Bench haul road", Units: soil.US})}},
		{qa, []ledger.Signed{
			qa.sign(b, project, &ledger.SpecDefined{ID: spec, Name: "road fill", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"}),
			qa.sign(b, project, &ledger.ReferenceAdded{ID: ref, Procedure: soil.Procedure{Standard: soil.ASTMD698, Method: "A"},
				MaxDryDensity: pcf(116), OptimumMoisture: 13.5}),
		}},
	} {
		r, err := pb.NewSyncServiceClient(c.conn("")).Push(p.d.ctx(), pushRequest(project, p.events))
		if err != nil {
			b.Fatal(err)
		}
		for _, o := range r.GetOutcomes() {
			if o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
				b.Fatalf("set-up: %v %s", o.GetStatus(), o.GetMessage())
			}
		}
	}
	inspectors := []*rawDevice{
		c.rawDevice(b, "ines", map[string]server.Role{project: server.Inspector}, false),
		c.rawDevice(b, "ivo", map[string]server.Role{project: server.Inspector}, false),
	}
	test := func(d *rawDevice, i int) ledger.Signed {
		return d.sign(b, project, &ledger.TestRecorded{TestID: newV7(), Content: ledger.TestContent{Readings: sandCone(104+float64(i%14), 12.5),
			Feature: "road", LiftNumber: uint32(i%5 + 1), SpecID: spec, ReferenceID: ref}})
	}
	// The envelopes already there: enrolments and the set-up.
	head := c.head()
	var envBytes int64
	stored, err := c.store.After(ctx, project, 0, int(head.Seq))
	if err != nil {
		b.Fatal(err)
	}
	for _, e := range stored {
		envBytes += int64(len(e.Event))
	}
	const chunk = 10_000 // tests a stored batch; each inspector signs half
	for done := 0; done < total; done += chunk {
		k := min(chunk, total-done)
		parts := make([][]ledger.Signed, len(inspectors))
		var wg sync.WaitGroup
		for j, d := range inspectors {
			wg.Add(1)
			go func() {
				defer wg.Done()
				for i := j; i < k; i += len(inspectors) {
					parts[j] = append(parts[j], test(d, done+i))
				}
			}()
		}
		wg.Wait()
		rows := make([]server.Row, 0, k)
		next := head
		now := time.Now()
		for _, part := range parts {
			for _, sg := range part {
				env := sg.Bytes()
				next.Seq++
				next.Hash = server.Hash(ledger.Link(ledger.Hash(next.Hash), next.Seq, env))
				rows = append(rows, server.Row{Seq: next.Seq, EventID: sg.Event.ID, DeviceID: sg.Event.Device, DeviceSeq: sg.Event.DeviceSeq,
					Kind: sg.Event.Kind.KindName(), RecordID: ledger.RecordID(sg.Event.Kind), Envelope: env, Hash: next.Hash, Received: now})
				envBytes += int64(len(env))
			}
		}
		if err := c.store.Append(ctx, project, head, rows); err != nil {
			b.Fatal(err)
		}
		head = next
	}
	c.stop()
	fi, err := os.Stat(filepath.Join(c.dir, "ledger.db"))
	if err != nil {
		b.Fatal(err)
	}

	var ms runtime.MemStats
	var restart time.Duration
	var heap uint64
	d := inspectors[0]
	b.ResetTimer()
	for range b.N {
		b.StopTimer()
		if c.g != nil {
			c.stop()
		}
		c.srv, c.store = nil, nil
		runtime.GC()
		runtime.ReadMemStats(&ms)
		before := ms.HeapAlloc
		first := test(d, 0)
		b.StartTimer()

		start := time.Now()
		c.start("")
		r, err := pb.NewSyncServiceClient(c.conn("")).Push(d.ctx(), pushRequest(project, []ledger.Signed{first}))
		restart += time.Since(start)
		if err != nil {
			b.Fatal(err)
		}
		if o := r.GetOutcomes()[0]; o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
			b.Fatalf("first push after the restart: %v %s", o.GetStatus(), o.GetMessage())
		}
		envBytes += int64(len(first.Bytes()))

		b.StopTimer()
		runtime.GC()
		runtime.ReadMemStats(&ms)
		heap = ms.HeapAlloc - before
		if path := os.Getenv("TAMP_BENCH_HEAP_PROFILE"); path != "" { // the live heap by where it was allocated
			writeHeapProfile(b, path)
		}
		runtime.KeepAlive(c.srv)
		b.StartTimer()
	}
	b.StopTimer()
	events := float64(head.Seq) // entries in the ledger before the first push
	b.ReportMetric(restart.Seconds()/float64(b.N), "restart-s")
	b.ReportMetric(float64(restart.Microseconds())/float64(b.N)/events, "restart-us/event")
	b.ReportMetric(float64(heap)/float64(envBytes), "heap/disk")
	b.ReportMetric(float64(heap)/(1<<20), "heap-MB")
	b.ReportMetric(float64(envBytes)/(1<<20), "envelope-MB")
	b.ReportMetric(float64(fi.Size())/(1<<20), "file-MB")
	b.ReportMetric(events, "events")
}

// writeHeapProfile writes the live heap's profile, as of the last garbage
// collection, to path.
func writeHeapProfile(b *testing.B, path string) {
	f, err := os.Create(path)
	if err != nil {
		b.Fatal(err)
	}
	defer f.Close()
	if err := pprof.WriteHeapProfile(f); err != nil {
		b.Fatal(err)
	}
}
