// Package storetest is the conformance suite of server.Store: the
// guarantees the server relies on, method group by method group, which
// every store runs against a fresh, empty store of its own. A store's test
// calls Run with a function that opens one:
//
//	func TestConformance(t *testing.T) {
//		storetest.Run(t, func(t *testing.T) server.Store {
//			s, err := mystore.Open(...)
//			if err != nil {
//				t.Fatal(err)
//			}
//			t.Cleanup(func() { s.Close() })
//			return s
//		})
//	}
//
// The suite checks what server.Store's documentation promises, no more: an
// error the documentation leaves to the store (a duplicate project id) is
// checked as an error and an unchanged store, not for its words.
package storetest

import (
	"bytes"
	"crypto/ed25519"
	"crypto/rand"
	"crypto/sha256"
	"errors"
	"fmt"
	"slices"
	"sync"
	"testing"
	"time"

	"tamp/internal/ledger"
	"tamp/server"
)

// Run runs the suite: each subtest opens its own store with open, which
// must return a new, empty store and close it when the test ends.
func Run(t *testing.T, open func(t *testing.T) server.Store) {
	for _, tc := range []struct {
		name string
		fn   func(t *testing.T, s server.Store)
	}{
		{"Projects", testProjects},
		{"AppendAndRead", testAppendAndRead},
		{"AppendFollowsHead", testAppendFollowsHead},
		{"AppendHoldsEachEventOnce", testEventOnce},
		{"ConcurrentAppendsOneWins", testConcurrentAppends},
		{"ProjectsHaveTheirOwnChains", testSeparateChains},
		{"Epochs", testEpochs},
		{"AfterLimits", testAfterLimits},
		{"ReferenceData", testReferenceData},
		{"ClockSkews", testClockSkews},
		{"Users", testUsers},
		{"MembersAndRoles", testMembers},
		{"EnrolmentCodes", testEnrolmentCodes},
		{"EnrolmentCodeUsedOnceUnderConcurrency", testConcurrentEnroll},
		{"Tokens", testTokens},
		{"RevokeAndDevices", testRevokeAndDevices},
		{"Invitations", testInvitations},
		{"InvitationResolvedOnceUnderConcurrency", testConcurrentResolve},
		{"ServerIdentity", testServerIdentity},
		{"ServerIdentityCreatedOnceUnderConcurrency", testConcurrentIdentity},
		{"RegisterDevice", testRegisterDevice},
		{"Probe", testProbe},
	} {
		t.Run(tc.name, func(t *testing.T) { tc.fn(t, open(t)) })
	}
}

// t0 is the suite's clock: times are kept to the microsecond.
var t0 = time.Date(2026, 10, 5, 7, 30, 0, 0, time.UTC)

const (
	projA = "0190d3a0-0000-7000-8000-00000000a001"
	projB = "0190d3a0-0000-7000-8000-00000000b002"
)

func genesis(project string) server.Hash { return server.Hash(ledger.Genesis(project)) }

func must(t *testing.T, err error) {
	t.Helper()
	if err != nil {
		t.Fatal(err)
	}
}

func newProject(t *testing.T, s server.Store, id string) server.Checkpoint {
	t.Helper()
	must(t, s.CreateProject(t.Context(), id, "pad "+id[len(id)-4:], genesis(id), t0))
	h, err := s.Head(t.Context(), id)
	must(t, err)
	return h
}

// rowsAfter makes n rows that follow head, chained as the server chains
// them; tag keeps their event ids and bytes apart from other batches'.
func rowsAfter(head server.Checkpoint, n int, tag string, kind func(i int) string) []server.Row {
	out := make([]server.Row, 0, n)
	h := ledger.Hash(head.Hash)
	for i := range n {
		seq := head.Seq + uint64(i) + 1
		env := fmt.Appendf(nil, "event %s/%d of %s", tag, i, head.Project)
		h = ledger.Link(h, seq, env)
		k := "test_recorded"
		if kind != nil {
			k = kind(i)
		}
		out = append(out, server.Row{Seq: seq, EventID: fmt.Sprintf("%s-%04d", tag, i), DeviceID: "dev-" + tag, DeviceSeq: uint64(i + 1),
			Kind: k, RecordID: fmt.Sprintf("rec-%s-%d", tag, i), Envelope: env, Hash: server.Hash(h), Received: t0})
	}
	return out
}

// after returns the head rows lead to.
func after(head server.Checkpoint, rows []server.Row) server.Checkpoint {
	if len(rows) == 0 {
		return head
	}
	last := rows[len(rows)-1]
	head.Seq, head.Hash = last.Seq, last.Hash
	return head
}

// entries reads a project's whole ledger.
func entries(t *testing.T, s server.Store, project string) []server.Entry {
	t.Helper()
	es, err := s.After(t.Context(), project, 0, 1<<30)
	must(t, err)
	return es
}

// sameEntries checks that es are rows, stored as appended.
func sameEntries(t *testing.T, what string, es []server.Entry, rows []server.Row) {
	t.Helper()
	if len(es) != len(rows) {
		t.Fatalf("%s: %d entries, want %d", what, len(es), len(rows))
	}
	for i, e := range es {
		r := rows[i]
		if e.Seq != r.Seq || e.Hash != r.Hash || !bytes.Equal(e.Event, r.Envelope) || e.SkewMicros != r.SkewMicros {
			t.Fatalf("%s: entry %d = seq %d hash %s skew %d %q; want seq %d hash %s skew %d %q", what, i,
				e.Seq, e.Hash, e.SkewMicros, e.Event, r.Seq, r.Hash, r.SkewMicros, r.Envelope)
		}
		if e.DeviceID != r.DeviceID || e.DeviceSeq != r.DeviceSeq {
			t.Fatalf("%s: entry %d is device %q number %d, want %q number %d", what, i, e.DeviceID, e.DeviceSeq, r.DeviceID, r.DeviceSeq)
		}
	}
}

func head(t *testing.T, s server.Store, project string) server.Checkpoint {
	t.Helper()
	h, err := s.Head(t.Context(), project)
	must(t, err)
	return h
}

