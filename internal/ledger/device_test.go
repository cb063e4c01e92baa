package ledger

import (
	"crypto/ed25519"
	"testing"
	"time"
)

// Entries a revoked device made after those the ledger held at its
// revocation have no effect, whichever order the revocation and the entries
// arrive in and whatever time they claim; entries held before it stand
// (issue 10, rule 5).
func TestRevocationTakesLaterEntriesOutOfEffect(t *testing.T) {
	f := newFixture(t, 11)
	setup := f.emit("admin", f.setUp())
	spec := f.emit("qa", f.spec())
	ref := f.emit("qa", f.reference())
	rk, sk := ref.Event.Kind.(*ReferenceAdded), spec.Event.Kind.(*SpecDefined)
	before := f.emit("lost tablet", f.test(rk.ID, sk.ID, 104, 13))
	cut := f.wall.Add(time.Second)
	lost := f.device("lost tablet")
	enrolled := f.emit("server", &DeviceEnrolled{DeviceID: lost.id, UserID: lost.user, PublicKey: lost.key.Public().(ed25519.PublicKey), Enrolled: f.wall})
	revoked := f.emit("server", &DeviceRevoked{DeviceID: lost.id, Effective: cut, RevokedBy: "user-admin", Reason: "tablet lost",
		LastDeviceSeq: before.Event.DeviceSeq})
	after := f.emit("lost tablet", f.test(rk.ID, sk.ID, 90, 20))
	voidAfter := f.emit("lost tablet", &TestVoided{TestID: before.Event.Kind.(*TestRecorded).TestID, Reason: "not mine"})
	// A stolen key backdates an entry to before the revocation.
	back := voidAfter.Event
	back.ID, back.DeviceSeq, back.HLC = f.id(true), voidAfter.Event.DeviceSeq+1, HLC{Wall: before.Event.HLC.Wall + 1}
	backdated, err := Seal(back, lost.key)
	if err != nil {
		t.Fatal(err)
	}

	all := []Signed{setup, spec, ref, before, enrolled, revoked, after, voidAfter, backdated}
	var digests []Hash
	for _, order := range [][]int{{0, 1, 2, 3, 4, 5, 6, 7, 8}, {8, 7, 6, 0, 1, 2, 3, 4, 5}, {5, 7, 3, 8, 6, 2, 1, 0, 4}} {
		p := NewProjection(f.project)
		for _, i := range order {
			apply(t, p, all[i])
		}
		if _, ok := p.Test(after.Event.Kind.(*TestRecorded).TestID); ok {
			t.Errorf("order %v: a test signed after the revocation is in effect", order)
		}
		tt, ok := p.Test(before.Event.Kind.(*TestRecorded).TestID)
		if !ok || tt.Voided() {
			t.Errorf("order %v: the test held before the revocation: held %v, voided by a later or backdated entry %v", order, ok, ok && tt.Voided())
		}
		for _, late := range []Signed{after, backdated} {
			if err := p.SignedAfterRevocation(&late.Event); err == nil || err.Field != "signed_after_revocation" {
				t.Errorf("order %v: SignedAfterRevocation(entry %d) = %v", order, late.Event.DeviceSeq, err)
			}
		}
		if err := p.SignedAfterRevocation(&before.Event); err != nil {
			t.Errorf("order %v: SignedAfterRevocation(before) = %v", order, err)
		}
		if d, ok := p.Device(lost.id); !ok || d.Revoked == nil || !d.Revoked.Effective.Equal(cut) {
			t.Errorf("order %v: device %+v", order, d)
		}
		digests = append(digests, p.Digest())
	}
	for i := range digests {
		if digests[i] != digests[0] {
			t.Errorf("digest of order %d differs from order 0", i)
		}
	}
}
