package sqlitestore

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"crypto/sha256"
	"errors"
	"os"
	"path/filepath"
	"testing"
	"time"

	"tamp/internal/ledger"
	"tamp/server"
)

// The reader for a migration reads every table and each ledger's rows as
// the store holds them, refuses a ledger another connection holds open,
// and changes nothing.
func TestMigrateReaderDumpsWithoutWriting(t *testing.T) {
	ctx := context.Background()
	file := filepath.Join(t.TempDir(), "ledger.db")
	s, err := Open(ctx, file, Options{})
	if err != nil {
		t.Fatal(err)
	}
	const p = "0190d3a0-0000-7000-8000-0000000000bb"
	now := time.UnixMicro(time.Now().UnixMicro())
	if err := s.CreateProject(ctx, p, "levee", genesis(p), now); err != nil {
		t.Fatal(err)
	}
	log := ledger.NewLog(p, 1)
	var rows []server.Row
	for i := range 70 { // more than one prepared insert
		e := log.Append([]byte{byte(i), 7, 7})
		rows = append(rows, server.Row{Seq: e.Seq, EventID: string(rune('a'+i%26)) + string(rune('A'+i/26)), DeviceID: "d1", DeviceSeq: uint64(i + 1),
			Kind: "test_recorded", RecordID: "r", Envelope: e.Event, Hash: server.Hash(e.Hash), SkewMicros: int64(i % 3), Received: now.Add(time.Duration(i) * time.Second)})
	}
	if err := s.Append(ctx, p, server.Checkpoint{Project: p, Epoch: 1, Hash: genesis(p)}, rows); err != nil {
		t.Fatal(err)
	}
	if err := s.AddUser(ctx, "u1", "Ida Marsh", true, now); err != nil {
		t.Fatal(err)
	}
	if err := s.SetMember(ctx, p, "u1", server.QA); err != nil {
		t.Fatal(err)
	}
	code := sha256.Sum256([]byte("code"))
	if err := s.AddEnrollmentCode(ctx, code[:], "u1", now.Add(time.Hour)); err != nil {
		t.Fatal(err)
	}
	pub, priv, _ := ed25519.GenerateKey(nil)
	token := sha256.Sum256([]byte("token"))
	if _, err := s.RegisterDevice(ctx, server.Device{ID: "d1", UserID: "u1", Name: "tablet", PublicKey: pub, TokenHash: token[:]}, "Ida Marsh", now); err != nil {
		t.Fatal(err)
	}
	if err := s.Revoke(ctx, "d1", now.Add(time.Minute)); err != nil {
		t.Fatal(err)
	}
	id, err := s.ServerIdentity(ctx, func() server.Identity { return server.Identity{DeviceID: "srv", UserID: "srvu", Key: priv} })
	if err != nil {
		t.Fatal(err)
	}

	// Open in this process: refused, as for a tampd serving it.
	if _, err := OpenReader(ctx, file); !errors.Is(err, ErrInUse) {
		t.Errorf("reader while the store is open: %v, want ErrInUse", err)
	}
	s.Close()
	if _, err := OpenReader(ctx, file+".missing"); err == nil {
		t.Error("a reader of a missing file opened")
	} else if _, err := os.Stat(file + ".missing"); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("the reader created the missing file: %v", err)
	}
	before, err := os.ReadFile(file)
	if err != nil {
		t.Fatal(err)
	}
	r, err := OpenReader(ctx, file)
	if err != nil {
		t.Fatal(err)
	}
	d, err := r.Dump(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if len(d.Projects) != 1 || d.Projects[0].Rows != 70 || d.Projects[0].Head != (server.Checkpoint{Project: p, Epoch: 1, Seq: 70, Hash: server.Hash(log.Head().Hash)}) ||
		d.Projects[0].Name != "levee" || !d.Projects[0].Created.Equal(now) {
		t.Errorf("projects = %+v", d.Projects)
	}
	if len(d.Users) != 2 || d.Users[1].ID != "u1" || !d.Users[1].ServerAdmin || !d.Users[1].Created.Equal(now) {
		t.Errorf("users = %+v, want the server's and u1, a server administrator", d.Users)
	}
	var dev *server.DumpDevice
	for i := range d.Devices {
		if d.Devices[i].ID == "d1" {
			dev = &d.Devices[i]
		}
	}
	if len(d.Devices) != 2 || dev == nil || !dev.Revoked || !dev.RevokedAt.Equal(now.Add(time.Minute)) || !bytes.Equal(dev.TokenHash, token[:]) ||
		!bytes.Equal(dev.PublicKey, pub) {
		t.Errorf("devices = %+v", d.Devices)
	}
	if len(d.Codes) != 1 || !bytes.Equal(d.Codes[0].Hash, code[:]) || !d.Codes[0].Used.IsZero() || !d.Codes[0].Expires.Equal(now.Add(time.Hour)) {
		t.Errorf("codes = %+v", d.Codes)
	}
	if len(d.Members) != 1 || d.Members[0] != (server.DumpMember{Project: p, User: "u1", Role: server.QA}) {
		t.Errorf("members = %+v", d.Members)
	}
	if d.Identity == nil || d.Identity.DeviceID != id.DeviceID || !bytes.Equal(d.Identity.Seed, priv.Seed()) {
		t.Errorf("identity = %+v", d.Identity)
	}
	n := 0
	for row, err := range r.Ledger(ctx, p) {
		if err != nil {
			t.Fatal(err)
		}
		w := rows[n]
		if row.Seq != w.Seq || row.EventID != w.EventID || row.DeviceSeq != w.DeviceSeq || !bytes.Equal(row.Envelope, w.Envelope) ||
			row.Hash != w.Hash || row.SkewMicros != w.SkewMicros || !row.Received.Equal(w.Received) || row.Kind != w.Kind || row.RecordID != w.RecordID {
			t.Fatalf("row %d = %+v, want %+v", n, row, w)
		}
		n++
	}
	if n != 70 {
		t.Errorf("the ledger yielded %d rows, want 70", n)
	}
	if err := r.Close(); err != nil {
		t.Fatal(err)
	}
	if after, err := os.ReadFile(file); err != nil || !bytes.Equal(before, after) {
		t.Errorf("reading changed the file (%v)", err)
	}
}
