package ledger

import (
	"bytes"
	"crypto/ed25519"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"
	"google.golang.org/protobuf/proto"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/soil"
)

func TestSealOpen(t *testing.T) {
	f := newFixture(t, 10)
	s := f.emit("ann", f.test("", "", 110, 12))
	got, err := Open(s.Proto(), f.keys)
	if err != nil {
		t.Fatal(err)
	}
	if got.Event.ID != s.Event.ID || string(got.Body) != string(s.Body) {
		t.Errorf("Open returned another event")
	}
	d, err := Decode(s.Bytes())
	if err != nil || d.Event.ID != s.Event.ID {
		t.Errorf("Decode(Bytes()) = %v, %v", d.Event.ID, err)
	}
}

func TestForgedSignature(t *testing.T) {
	f := newFixture(t, 11)
	ann, bob := f.device("ann"), f.device("bob")
	s := f.emit("ann", f.spec())
	// Signed by another device's key but claiming ann's device.
	forged := s
	forged.Signature = ed25519.Sign(bob.key, signed(s.Body))
	if _, err := Open(forged.Proto(), f.keys); ReasonOf(err) != BadSignature {
		t.Errorf("signature by another device's key: %v, want bad_signature", err)
	}
	if err := s.Verify(ann.key.Public().(ed25519.PublicKey)); err != nil {
		t.Errorf("genuine signature: %v", err)
	}
	if _, err := Open(s.Proto(), func(string) (ed25519.PublicKey, bool) { return nil, false }); ReasonOf(err) != BadSignature {
		t.Errorf("unknown device: %v", err)
	}
	short := s.Proto()
	short.Signature = short.Signature[:10]
	if _, err := Open(short, f.keys); ReasonOf(err) != BadSignature {
		t.Errorf("truncated signature: %v", err)
	}
}

func TestEditedBodyDetected(t *testing.T) {
	f := newFixture(t, 12)
	test := f.test("", "", 110, 12)
	s := f.emit("ann", test)
	// Change the soil mass inside the signed body and re-encode it.
	var b pb.EventBody
	if err := proto.Unmarshal(s.Body, &b); err != nil {
		t.Fatal(err)
	}
	b.GetTestRecorded().GetContent().GetReadings().GetSandCone().SoilMass *= 1.05
	edited, err := deterministic.Marshal(&b)
	if err != nil {
		t.Fatal(err)
	}
	m := &pb.Event{Body: edited, Signature: s.Signature}
	if _, err := Open(m, f.keys); ReasonOf(err) != BadSignature {
		t.Errorf("edited body: %v, want bad_signature", err)
	}
	// In a chain, the edit breaks the link even if a signature were forged.
	log := NewLog(f.project, 1)
	e1 := log.Append(s.Bytes())
	e1.Event = (&Signed{Body: edited, Signature: s.Signature}).Bytes()
	if err := NewVerifier(Start(f.project, 1)).Verify([]Entry{e1}); !errors.Is(err, ErrChainBroken) {
		t.Errorf("edited event in the chain: %v, want ErrChainBroken", err)
	}
}

func TestMalformedAndUnknownKind(t *testing.T) {
	if _, err := Decode([]byte{0xff, 0xff, 0xff}); ReasonOf(err) != Malformed {
		t.Errorf("garbage: %v", err)
	}
	f := newFixture(t, 13)
	d := f.device("ann")
	body, _ := deterministic.Marshal(&pb.EventBody{EventId: f.id(true), ProjectId: f.project, AuthorId: d.user, DeviceId: d.id, DeviceSeq: 1,
		Hlc: &pb.HybridTime{WallMicros: 1}})
	m := &pb.Event{Body: body, Signature: ed25519.Sign(d.key, signed(body))}
	if _, err := Open(m, f.keys); ReasonOf(err) != UnknownKind {
		t.Errorf("no kind: %v", err)
	}
	// A body from a newer version: an unknown field number where the kind would be.
	future := append(append([]byte{}, body...), 0xfa, 0x07, 0x00) // field 127, length-delimited, empty
	m = &pb.Event{Body: future, Signature: ed25519.Sign(d.key, signed(future))}
	if _, err := Open(m, f.keys); ReasonOf(err) != UnknownKind {
		t.Errorf("unknown kind from a newer version: %v", err)
	}
}