// A new project's ledger is empty at epoch 1 with the genesis hash; a
// project id is created once; an unknown project has no head.
func testProjects(t *testing.T, s server.Store) {
	ctx := t.Context()
	h := newProject(t, s, projA)
	want := server.Checkpoint{Project: projA, Epoch: 1, Seq: 0, Hash: genesis(projA)}
	if h != want {
		t.Errorf("new project's head = %+v, want %+v", h, want)
	}
	if es := entries(t, s, projA); len(es) != 0 {
		t.Errorf("a new ledger holds %d entries", len(es))
	}
	rows := rowsAfter(h, 2, "a", nil)
	must(t, s.Append(ctx, projA, h, rows))
	if err := s.CreateProject(ctx, projA, "again", server.Hash{1}, t0); err == nil {
		t.Error("creating a project id that exists succeeded")
	}
	if got := head(t, s, projA); got != after(h, rows) {
		t.Errorf("head after creating the id again = %+v, want it unchanged", got)
	}
	sameEntries(t, "ledger after creating the id again", entries(t, s, projA), rows)
	if _, err := s.Head(ctx, "0190d3a0-0000-7000-8000-0000000000ff"); !errors.Is(err, server.ErrNoProject) {
		t.Errorf("head of an unknown project: %v, want ErrNoProject", err)
	}
	if _, ok, err := s.HashAt(ctx, "0190d3a0-0000-7000-8000-0000000000ff", 1); ok || err != nil {
		t.Errorf("HashAt of an unknown project = %v, %v; want false and no error", ok, err)
	}
}

// Appended rows are read back as they were given, the head follows the
// last, and HashAt answers for stored entries only.
func testAppendAndRead(t *testing.T, s server.Store) {
	ctx := t.Context()
	h := newProject(t, s, projA)
	// Batches of many sizes, with events of many sizes, one of them large:
	// a store that splits a batch into statements must keep them whole
	// and in order.
	var all []server.Row
	for i, n := range []int{1, 3, 87, 500, 2} {
		rows := rowsAfter(h, n, fmt.Sprintf("b%d", i), nil)
		for j := range rows {
			if j%5 == 0 {
				rows[j].SkewMicros = int64(j+1) * 1_000_003
			}
		}
		if n == 3 { // an event of 256 KiB, its bytes all values
			env := make([]byte, 256<<10)
			for k := range env {
				env[k] = byte(k)
			}
			rows[1].Envelope = env
			rows = rechain(h, rows)
		}
		must(t, s.Append(ctx, projA, h, rows))
		h = after(h, rows)
		if got := head(t, s, projA); got != h {
			t.Fatalf("head after batch %d = %d %s, want %d %s", i, got.Seq, got.Hash, h.Seq, h.Hash)
		}
		all = append(all, rows...)
	}
	sameEntries(t, "the ledger", entries(t, s, projA), all)
	for _, seq := range []uint64{0, 1, 2, 300, uint64(len(all)), uint64(len(all) + 1)} {
		got, ok, err := s.HashAt(ctx, projA, seq)
		held := seq >= 1 && seq <= uint64(len(all))
		if err != nil || ok != held || held && got != all[seq-1].Hash {
			t.Errorf("HashAt(%d) = %s, %v, %v; want held %v", seq, got, ok, err, held)
		}
	}
	// Chained as the server chains: each hash links the one before.
	prev := ledger.Genesis(projA)
	for _, e := range entries(t, s, projA) {
		if prev = ledger.Link(prev, e.Seq, e.Event); server.Hash(prev) != e.Hash {
			t.Fatalf("entry %d does not link to the one before", e.Seq)
		}
	}
}

// rechain recomputes the hashes of rows after their envelopes changed.
func rechain(head server.Checkpoint, rows []server.Row) []server.Row {
	h := ledger.Hash(head.Hash)
	for i := range rows {
		h = ledger.Link(h, rows[i].Seq, rows[i].Envelope)
		rows[i].Hash = server.Hash(h)
	}
	return rows
}

// An Append after any head other than the project's own fails with
// ErrConflict and changes nothing; so does an acknowledged Append retried;
// no rows is nothing to do.
func testAppendFollowsHead(t *testing.T, s server.Store) {
	ctx := t.Context()
	h := newProject(t, s, projA)
	first := rowsAfter(h, 3, "first", nil)
	must(t, s.Append(ctx, projA, h, first))
	cur := after(h, first)
	if err := s.Append(ctx, projA, h, first); !errors.Is(err, server.ErrConflict) {
		t.Errorf("the same Append again: %v, want ErrConflict", err)
	}
	stale := []struct {
		name string
		head server.Checkpoint
	}{
		{"an older head", h},
		{"the right sequence number with another hash", server.Checkpoint{Project: projA, Epoch: 1, Seq: cur.Seq, Hash: server.Hash{9}}},
		{"a sequence number past the head", server.Checkpoint{Project: projA, Epoch: 1, Seq: cur.Seq + 1, Hash: cur.Hash}},
		{"another epoch", server.Checkpoint{Project: projA, Epoch: 2, Seq: cur.Seq, Hash: cur.Hash}},
	}
	for _, tc := range stale {
		if err := s.Append(ctx, projA, tc.head, rowsAfter(tc.head, 2, "stale", nil)); !errors.Is(err, server.ErrConflict) {
			t.Errorf("append after %s: %v, want ErrConflict", tc.name, err)
		}
	}
	if got := head(t, s, projA); got != cur {
		t.Errorf("head after refused appends = %+v, want %+v", got, cur)
	}
	sameEntries(t, "ledger after refused appends", entries(t, s, projA), first)

	for _, hd := range []server.Checkpoint{cur, h} {
		if err := s.Append(ctx, projA, hd, nil); err != nil {
			t.Errorf("append of no rows after %d: %v", hd.Seq, err)
		}
	}
	if got := head(t, s, projA); got != cur {
		t.Errorf("head after appending no rows = %+v, want %+v", got, cur)
	}
	unknown := server.Checkpoint{Project: "0190d3a0-0000-7000-8000-0000000000ff", Epoch: 1, Hash: genesis("0190d3a0-0000-7000-8000-0000000000ff")}
	if err := s.Append(ctx, unknown.Project, unknown, rowsAfter(unknown, 1, "x", nil)); !errors.Is(err, server.ErrNoProject) {
		t.Errorf("append to an unknown project: %v, want ErrNoProject", err)
	}
	next := rowsAfter(cur, 2, "next", nil)
	must(t, s.Append(ctx, projA, cur, next))
	sameEntries(t, "ledger after the next append", entries(t, s, projA), append(slices.Clip(first), next...))
}

