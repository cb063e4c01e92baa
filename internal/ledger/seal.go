package ledger

import (
	"crypto/ed25519"
	"fmt"

	voi "github.com/oasisprotocol/curve25519-voi/primitives/ed25519"
	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	pb "tamp/internal/gen/tamp/v1"
)

// signingContext is prefixed to the body before signing, so a signature
// over an event can never be mistaken for one over anything else.
const signingContext = "tamp.v1.EventBody\x00"

// MaxEventBytes is the largest encoded event accepted.
const MaxEventBytes = 256 << 10

// Signed is an event with the exact bytes its device signed.
type Signed struct {
	Event     Event
	Body      []byte // deterministic protobuf encoding of the body, as signed
	Signature []byte // Ed25519 over signingContext || Body
}

var deterministic = proto.MarshalOptions{Deterministic: true}

// EncodeBody returns the canonical bytes of e: the deterministic protobuf
// encoding of its body.
func EncodeBody(e Event) ([]byte, error) {
	b, err := ToProto(e)
	if err != nil {
		return nil, err
	}
	return deterministic.Marshal(b)
}

// Seal checks e as a new entry (Validate, Admit), encodes it canonically
// and signs it with the device key. The Signed it returns holds the event
// as decoded from the signed body, not e itself: the value every replica
// decodes from the same bytes (an empty list becomes nil, a time is cut to
// the microsecond), so the device's view is built from what the others
// hold. Validate runs on e and again, with Admit, on the decoded event, as
// a replica runs them. It returns a *Rejection when the event breaks a rule.
func Seal(e Event, key ed25519.PrivateKey) (Signed, error) {
	if err := Validate(e); err != nil {
		return Signed{}, err
	}
	body, err := EncodeBody(e)
	if err != nil {
		return Signed{}, fmt.Errorf("ledger: seal %s: %w", e.ID, err)
	}
	if len(body) > MaxEventBytes {
		return Signed{}, reject(Malformed, "", fmt.Sprintf("the event encodes to %d bytes, above the limit of %d", len(body), MaxEventBytes))
	}
	d, err := decodeEvent(body)
	if err != nil {
		return Signed{}, fmt.Errorf("ledger: seal %s: decode the body: %w", e.ID, err)
	}
	if err := Validate(d); err != nil {
		return Signed{}, err
	}
	if err := admit(d, body); err != nil {
		return Signed{}, err
	}
	return Signed{Event: d, Body: body, Signature: sign(key, signed(body))}, nil
}

// sign is Ed25519 (RFC 8032), which is deterministic: curve25519-voi's
// signer gives the standard library's signature bytes (a test holds them
// equal) in about 60 % of its time, which a recording waits for.
func sign(key ed25519.PrivateKey, msg []byte) []byte {
	return voi.Sign(voi.PrivateKey(key), msg)
}

func signed(body []byte) []byte {
	return append([]byte(signingContext), body...)
}

// Bytes returns the event's envelope encoding: its stored form, and the
// "event bytes" of the hash chain. It is the deterministic protobuf
// encoding of the Event message, written out by hand: body (field 1) then
// signature (field 2), each omitted when empty; a test holds it equal to
// the marshaller's.
func (s Signed) Bytes() []byte {
	n := 0
	if len(s.Body) > 0 {
		n += 1 + protowire.SizeBytes(len(s.Body))
	}
	if len(s.Signature) > 0 {
		n += 1 + protowire.SizeBytes(len(s.Signature))
	}
	b := make([]byte, 0, n)
	if len(s.Body) > 0 {
		b = protowire.AppendTag(b, 1, protowire.BytesType)
		b = protowire.AppendBytes(b, s.Body)
	}
	if len(s.Signature) > 0 {
		b = protowire.AppendTag(b, 2, protowire.BytesType)
		b = protowire.AppendBytes(b, s.Signature)
	}
	return b
}

// Proto returns the envelope as it travels.
func (s Signed) Proto() *pb.Event { return &pb.Event{Body: s.Body, Signature: s.Signature} }

// Signatures are verified under the rules of ZIP 215, with which single and
// batch verification give the same answer for every signature (the
// standard library's cofactorless check can disagree with any batch check
// on crafted signatures, which would let one replica accept what another
// refuses). Every signature Ed25519 signing produces verifies under them.
var verifyOptions = &voi.Options{Verify: voi.VerifyOptionsZIP_215}

// Verify checks the signature with the device's public key. It returns a
// *Rejection with BadSignature when it does not verify.
func (s Signed) Verify(pub ed25519.PublicKey) error {
	if len(pub) != ed25519.PublicKeySize {
		return reject(BadSignature, "device_id", "no valid public key is known for device "+s.Event.Device)
	}
	if !voi.VerifyWithOptions(voi.PublicKey(pub), signed(s.Body), s.Signature, verifyOptions) {
		return s.badSignature()
	}
	return nil
}

func (s Signed) badSignature() error {
	return reject(BadSignature, "signature", fmt.Sprintf("the signature of event %s does not verify with device %s's key", s.Event.ID, s.Event.Device))
}

