package server

import (
	"cmp"
	"fmt"
	"slices"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
)

// maxMissing bounds the gaps one push response lists; maxOffered the
// entries a project remembers as offered and not accepted (beyond it, a
// gap named by a later entry is asked for once more, and the device offers
// the entry again).
const (
	maxMissing = 100
	maxOffered = 10_000
)

// devSeq names an entry by its device and device sequence number.
type devSeq struct {
	device string
	seq    uint64
}

// deviceSeqs is what a project's ledger holds of each device's entries,
// and what it lacks. Every entry names its device's previous entry in the
// project (prev_device_seq); an entry named so that the ledger does not
// hold, and that no push has offered since the state was loaded, is a gap
// the server asks devices to fill. A deviceSeqs is guarded by its
// project's mu.
type deviceSeqs struct {
	held    map[string][]uint64 // device -> the sequence numbers of its decided entries, ascending
	gaps    map[devSeq]struct{} // entries named by a later entry that the ledger lacks
	offered map[devSeq]struct{} // entries pushed and not accepted (waiting or refused) since the load
}

func newDeviceSeqs() *deviceSeqs {
	return &deviceSeqs{held: map[string][]uint64{}, gaps: map[devSeq]struct{}{}, offered: map[devSeq]struct{}{}}
}

func (d *deviceSeqs) holds(device string, seq uint64) bool {
	_, ok := slices.BinarySearch(d.held[device], seq)
	return ok
}

// hold records a decided entry, closing the gap it fills, and reports
// whether it opens one: its predecessor is neither held nor offered.
func (d *deviceSeqs) hold(e *ledger.Event) (opened bool) {
	seqs := d.held[e.Device]
	if n := len(seqs); n == 0 || seqs[n-1] < e.DeviceSeq {
		d.held[e.Device] = append(seqs, e.DeviceSeq)
	} else if i, ok := slices.BinarySearch(seqs, e.DeviceSeq); !ok {
		d.held[e.Device] = slices.Insert(seqs, i, e.DeviceSeq)
	}
	k := devSeq{e.Device, e.DeviceSeq}
	delete(d.gaps, k)
	delete(d.offered, k)
	prev := devSeq{e.Device, e.PrevDeviceSeq}
	if prev.seq == 0 || d.holds(prev.device, prev.seq) {
		return false
	}
	if _, ok := d.offered[prev]; ok {
		return false
	}
	if _, ok := d.gaps[prev]; ok {
		return false
	}
	d.gaps[prev] = struct{}{}
	return true
}

// offer records an authentic entry that a push offered and the server did
// not accept (it waits, or was refused): the ledger does not lack it
// unknowingly, so no gap is asked for.
func (d *deviceSeqs) offer(e *ledger.Event) {
	k := devSeq{e.Device, e.DeviceSeq}
	if d.holds(k.device, k.seq) {
		return
	}
	delete(d.gaps, k)
	if len(d.offered) < maxOffered {
		d.offered[k] = struct{}{}
	}
}

// missing lists the open gaps, at most maxMissing of them, by device and
// sequence number, each with the highest sequence number below it that the
// ledger holds of that device.
func (d *deviceSeqs) missing() []*pb.MissingEntries {
	if len(d.gaps) == 0 {
		return nil
	}
	keys := make([]devSeq, 0, len(d.gaps))
	for k := range d.gaps {
		keys = append(keys, k)
	}
	slices.SortFunc(keys, func(a, b devSeq) int {
		return cmp.Or(cmp.Compare(a.device, b.device), cmp.Compare(a.seq, b.seq))
	})
	out := make([]*pb.MissingEntries, 0, min(len(keys), maxMissing))
	for _, k := range keys[:min(len(keys), maxMissing)] {
		seqs := d.held[k.device]
		i, _ := slices.BinarySearch(seqs, k.seq)
		var after uint64
		if i > 0 {
			after = seqs[i-1]
		}
		out = append(out, &pb.MissingEntries{DeviceId: k.device, AfterDeviceSeq: after, ThroughDeviceSeq: k.seq})
	}
	return out
}

// missingAttr renders gaps for the log: device:after-through.
func missingAttr(ms []*pb.MissingEntries) []string {
	out := make([]string, 0, len(ms))
	for _, m := range ms {
		out = append(out, fmt.Sprintf("%s:%d-%d", m.GetDeviceId(), m.GetAfterDeviceSeq(), m.GetThroughDeviceSeq()))
	}
	return out
}