// A row whose event id the ledger holds, or two rows of one id, fail the
// whole Append and change nothing.
func testEventOnce(t *testing.T, s server.Store) {
	ctx := t.Context()
	h := newProject(t, s, projA)
	first := rowsAfter(h, 4, "once", nil)
	must(t, s.Append(ctx, projA, h, first))
	cur := after(h, first)

	again := rowsAfter(cur, 3, "again", nil)
	again[2].EventID = first[1].EventID // held already, last in the batch
	again[0].SkewMicros = 400_000_000
	if err := s.Append(ctx, projA, cur, again); err == nil {
		t.Error("appending an event id the ledger holds succeeded")
	}
	twice := rowsAfter(cur, 3, "twice", nil)
	twice[2].EventID = twice[0].EventID
	if err := s.Append(ctx, projA, cur, twice); err == nil {
		t.Error("appending two rows of one event id succeeded")
	}
	if got := head(t, s, projA); got != cur {
		t.Errorf("head after refused duplicates = %+v, want %+v", got, cur)
	}
	sameEntries(t, "ledger after refused duplicates", entries(t, s, projA), first)
	skews, err := s.ClockSkews(ctx, projA)
	must(t, err)
	if len(skews) != 0 {
		t.Errorf("clock skews after refused appends: %v", skews)
	}
	// The ledger takes the next rows after them as before.
	next := rowsAfter(cur, 3, "next", nil)
	must(t, s.Append(ctx, projA, cur, next))
	sameEntries(t, "ledger after the next append", entries(t, s, projA), append(slices.Clip(first), next...))
}

// Of appends racing after one head, exactly one succeeds and the rest fail
// with ErrConflict; the chain holds the winners' rows and nothing else.
func testConcurrentAppends(t *testing.T, s server.Store) {
	ctx := t.Context()
	h := newProject(t, s, projA)
	var chain []server.Row
	const racers = 3
	for round := range 12 {
		batches := make([][]server.Row, racers)
		for r := range batches {
			batches[r] = rowsAfter(h, 1+(round+r)%4*10, fmt.Sprintf("r%d-%d", round, r), nil)
		}
		errs := make([]error, racers)
		race(racers, func(r int) {
			errs[r] = s.Append(ctx, projA, h, batches[r])
		})
		won := -1
		for r, err := range errs {
			switch {
			case err == nil && won >= 0:
				t.Fatalf("round %d: appends %d and %d after one head both succeeded", round, won, r)
			case err == nil:
				won = r
			case !errors.Is(err, server.ErrConflict):
				t.Fatalf("round %d: a losing append failed with %v, want ErrConflict", round, err)
			}
		}
		if won < 0 {
			t.Fatalf("round %d: no append succeeded: %v", round, errs)
		}
		chain = append(chain, batches[won]...)
		h = after(h, batches[won])
		if got := head(t, s, projA); got != h {
			t.Fatalf("round %d: head = %d, want the winner's %d", round, got.Seq, h.Seq)
		}
	}
	sameEntries(t, "ledger after racing appends", entries(t, s, projA), chain)
}

// Each project has its own chain, numbered from 1.
func testSeparateChains(t *testing.T, s server.Store) {
	ctx := t.Context()
	ha, hb := newProject(t, s, projA), newProject(t, s, projB)
	ra := rowsAfter(ha, 5, "a", nil)
	rb := rowsAfter(hb, 2, "b", nil)
	must(t, s.Append(ctx, projA, ha, ra))
	must(t, s.Append(ctx, projB, hb, rb))
	sameEntries(t, "project A", entries(t, s, projA), ra)
	sameEntries(t, "project B", entries(t, s, projB), rb)
	if got := head(t, s, projB); got != after(hb, rb) {
		t.Errorf("head of B = %+v, want %+v", got, after(hb, rb))
	}
	// A head of one project is no head of the other.
	if err := s.Append(ctx, projB, after(ha, ra), rowsAfter(after(ha, ra), 1, "x", nil)); !errors.Is(err, server.ErrConflict) {
		t.Errorf("append to B after A's head: %v, want ErrConflict", err)
	}
	if got, ok, _ := s.HashAt(ctx, projB, 4); ok {
		t.Errorf("HashAt(B, 4) = %s, held; B has 2 entries", got)
	}
}

// SetEpoch raises a ledger's epoch and keeps its entries; a head of the old
// epoch no longer appends.
func testEpochs(t *testing.T, s server.Store) {
	ctx := t.Context()
	h := newProject(t, s, projA)
	rows := rowsAfter(h, 3, "e1", nil)
	must(t, s.Append(ctx, projA, h, rows))
	old := after(h, rows)
	must(t, s.SetEpoch(ctx, projA, 2))
	want := old
	want.Epoch = 2
	if got := head(t, s, projA); got != want {
		t.Errorf("head after SetEpoch(2) = %+v, want %+v", got, want)
	}
	for _, e := range []uint64{2, 1} {
		if err := s.SetEpoch(ctx, projA, e); !errors.Is(err, server.ErrConflict) {
			t.Errorf("SetEpoch(%d) at epoch 2: %v, want ErrConflict", e, err)
		}
	}
	if err := s.Append(ctx, projA, old, rowsAfter(old, 1, "old", nil)); !errors.Is(err, server.ErrConflict) {
		t.Errorf("append after a head of the old epoch: %v, want ErrConflict", err)
	}
	more := rowsAfter(want, 2, "e2", nil)
	must(t, s.Append(ctx, projA, want, more))
	must(t, s.SetEpoch(ctx, projA, 7)) // epochs may skip
	if got := head(t, s, projA); got.Epoch != 7 || got.Seq != 5 || got.Hash != more[1].Hash {
		t.Errorf("head after SetEpoch(7) = %+v", got)
	}
	sameEntries(t, "ledger across epochs", entries(t, s, projA), append(slices.Clip(rows), more...))
}

// After returns up to limit entries after seq, in order.
func testAfterLimits(t *testing.T, s server.Store) {
	ctx := t.Context()
	h := newProject(t, s, projA)
	rows := rowsAfter(h, 10, "l", nil)
	must(t, s.Append(ctx, projA, h, rows))
	for _, tc := range []struct {
		seq         uint64
		limit, want int // want: how many, from rows[seq]
	}{{0, 0, 0}, {0, 1, 1}, {0, 10, 10}, {0, 11, 10}, {3, 4, 4}, {3, 100, 7}, {9, 5, 1}, {10, 5, 0}, {12, 5, 0}} {
		got, err := s.After(ctx, projA, tc.seq, tc.limit)
		must(t, err)
		sameEntries(t, fmt.Sprintf("After(%d, %d)", tc.seq, tc.limit), got, rows[min(tc.seq, 10):min(tc.seq, 10)+uint64(tc.want)])
	}
}

