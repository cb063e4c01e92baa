package server

import (
	"fmt"
	"testing"

	"tamp/internal/ledger"
)

func entry(device string, seq, prev uint64) *ledger.Event {
	return &ledger.Event{Device: device, DeviceSeq: seq, PrevDeviceSeq: prev}
}

func gapsOf(d *deviceSeqs) string {
	var s string
	for _, m := range d.missing() {
		s += fmt.Sprintf("%s:%d-%d ", m.GetDeviceId(), m.GetAfterDeviceSeq(), m.GetThroughDeviceSeq())
	}
	return s
}

// What a project lacks of a device's entries does not depend on the order
// its entries arrived in; an entry offered and not accepted is not asked
// for; each gap names the highest entry held below it.
func TestDeviceSeqGaps(t *testing.T) {
	d := newDeviceSeqs()
	steps := []struct {
		e      *ledger.Event
		offer  bool
		opened bool
		want   string
	}{
		{e: entry("a", 35, 0), want: ""},
		{e: entry("a", 39, 38), opened: true, want: "a:35-38 "},
		{e: entry("b", 2, 1), opened: true, want: "a:35-38 b:0-1 "},
		{e: entry("a", 38, 36), opened: true, want: "a:35-36 b:0-1 "},
		{e: entry("b", 1, 0), offer: true, want: "a:35-36 "}, // b's 1 was offered and refused
		{e: entry("b", 3, 1), want: "a:35-36 "},              // names the refused entry: no gap
		{e: entry("a", 36, 35), want: ""},
		{e: entry("a", 37, 36), want: ""}, // late, out of order: no harm
		{e: entry("a", 41, 40), opened: true, want: "a:39-40 "},
	}
	for i, s := range steps {
		if s.offer {
			d.offer(s.e)
		} else if got := d.hold(s.e); got != s.opened {
			t.Errorf("step %d: hold(%s %d after %d) opened = %v, want %v", i, s.e.Device, s.e.DeviceSeq, s.e.PrevDeviceSeq, got, s.opened)
		}
		if got := gapsOf(d); got != s.want {
			t.Errorf("step %d: missing %q, want %q", i, got, s.want)
		}
	}
	if !d.holds("a", 37) || d.holds("a", 40) {
		t.Error("holds: wrong sequence numbers")
	}
}

// A reply lists at most maxMissing gaps.
func TestDeviceSeqGapsBounded(t *testing.T) {
	d := newDeviceSeqs()
	for i := range uint64(maxMissing + 20) {
		d.hold(entry("a", 2*i+2, 2*i+1))
	}
	if n := len(d.missing()); n != maxMissing {
		t.Errorf("missing lists %d gaps, want %d", n, maxMissing)
	}
}
