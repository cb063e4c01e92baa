package server_test

import (
	"context"
	"errors"
	"io"
	"math/rand/v2"
	"net"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/backoff"

	"tamp/client"
	"tamp/internal/ledger"
	"tamp/server"
)

// cutProxy forwards TCP connections to a target and cuts each one after a
// random number of bytes (seeded), in either direction.
type cutProxy struct {
	lis    net.Listener
	target string
	mu     sync.Mutex
	rng    *rand.Rand
	maxCut int
	cuts   int
	wg     sync.WaitGroup
}

func newCutProxy(t *testing.T, target string, seed uint64, maxCut int) *cutProxy {
	t.Helper()
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	p := &cutProxy{lis: lis, target: target, rng: rand.New(rand.NewPCG(seed, seed+1)), maxCut: maxCut}
	p.wg.Add(1)
	go p.serve()
	t.Cleanup(func() { lis.Close(); p.wg.Wait() })
	return p
}

func (p *cutProxy) addr() string { return p.lis.Addr().String() }

func (p *cutProxy) serve() {
	defer p.wg.Done()
	for {
		in, err := p.lis.Accept()
		if err != nil {
			return
		}
		out, err := net.Dial("tcp", p.target)
		if err != nil {
			in.Close()
			continue
		}
		p.mu.Lock()
		budget := int64(200 + p.rng.IntN(p.maxCut))
		p.cuts++
		p.mu.Unlock()
		var once sync.Once
		closeBoth := func() { once.Do(func() { in.Close(); out.Close() }) }
		var left sync.Mutex
		copyCut := func(dst, src net.Conn) {
			defer p.wg.Done()
			defer closeBoth()
			buf := make([]byte, 4096)
			for {
				n, err := src.Read(buf)
				if n > 0 {
					left.Lock()
					allowed := min(int64(n), budget)
					budget -= allowed
					left.Unlock()
					if _, werr := dst.Write(buf[:allowed]); werr != nil || allowed < int64(n) {
						return
					}
				}
				if err != nil {
					return
				}
			}
		}
		p.wg.Add(2)
		go copyCut(out, in)
		go copyCut(in, out)
	}
}

// Syncs through a proxy that cuts every connection at a random byte offset
// leave the ledger as one clean run leaves it: every event once, none lost.
func TestCutConnections(t *testing.T) {
	if testing.Short() {
		t.Skip("many syncs")
	}
	c := startCluster(t, t.TempDir())
	project := c.newProject("Sagebrush Flats pad")
	qa, ann, bo := c.device("quinn", server.QA), c.device("ann", server.Inspector), c.device("bo", server.Inspector)
	spec, ref := setUp(t, c, qa, project)
	syncOK(t, qa, c.conn(""), project)
	proxy := newCutProxy(t, c.addr, 42, 6_000)
	cut := c.conn(proxy.addr(), grpc.WithConnectParams(grpc.ConnectParams{
		Backoff: backoff.Config{BaseDelay: 5 * time.Millisecond, Multiplier: 1.5, MaxDelay: 20 * time.Millisecond}, MinConnectTimeout: time.Second}))
	opts := client.SyncOptions{BatchSize: 7, MaxAttempts: 4, BaseDelay: time.Millisecond, MaxDelay: 5 * time.Millisecond}
	created := 3
	failures := 0
	for round := range 25 {
		for _, s := range []*client.Store{ann, bo} {
			record(t, s, project, spec, ref, 1+round%4, float64(round%3))
			created += 1 + round%4
			if _, err := s.Sync(context.Background(), cut, project, opts); err != nil {
				if errors.Is(err, client.ErrFork) {
					t.Fatalf("round %d: a cut connection was taken for a fork: %v", round, err)
				}
				failures++
			}
		}
	}
	// Then a clean run through no proxy.
	for range 2 {
		for _, s := range []*client.Store{qa, ann, bo} {
			syncOK(t, s, c.conn(""), project)
		}
	}
	t.Logf("%d connections cut, %d syncs failed part-way", proxy.cuts, failures)
	if proxy.cuts < 20 {
		t.Errorf("only %d connections were made through the proxy", proxy.cuts)
	}
	head := c.head()
	if n := c.memberEntries(project); n != created {
		t.Errorf("server holds %d events, %d were created: duplicates or losses", n, created)
	}
	// The clean run's state: one projection of every event each device made.
	want := ledger.NewProjection(project)
	for _, s := range []*client.Store{qa, ann, bo} {
		if s.Digest(project) != c.digest() {
			t.Error("a device's state differs from the server's")
		}
		if v := verified(t, s, project); !sameCheckpoint(v, head) {
			t.Errorf("device verified %d, head %d", v.Seq, head.Seq)
		}
	}
	entries, err := c.store.After(context.Background(), project, 0, 100000)
	if err != nil {
		t.Fatal(err)
	}
	seen := map[string]bool{}
	for _, e := range entries {
		sg, err := ledger.Decode(e.Event)
		if err != nil {
			t.Fatal(err)
		}
		if seen[sg.Event.ID] {
			t.Errorf("event %s appears twice", sg.Event.ID)
		}
		seen[sg.Event.ID] = true
		if _, err := want.Apply(sg); err != nil {
			t.Fatal(err)
		}
	}
	if want.Digest().String() != c.digest() {
		t.Error("the server's projection differs from its own ledger")
	}
}

