package ledger

import (
	"encoding/binary"
	"fmt"
	"math"
	"slices"
	"time"
)

// Device is what a project's ledger says of an enrolled device: its key as
// the server introduced it, and its revocation, if any.
type Device struct {
	DeviceEnrolled
	// Role is the user's role on the project as the latest introduction of
	// the device gives it, at RoleHLC.
	Role    string `json:",omitempty"`
	RoleHLC HLC    `json:"-"`
	// Roles are every role an introduction of the device recorded, in
	// event order: the user's role at a time is the latest at or before it.
	Roles []RoleChange `json:"-"`
	// Revoked is the revocation that cuts the device off earliest (the
	// lowest LastDeviceSeq); nil while it stands.
	Revoked *DeviceRevoked `json:",omitempty"`
	// Revocations lists the events that revoked it.
	Revocations []string `json:",omitempty"`
}

// cutoff is the highest device sequence number of the device's entries in
// effect: all of them while it stands.
func (d *Device) cutoff() uint64 {
	if d == nil || d.Revoked == nil {
		return math.MaxUint64
	}
	return d.Revoked.LastDeviceSeq
}

func buildDevice(evs []*Event) *Device {
	var d *Device
	for _, e := range evs {
		switch k := e.Kind.(type) {
		case *DeviceEnrolled: // evs are in event order: the latest introduction gives the role
			if d == nil {
				d = &Device{}
			}
			if d.DeviceID == "" {
				d.DeviceEnrolled = *k
			}
			if k.Role != "" {
				d.Role, d.RoleHLC = k.Role, e.HLC
				d.Roles = append(d.Roles, RoleChange{Role: k.Role, HLC: e.HLC, EventID: e.ID})
			}
		case *DeviceRevoked:
			if d == nil {
				d = &Device{}
			}
			d.Revocations = append(d.Revocations, e.ID)
			if d.Revoked == nil || k.LastDeviceSeq < d.Revoked.LastDeviceSeq {
				r := *k
				d.Revoked = &r
			}
		}
	}
	return d
}

// ServerMade reports whether only the server makes entries of kind k,
// signed with its own key (its descriptor's ServerMade): a device's
// introduction and its revocation.
func ServerMade(k Kind) bool {
	d := descriptorOf(k)
	return d != nil && d.ServerMade
}

// Device returns what the ledger says of a device.
func (p *Projection) Device(id string) (*Device, bool) { d, ok := p.devices[id]; return d, ok }

// SignedAfterRevocation returns a PermissionDenied rejection when e's device
// was revoked and e is numbered above the last of the device's entries the
// project's ledger held then: such an entry has no effect on any replica,
// and the server refuses it on push whoever relays it. The device's own
// device entries are exempt.
func (p *Projection) SignedAfterRevocation(e *Event) *Rejection {
	d, ok := p.devices[e.Device]
	if !ok || e.DeviceSeq <= d.cutoff() {
		return nil
	}
	switch e.Kind.(type) {
	case *DeviceEnrolled, *DeviceRevoked:
		return nil
	}
	return reject(PermissionDenied, "signed_after_revocation", fmt.Sprintf("device %s was revoked at %s, when the ledger held its entries up to number %d; entry %s is number %d",
		e.Device, d.Revoked.Effective.Format(time.RFC3339), d.Revoked.LastDeviceSeq, e.ID, e.DeviceSeq))
}

// LatestRole returns the role on the project that the latest introduction
// of any of user's devices records, or "".
func (p *Projection) LatestRole(user string) string {
	var role string
	var at HLC
	for _, d := range p.devices {
		if d.UserID == user && d.Role != "" && (role == "" || d.RoleHLC.Compare(at) > 0) {
			role, at = d.Role, d.RoleHLC
		}
	}
	return role
}

// RoleChange is a role an introduction recorded, from its time on.
type RoleChange struct {
	Role    string
	HLC     HLC
	EventID string
}

// RoleAt returns the user's role on the project at time at, as the latest
// introduction of any of the user's devices at or before it records it,
// with that introduction's event id; "" when none does.
func (p *Projection) RoleAt(user string, at HLC) (role, eventID string) {
	var best HLC
	for _, d := range p.devices {
		if d.UserID != user {
			continue
		}
		for _, r := range d.Roles {
			if r.HLC.Compare(at) <= 0 && (role == "" || r.HLC.Compare(best) > 0) {
				role, eventID, best = r.Role, r.EventID, r.HLC
			}
		}
	}
	return role, eventID
}

// Devices returns what the ledger says of every device, by id.
func (p *Projection) Devices() []*Device { return sorted(p.devices) }

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
// a server that lost it: the context, a zero byte, the server's own device
// id (so a proof serves one server only), a zero byte, the device id and
// the time in microseconds as 8 big-endian bytes.
func ResumeProof(server, device string, micros int64) []byte {
	b := append([]byte(resumeContext), 0)
	b = append(b, server...)
	b = append(b, 0)
	b = append(b, device...)
	return binary.BigEndian.AppendUint64(b, uint64(micros))
}
