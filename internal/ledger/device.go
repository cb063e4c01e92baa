package ledger

import (
	"encoding/binary"
	"fmt"
	"slices"
	"time"
)

// Device is what a project's ledger says of an enrolled device: its key as
// the server introduced it, and its revocation, if any.
type Device struct {
	DeviceEnrolled
	// Revoked is the earliest revocation of the device; nil while it stands.
	Revoked *DeviceRevoked `json:",omitempty"`
	// Revocations lists the events that revoked it.
	Revocations []string `json:",omitempty"`
}

func (d *Device) revokedAt() time.Time {
	if d == nil || d.Revoked == nil {
		return time.Time{}
	}
	return d.Revoked.Effective
}

func buildDevice(evs []*Event) *Device {
	var d *Device
	for _, e := range evs {
		switch k := e.Kind.(type) {
		case *DeviceEnrolled:
			if d == nil {
				d = &Device{}
			}
			if d.DeviceID == "" {
				d.DeviceEnrolled = *k
			}
		case *DeviceRevoked:
			if d == nil {
				d = &Device{}
			}
			d.Revocations = append(d.Revocations, e.ID)
			if d.Revoked == nil || k.Effective.Before(d.Revoked.Effective) {
				r := *k
				d.Revoked = &r
			}
		}
	}
	return d
}

// Device returns what the ledger says of a device.
func (p *Projection) Device(id string) (*Device, bool) { d, ok := p.devices[id]; return d, ok }

// SignedAfterRevocation returns a PermissionDenied rejection when e's device
// was revoked and e's hybrid time is after the revocation's effective time:
// such an entry has no effect on any replica, and the server refuses it on
// push whoever relays it. A device's own revocation entries are exempt.
func (p *Projection) SignedAfterRevocation(e *Event) *Rejection {
	d, ok := p.devices[e.Device]
	if !ok || d.Revoked == nil {
		return nil
	}
	switch e.Kind.(type) {
	case *DeviceEnrolled, *DeviceRevoked:
		return nil
	}
	if e.HLC.Wall <= d.Revoked.Effective.UnixMicro() {
		return nil
	}
	return reject(PermissionDenied, "signed_after_revocation", fmt.Sprintf("device %s was revoked from %s; entry %s was signed after that",
		e.Device, d.Revoked.Effective.Format(time.RFC3339), e.ID))
}

// sweepRevoked takes out of effect the held events a device signed after
// its revocation, and puts back any that no longer are, recomputing the
// records they are about. It runs only when a device's revocation time
// changes, which is rare.
func (p *Projection) sweepRevoked(device string) {
	var changed []*Event
	for _, s := range p.events {
		e := &s.Event
		if e.Device != device {
			continue
		}
		out := p.SignedAfterRevocation(e) != nil
		if out == p.revokedOut[e.ID] {
			continue
		}
		key := RecordID(e.Kind)
		tr, retest := e.Kind.(*TestRecorded)
		retest = retest && tr.RetestOf != ""
		if out {
			p.revokedOut[e.ID] = true
			p.byRecord[key] = slices.DeleteFunc(p.byRecord[key], func(o *Event) bool { return o.ID == e.ID })
			if retest {
				delete(p.retests[tr.RetestOf], tr.TestID)
			}
		} else {
			delete(p.revokedOut, e.ID)
			p.byRecord[key] = append(p.byRecord[key], e)
			if retest {
				if p.retests[tr.RetestOf] == nil {
					p.retests[tr.RetestOf] = map[string]bool{}
				}
				p.retests[tr.RetestOf][tr.TestID] = true
			}
		}
		changed = append(changed, e)
	}
	slices.SortFunc(changed, order)
	for _, e := range changed {
		p.recompute(RecordID(e.Kind), e.Kind)
	}
}

// resumeContext is what a device signs to prove it holds its key when it
// asks a server for a new token.
const resumeContext = "tamp.v1.ResumeDevice"

// ResumeProof returns the bytes a device signs to resume its enrolment with
// a server that lost it: the context, a zero byte, the device id and the
// time in microseconds as 8 big-endian bytes.
func ResumeProof(device string, micros int64) []byte {
	b := append([]byte(resumeContext), 0)
	b = append(b, device...)
	return binary.BigEndian.AppendUint64(b, uint64(micros))
}