// The server's data directory is restored from an earlier copy mid-run: the
// devices detect it, push back what it lost, and nothing acknowledged is lost.
func TestRestoredFromBackup(t *testing.T) {
	dir := t.TempDir()
	c := startCluster(t, dir)
	project := c.newProject("Sagebrush Flats pad")
	qa, ann, bo := c.device("quinn", server.QA), c.device("ann", server.Inspector), c.device("bo", server.Inspector)
	spec, ref := setUp(t, c, qa, project)
	for _, s := range []*client.Store{qa, ann, bo} {
		syncOK(t, s, c.conn(""), project)
	}
	record(t, ann, project, spec, ref, 4, 0)
	syncOK(t, ann, c.conn(""), project)

	// Back up the data directory with the server stopped.
	addr := c.addr
	c.stop()
	backup := filepath.Join(t.TempDir(), "backup.db")
	copyFile(t, filepath.Join(dir, "ledger.db"), backup)
	c.start(addr)

	// Work goes on: both inspectors record and sync; the server acknowledges.
	record(t, ann, project, spec, ref, 5, 1)
	record(t, bo, project, spec, ref, 6, 2)
	syncOK(t, ann, c.conn(""), project)
	syncOK(t, bo, c.conn(""), project)
	acknowledged := c.head().Seq
	ackDigest := c.digest()

	// The disk fails; the server comes back from the backup.
	c.stop()
	for _, suffix := range []string{"", "-wal", "-shm"} {
		os.Remove(filepath.Join(dir, "ledger.db"+suffix))
	}
	copyFile(t, backup, filepath.Join(dir, "ledger.db"))
	c.start(addr)
	if got := c.head().Seq; got >= acknowledged {
		t.Fatalf("the restore did not lose anything (%d >= %d)", got, acknowledged)
	}

	// Bo syncs first: he detects the rollback and pushes back all he holds,
	// which includes ann's acknowledged events he had pulled.
	_, err := bo.Sync(context.Background(), c.conn(""), project, client.SyncOptions{})
	if !errors.Is(err, client.ErrFork) || !errors.Is(err, ledger.ErrRolledBack) {
		t.Fatalf("bo's sync after the restore: %v, want a fork (rolled back)", err)
	}
	if got := c.head().Seq; got != acknowledged {
		t.Errorf("after bo pushed back, the server holds %d events, %d were acknowledged", got, acknowledged)
	}
	// The next syncs continue in the new epoch, and everyone converges.
	for range 2 {
		for _, s := range []*client.Store{qa, ann, bo} {
			syncOK(t, s, c.conn(""), project)
		}
	}
	head := c.head()
	if head.Epoch < 2 {
		t.Errorf("epoch = %d, want a new epoch after the restore", head.Epoch)
	}
	if c.digest() != ackDigest {
		t.Error("the server's state differs from what it had acknowledged")
	}
	for _, s := range []*client.Store{qa, ann, bo} {
		if v := verified(t, s, project); !sameCheckpoint(v, head) {
			t.Errorf("device verified %d/%d, head %d/%d", v.Epoch, v.Seq, head.Epoch, head.Seq)
		}
		if s.Digest(project) != ackDigest {
			t.Error("a device's state differs")
		}
	}
}

func copyFile(t *testing.T, from, to string) {
	t.Helper()
	in, err := os.Open(from)
	if err != nil {
		t.Fatal(err)
	}
	defer in.Close()
	out, err := os.Create(to)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := io.Copy(out, in); err != nil {
		t.Fatal(err)
	}
	if err := out.Close(); err != nil {
		t.Fatal(err)
	}
}
