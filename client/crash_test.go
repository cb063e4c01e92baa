package client

import (
	"bufio"
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// TestCrashChild is the writer the crash test kills; it runs only when
// started by TestCrashSafety.
func TestCrashChild(t *testing.T) {
	path := os.Getenv("TAMP_CRASH_DB")
	if path == "" {
		t.Skip("run by TestCrashSafety")
	}
	project := os.Getenv("TAMP_CRASH_PROJECT")
	ctx := context.Background()
	s, err := Open(ctx, path, Options{User: "ines"})
	if err != nil {
		fmt.Println("open error:", err)
		os.Exit(3)
	}
	for i := 0; ; i++ {
		r, err := s.RecordTest(ctx, TestInput{Project: project, Readings: sandCone(100+float64(i%20), 12), Feature: "trench backfill"})
		if err != nil {
			fmt.Println("record error:", err)
			os.Exit(4)
		}
		fmt.Println("committed", r.EventID)
		if i%3 == 0 {
			c, err := s.CorrectTest(ctx, project, r.TestID, "re-weighed", func(c *TestInput) { c.Readings.SandCone.SoilMass *= 1.01 })
			if err != nil {
				fmt.Println("correct error:", err)
				os.Exit(5)
			}
			fmt.Println("committed", c.EventID)
		}
	}
}

// TestCrashSafety kills a process that writes tests in a loop, many times
// at random moments, and checks after each kill that the store opens, passes
// SQLite's integrity check, holds every entry the writer reported committed,
// and holds only whole, correctly signed entries.
func TestCrashSafety(t *testing.T) {
	if testing.Short() {
		t.Skip("kills child processes")
	}
	dir := t.TempDir()
	path := filepath.Join(dir, "device.db")
	project := "0190d3a0-0000-7000-8000-000000000001"
	rng := rand.New(rand.NewPCG(11, 12))
	committed := map[string]bool{}
	kills := 12
	for round := range kills {
		cmd := exec.Command(os.Args[0], "-test.run=^TestCrashChild$", "-test.count=1")
		cmd.Env = append(os.Environ(), "TAMP_CRASH_DB="+path, "TAMP_CRASH_PROJECT="+project)
		out, err := cmd.StdoutPipe()
		if err != nil {
			t.Fatal(err)
		}
		cmd.Stderr = os.Stderr
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		lines := make(chan string)
		go func() {
			sc := bufio.NewScanner(out)
			for sc.Scan() {
				lines <- sc.Text()
			}
			close(lines)
		}()
		deadline := time.After(time.Duration(150+rng.IntN(500)) * time.Millisecond)
		var seen int
	read:
		for {
			select {
			case l, ok := <-lines:
				if !ok {
					break read
				}
				if id, ok := strings.CutPrefix(l, "committed "); ok {
					committed[id] = true
					seen++
				} else if strings.Contains(l, "error") {
					t.Fatalf("round %d: writer failed: %s", round, l)
				}
			case <-deadline:
				_ = cmd.Process.Signal(syscall.SIGKILL)
				deadline = nil
			}
		}
		_ = cmd.Wait()

		s, err := Open(context.Background(), path, Options{})
		if err != nil {
			t.Fatalf("round %d: open after kill: %v", round, err)
		}
		var check string
		if err := s.db.Reader().QueryRow(`PRAGMA integrity_check`).Scan(&check); err != nil || check != "ok" {
			t.Fatalf("round %d: integrity_check = %q, %v", round, check, err)
		}
		var n int
		var maxSeq uint64
		s.db.Reader().QueryRow(`SELECT COUNT(*), COALESCE(MAX(device_seq), 0) FROM events`).Scan(&n, &maxSeq)
		// The next entry follows the highest stored number, whatever the
		// kill interrupted: no number is reused, none skipped.
		res, err := s.RecordTest(context.Background(), TestInput{Project: project, Readings: sandCone(101, 12), Feature: "after the kill"})
		if err != nil {
			t.Fatalf("round %d: record after kill: %v", round, err)
		}
		var next uint64
		if err := s.db.Reader().QueryRow(`SELECT device_seq FROM events WHERE event_id = ?`, res.EventID).Scan(&next); err != nil || next != maxSeq+1 {
			t.Fatalf("round %d: the entry after the kill is numbered %d (%v), want %d, after the highest stored", round, next, err, maxSeq+1)
		}
		n++
		for id := range committed {
			var one int
			if err := s.db.Reader().QueryRow(`SELECT 1 FROM events WHERE event_id = ?`, id).Scan(&one); err != nil {
				t.Fatalf("round %d: committed event %s lost: %v", round, id, err)
			}
		}
		if n < len(committed) {
			t.Fatalf("round %d: %d events stored, %d reported committed", round, n, len(committed))
		}
		s.Close()
		t.Logf("round %d: %d written this round, %d stored in all", round, seen, n)
	}
	if len(committed) == 0 {
		t.Fatal("the writer committed nothing in any round")
	}
}
