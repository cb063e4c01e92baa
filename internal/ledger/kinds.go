package ledger

import (
	"fmt"
	"slices"
	"time"
)

// KindDescriptor says what the rest of tamp needs to know of one kind of
// event: the projection, the server's role table and its stores read it
// here rather than keeping lists of kinds of their own.
type KindDescriptor struct {
	// Name is the kind's name in snake case, as reports, the stores and the
	// role table show it: its KindName, and the name of its field in the
	// wire format's EventBody.
	Name string
	// New returns a zero value of the kind (a pointer to a new one).
	New func() Kind
	// Record returns the id of the record an event of the kind makes or
	// changes ("" for the project set-up).
	Record func(Kind) string
	// Refs returns the ids of the records an event of the kind refers to
	// (not the one it is about), so that it waits until they arrive; nil
	// for none. Empty ids are left out.
	Refs func(Kind) []string
	// Creates: an event of the kind creates the record it is about, whose
	// id then belongs to the first event that recorded it. (A set-up and
	// an equipment registration replace earlier ones instead.)
	Creates bool
	// Reference: the kind is reference data (a record that grades and
	// checks tests), which a new device pulls ahead of the chain.
	Reference bool
	// ServerMade: only the server makes entries of the kind, signed with
	// its own key; no member's device may.
	ServerMade bool
	// Roles are the project roles ("inspector", "office", "qa", "admin")
	// that may make an entry of the kind by default; none when the server
	// makes it.
	Roles []string

	// refs is Refs as an array with the empty ids in place, which the
	// projection reads on every apply without allocating.
	refs func(Kind) refList
	// validate checks an event of the kind whole and its values possible.
	validate func(Kind) error
	// rebuild recomputes the record key from its events (sorted in event
	// order) into the projection, and reports whether the tests depending
	// on the record must be rebuilt too.
	rebuild func(p *Projection, key string, evs []*Event) bool
}

// The project roles, as the descriptors name them.
const (
	roleInspector = "inspector"
	roleOffice    = "office"
	roleQA        = "qa"
	roleAdmin     = "admin"
)

// kindOf describes the kind *T in the terms of its own type; descriptor
// turns it into a KindDescriptor.
type kindOf[T any, K interface {
	*T
	Kind
	validate() error
}] struct {
	record     func(K) string
	refs       func(K) refList // nil for none
	creates    bool
	reference  bool
	serverMade bool
	roles      []string
	rebuild    func(p *Projection, key string, evs []*Event) bool
}

func (s kindOf[T, K]) descriptor() KindDescriptor {
	d := KindDescriptor{
		Name:       K(new(T)).KindName(),
		New:        func() Kind { return K(new(T)) },
		Record:     func(k Kind) string { return s.record(k.(K)) },
		Refs:       func(Kind) []string { return nil },
		refs:       func(Kind) refList { return refList{} },
		Creates:    s.creates,
		Reference:  s.reference,
		ServerMade: s.serverMade,
		Roles:      s.roles,
		validate:   func(k Kind) error { return k.(K).validate() },
		rebuild:    s.rebuild,
	}
	if s.refs != nil {
		d.refs = func(k Kind) refList { return s.refs(k.(K)) }
		d.Refs = func(k Kind) []string { r := s.refs(k.(K)); return r.ids() }
	}
	return d
}

// maxRefs is the most records an event can refer to: a correction names
// its test, the revision it supersedes and the five records of its content.
const maxRefs = 7

// refList holds the ids an event refers to, in order, empty where the event
// names none: an array, so that reading it allocates nothing.
type refList [maxRefs]string

// ids returns the non-empty ids of r in order, nil for none.
func (r *refList) ids() []string {
	n := 0
	for _, v := range r {
		if v != "" {
			n++
		}
	}
	if n == 0 {
		return nil
	}
	out := make([]string, 0, n)
	for _, v := range r {
		if v != "" {
			out = append(out, v)
		}
	}
	return out
}

// contentRefs are the records a revision of a test refers to.
func contentRefs(c *TestContent) [5]string {
	var correction string
	if c.Readings.Nuclear != nil {
		correction = c.Readings.Nuclear.CorrectionID
	}
	return [5]string{c.ReferenceID, c.SpecID, c.EquipmentID, c.PlacementID, correction}
}