// ReferenceData returns the rows of reference kinds (those the ledger's
// kind descriptors mark as reference data), in order, and no others.
func testReferenceData(t *testing.T, s server.Store) {
	ctx := t.Context()
	reference := ledger.KindNames(func(d ledger.KindDescriptor) bool { return d.Reference })
	other := ledger.KindNames(func(d ledger.KindDescriptor) bool { return !d.Reference })
	if len(reference) == 0 || len(other) == 0 {
		t.Fatalf("the ledger's descriptors give %d reference kinds and %d others", len(reference), len(other))
	}
	ref := map[string]bool{}
	for _, k := range reference {
		ref[k] = true
	}
	h := newProject(t, s, projA)
	kinds := func(i int) string { // interleaved, each reference kind at least twice, every other kind at least once
		if i%2 == 0 {
			return reference[(i/2)%len(reference)]
		}
		return other[(i/2)%len(other)]
	}
	rows := rowsAfter(h, 2*max(12, 2*len(reference), len(other)), "k", kinds)
	rows[4].SkewMicros = -4_000_000
	must(t, s.Append(ctx, projA, h, rows[:9]))
	must(t, s.Append(ctx, projA, after(h, rows[:9]), rows[9:]))
	var want []server.Row
	for _, r := range rows {
		if ref[r.Kind] {
			want = append(want, r)
		}
	}
	got, err := s.ReferenceData(ctx, projA)
	must(t, err)
	sameEntries(t, "reference data", got, want)
	newProject(t, s, projB)
	if got, err := s.ReferenceData(ctx, projB); err != nil || len(got) != 0 {
		t.Errorf("reference data of an empty ledger = %d entries, %v", len(got), err)
	}
}

// ClockSkews returns the skew recorded with each event that has one.
func testClockSkews(t *testing.T, s server.Store) {
	ctx := t.Context()
	h := newProject(t, s, projA)
	hb := newProject(t, s, projB)
	if got, err := s.ClockSkews(ctx, projA); err != nil || len(got) != 0 {
		t.Errorf("clock skews of an empty ledger = %v, %v", got, err)
	}
	rows := rowsAfter(h, 6, "s", nil)
	rows[1].SkewMicros = 360_000_000
	rows[4].SkewMicros = -301_000_000
	must(t, s.Append(ctx, projA, h, rows))
	rb := rowsAfter(hb, 1, "sb", nil)
	rb[0].SkewMicros = 999
	must(t, s.Append(ctx, projB, hb, rb))
	got, err := s.ClockSkews(ctx, projA)
	must(t, err)
	want := map[string]int64{rows[1].EventID: 360_000_000, rows[4].EventID: -301_000_000}
	if len(got) != len(want) || got[rows[1].EventID] != want[rows[1].EventID] || got[rows[4].EventID] != want[rows[4].EventID] {
		t.Errorf("clock skews = %v, want %v", got, want)
	}
	es := entries(t, s, projA)
	if es[1].SkewMicros != 360_000_000 || es[0].SkewMicros != 0 {
		t.Errorf("entries' skews = %d, %d; want 0, 360000000", es[0].SkewMicros, es[1].SkewMicros)
	}
}

// Users are created once and counted without the server's own.
func testUsers(t *testing.T, s server.Store) {
	ctx := t.Context()
	if n, err := s.CountUsers(ctx); err != nil || n != 0 {
		t.Errorf("users of an empty store = %d, %v", n, err)
	}
	must(t, s.AddUser(ctx, "u-ines", "Ines Palo", true, t0))
	must(t, s.AddUser(ctx, "u-rudi", "Rudi Kamp", false, t0))
	if err := s.AddUser(ctx, "u-ines", "Someone Else", false, t0); err == nil {
		t.Error("adding a user id that exists succeeded")
	}
	for _, want := range []server.User{{ID: "u-ines", Name: "Ines Palo", ServerAdmin: true}, {ID: "u-rudi", Name: "Rudi Kamp"}} {
		if got, err := s.User(ctx, want.ID); err != nil || got != want {
			t.Errorf("User(%s) = %+v, %v; want %+v", want.ID, got, err, want)
		}
	}
	if _, err := s.User(ctx, "u-nobody"); !errors.Is(err, server.ErrNoUser) {
		t.Errorf("unknown user: %v, want ErrNoUser", err)
	}
	if _, err := s.ServerIdentity(ctx, freshIdentity); err != nil {
		t.Fatal(err)
	}
	if n, err := s.CountUsers(ctx); err != nil || n != 2 {
		t.Errorf("users = %d, %v; want 2 (the server's own left out)", n, err)
	}
}

// A member holds one role per project; Members and ProjectsOf list them.
func testMembers(t *testing.T, s server.Store) {
	ctx := t.Context()
	newProject(t, s, projB)
	newProject(t, s, projA)
	for _, u := range []server.User{{ID: "u3", Name: "Cyd"}, {ID: "u1", Name: "Bea", ServerAdmin: true}, {ID: "u2", Name: "Bea"}, {ID: "u4", Name: "Abe"}} {
		must(t, s.AddUser(ctx, u.ID, u.Name, u.ServerAdmin, t0))
	}
	must(t, s.SetMember(ctx, projA, "u3", server.Inspector))
	must(t, s.SetMember(ctx, projA, "u2", server.Office))
	must(t, s.SetMember(ctx, projA, "u1", server.QA))
	must(t, s.SetMember(ctx, projA, "u4", server.Admin))
	must(t, s.SetMember(ctx, projB, "u3", server.Office))
	must(t, s.SetMember(ctx, projA, "u3", server.QA)) // replaces inspector
	for _, tc := range []struct {
		project, user string
		want          server.Role
	}{{projA, "u3", server.QA}, {projB, "u3", server.Office}, {projA, "u4", server.Admin}, {projB, "u1", ""}, {projA, "u-nobody", ""}} {
		if got, err := s.Role(ctx, tc.project, tc.user); err != nil || got != tc.want {
			t.Errorf("Role(%s, %s) = %q, %v; want %q", tc.project[len(tc.project)-4:], tc.user, got, err, tc.want)
		}
	}
	ms, err := s.Members(ctx, projA)
	must(t, err)
	want := []server.Member{
		{User: server.User{ID: "u4", Name: "Abe"}, Role: server.Admin},
		{User: server.User{ID: "u1", Name: "Bea", ServerAdmin: true}, Role: server.QA},
		{User: server.User{ID: "u2", Name: "Bea"}, Role: server.Office},
		{User: server.User{ID: "u3", Name: "Cyd"}, Role: server.QA},
	}
	if !slices.Equal(ms, want) {
		t.Errorf("members = %+v, want %+v (by name, then id)", ms, want)
	}
	if ms, err := s.Members(ctx, projB); err != nil || len(ms) != 1 || ms[0].ID != "u3" || ms[0].Role != server.Office {
		t.Errorf("members of B = %+v, %v", ms, err)
	}
	if ps, err := s.ProjectsOf(ctx, "u3"); err != nil || !slices.Equal(ps, []string{projA, projB}) {
		t.Errorf("ProjectsOf(u3) = %v, %v; want both, by id", ps, err)
	}
	if ps, err := s.ProjectsOf(ctx, "u-nobody"); err != nil || len(ps) != 0 {
		t.Errorf("ProjectsOf(nobody) = %v, %v", ps, err)
	}
}

