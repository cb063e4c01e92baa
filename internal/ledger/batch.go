package ledger

import (
	"crypto/ed25519"
	"crypto/rand"
	"crypto/sha512"

	"github.com/oasisprotocol/curve25519-voi/curve"
	"github.com/oasisprotocol/curve25519-voi/curve/scalar"
)

// oneKeyBatch reports whether the signatures of evs[i] for i in idx, over
// the message context + body, all verify with pub (they are one device's
// events), checking them at once under the rules
// of ZIP 215: with k_i = SHA-512(R_i || A || message_i) and random 128-bit
// z_i, the cofactored batch equation
//
//	[8]([-sum z_i s_i]B + sum [z_i]R_i + [sum z_i k_i]A) = 0
//
// holds for valid signatures and, but with probability 2^-128, for no set
// holding an invalid one. A general batch verifier has a term z_i k_i A_i
// per signature; with one key they add up to one term, which halves the
// multiscalar multiplication. A and R may be non-canonical encodings, s must
// be below the group order: ZIP 215's choices, which curve25519-voi's
// verifier makes too. False means at least one signature does not verify or
// could not be read; the caller then finds which with the general verifier.
func oneKeyBatch(pub ed25519.PublicKey, context string, evs []Signed, idx []int) bool {
	n := len(idx)
	if n == 0 || len(pub) != ed25519.PublicKeySize {
		return false
	}
	var cA curve.CompressedEdwardsY
	if _, err := cA.SetBytes(pub); err != nil {
		return false
	}
	var A curve.EdwardsPoint
	if _, err := A.SetCompressedY(&cA); err != nil {
		return false
	}
	zs := make([]byte, 16*n)
	if _, err := rand.Read(zs); err != nil {
		return false
	}
	coeffs := make([]scalar.Scalar, n+2)
	rs := make([]curve.EdwardsPoint, n)
	scalars := make([]*scalar.Scalar, n+2)
	points := make([]*curve.EdwardsPoint, n+2)
	bCoeff, aCoeff := &coeffs[0], &coeffs[1]
	scalars[0], points[0] = bCoeff, curve.ED25519_BASEPOINT_POINT
	scalars[1], points[1] = aCoeff, &A

	h := sha512.New()
	var digest [sha512.Size]byte
	var z32 [32]byte
	var s, k, t scalar.Scalar
	for i, j := range idx {
		e := &evs[j]
		sig := e.Signature
		if len(sig) != ed25519.SignatureSize || !scalar.ScMinimalVartime(sig[32:]) {
			return false
		}
		var cR curve.CompressedEdwardsY
		if _, err := cR.SetBytes(sig[:32]); err != nil {
			return false
		}
		if _, err := rs[i].SetCompressedY(&cR); err != nil {
			return false
		}
		if _, err := s.SetBytesModOrder(sig[32:]); err != nil {
			return false
		}
		h.Reset()
		h.Write(sig[:32])
		h.Write(pub)
		h.Write([]byte(context))
		h.Write(e.Body)
		if _, err := k.SetBytesModOrderWide(h.Sum(digest[:0])); err != nil {
			return false
		}
		z := &coeffs[2+i]
		copy(z32[:16], zs[16*i:16*i+16])
		if _, err := z.SetBytesModOrder(z32[:]); err != nil {
			return false
		}
		bCoeff.Add(bCoeff, t.Mul(z, &s))
		aCoeff.Add(aCoeff, t.Mul(z, &k))
		scalars[2+i], points[2+i] = z, &rs[i]
	}
	bCoeff.Neg(bCoeff)
	var sum curve.EdwardsPoint
	sum.MultiscalarMulVartime(scalars, points)
	return sum.IsSmallOrder()
}