// How each kind of record is rebuilt; true: rebuild the tests that depend
// on it.
var (
	rebuildSetUp = func(p *Projection, _ string, evs []*Event) bool {
		p.setup = buildSetUp(evs)
		p.loc = nil
		if p.setup != nil && p.setup.TimeZone != "" {
			if loc, err := time.LoadLocation(p.setup.TimeZone); err == nil {
				p.loc = loc
			}
		}
		for id := range p.tests { // units, water and time zone grade every test
			p.recomputeTest(id, false, false)
		}
		return false
	}
	rebuildTest = func(p *Projection, key string, _ []*Event) bool {
		p.recomputeTest(key, true, true)
		return false
	}
	rebuildEquipment = func(p *Projection, key string, evs []*Event) bool {
		p.equipment = setOrDelete(p.equipment, key, buildEquipment(evs))
		return true
	}
	rebuildDevice = func(p *Projection, key string, evs []*Event) bool {
		before := p.devices[key].cutoff()
		p.devices = setOrDelete(p.devices, key, buildDevice(evs))
		if p.devices[key].cutoff() != before {
			p.sweepRevoked(key)
		}
		return true
	}
)

// descriptors are the descriptors of the kinds, in the order of the wire
// format's fields, and byName indexes them by name. They are set by init:
// the projection they rebuild reads them.
var (
	descriptors []KindDescriptor
	byName      map[string]int
)

func init() {
	descriptors = describeKinds()
	byName = indexKinds(descriptors)
}

func describeKinds() []KindDescriptor {
	return []KindDescriptor{
		kindOf[ProjectSetUp, *ProjectSetUp]{
			record:    func(*ProjectSetUp) string { return "" },
			reference: true, roles: []string{roleAdmin}, rebuild: rebuildSetUp,
		}.descriptor(),
		kindOf[SpecDefined, *SpecDefined]{
			record:  func(k *SpecDefined) string { return k.ID },
			creates: true, reference: true, roles: []string{roleQA},
			rebuild: func(p *Projection, key string, evs []*Event) bool {
				p.specs = setOrDelete(p.specs, key, buildSpec(evs))
				return true
			},
		}.descriptor(),
		kindOf[ReferenceAdded, *ReferenceAdded]{
			record:  func(k *ReferenceAdded) string { return k.ID },
			creates: true, reference: true, roles: []string{roleQA},
			rebuild: func(p *Projection, key string, evs []*Event) bool {
				p.refs = setOrDelete(p.refs, key, buildReference(evs))
				return true
			},
		}.descriptor(),
		kindOf[EquipmentRegistered, *EquipmentRegistered]{
			record:    func(k *EquipmentRegistered) string { return k.ID },
			reference: true, roles: []string{roleOffice, roleQA}, rebuild: rebuildEquipment,
		}.descriptor(),
		kindOf[StandardCountRecorded, *StandardCountRecorded]{
			record:    func(k *StandardCountRecorded) string { return k.EquipmentID },
			refs:      func(k *StandardCountRecorded) refList { return refList{k.EquipmentID} },
			reference: true, roles: []string{roleInspector}, // the gauge operator's daily check
			rebuild: rebuildEquipment,
		}.descriptor(),
		kindOf[MoistureCorrectionSet, *MoistureCorrectionSet]{
			record:  func(k *MoistureCorrectionSet) string { return k.ID },
			refs:    func(k *MoistureCorrectionSet) refList { return refList{k.EquipmentID, k.ReferenceID} },
			creates: true, reference: true, roles: []string{roleQA},
			rebuild: func(p *Projection, key string, evs []*Event) bool {
				p.corrections = setOrDelete(p.corrections, key, buildCorrection(evs))
				return true
			},
		}.descriptor(),
		kindOf[BorrowSourceMeasured, *BorrowSourceMeasured]{
			record:  func(k *BorrowSourceMeasured) string { return k.ID },
			refs:    func(k *BorrowSourceMeasured) refList { return refList{k.ReferenceID} },
			creates: true, roles: []string{roleQA},
			rebuild: func(p *Projection, key string, evs []*Event) bool {
				p.borrow = setOrDelete(p.borrow, key, p.buildBorrow(evs))
				return true
			},
		}.descriptor(),
		kindOf[LiftPlacementRecorded, *LiftPlacementRecorded]{
			record:  func(k *LiftPlacementRecorded) string { return k.ID },
			refs:    func(k *LiftPlacementRecorded) refList { return refList{k.BorrowSourceID} },
			creates: true, roles: []string{roleOffice},
			rebuild: func(p *Projection, key string, evs []*Event) bool {
				p.placements = setOrDelete(p.placements, key, buildPlacement(evs))
				return true
			},
		}.descriptor(),
		kindOf[HaulRecorded, *HaulRecorded]{
			record:  func(k *HaulRecorded) string { return k.ID },
			refs:    func(k *HaulRecorded) refList { return refList{k.BorrowSourceID, k.PlacementID} },
			creates: true, roles: []string{roleOffice},
			rebuild: func(p *Projection, key string, evs []*Event) bool {
				p.hauls = setOrDelete(p.hauls, key, buildHaul(evs))
				return true
			},
		}.descriptor(),
		kindOf[TestRecorded, *TestRecorded]{
			record: func(k *TestRecorded) string { return k.TestID },
			refs: func(k *TestRecorded) refList {
				c := contentRefs(&k.Content)
				return refList{c[0], c[1], c[2], c[3], c[4], k.RetestOf}
			},
			creates: true, roles: []string{roleInspector}, rebuild: rebuildTest,
		}.descriptor(),
		kindOf[TestCorrected, *TestCorrected]{
			record: func(k *TestCorrected) string { return k.TestID },
			refs: func(k *TestCorrected) refList {
				c := contentRefs(&k.Content)
				return refList{k.TestID, k.Supersedes, c[0], c[1], c[2], c[3], c[4]}
			},
			roles:   []string{roleInspector},
			rebuild: rebuildTest,
		}.descriptor(),
		kindOf[TestVoided, *TestVoided]{
			record:  func(k *TestVoided) string { return k.TestID },
			refs:    func(k *TestVoided) refList { return refList{k.TestID} },
			roles:   []string{roleInspector},
			rebuild: rebuildTest,
		}.descriptor(),
		kindOf[TestReviewed, *TestReviewed]{
			record:  func(k *TestReviewed) string { return k.TestID },
			refs:    func(k *TestReviewed) refList { return refList{k.TestID, k.Revision} },
			roles:   []string{roleOffice, roleQA},
			rebuild: rebuildTest,
		}.descriptor(),
		kindOf[ExceptionAccepted, *ExceptionAccepted]{
			record:  func(k *ExceptionAccepted) string { return k.TestID },
			refs:    func(k *ExceptionAccepted) refList { return refList{k.TestID, k.Revision} },
			roles:   []string{roleQA},
			rebuild: rebuildTest,
		}.descriptor(),
		kindOf[DeviceEnrolled, *DeviceEnrolled]{
			record:     func(k *DeviceEnrolled) string { return k.DeviceID },
			serverMade: true, rebuild: rebuildDevice,
		}.descriptor(),
		kindOf[DeviceRevoked, *DeviceRevoked]{
			record:     func(k *DeviceRevoked) string { return k.DeviceID },
			serverMade: true, rebuild: rebuildDevice,
		}.descriptor(),
	}
}

