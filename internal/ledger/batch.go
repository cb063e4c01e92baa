package ledger

import (
	"crypto/ed25519"
	"crypto/rand"
	"crypto/sha512"

	"github.com/oasisprotocol/curve25519-voi/curve"
	"github.com/oasisprotocol/curve25519-voi/curve/scalar"
)

// keyGroup is one device's events in a batch: its public key and the
// indices of its events.
type keyGroup struct {
	pub ed25519.PublicKey
	idx []int
}

// oneKeyBatch reports whether the signatures of evs[i] for i in idx, over
// the message context + body, all verify with pub (they are one device's
// events): keysBatch with one group.
func oneKeyBatch(pub ed25519.PublicKey, context string, evs []Signed, idx []int) bool {
	return keysBatch([]keyGroup{{pub: pub, idx: idx}}, context, evs)
}

// keysBatch reports whether the signatures of every group's events, over
// the message context + body, all verify with the group's key, checking
// them at once under the rules of ZIP 215: with k_i = SHA-512(R_i || A_i ||
// message_i) and random 128-bit z_i, the cofactored batch equation
//
//	[8]([-sum z_i s_i]B + sum [z_i]R_i + sum_A [sum_{i of A} z_i k_i]A) = 0
//
// holds for valid signatures and, but with probability 2^-128, for no set
// holding an invalid one. A general batch verifier has a term z_i k_i A_i
// per signature; the events of one key add up to one term, which halves
// the multiscalar multiplication, and one equation over all the keys of a
// pulled chunk costs less per signature than one per key (the
// multiplication's cost per point falls as it grows). A and R may be
// non-canonical encodings, s must be below the group order: ZIP 215's
// choices, which curve25519-voi's verifier makes too. False means at least
// one signature does not verify or could not be read; the caller then
// finds which, key by key.
func keysBatch(groups []keyGroup, context string, evs []Signed) bool {
	n := 0
	for _, g := range groups {
		if len(g.pub) != ed25519.PublicKeySize {
			return false
		}
		n += len(g.idx)
	}
	if n == 0 {
		return false
	}
	keys := len(groups)
	zs := make([]byte, 16*n)
	if _, err := rand.Read(zs); err != nil {
		return false
	}
	coeffs := make([]scalar.Scalar, 1+keys+n)
	as := make([]curve.EdwardsPoint, keys)
	rs := make([]curve.EdwardsPoint, n)
	scalars := make([]*scalar.Scalar, 1+keys+n)
	points := make([]*curve.EdwardsPoint, 1+keys+n)
	bCoeff := &coeffs[0]
	scalars[0], points[0] = bCoeff, curve.ED25519_BASEPOINT_POINT

	h := sha512.New()
	var digest [sha512.Size]byte
	var z32 [32]byte
	var s, k, t scalar.Scalar
	at := 0 // the signature's place among all
	for g, grp := range groups {
		var cA curve.CompressedEdwardsY
		if _, err := cA.SetBytes(grp.pub); err != nil {
			return false
		}
		if _, err := as[g].SetCompressedY(&cA); err != nil {
			return false
		}
		aCoeff := &coeffs[1+g]
		scalars[1+g], points[1+g] = aCoeff, &as[g]
		for _, j := range grp.idx {
			e := &evs[j]
			sig := e.Signature
			if len(sig) != ed25519.SignatureSize || !scalar.ScMinimalVartime(sig[32:]) {
				return false
			}
			var cR curve.CompressedEdwardsY
			if _, err := cR.SetBytes(sig[:32]); err != nil {
				return false
			}
			if _, err := rs[at].SetCompressedY(&cR); err != nil {
				return false
			}
			if _, err := s.SetBytesModOrder(sig[32:]); err != nil {
				return false
			}
			h.Reset()
			h.Write(sig[:32])
			h.Write(grp.pub)
			h.Write([]byte(context))
			h.Write(e.Body)
			if _, err := k.SetBytesModOrderWide(h.Sum(digest[:0])); err != nil {
				return false
			}
			z := &coeffs[1+keys+at]
			copy(z32[:16], zs[16*at:16*at+16])
			if _, err := z.SetBytesModOrder(z32[:]); err != nil {
				return false
			}
			bCoeff.Add(bCoeff, t.Mul(z, &s))
			aCoeff.Add(aCoeff, t.Mul(z, &k))
			scalars[1+keys+at], points[1+keys+at] = z, &rs[at]
			at++
		}
	}
	bCoeff.Neg(bCoeff)
	var sum curve.EdwardsPoint
	sum.MultiscalarMulVartime(scalars, points)
	return sum.IsSmallOrder()
}