// VerifyBatch checks the signatures of many events at once, several times
// faster than one by one when all are good; keys gives each device's key.
// It returns one error per event, nil where the signature verifies, with the
// same answers Verify gives. Each device's events are checked together
// (oneKeyBatch); the events of a device whose batch fails go through
// curve25519-voi's batch verifier, which tells which signatures are bad.
func VerifyBatch(evs []Signed, keys KeyFunc) []error {
	errs := make([]error, len(evs))
	var devices []string
	byDevice := map[string][]int{}
	for i, s := range evs {
		d := s.Event.Device
		if _, ok := byDevice[d]; !ok {
			devices = append(devices, d)
		}
		byDevice[d] = append(byDevice[d], i)
	}
	// Every device's events in one equation first: a pulled chunk mixes a
	// crew's devices, and one equation costs less per signature than one
	// per device. Only when it fails are the devices checked one by one.
	type keyed struct {
		group keyGroup
		x     *voi.ExpandedPublicKey
	}
	var known []keyed
	for _, d := range devices {
		is := byDevice[d]
		pub, ok := keys(d)
		var x *voi.ExpandedPublicKey
		if ok && len(pub) == ed25519.PublicKeySize {
			x, _ = voi.NewExpandedPublicKey(voi.PublicKey(pub))
		}
		if x == nil {
			for _, i := range is {
				errs[i] = reject(BadSignature, "device_id", "device "+d+" is not enrolled or its key is not valid")
			}
			continue
		}
		known = append(known, keyed{group: keyGroup{pub: pub, idx: is}, x: x})
	}
	if len(known) > 1 {
		groups := make([]keyGroup, len(known))
		for i, k := range known {
			groups[i] = k.group
		}
		if keysBatch(groups, signingContext, evs) {
			return errs
		}
	}
	var bv *voi.BatchVerifier
	var idx []int
	for _, k := range known {
		pub, is, x := k.group.pub, k.group.idx, k.x
		if oneKeyBatch(pub, signingContext, evs, is) {
			continue
		}
		if bv == nil {
			bv = voi.NewBatchVerifier()
		}
		for _, i := range is {
			bv.AddExpandedWithOptions(x, signed(evs[i].Body), evs[i].Signature, verifyOptions)
			idx = append(idx, i)
		}
	}
	if len(idx) == 0 {
		return errs
	}
	_, valid := bv.Verify(nil)
	for j, i := range idx {
		if !valid[j] {
			errs[i] = evs[i].badSignature()
		}
	}
	return errs
}

// Decode decodes an envelope's bytes without verifying its signature.
func Decode(envelope []byte) (Signed, error) {
	if len(envelope) > MaxEventBytes+ed25519.SignatureSize+16 {
		return Signed{}, reject(Malformed, "", fmt.Sprintf("the event is %d bytes, above the limit", len(envelope)))
	}
	var m pb.Event
	if err := proto.Unmarshal(envelope, &m); err != nil {
		return Signed{}, &Rejection{Reason: Malformed, Detail: "the event does not decode", Err: err}
	}
	return FromEnvelope(&m)
}

// SplitEnvelope returns the body and signature of stored envelope bytes
// as they travel, without decoding the body: what a server sends of an
// entry on a pull (the device decodes and verifies it). It returns a
// Malformed *Rejection for bytes that are not an envelope.
func SplitEnvelope(envelope []byte) (*pb.Event, error) {
	var m pb.Event
	for b := envelope; len(b) > 0; {
		num, typ, n := protowire.ConsumeTag(b)
		if n < 0 || typ != protowire.BytesType || (num != 1 && num != 2) {
			return nil, reject(Malformed, "", "the stored bytes are not an event envelope")
		}
		v, m2 := protowire.ConsumeBytes(b[n:])
		if m2 < 0 {
			return nil, reject(Malformed, "", "the stored bytes are not an event envelope")
		}
		if num == 1 {
			m.Body = v
		} else {
			m.Signature = v
		}
		b = b[n+m2:]
	}
	return &m, nil
}

// FromEnvelope decodes a received envelope's body without verifying its
// signature.
func FromEnvelope(m *pb.Event) (Signed, error) {
	if len(m.GetBody()) > MaxEventBytes {
		return Signed{}, reject(Malformed, "body", fmt.Sprintf("the body is %d bytes, above the limit of %d", len(m.GetBody()), MaxEventBytes))
	}
	if len(m.GetSignature()) != ed25519.SignatureSize {
		return Signed{}, reject(BadSignature, "signature", fmt.Sprintf("a signature is %d bytes, not %d", ed25519.SignatureSize, len(m.GetSignature())))
	}
	e, err := decodeEvent(m.GetBody())
	if err != nil {
		return Signed{}, err
	}
	return Signed{Event: e, Body: m.GetBody(), Signature: m.GetSignature()}, nil
}

// KeyFunc returns a device's public key, and whether it is known.
type KeyFunc func(device string) (ed25519.PublicKey, bool)

// Open decodes an envelope, verifies its signature with the key keys gives
// for its device, and validates it: what a replica does with every event it
// receives. Errors are *Rejection values.
func Open(m *pb.Event, keys KeyFunc) (Signed, error) {
	s, err := FromEnvelope(m)
	if err != nil {
		return Signed{}, err
	}
	pub, ok := keys(s.Event.Device)
	if !ok {
		return Signed{}, reject(BadSignature, "device_id", "device "+s.Event.Device+" is not enrolled")
	}
	if err := s.Verify(pub); err != nil {
		return Signed{}, err
	}
	if err := Validate(s.Event); err != nil {
		return Signed{}, err
	}
	return s, nil
}