func codeHash(code string) []byte { h := sha256.Sum256([]byte("code " + code)); return h[:] }

func tokenHash(tok string) []byte { h := sha256.Sum256([]byte("token " + tok)); return h[:] }

func key(t *testing.T) ed25519.PublicKey {
	t.Helper()
	pub, _, err := ed25519.GenerateKey(rand.Reader)
	must(t, err)
	return pub
}

// A code enrols one device before it expires; a refused enrolment uses
// nothing up; dropping a user's codes voids the unused ones.
func testEnrolmentCodes(t *testing.T, s server.Store) {
	ctx := t.Context()
	must(t, s.AddUser(ctx, "u-dee", "Dee", false, t0))
	must(t, s.AddUser(ctx, "u-eli", "Eli", false, t0))
	must(t, s.AddEnrollmentCode(ctx, codeHash("one"), "u-dee", t0.Add(time.Hour)))
	k1 := key(t)
	d, err := s.Enroll(ctx, codeHash("one"), server.Device{ID: "dev-1", Name: "Dee's tablet", PublicKey: k1}, tokenHash("1"), t0)
	if err != nil || d.ID != "dev-1" || d.UserID != "u-dee" || d.Name != "Dee's tablet" || !bytes.Equal(d.PublicKey, k1) {
		t.Fatalf("enrol = %+v, %v", d, err)
	}
	got, err := s.Device(ctx, "dev-1")
	if err != nil || got.UserID != "u-dee" || got.Name != "Dee's tablet" || !bytes.Equal(got.PublicKey, k1) ||
		!bytes.Equal(got.TokenHash, tokenHash("1")) || got.Revoked {
		t.Errorf("enrolled device = %+v, %v", got, err)
	}
	if _, err := s.Enroll(ctx, codeHash("one"), server.Device{ID: "dev-2", PublicKey: key(t)}, tokenHash("2"), t0); !errors.Is(err, server.ErrCodeInvalid) {
		t.Errorf("a code used twice: %v, want ErrCodeInvalid", err)
	}
	if _, err := s.Enroll(ctx, codeHash("never issued"), server.Device{ID: "dev-2", PublicKey: key(t)}, tokenHash("2"), t0); !errors.Is(err, server.ErrCodeInvalid) {
		t.Errorf("an unknown code: %v, want ErrCodeInvalid", err)
	}
	must(t, s.AddEnrollmentCode(ctx, codeHash("late"), "u-dee", t0.Add(time.Hour)))
	if _, err := s.Enroll(ctx, codeHash("late"), server.Device{ID: "dev-3", PublicKey: key(t)}, tokenHash("3"), t0.Add(2*time.Hour)); !errors.Is(err, server.ErrCodeInvalid) {
		t.Errorf("an expired code: %v, want ErrCodeInvalid", err)
	}
	// Enrolling an id that is enrolled already is refused, and the code
	// stays unused for a device of another id.
	must(t, s.AddEnrollmentCode(ctx, codeHash("eli"), "u-eli", t0.Add(time.Hour)))
	if _, err := s.Enroll(ctx, codeHash("eli"), server.Device{ID: "dev-1", PublicKey: key(t)}, tokenHash("4"), t0); !errors.Is(err, server.ErrDeviceExists) {
		t.Errorf("enrolling dev-1 again: %v, want ErrDeviceExists", err)
	}
	if got, _ := s.Device(ctx, "dev-1"); got.UserID != "u-dee" || !bytes.Equal(got.PublicKey, k1) || !bytes.Equal(got.TokenHash, tokenHash("1")) {
		t.Errorf("dev-1 after a refused enrolment of its id = %+v", got)
	}
	if _, err := s.DeviceByToken(ctx, tokenHash("4")); !errors.Is(err, server.ErrNoDevice) {
		t.Errorf("the refused enrolment's token: %v, want ErrNoDevice", err)
	}
	if d, err := s.Enroll(ctx, codeHash("eli"), server.Device{ID: "dev-5", PublicKey: key(t)}, tokenHash("5"), t0.Add(time.Minute)); err != nil || d.UserID != "u-eli" {
		t.Errorf("the code after a refused enrolment = %+v, %v; want it unused", d, err)
	}

	// DropEnrollmentCodes voids the unused codes of one user only.
	must(t, s.AddEnrollmentCode(ctx, codeHash("dee-2"), "u-dee", t0.Add(time.Hour)))
	must(t, s.AddEnrollmentCode(ctx, codeHash("eli-2"), "u-eli", t0.Add(time.Hour)))
	must(t, s.DropEnrollmentCodes(ctx, "u-dee"))
	if _, err := s.Enroll(ctx, codeHash("dee-2"), server.Device{ID: "dev-6", PublicKey: key(t)}, tokenHash("6"), t0); !errors.Is(err, server.ErrCodeInvalid) {
		t.Errorf("a dropped code: %v, want ErrCodeInvalid", err)
	}
	if d, err := s.DeviceByToken(ctx, tokenHash("1")); err != nil || d.ID != "dev-1" {
		t.Errorf("the device enrolled before the drop = %+v, %v", d, err)
	}
	if _, err := s.Enroll(ctx, codeHash("eli-2"), server.Device{ID: "dev-7", PublicKey: key(t)}, tokenHash("7"), t0); err != nil {
		t.Errorf("another user's code after the drop: %v", err)
	}
}

// Devices racing to enrol with one code: exactly one is enrolled.
func testConcurrentEnroll(t *testing.T, s server.Store) {
	ctx := t.Context()
	must(t, s.AddUser(ctx, "u-fay", "Fay", false, t0))
	for round := range 5 {
		code := codeHash(fmt.Sprint("race ", round))
		must(t, s.AddEnrollmentCode(ctx, code, "u-fay", t0.Add(time.Hour)))
		const racers = 3
		errs := make([]error, racers)
		keys := []ed25519.PublicKey{key(t), key(t), key(t)}
		race(racers, func(r int) {
			id := fmt.Sprintf("dev-%d-%d", round, r)
			_, errs[r] = s.Enroll(ctx, code, server.Device{ID: id, PublicKey: keys[r]}, tokenHash(id), t0)
		})
		if won := oneWon(t, round, errs, server.ErrCodeInvalid); won != 1 {
			t.Fatalf("round %d: one code enrolled %d devices, want 1", round, won)
		}
	}
	if ds, err := s.Devices(ctx, "u-fay"); err != nil || len(ds) != 5 {
		t.Errorf("Fay's devices = %d, %v; want 5", len(ds), err)
	}
}

