package server_test

import (
	"context"
	"crypto/ed25519"
	"database/sql"
	"path/filepath"
	"sync"
	"syscall"
	"testing"
	"time"

	"github.com/google/uuid"
	"google.golang.org/grpc/metadata"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/sqlite"
	"tamp/server"
	"tamp/server/sqlitestore"
)

const benchBatch = 500

var benchDevices = 4

// BenchmarkPush measures push throughput in events per second through the
// real gRPC path (decode, signature check, validation, projection, append
// with the hash chain), and in the same run the raw SQLite insert rate of
// the same rows in batches of the same size, and reports their ratio.
func BenchmarkPush(b *testing.B) {
	c := startCluster(b, b.TempDir())
	ctx := context.Background()
	project, _ := c.srv.CreateProject(ctx, "bench")
	cc := c.conn("")
	// Two devices push at once, as a crew does at day's end: one verifies
	// signatures while the other's batch is being appended.
	type pusher struct {
		ctx     context.Context
		batches [][]ledger.Signed
	}
	var pushers []pusher
	for d := range benchDevices {
		user, _ := c.srv.AddUser(ctx, "bench", false)
		if err := c.srv.AddMember(ctx, project, user, server.Inspector); err != nil {
			b.Fatal(err)
		}
		code, _, _ := c.srv.IssueEnrollmentCode(ctx, user)
		pub, key, _ := ed25519.GenerateKey(nil)
		dev := uuid.Must(uuid.NewV7()).String()
		resp, err := pb.NewAdminServiceClient(cc).EnrollDevice(ctx, &pb.EnrollDeviceRequest{Code: code, DeviceId: dev, PublicKey: pub})
		if err != nil {
			b.Fatal(err)
		}
		p := pusher{ctx: metadata.AppendToOutgoingContext(ctx, "authorization", "Bearer "+resp.GetToken())}
		// Sign every event before the clock starts; each device pushes half.
		var seq uint64
		for range (b.N + benchDevices - 1 - d) / benchDevices {
			var batch []ledger.Signed
			for range benchBatch {
				seq++
				e := ledger.Event{ID: uuid.Must(uuid.NewV7()).String(), Project: project, Author: user, Device: dev, DeviceSeq: seq,
					HLC: ledger.HLC{Wall: time.Now().UnixMicro(), Logical: uint32(seq)}, DeviceTime: time.Now().UTC().Truncate(time.Microsecond),
					Kind: &ledger.TestRecorded{TestID: uuid.Must(uuid.NewV7()).String(), Content: ledger.TestContent{Readings: sandCone(110, 12), Feature: "pad"}}}
				s, err := ledger.Seal(e, key)
				if err != nil {
					b.Fatal(err)
				}
				batch = append(batch, s)
			}
			p.batches = append(p.batches, batch)
		}
		pushers = append(pushers, p)
	}
	sc := pb.NewSyncServiceClient(cc)
	b.ResetTimer()
	cpu0 := cpuTime()
	start := time.Now()
	var wg sync.WaitGroup
	for _, p := range pushers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for _, batch := range p.batches {
				req := &pb.PushRequest{ProjectId: project}
				for _, s := range batch {
					req.Events = append(req.Events, s.Proto())
				}
				r, err := sc.Push(p.ctx, req)
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
	var batches [][]ledger.Signed
	for _, p := range pushers {
		batches = append(batches, p.batches...)
	}
	pushWall := time.Since(start)
	pushCPU := cpuTime() - cpu0
	pushRate := float64(b.N*benchBatch) / pushWall.Seconds()
	b.StopTimer()

	// The same rows, inserted straight into a fresh store's ledger table.
	raw, err := sqlitestore.Open(ctx, filepath.Join(b.TempDir(), "raw.db"), sqlite.Normal)
	if err != nil {
		b.Fatal(err)
	}
	defer raw.Close()
	if err := raw.CreateProject(ctx, project, "bench", time.Now()); err != nil {
		b.Fatal(err)
	}
	start = time.Now()
	n := uint64(0)
	for _, batch := range batches {
		err := raw.DB().Tx(ctx, func(tx *sql.Tx) error {
			ins, err := tx.Prepare(`INSERT INTO ledger (project_id, seq, event_id, device_id, device_seq, kind, record_id, envelope, hash, received_micros)
				VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`)
			if err != nil {
				return err
			}
			defer ins.Close()
			for _, s := range batch {
				n++
				var h ledger.Hash
				if _, err := ins.Exec(project, n, s.Event.ID, s.Event.Device, s.Event.DeviceSeq, "test_recorded", ledger.RecordID(s.Event.Kind), s.Bytes(), h[:], 0); err != nil {
					return err
				}
			}
			return nil
		})
		if err != nil {
			b.Fatal(err)
		}
	}
	rawRate := float64(n) / time.Since(start).Seconds()
	b.ReportMetric(pushRate, "push-events/s")
	b.ReportMetric(rawRate, "raw-rows/s")
	b.ReportMetric(pushRate/rawRate, "push/raw")
	b.ReportMetric(float64(pushCPU.Microseconds())/float64(b.N*benchBatch), "cpu-us/event")
	b.ReportMetric(pushCPU.Seconds()/pushWall.Seconds(), "cores")
}

// cpuTime returns the CPU time the process has used, user and system.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
