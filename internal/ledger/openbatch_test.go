package ledger

import (
	"crypto/ed25519"
	"fmt"
	"testing"

	pb "tamp/internal/gen/tamp/v1"
)

// OpenBatch gives, event by event, the answer Open gives: the same event
// where Open accepts, and the same reason and field where it refuses
// (a bad signature, an unknown device, a body that does not decode, an
// event that breaks a rule), on chunks large enough to be split.
func TestOpenBatchAgreesWithOpen(t *testing.T) {
	for _, n := range []int{1, 60, 700} {
		f := newFixture(t, uint64(70+n))
		names := []string{"ann", "bob", "cy"}
		var ms []*pb.Event
		for i := range n {
			ms = append(ms, f.emit(names[i%3], f.test("", "", 100+float64(i%20), 12)).Proto())
		}
		bad := func(i int) *pb.Event { return ms[(i*37)%n] }
		if n > 1 {
			m := bad(1)
			m.Body = append([]byte{}, m.Body...)
			m.Body[len(m.Body)/2] ^= 1                                        // the signature no longer verifies, or the body no longer decodes
			ms[(2*37)%n] = f.emit("mallory", f.test("", "", 102, 12)).Proto() // a device keys does not know
			m = bad(3)
			m.Signature = append([]byte{}, m.Signature...)
			m.Signature[40] ^= 1
			// An event that breaks a rule, signed by an enrolled device.
			d := f.device("ann")
			d.seq++
			e := Event{ID: "not-a-uuid", Project: f.project, Author: d.user, Device: d.id, DeviceSeq: d.seq,
				HLC: d.clock.Now(), DeviceTime: f.wall, Kind: f.test("", "", 101, 12)}
			body, err := EncodeBody(e)
			if err != nil {
				t.Fatal(err)
			}
			ms[(4*37)%n] = &pb.Event{Body: body, Signature: ed25519.Sign(d.key, signed(body))}
			bad(5).Signature = bad(5).Signature[:10]
		}
		keys := func(dev string) (ed25519.PublicKey, bool) {
			if dev == f.device("mallory").id {
				return nil, false
			}
			return f.keys(dev)
		}
		out, errs := OpenBatch(ms, keys)
		refused := 0
		for i, m := range ms {
			want, wantErr := Open(m, keys)
			if (errs[i] == nil) != (wantErr == nil) {
				t.Fatalf("n=%d event %d: OpenBatch says %v, Open says %v", n, i, errs[i], wantErr)
			}
			if wantErr != nil {
				refused++
				if got, w := fmt.Sprint(errs[i]), fmt.Sprint(wantErr); got != w {
					t.Errorf("n=%d event %d: OpenBatch says %q, Open says %q", n, i, got, w)
				}
				continue
			}
			if out[i].Event.ID != want.Event.ID || string(out[i].Body) != string(want.Body) || string(out[i].Signature) != string(want.Signature) {
				t.Errorf("n=%d event %d: OpenBatch gives %s, Open %s", n, i, out[i].Event.ID, want.Event.ID)
			}
		}
		if n > 1 && refused != 5 {
			t.Errorf("n=%d: %d events refused, want the 5 spoiled", n, refused)
		}
	}
}