// A token finds its device until it is replaced; unknown devices and
// tokens are ErrNoDevice.
func testTokens(t *testing.T, s server.Store) {
	ctx := t.Context()
	must(t, s.AddUser(ctx, "u-gil", "Gil", false, t0))
	must(t, s.AddEnrollmentCode(ctx, codeHash("g"), "u-gil", t0.Add(time.Hour)))
	if _, err := s.Enroll(ctx, codeHash("g"), server.Device{ID: "dev-g", PublicKey: key(t)}, tokenHash("old"), t0); err != nil {
		t.Fatal(err)
	}
	if d, err := s.DeviceByToken(ctx, tokenHash("old")); err != nil || d.ID != "dev-g" || d.UserID != "u-gil" || !bytes.Equal(d.TokenHash, tokenHash("old")) {
		t.Errorf("DeviceByToken = %+v, %v", d, err)
	}
	must(t, s.SetToken(ctx, "dev-g", tokenHash("new")))
	if _, err := s.DeviceByToken(ctx, tokenHash("old")); !errors.Is(err, server.ErrNoDevice) {
		t.Errorf("the replaced token: %v, want ErrNoDevice", err)
	}
	if d, err := s.DeviceByToken(ctx, tokenHash("new")); err != nil || d.ID != "dev-g" {
		t.Errorf("the new token = %+v, %v", d, err)
	}
	if err := s.SetToken(ctx, "dev-nobody", tokenHash("x")); !errors.Is(err, server.ErrNoDevice) {
		t.Errorf("SetToken of an unknown device: %v, want ErrNoDevice", err)
	}
	if _, err := s.Device(ctx, "dev-nobody"); !errors.Is(err, server.ErrNoDevice) {
		t.Errorf("Device(unknown): %v, want ErrNoDevice", err)
	}
	if _, err := s.DeviceByToken(ctx, tokenHash("never")); !errors.Is(err, server.ErrNoDevice) {
		t.Errorf("DeviceByToken(unknown): %v, want ErrNoDevice", err)
	}
}

// enrol enrols a device for user at time at.
func enrol(t *testing.T, s server.Store, user, id string, at time.Time) {
	t.Helper()
	must(t, s.AddEnrollmentCode(t.Context(), codeHash(id), user, at.Add(time.Hour)))
	if _, err := s.Enroll(t.Context(), codeHash(id), server.Device{ID: id, Name: id + "'s name", PublicKey: key(t)}, tokenHash(id), at); err != nil {
		t.Fatal(err)
	}
}

// A revoked device stays revoked and stays listed; Devices lists in order
// of enrolment.
func testRevokeAndDevices(t *testing.T, s server.Store) {
	ctx := t.Context()
	must(t, s.AddUser(ctx, "u-hal", "Hal", false, t0))
	must(t, s.AddUser(ctx, "u-ivy", "Ivy", false, t0))
	enrol(t, s, "u-hal", "dev-c", t0.Add(2*time.Minute))
	enrol(t, s, "u-ivy", "dev-b", t0.Add(3*time.Minute))
	enrol(t, s, "u-hal", "dev-a", t0.Add(4*time.Minute))
	enrol(t, s, "u-hal", "dev-d", t0.Add(2*time.Minute)) // enrolled with dev-c: by id after it
	must(t, s.Revoke(ctx, "dev-a", t0.Add(time.Hour)))
	must(t, s.Revoke(ctx, "dev-a", t0.Add(2*time.Hour)))
	if err := s.Revoke(ctx, "dev-nobody", t0); !errors.Is(err, server.ErrNoDevice) {
		t.Errorf("revoking an unknown device: %v, want ErrNoDevice", err)
	}
	if d, err := s.Device(ctx, "dev-a"); err != nil || !d.Revoked {
		t.Errorf("revoked device = %+v, %v", d, err)
	}
	if d, err := s.DeviceByToken(ctx, tokenHash("dev-a")); err != nil || d.ID != "dev-a" || !d.Revoked {
		t.Errorf("revoked device by token = %+v, %v; want it found, revoked", d, err)
	}
	ids := func(ds []server.Device) (out []string) {
		for _, d := range ds {
			r := ""
			if d.Revoked {
				r = " revoked"
			}
			out = append(out, d.ID+r)
		}
		return out
	}
	hal, err := s.Devices(ctx, "u-hal")
	must(t, err)
	if got, want := ids(hal), []string{"dev-c", "dev-d", "dev-a revoked"}; !slices.Equal(got, want) {
		t.Errorf("Hal's devices = %v, want %v", got, want)
	}
	for _, d := range hal {
		if d.UserID != "u-hal" || d.Name != d.ID+"'s name" || len(d.PublicKey) != ed25519.PublicKeySize {
			t.Errorf("listed device = %+v", d)
		}
	}
	all, err := s.Devices(ctx, "")
	must(t, err)
	if got, want := ids(all), []string{"dev-c", "dev-d", "dev-b", "dev-a revoked"}; !slices.Equal(got, want) {
		t.Errorf("all devices = %v, want %v", got, want)
	}
	if ds, err := s.Devices(ctx, "u-nobody"); err != nil || len(ds) != 0 {
		t.Errorf("devices of nobody = %v, %v", ds, err)
	}
}

