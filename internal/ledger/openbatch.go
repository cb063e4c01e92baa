package ledger

import (
	"crypto/ed25519"
	"runtime"
	"sync"

	pb "tamp/internal/gen/tamp/v1"
)

// OpenBatch is Open for many envelopes at once, as a replica receives them
// in a chunk: it decodes each, verifies the signatures together with
// VerifyBatch (several times faster than one by one), and validates each.
// errs[i] is nil where Open(ms[i], keys) would succeed, and out[i] is then
// what Open returns; otherwise errs[i] is the *Rejection Open gives. Large
// chunks are split across the cores.
func OpenBatch(ms []*pb.Event, keys KeyFunc) (out []Signed, errs []error) {
	out, errs = make([]Signed, len(ms)), make([]error, len(ms))
	const perWorker = 128 // below this a goroutine is not worth starting
	workers := min(runtime.GOMAXPROCS(0), (len(ms)+perWorker-1)/perWorker)
	if workers <= 1 {
		openBatch(ms, keys, out, errs)
		return out, errs
	}
	var wg sync.WaitGroup
	step := (len(ms) + workers - 1) / workers
	for lo := 0; lo < len(ms); lo += step {
		hi := min(len(ms), lo+step)
		wg.Go(func() { openBatch(ms[lo:hi], keys, out[lo:hi], errs[lo:hi]) })
	}
	wg.Wait()
	return out, errs
}

// openBatch is OpenBatch on one goroutine, filling out and errs.
func openBatch(ms []*pb.Event, keys KeyFunc, out []Signed, errs []error) {
	var evs []Signed // decoded, of a device with a usable key
	var at []int     // evs[j] is ms[at[j]]
	for i, m := range ms {
		s, err := FromEnvelope(m)
		if err != nil {
			errs[i] = err
			continue
		}
		pub, ok := keys(s.Event.Device)
		switch {
		case !ok:
			errs[i] = reject(BadSignature, "device_id", "device "+s.Event.Device+" is not enrolled")
		case len(pub) != ed25519.PublicKeySize:
			errs[i] = s.Verify(pub) // names the key as not valid
		default:
			out[i] = s
			evs = append(evs, s)
			at = append(at, i)
		}
	}
	for j, err := range VerifyBatch(evs, keys) {
		i := at[j]
		if err == nil {
			err = Validate(out[i].Event)
		}
		if err != nil {
			out[i], errs[i] = Signed{}, err
		}
	}
}