func TestChainVerification(t *testing.T) {
	f := newFixture(t, 14)
	log := NewLog(f.project, 3)
	for range 10 {
		log.Append(f.emit("ann", f.spec()).Bytes())
	}
	all := log.After(0, 0)
	v := NewVerifier(Start(f.project, 3))
	if err := v.Verify(all[:4]); err != nil {
		t.Fatal(err)
	}
	if err := v.Verify(all[4:]); err != nil {
		t.Fatal(err)
	}
	if v.At() != log.Head() {
		t.Errorf("verified %+v, head %+v", v.At(), log.Head())
	}

	// Reordered.
	swapped := []Entry{all[1], all[0]}
	if err := NewVerifier(Start(f.project, 3)).Verify(swapped); !errors.Is(err, ErrChainGap) {
		t.Errorf("reordered: %v", err)
	}
	// An entry left out.
	if err := NewVerifier(Start(f.project, 3)).Verify([]Entry{all[0], all[2]}); !errors.Is(err, ErrChainGap) {
		t.Errorf("gap: %v", err)
	}
	// Truncated: the server now holds 6 events, the device verified 10.
	short := NewLog(f.project, 3)
	for _, e := range all[:6] {
		short.Append(e.Event)
	}
	if err := v.CheckHead(short.Head()); !errors.Is(err, ErrRolledBack) {
		t.Errorf("truncated server: %v", err)
	}
	// Rolled-back epoch.
	old := short.Head()
	old.Epoch = 2
	if err := v.CheckHead(old); !errors.Is(err, ErrEpochRolledBack) {
		t.Errorf("older epoch: %v", err)
	}
	// Rewritten history: same length, other content.
	rewritten := NewLog(f.project, 3)
	for i, e := range all {
		if i == 5 {
			rewritten.Append(f.emit("mallory", f.spec()).Bytes())
			continue
		}
		rewritten.Append(e.Event)
	}
	if err := v.CheckHead(rewritten.Head()); !errors.Is(err, ErrForked) {
		t.Errorf("rewritten, same length: %v", err)
	}
	// Rewritten and extended: the anchor at the verified point differs, and
	// the next entry does not link.
	rewritten.Append(f.emit("ann", f.spec()).Bytes())
	anchor := Checkpoint{Project: f.project, Epoch: 3, Seq: 10, Hash: rewritten.After(9, 1)[0].Hash}
	if err := v.CheckAnchor(anchor); !errors.Is(err, ErrForked) {
		t.Errorf("rewritten, extended, anchor: %v", err)
	}
	if err := v.Verify(rewritten.After(10, 0)); !errors.Is(err, ErrChainBroken) {
		t.Errorf("rewritten, extended, next entry: %v", err)
	}
	if v.At() != log.Head() {
		t.Error("a failed verification moved the verified point")
	}
	// Another project's chain cannot be spliced in.
	if Genesis(f.project) == Genesis(newFixture(t, 15).project) {
		t.Error("two projects share a genesis hash")
	}
}

func TestClock(t *testing.T) {
	f := newFixture(t, 16)
	wall := f.wall
	c := NewClock(func() time.Time { return wall }, HLC{})
	a := c.Now()
	b := c.Now()
	if b.Compare(a) <= 0 {
		t.Errorf("same wall time: %v then %v", a, b)
	}
	c.Observe(HLC{Wall: a.Wall + 5_000_000, Logical: 3})
	d := c.Now()
	if d.Compare(HLC{Wall: a.Wall + 5_000_000, Logical: 3}) <= 0 {
		t.Errorf("after observing a clock ahead: %v", d)
	}
	wall = wall.Add(-time.Hour) // the device clock is set back
	if e := c.Now(); e.Compare(d) <= 0 {
		t.Errorf("clock set back: %v after %v", e, d)
	}
	if r := NewClock(func() time.Time { return wall }, c.Last()).Now(); r.Compare(c.Last()) <= 0 {
		t.Error("a restarted clock ran backwards")
	}
}

// Bytes writes the envelope by hand; it must be the marshaller's encoding.
func TestBytesIsDeterministicMarshal(t *testing.T) {
	long := make([]byte, 300) // a body whose length takes a two-byte varint
	for i := range long {
		long[i] = byte(i)
	}
	sig := make([]byte, ed25519.SignatureSize)
	for _, s := range []Signed{{}, {Body: []byte{1}}, {Signature: sig}, {Body: long, Signature: sig}, {Body: long[:127], Signature: sig[:1]}} {
		want, err := proto.MarshalOptions{Deterministic: true}.Marshal(s.Proto())
		if err != nil {
			t.Fatal(err)
		}
		if got := s.Bytes(); string(got) != string(want) {
			t.Errorf("Bytes() of body %d, signature %d bytes = %x, want %x", len(s.Body), len(s.Signature), got, want)
		}
	}
}