// An invitation is pending until accepted or declined, one per user and
// project; accepting makes the user a member.
func testInvitations(t *testing.T, s server.Store) {
	ctx := t.Context()
	newProject(t, s, projA)
	newProject(t, s, projB)
	must(t, s.AddUser(ctx, "adam", "Adam", false, t0))
	must(t, s.AddUser(ctx, "bea", "Bea", false, t0))
	id, err := s.Invite(ctx, server.Invitation{ID: "inv-1", Project: projA, User: "bea", Role: server.Inspector, InvitedBy: "adam", Created: t0})
	if err != nil || id != "inv-1" {
		t.Fatalf("invite = %q, %v", id, err)
	}
	// Inviting again while one is pending updates it rather than adding one.
	id, err = s.Invite(ctx, server.Invitation{ID: "inv-2", Project: projA, User: "bea", Role: server.QA, InvitedBy: "adam", Created: t0.Add(3 * time.Minute)})
	if err != nil || id != "inv-1" {
		t.Fatalf("second invite = %q, %v; want the pending inv-1", id, err)
	}
	if _, err := s.Invite(ctx, server.Invitation{ID: "inv-3", Project: projB, User: "bea", Role: server.Office, InvitedBy: "adam", Created: t0.Add(2 * time.Minute)}); err != nil {
		t.Fatal(err)
	}
	if _, err := s.Invitation(ctx, "inv-2"); !errors.Is(err, server.ErrNoInvitation) {
		t.Errorf("the id of an invitation merged into a pending one: %v, want ErrNoInvitation", err)
	}
	invs, err := s.Invitations(ctx, "bea")
	if err != nil || len(invs) != 2 {
		t.Fatalf("invitations = %+v, %v; want 2", invs, err)
	}
	if got := invs[0]; got.ID != "inv-3" || got.Project != projB || got.Role != server.Office || got.ProjectName != "pad b002" ||
		got.User != "bea" || got.InvitedBy != "adam" || got.InviterName != "Adam" || !got.Created.Equal(t0.Add(2*time.Minute)) {
		t.Errorf("oldest invitation = %+v", got)
	}
	if got := invs[1]; got.ID != "inv-1" || got.Role != server.QA || got.ProjectName != "pad a001" || !got.Created.Equal(t0.Add(3*time.Minute)) {
		t.Errorf("newer invitation = %+v", got)
	}
	if got, err := s.Invitation(ctx, "inv-1"); err != nil || got.Project != projA || got.User != "bea" || got.Role != server.QA ||
		got.InvitedBy != "adam" || !got.Created.Equal(t0.Add(3*time.Minute)) {
		t.Errorf("Invitation(inv-1) = %+v, %v", got, err)
	}
	if r, _ := s.Role(ctx, projA, "bea"); r != "" {
		t.Errorf("bea holds %q on A before accepting", r)
	}
	inv, err := s.ResolveInvitation(ctx, "inv-1", true, t0.Add(time.Hour))
	if err != nil || inv.ID != "inv-1" || inv.Project != projA || inv.Role != server.QA || inv.User != "bea" || inv.InvitedBy != "adam" {
		t.Fatalf("accept = %+v, %v", inv, err)
	}
	if r, _ := s.Role(ctx, projA, "bea"); r != server.QA {
		t.Errorf("bea holds %q on A after accepting, want qa", r)
	}
	for _, accept := range []bool{true, false} {
		if _, err := s.ResolveInvitation(ctx, "inv-1", accept, t0.Add(time.Hour)); !errors.Is(err, server.ErrNoInvitation) {
			t.Errorf("resolving an accepted invitation (accept %v): %v, want ErrNoInvitation", accept, err)
		}
	}
	if _, err := s.Invitation(ctx, "inv-1"); !errors.Is(err, server.ErrNoInvitation) {
		t.Errorf("an accepted invitation is still pending: %v", err)
	}
	if _, err := s.ResolveInvitation(ctx, "inv-3", false, t0.Add(time.Hour)); err != nil {
		t.Fatal(err)
	}
	if r, _ := s.Role(ctx, projB, "bea"); r != "" {
		t.Errorf("bea holds %q on B after declining", r)
	}
	if invs, _ := s.Invitations(ctx, "bea"); len(invs) != 0 {
		t.Errorf("pending after accepting and declining: %+v", invs)
	}
	if _, err := s.ResolveInvitation(ctx, "inv-none", true, t0); !errors.Is(err, server.ErrNoInvitation) {
		t.Errorf("resolving an unknown invitation: %v, want ErrNoInvitation", err)
	}
	// A new invitation may follow a closed one; accepting it replaces the
	// role held.
	if id, err := s.Invite(ctx, server.Invitation{ID: "inv-4", Project: projA, User: "bea", Role: server.Admin, InvitedBy: "adam", Created: t0.Add(2 * time.Hour)}); err != nil || id != "inv-4" {
		t.Fatalf("invite after an acceptance = %q, %v", id, err)
	}
	if _, err := s.ResolveInvitation(ctx, "inv-4", true, t0.Add(3*time.Hour)); err != nil {
		t.Fatal(err)
	}
	if r, _ := s.Role(ctx, projA, "bea"); r != server.Admin {
		t.Errorf("bea holds %q on A after accepting again, want admin", r)
	}
}

// Of racing resolutions of one invitation exactly one succeeds, and of
// racing invitations of one user to one project one stays pending.
func testConcurrentResolve(t *testing.T, s server.Store) {
	ctx := t.Context()
	newProject(t, s, projA)
	must(t, s.AddUser(ctx, "adam", "Adam", false, t0))
	must(t, s.AddUser(ctx, "cal", "Cal", false, t0))
	const racers = 3
	for round := range 5 {
		ids := make([]string, racers)
		errs := make([]error, racers)
		race(racers, func(r int) {
			ids[r], errs[r] = s.Invite(ctx, server.Invitation{ID: fmt.Sprintf("inv-%d-%d", round, r), Project: projA, User: "cal",
				Role: server.Inspector, InvitedBy: "adam", Created: t0.Add(time.Duration(round) * time.Minute)})
		})
		for r := range racers {
			if errs[r] != nil || ids[r] != ids[0] {
				t.Fatalf("round %d: racing invitations = %v, %v; want one pending id", round, ids, errs)
			}
		}
		if invs, err := s.Invitations(ctx, "cal"); err != nil || len(invs) != 1 {
			t.Fatalf("round %d: pending = %+v, %v; want 1", round, invs, err)
		}
		race(racers, func(r int) {
			_, errs[r] = s.ResolveInvitation(ctx, ids[0], r%2 == 0, t0.Add(time.Hour))
		})
		if won := oneWon(t, round, errs, server.ErrNoInvitation); won != 1 {
			t.Fatalf("round %d: %d resolutions of one invitation succeeded, want 1", round, won)
		}
	}
}

func freshIdentity() server.Identity {
	pub, priv, err := ed25519.GenerateKey(rand.Reader)
	if err != nil {
		panic(err)
	}
	id := fmt.Sprintf("%x", pub[:8])
	return server.Identity{DeviceID: "srv-dev-" + id, UserID: "srv-user-" + id, Key: priv}
}

// The server's identity is stored once, with a device whose key is its
// own, and is not counted among the users.
func testServerIdentity(t *testing.T, s server.Store) {
	ctx := t.Context()
	calls := 0
	first, err := s.ServerIdentity(ctx, func() server.Identity { calls++; return freshIdentity() })
	must(t, err)
	if calls != 1 || first.Key == nil || first.DeviceID == "" || first.UserID == "" {
		t.Fatalf("first ServerIdentity = %+v after %d calls of fresh", first, calls)
	}
	again, err := s.ServerIdentity(ctx, func() server.Identity { calls++; return freshIdentity() })
	must(t, err)
	if calls != 1 {
		t.Errorf("fresh called again once an identity was stored")
	}
	if again.DeviceID != first.DeviceID || again.UserID != first.UserID || !again.Key.Equal(first.Key) {
		t.Errorf("ServerIdentity again = %+v, want the first", again)
	}
	d, err := s.Device(ctx, first.DeviceID)
	if err != nil || d.UserID != first.UserID || !bytes.Equal(d.PublicKey, first.Key.Public().(ed25519.PublicKey)) || d.Revoked {
		t.Errorf("the server's device = %+v, %v", d, err)
	}
	if u, err := s.User(ctx, first.UserID); err != nil || u.ServerAdmin {
		t.Errorf("the server's user = %+v, %v; want one, no administrator", u, err)
	}
	if n, err := s.CountUsers(ctx); err != nil || n != 0 {
		t.Errorf("CountUsers = %d, %v; want 0", n, err)
	}
}