// indexKinds indexes descriptors by name, and checks them.
func indexKinds(descriptors []KindDescriptor) map[string]int {
	m := make(map[string]int, len(descriptors))
	for i, d := range descriptors {
		if _, dup := m[d.Name]; dup {
			panic(fmt.Sprintf("ledger: two kinds named %s", d.Name))
		}
		if d.ServerMade != (len(d.Roles) == 0) {
			panic(fmt.Sprintf("ledger: kind %s: a kind is made by the server exactly when no role may make it", d.Name))
		}
		m[d.Name] = i
	}
	return m
}

// Kinds returns the descriptors of every kind of event, in the order of
// the wire format's fields (copies: changing them changes nothing here).
func Kinds() []KindDescriptor {
	out := make([]KindDescriptor, len(descriptors))
	for i, d := range descriptors {
		out[i] = d.clone()
	}
	return out
}

func (d KindDescriptor) clone() KindDescriptor {
	d.Roles = slices.Clone(d.Roles)
	return d
}

// DescriptorOf returns the descriptor of k's kind; false for nil or a
// kind this version does not know.
func DescriptorOf(k Kind) (KindDescriptor, bool) {
	d := descriptorOf(k)
	if d == nil {
		return KindDescriptor{}, false
	}
	return d.clone(), true
}

// KindByName returns the descriptor of the kind named name (snake case).
func KindByName(name string) (KindDescriptor, bool) {
	i, ok := byName[name]
	if !ok {
		return KindDescriptor{}, false
	}
	return descriptors[i].clone(), true
}

// KindNames returns the names of the kinds whose descriptor satisfies
// keep (every kind for nil), in the order of Kinds.
func KindNames(keep func(KindDescriptor) bool) []string {
	var out []string
	for _, d := range descriptors {
		if keep == nil || keep(d) {
			out = append(out, d.Name)
		}
	}
	return out
}

// descriptorOf is DescriptorOf without the copy, for the projection.
func descriptorOf(k Kind) *KindDescriptor {
	if k == nil {
		return nil
	}
	i, ok := byName[k.KindName()]
	if !ok {
		return nil
	}
	return &descriptors[i]
}