// Seal returns the event as every replica decodes it from the signed
// bytes, not the value it was given: an empty list comes back nil and a
// time is cut to the microsecond, so the view a device builds from what it
// sealed is the view a replica builds from the bytes.
func TestSealReturnsTheDecodedEvent(t *testing.T) {
	f := newFixture(t, 18)
	d := f.device("ann")
	ref := f.reference()
	ref.Points = []soil.CurvePoint{} // empty, not nil: encoded as no points, decoded as nil
	ref.MaxDryDensity, ref.OptimumMoisture = pcf(115.8), 13.4
	test := f.test(ref.ID, "", 110, 12)
	at := time.Date(2026, 6, 15, 14, 30, 0, 123456789, time.FixedZone("MDT", -6*3600)) // nanoseconds, and a zone
	var sealed, decoded []Signed
	for i, k := range []Kind{ref, test} {
		e := Event{ID: f.id(true), Project: f.project, Author: d.user, Device: d.id, DeviceSeq: uint64(i + 1),
			HLC: d.clock.Now(), DeviceTime: at, Kind: k}
		s, err := Seal(e, d.key)
		if err != nil {
			t.Fatalf("seal %s: %v", k.KindName(), err)
		}
		got, err := Decode(s.Bytes())
		if err != nil {
			t.Fatalf("decode %s: %v", k.KindName(), err)
		}
		if diff := cmp.Diff(got.Event, s.Event); diff != "" {
			t.Errorf("the event Seal returns differs from the one decoded from its bytes (-decoded +sealed):\n%s", diff)
		}
		sealed, decoded = append(sealed, s), append(decoded, got)
	}
	device, replica := NewProjection(f.project), NewProjection(f.project)
	apply(t, device, sealed...)
	apply(t, replica, decoded...)
	if device.Digest() != replica.Digest() {
		t.Errorf("the view built from the sealed events differs from the one built from their bytes")
	}
}

// BenchmarkSeal measures checking, encoding and signing one test entry, as
// a device does for every entry it records.
func BenchmarkSeal(b *testing.B) {
	f := newFixture(b, 17)
	d := f.device("ann")
	e := Event{ID: f.id(true), Project: f.project, Author: d.user, Device: d.id, DeviceSeq: 1,
		HLC: d.clock.Now(), DeviceTime: f.wall, Kind: f.test("", "", 110, 12)}
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Seal(e, d.key); err != nil {
			b.Fatal(err)
		}
	}
}

// SplitEnvelope gives back the body and signature an envelope was made
// of, without decoding the body, and refuses bytes of another shape.
func TestSplitEnvelope(t *testing.T) {
	f := newFixture(t, 31)
	s := f.emit("ann", f.setUp())
	m, err := SplitEnvelope(s.Bytes())
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(m.GetBody(), s.Body) || !bytes.Equal(m.GetSignature(), s.Signature) {
		t.Fatalf("SplitEnvelope gave body %x and signature %x, want %x and %x", m.GetBody(), m.GetSignature(), s.Body, s.Signature)
	}
	if back, err := Decode(s.Bytes()); err != nil || !bytes.Equal(back.Body, m.GetBody()) {
		t.Fatalf("Decode of the same bytes: %v", err)
	}
	for name, b := range map[string][]byte{
		"truncated":       s.Bytes()[:len(s.Bytes())-3],
		"varint field":    {0x08, 0x01},
		"unknown field 3": {0x1a, 0x01, 0x00},
	} {
		if _, err := SplitEnvelope(b); err == nil || ReasonOf(err) != Malformed {
			t.Errorf("SplitEnvelope(%s) = %v, want a Malformed rejection", name, err)
		}
	}
}

// TestSignMatchesStandardLibrary holds the signer Seal uses to the
// standard library's Ed25519 (RFC 8032 signatures are deterministic: the
// same key and message give the same bytes), over keys from seeds and
// messages of every length up to a few hundred bytes, and over RFC 8032's
// test vector 1 (section 7.1: the empty message; the bytes recalled from
// memory, and the standard library agrees with them).
func TestSignMatchesStandardLibrary(t *testing.T) {
	seed, _ := hex.DecodeString("9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60")
	want, _ := hex.DecodeString("e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b")
	if got := sign(ed25519.NewKeyFromSeed(seed), nil); !bytes.Equal(got, want) {
		t.Fatalf("RFC 8032 vector 1: signature %x, want %x", got, want)
	}
	msg := make([]byte, 600)
	for i := range msg {
		msg[i] = byte(i*7 + 3)
	}
	for k := range 8 {
		seed := sha256.Sum256([]byte{byte(k)})
		key := ed25519.NewKeyFromSeed(seed[:])
		for n := 0; n <= len(msg); n += 37 {
			if got, want := sign(key, msg[:n]), ed25519.Sign(key, msg[:n]); !bytes.Equal(got, want) {
				t.Fatalf("key %d, %d-byte message: signature %x, want the standard library's %x", k, n, got, want)
			}
		}
	}
}