// Racing first calls of ServerIdentity all return one identity.
func testConcurrentIdentity(t *testing.T, s server.Store) {
	ctx := t.Context()
	const racers = 4
	ids := make([]server.Identity, racers)
	errs := make([]error, racers)
	race(racers, func(r int) {
		ids[r], errs[r] = s.ServerIdentity(ctx, freshIdentity)
	})
	for r := range racers {
		if errs[r] != nil {
			t.Fatalf("racer %d: %v", r, errs[r])
		}
		if ids[r].DeviceID != ids[0].DeviceID || !ids[r].Key.Equal(ids[0].Key) {
			t.Fatalf("racing first calls returned different identities: %s and %s", ids[0].DeviceID, ids[r].DeviceID)
		}
	}
	later, err := s.ServerIdentity(ctx, freshIdentity)
	if err != nil || later.DeviceID != ids[0].DeviceID {
		t.Errorf("ServerIdentity after the race = %s, %v; want %s", later.DeviceID, err, ids[0].DeviceID)
	}
	if n, err := s.CountUsers(ctx); err != nil || n != 0 {
		t.Errorf("CountUsers after the race = %d, %v; want 0", n, err)
	}
}

// RegisterDevice adds a device once, and its user when missing.
func testRegisterDevice(t *testing.T, s server.Store) {
	ctx := t.Context()
	must(t, s.AddUser(ctx, "u-kit", "Kit", true, t0))
	k1, k2 := key(t), key(t)
	created, err := s.RegisterDevice(ctx, server.Device{ID: "dev-lost", UserID: "u-lem", Name: "Lem's tablet", PublicKey: k1}, "Lem", t0)
	if err != nil || !created {
		t.Fatalf("register = %v, %v", created, err)
	}
	if u, err := s.User(ctx, "u-lem"); err != nil || u.Name != "Lem" || u.ServerAdmin {
		t.Errorf("the registered device's user = %+v, %v", u, err)
	}
	d, err := s.Device(ctx, "dev-lost")
	if err != nil || d.UserID != "u-lem" || d.Name != "Lem's tablet" || !bytes.Equal(d.PublicKey, k1) || d.Revoked {
		t.Errorf("registered device = %+v, %v", d, err)
	}
	for _, tok := range [][]byte{nil, {}} {
		if got, err := s.DeviceByToken(ctx, tok); err == nil && got.ID == "dev-lost" {
			t.Errorf("a device registered without a token is found by token %x", tok)
		}
	}
	// Known already: nothing changes.
	created, err = s.RegisterDevice(ctx, server.Device{ID: "dev-lost", UserID: "u-other", Name: "other", PublicKey: k2, Revoked: true,
		TokenHash: tokenHash("x")}, "Other", t0)
	if err != nil || created {
		t.Errorf("registering a known device = %v, %v; want false", created, err)
	}
	if d, _ := s.Device(ctx, "dev-lost"); d.UserID != "u-lem" || !bytes.Equal(d.PublicKey, k1) || d.Revoked {
		t.Errorf("device after registering it again = %+v", d)
	}
	if _, err := s.User(ctx, "u-other"); !errors.Is(err, server.ErrNoUser) {
		t.Errorf("registering a known device created its user: %v", err)
	}
	if _, err := s.DeviceByToken(ctx, tokenHash("x")); !errors.Is(err, server.ErrNoDevice) {
		t.Errorf("registering a known device set its token: %v", err)
	}
	// A revoked device of an existing user, with a token; the user keeps
	// its name and flag.
	created, err = s.RegisterDevice(ctx, server.Device{ID: "dev-kit", UserID: "u-kit", Name: "Kit's", PublicKey: k2, Revoked: true,
		TokenHash: tokenHash("kit")}, "Renamed", t0)
	if err != nil || !created {
		t.Fatalf("register Kit's = %v, %v", created, err)
	}
	if u, _ := s.User(ctx, "u-kit"); u.Name != "Kit" || !u.ServerAdmin {
		t.Errorf("existing user after registering a device = %+v", u)
	}
	if d, err := s.DeviceByToken(ctx, tokenHash("kit")); err != nil || d.ID != "dev-kit" || !d.Revoked {
		t.Errorf("Kit's registered device by token = %+v, %v; want it, revoked", d, err)
	}
	must(t, s.SetToken(ctx, "dev-lost", tokenHash("resumed")))
	if d, err := s.DeviceByToken(ctx, tokenHash("resumed")); err != nil || d.ID != "dev-lost" {
		t.Errorf("after SetToken = %+v, %v", d, err)
	}
	if n, err := s.CountUsers(ctx); err != nil || n != 2 {
		t.Errorf("CountUsers = %d, %v; want 2", n, err)
	}
}

// Probe writes on a store that can, and leaves nothing behind.
func testProbe(t *testing.T, s server.Store) {
	ctx := t.Context()
	h := newProject(t, s, projA)
	for range 3 {
		if err := s.Probe(ctx); err != nil {
			t.Fatalf("probe of a writable store: %v", err)
		}
	}
	if got := head(t, s, projA); got != h {
		t.Errorf("head after probes = %+v", got)
	}
	if n, err := s.CountUsers(ctx); err != nil || n != 0 {
		t.Errorf("users after probes = %d, %v", n, err)
	}
	if ds, err := s.Devices(ctx, ""); err != nil || len(ds) != 0 {
		t.Errorf("devices after probes = %v, %v", ds, err)
	}
}

// race runs fn(0) to fn(n-1) on their own goroutines, released together,
// and waits for them all.
func race(n int, fn func(r int)) {
	start := make(chan struct{})
	var wg sync.WaitGroup
	for r := range n {
		wg.Go(func() {
			<-start
			fn(r)
		})
	}
	close(start)
	wg.Wait()
}

// oneWon counts the racers that succeeded, and reports each that failed
// with anything but loser, the error a racer that lost must get.
func oneWon(t *testing.T, round int, errs []error, loser error) int {
	t.Helper()
	won := 0
	for r, err := range errs {
		switch {
		case err == nil:
			won++
		case !errors.Is(err, loser):
			t.Errorf("round %d: racer %d: %v, want %v", round, r, err, loser)
		}
	}
	return won
}
