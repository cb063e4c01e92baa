package pgstore_test

import (
	"bytes"
	"crypto/ed25519"
	"crypto/sha256"
	"errors"
	"iter"
	"slices"
	"strings"
	"testing"
	"time"

	"tamp/internal/ledger"
	"tamp/internal/pgtest"
	"tamp/server"
	"tamp/server/pgstore"
)

// Load copies a dump whose chains recompute to their heads, in one
// transaction, and keeps nothing of one that does not (an altered hash,
// a missing row); it refuses a database that is not empty.
func TestPostgresLoadVerifiesAndRefuses(t *testing.T) {
	ctx := t.Context()
	s := open(t, pgtest.NewDatabase(t))
	const p = "0190d3a0-0000-7000-8000-0000000000cc"
	now := time.UnixMicro(time.Now().UnixMicro())
	log := ledger.NewLog(p, 1)
	var rows []server.Row
	for i := range 5 {
		e := log.Append([]byte{byte(i), 9})
		rows = append(rows, server.Row{Seq: e.Seq, EventID: "e" + string(rune('a'+i)), DeviceID: "d1", DeviceSeq: uint64(i + 1), Kind: "test_recorded",
			RecordID: "r", Envelope: e.Event, Hash: server.Hash(e.Hash), SkewMicros: int64(i), Received: now})
	}
	pub, priv, _ := ed25519.GenerateKey(nil)
	token, code := sha256.Sum256([]byte("token")), sha256.Sum256([]byte("code"))
	d := server.Dump{
		Projects: []server.DumpProject{{Name: "levee", Head: server.Checkpoint{Project: p, Epoch: 2, Seq: 5, Hash: server.Hash(log.Head().Hash)}, Created: now, Rows: 5}},
		Users: []server.DumpUser{{User: server.User{ID: "u1", Name: "Ida Marsh", ServerAdmin: true}, Created: now},
			{User: server.User{ID: "u2", Name: "Tom Reyes"}, Created: now}, {User: server.User{ID: "srvu", Name: "tampd"}, Created: now}},
		Devices: []server.DumpDevice{{Device: server.Device{ID: "d1", UserID: "u1", Name: "tablet", PublicKey: pub, TokenHash: token[:]}, Enrolled: now},
			{Device: server.Device{ID: "srv", UserID: "srvu", Name: "tampd", PublicKey: priv.Public().(ed25519.PublicKey)}, Enrolled: now}},
		Codes:       []server.DumpCode{{Hash: code[:], User: "u2", Expires: now.Add(time.Hour)}},
		Members:     []server.DumpMember{{Project: p, User: "u1", Role: server.Admin}},
		Invitations: []server.DumpInvitation{{Invitation: server.Invitation{ID: "inv1", Project: p, User: "u2", Role: server.QA, InvitedBy: "u1", Created: now}, State: "pending"}},
		Identity:    &server.DumpIdentity{DeviceID: "srv", UserID: "srvu", Seed: priv.Seed()},
	}
	yield := func(rs []server.Row) func(string) iter.Seq2[server.Row, error] {
		return func(string) iter.Seq2[server.Row, error] {
			return func(y func(server.Row, error) bool) {
				for _, r := range rs {
					if !y(r, nil) {
						return
					}
				}
			}
		}
	}
	empty := func(when string) {
		t.Helper()
		if n, err := s.CountUsers(ctx); err != nil || n != 0 {
			t.Errorf("%s: %d users (%v), want none", when, n, err)
		}
		if _, err := s.Head(ctx, p); !errors.Is(err, server.ErrNoProject) {
			t.Errorf("%s: the project is there: %v", when, err)
		}
	}

	altered := slices.Clone(rows)
	altered[2].Envelope = []byte{2, 8}
	if _, err := s.Load(ctx, d, yield(altered)); !errors.Is(err, ledger.ErrChainBroken) {
		t.Errorf("load of an altered event: %v, want ErrChainBroken", err)
	}
	empty("after an altered event")
	if _, err := s.Load(ctx, d, yield(rows[:4])); err == nil || !strings.Contains(err.Error(), "recomputes to 4") {
		t.Errorf("load of a ledger short of its head: %v", err)
	}
	empty("after a short ledger")

	got, err := s.Load(ctx, d, yield(rows))
	if err != nil {
		t.Fatal(err)
	}
	if len(got.Projects) != 1 || got.Projects[0].Head != d.Projects[0].Head || got.Projects[0].Rows != 5 || got.Users != 3 || !got.Identity {
		t.Errorf("loaded %+v", got)
	}
	if h, err := s.Head(ctx, p); err != nil || h != d.Projects[0].Head {
		t.Errorf("head = %+v, %v; want %+v", h, err, d.Projects[0].Head)
	}
	es, err := s.After(ctx, p, 0, 10)
	if err != nil || len(es) != 5 || !bytes.Equal(es[4].Event, rows[4].Envelope) || es[4].SkewMicros != 4 {
		t.Errorf("after = %+v, %v", es, err)
	}
	if dev, err := s.DeviceByToken(ctx, token[:]); err != nil || dev.ID != "d1" || dev.Revoked {
		t.Errorf("device by its token = %+v, %v", dev, err)
	}
	id, err := s.ServerIdentity(ctx, func() server.Identity { t.Error("a fresh identity was made"); return server.Identity{} })
	if err != nil || id.DeviceID != "srv" || !bytes.Equal(id.Key.Seed(), priv.Seed()) {
		t.Errorf("identity = %+v, %v", id, err)
	}
	if invs, err := s.Invitations(ctx, "u2"); err != nil || len(invs) != 1 || invs[0].ID != "inv1" || invs[0].ProjectName != "levee" {
		t.Errorf("invitations of u2 = %+v, %v", invs, err)
	}
	if _, err := s.Enroll(ctx, code[:], server.Device{ID: "d2", Name: "phone", PublicKey: pub}, []byte("t2"), now); err != nil {
		t.Errorf("enrol with the copied code: %v", err)
	}
	if u, err := s.User(ctx, "u1"); err != nil || !u.ServerAdmin {
		t.Errorf("user u1 = %+v, %v; want a server administrator", u, err)
	}

	if _, err := s.Load(ctx, d, yield(rows)); !errors.Is(err, pgstore.ErrNotEmpty) {
		t.Errorf("a second load: %v, want ErrNotEmpty", err)
	}
}
