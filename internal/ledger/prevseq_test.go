package ledger

import (
	"errors"
	"testing"
)

// The link to the device's previous entry in the project is signed, comes
// back from the wire as it was, and must name an earlier entry.
func TestPrevDeviceSeqSignedAndChecked(t *testing.T) {
	f := newFixture(t, 31)
	d := f.device("ann")
	e := Event{ID: f.id(true), Project: f.project, Author: d.user, Device: d.id, DeviceSeq: 39, PrevDeviceSeq: 35,
		HLC: HLC{Wall: f.wall.UnixMicro()}, DeviceTime: f.wall, Kind: f.test(f.id(true), f.id(true), 110, 12)}
	s, err := Seal(e, d.key)
	if err != nil {
		t.Fatal(err)
	}
	back, err := Decode(s.Bytes())
	if err != nil {
		t.Fatal(err)
	}
	if back.Event.PrevDeviceSeq != 35 {
		t.Errorf("PrevDeviceSeq after the wire = %d, want 35", back.Event.PrevDeviceSeq)
	}
	for _, prev := range []uint64{39, 40} {
		e.PrevDeviceSeq = prev
		var r *Rejection
		if err := Validate(e); !errors.As(err, &r) || r.Reason != InvalidField || r.Field != "prev_device_seq" {
			t.Errorf("prev_device_seq %d with device_seq 39: %v, want invalid_field on prev_device_seq", prev, err)
		}
	}
}
