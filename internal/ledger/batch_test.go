package ledger

import (
	"compress/gzip"
	"crypto/ed25519"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"os"
	"slices"
	"testing"

	voi "github.com/oasisprotocol/curve25519-voi/primitives/ed25519"
)

// The ZIP 215 vectors (testdata/zip215.json.gz, as curve25519-voi ships
// them; from the ZIP 215 specification of the Zcash project): public keys
// and signatures over "Zcash" with small-order and non-canonically encoded
// points, every one of which a ZIP 215 verifier accepts.
func TestOneKeyBatchZIP215Vectors(t *testing.T) {
	f, err := os.Open("testdata/zip215.json.gz")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	z, err := gzip.NewReader(f)
	if err != nil {
		t.Fatal(err)
	}
	var vectors [][2]string
	if err := json.NewDecoder(z).Decode(&vectors); err != nil {
		t.Fatal(err)
	}
	if len(vectors) != 196 {
		t.Fatalf("%d vectors, want 196", len(vectors))
	}
	msg := []byte("Zcash")
	for n, v := range vectors {
		pub, _ := hex.DecodeString(v[0])
		sig, _ := hex.DecodeString(v[1])
		if !voi.VerifyWithOptions(voi.PublicKey(pub), msg, sig, verifyOptions) {
			t.Fatalf("vector %d: curve25519-voi refuses it", n)
		}
		evs := []Signed{{Body: msg, Signature: sig}, {Body: msg, Signature: sig}, {Body: msg, Signature: sig}}
		if !oneKeyBatch(pub, "", evs, []int{0, 1, 2}) {
			t.Errorf("vector %d: a batch of it is refused", n)
		}
		// With another message the batch stands or falls as that signature
		// does alone (some of these points sign every message).
		evs[1].Body = []byte("Zcasi")
		want := voi.VerifyWithOptions(voi.PublicKey(pub), evs[1].Body, sig, verifyOptions)
		if got := oneKeyBatch(pub, "", evs, []int{0, 1, 2}); got != want {
			t.Errorf("vector %d with another message: batch %v, alone %v", n, got, want)
		}
	}
}

// VerifyBatch gives, event by event, the answer Verify gives, whatever is
// wrong with which events of which devices.
func TestVerifyBatchAgreesWithVerify(t *testing.T) {
	corruptions := []struct {
		name string
		do   func(f *fixture, s *Signed)
	}{
		{"body", func(f *fixture, s *Signed) { s.Body = append([]byte{}, s.Body...); s.Body[len(s.Body)/2] ^= 1 }},
		{"R", func(f *fixture, s *Signed) { s.Signature = append([]byte{}, s.Signature...); s.Signature[3] ^= 0x10 }},
		{"S", func(f *fixture, s *Signed) { s.Signature = append([]byte{}, s.Signature...); s.Signature[40] ^= 1 }},
		{"S above the order", func(f *fixture, s *Signed) {
			// s + L encodes the same residue, which a ZIP 215 verifier refuses.
			l := [32]byte{0xed, 0xd3, 0xf5, 0x5c, 0x1a, 0x63, 0x12, 0x58, 0xd6, 0x9c, 0xf7, 0xa2, 0xde, 0xf9, 0xde, 0x14,
				0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0x10}
			sig := append([]byte{}, s.Signature...)
			carry := 0
			for i := range 32 {
				v := int(sig[32+i]) + int(l[i]) + carry
				sig[32+i], carry = byte(v), v>>8
			}
			s.Signature = sig
		}},
		{"other key", func(f *fixture, s *Signed) { s.Signature = ed25519.Sign(f.device("mallory").key, signed(s.Body)) }},
		{"unknown device", func(f *fixture, s *Signed) { s.Event.Device = "no-such-device" }},
	}
	for seed := range uint64(12) {
		f := newFixture(t, 900+seed)
		names := []string{"ann", "bob", "cy"}
		var evs []Signed
		for i := range 40 + int(seed)*7 {
			evs = append(evs, f.emit(names[i%3], f.test("", "", 100+float64(i%20), 12)))
		}
		if errs := VerifyBatch(evs, f.keys); countErrs(errs) != 0 {
			t.Fatalf("seed %d: good events refused: %v", seed, errs)
		}
		// The one-key check itself passes each device's good events (the
		// general verifier behind it would hide its refusing them).
		for _, name := range names {
			d := f.device(name)
			var idx []int
			for i, s := range evs {
				if s.Event.Device == d.id {
					idx = append(idx, i)
				}
			}
			if !oneKeyBatch(d.key.Public().(ed25519.PublicKey), signingContext, evs, idx) {
				t.Fatalf("seed %d: the one-key check refuses %s's %d good events", seed, name, len(idx))
			}
		}
		// So does the equation over every device's events at once; and it
		// fails when any one signature is bad (the corruptions below).
		var groups []keyGroup
		for _, name := range names {
			d := f.device(name)
			g := keyGroup{pub: d.key.Public().(ed25519.PublicKey)}
			for i, s := range evs {
				if s.Event.Device == d.id {
					g.idx = append(g.idx, i)
				}
			}
			groups = append(groups, g)
		}
		if !keysBatch(groups, signingContext, evs) {
			t.Fatalf("seed %d: the many-key check refuses %d good events of %d devices", seed, len(evs), len(groups))
		}
		bad := slices.Clone(evs)
		c := corruptions[int(seed)%(len(corruptions)-1)] // not "unknown device": the groups name the keys
		c.do(f, &bad[f.rng.IntN(len(bad))])
		if keysBatch(groups, signingContext, bad) {
			t.Errorf("seed %d: the many-key check passes a batch with a %s corruption", seed, c.name)
		}
		// Corrupt a few events in a seeded way; sometimes none of one device.
		for k := range 1 + int(seed%4) {
			i := f.rng.IntN(len(evs))
			c := corruptions[(int(seed)+k)%len(corruptions)]
			c.do(f, &evs[i])
		}
		errs := VerifyBatch(evs, f.keys)
		for i, s := range evs {
			pub, ok := f.keys(s.Event.Device)
			var want error
			if !ok {
				want = fmt.Errorf("unknown")
			} else {
				want = s.Verify(pub)
			}
			if (errs[i] == nil) != (want == nil) {
				t.Errorf("seed %d event %d: VerifyBatch says %v, Verify says %v", seed, i, errs[i], want)
			}
			if errs[i] != nil && ReasonOf(errs[i]) != BadSignature {
				t.Errorf("seed %d event %d: %v, want bad_signature", seed, i, errs[i])
			}
		}
	}
}

func countErrs(errs []error) int {
	n := 0
	for _, err := range errs {
		if err != nil {
			n++
		}
	}
	return n
}

// BenchmarkVerifyBatch measures signature checking of one device's batch
// (the usual push) and of a batch mixed from five devices.
func BenchmarkVerifyBatch(b *testing.B) {
	for _, devices := range []int{1, 5} {
		b.Run(fmt.Sprintf("devices=%d", devices), func(b *testing.B) {
			f := newFixture(b, 7)
			var evs []Signed
			for i := range 250 {
				evs = append(evs, f.emit(fmt.Sprint("d", i%devices), f.test("", "", 100, 12)))
			}
			b.ResetTimer()
			for range b.N {
				if errs := VerifyBatch(evs, f.keys); errs[0] != nil {
					b.Fatal(errs[0])
				}
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(evs)), "ns/event")
		})
	}
}
