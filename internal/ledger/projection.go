package ledger

import (
	"cmp"
	"crypto/sha256"
	"fmt"
	"slices"
	"sync"
	"time"
)

// order is the deterministic order of events everywhere a rule must pick
// one: hybrid time, then device id, then event id.
func order(a, b *Event) int {
	if c := a.HLC.Compare(b.HLC); c != 0 {
		return c
	}
	if c := cmp.Compare(a.Device, b.Device); c != 0 {
		return c
	}
	return cmp.Compare(a.ID, b.ID)
}

// Status is what Apply did with an event.
type Status int

// The outcomes of Apply.
const (
	// Applied: the event is new and takes effect.
	Applied Status = iota + 1
	// Duplicate: the event was already held; nothing changed.
	Duplicate
	// Waiting: the event is held but refers to records this replica has not
	// seen; it takes effect as they arrive (a test is shown as pending).
	Waiting
)

func (s Status) String() string {
	switch s {
	case Applied:
		return "applied"
	case Duplicate:
		return "duplicate"
	case Waiting:
		return "waiting"
	}
	return fmt.Sprintf("Status(%d)", int(s))
}

// Outcome is the result of applying one event.
type Outcome struct {
	Status  Status
	Missing []string // record ids the event refers to that are not held
}

// Projection is a project's state computed from a set of events. The state
// depends only on the set: any replicas holding the same events show the
// same state, whatever order and however often the events arrived. Every
// record's state is recomputed from all events about it whenever one
// arrives. A Projection's read methods may run concurrently with each
// other (a server reporting under a read lock), never with Apply or
// ApplyValidated.
type Projection struct {
	project string
	now     func() time.Time

	events   map[string]*heldEvent
	byRecord map[string][]*Event // record id ("" for the project) -> events about it
	// deps names, per record, the tests whose revisions name it: a list,
	// not a set, since a test adds only what its earlier build had not
	// named (a set per spec would hold every test of the project).
	deps    map[string]depList
	retests map[string]map[string]bool // test id -> tests that name it in retest_of

	setup       *SetUp
	loc         *time.Location // the set-up's time zone, loaded once; nil for UTC
	specs       map[string]*Spec
	refs        map[string]*Reference
	equipment   map[string]*Equipment
	corrections map[string]*Correction
	borrow      map[string]*BorrowSource
	placements  map[string]*Placement
	hauls       map[string]*Haul
	tests       map[string]*Test
	devices     map[string]*Device
	// revokedOut holds the events of revoked devices signed after their
	// revocation: held, for the chain, but without effect.
	revokedOut map[string]bool

	byID testOrder      // the tests sorted by id, for Tests and Snapshot
	days map[int]string // the tests' days by date, each kept once (see day)
}

// testOrder keeps the tests sorted by id between calls of Tests, so that a
// report does not sort every test again: Apply notes the tests it rebuilt,
// and the next Tests merges just those into the order it kept.
type testOrder struct {
	mu      sync.Mutex // readers may refresh the order concurrently
	sorted  []*Test    // never changed once built: a refresh builds anew
	changed []string   // ids of tests rebuilt or removed since sorted was built
	stale   bool       // too many changes to merge: sort afresh
	rows    testRows   // the rows of the order, built when a report first asks (see TestRows)
}

// touched notes that the test id was rebuilt or removed. It runs under
// Apply, which no reader runs concurrently with.
func (o *testOrder) touched(id string, tests int) {
	if o.stale {
		return
	}
	o.changed = append(o.changed, id)
	if len(o.changed) > max(tests, 1024) { // more changes than tests: a sort costs less than the merge
		o.sorted, o.changed, o.stale = nil, nil, true
	}
}

// sortedTests returns the tests sorted by id. The slice is shared: never
// change it.
func (p *Projection) sortedTests() []*Test {
	o := &p.byID
	o.mu.Lock()
	defer o.mu.Unlock()
	return p.refreshOrder()
}

// refreshOrder merges the tests rebuilt since the last call into the order
// and returns it. The caller holds p.byID.mu.
func (p *Projection) refreshOrder() []*Test {
	o := &p.byID
	switch {
	case o.stale || (o.sorted == nil && len(p.tests) > 0):
		o.sorted, o.stale = sorted(p.tests), false
	case len(o.changed) > 0:
		slices.Sort(o.changed)
		ids := slices.Compact(o.changed)
		out := make([]*Test, 0, len(p.tests))
		old := o.sorted
		for len(old) > 0 || len(ids) > 0 {
			switch {
			case len(ids) == 0 || (len(old) > 0 && old[0].ID < ids[0]):
				out = append(out, old[0])
				old = old[1:]
			default: // ids[0] was rebuilt, added or removed: take what the map holds now
				if len(old) > 0 && old[0].ID == ids[0] {
					old = old[1:]
				}
				if t, ok := p.tests[ids[0]]; ok {
					out = append(out, t)
				}
				ids = ids[1:]
			}
		}
		o.sorted = out
	}
	o.changed = nil
	return o.sorted
}

// NewProjection returns an empty projection of a project.
func NewProjection(project string) *Projection {
	return &Projection{
		project: project, events: map[string]*heldEvent{}, byRecord: map[string][]*Event{},
		deps: map[string]depList{}, retests: map[string]map[string]bool{},
		specs: map[string]*Spec{}, refs: map[string]*Reference{}, equipment: map[string]*Equipment{},
		corrections: map[string]*Correction{}, borrow: map[string]*BorrowSource{}, placements: map[string]*Placement{},
		hauls: map[string]*Haul{}, tests: map[string]*Test{}, devices: map[string]*Device{}, revokedOut: map[string]bool{},
		days: map[int]string{},
	}
}

// Reserve makes room for n events in a projection that holds none yet, so
// that loading a store's events does not grow its maps step by step (at
// 100,000 events growing them took a fifth of the load). It does nothing
// once an event is held.
func (p *Projection) Reserve(n int) {
	if len(p.events) > 0 || n <= 0 {
		return
	}
	p.events = make(map[string]*heldEvent, n)
	p.byRecord = make(map[string][]*Event, n)
	p.tests = make(map[string]*Test, n)
}

// Project returns the project id.
func (p *Projection) Project() string { return p.project }

// Len returns the number of events held.
func (p *Projection) Len() int { return len(p.events) }

// Has reports whether the event is held.
func (p *Projection) Has(eventID string) bool { _, ok := p.events[eventID]; return ok }

// heldEvent is an event the projection holds: decoded, with the digest of
// its signed body in place of the bytes, which the store keeps (a body
// kept in memory beside its decoded event would double what each event
// costs the projection).
type heldEvent struct {
	Event
	body [sha256.Size]byte
}

// Event returns a held event.
func (p *Projection) Event(eventID string) (Event, bool) {
	h, ok := p.events[eventID]
	if !ok {
		return Event{}, false
	}
	return h.Event, true
}

// HeldAs reports whether the event is held and, if so, whether it is held
// with the signed body body (a different body under a held id is a
// conflict, or a fork of the ledger).
func (p *Projection) HeldAs(eventID string, body []byte) (held, same bool) {
	h, ok := p.events[eventID]
	if !ok {
		return false, false
	}
	return true, h.body == sha256.Sum256(body)
}

// Apply adds a verified event to the set. An event already held with the
// same bytes is a Duplicate. It returns a *Rejection (WrongProject,
// ConflictingID for an event id reused with other bytes, or what Validate
// returns) and then changes nothing.
func (p *Projection) Apply(s Signed) (Outcome, error) { return p.apply(s, true) }

// ApplyValidated is Apply for an event the caller has just validated (with
// Validate or Open): it skips validating it again.
func (p *Projection) ApplyValidated(s Signed) (Outcome, error) { return p.apply(s, false) }

func (p *Projection) apply(s Signed, validate bool) (Outcome, error) {
	// s is read by value until the event is held: taking its address would
	// move it to the heap on every call, beside the copy that is held.
	if s.Event.Project != p.project {
		return Outcome{}, reject(WrongProject, "project_id", fmt.Sprintf("the event belongs to project %s, not %s", s.Event.Project, p.project))
	}
	if old, ok := p.events[s.Event.ID]; ok {
		if old.body == sha256.Sum256(s.Body) {
			return Outcome{Status: Duplicate, Missing: p.Missing(&old.Event)}, nil
		}
		return Outcome{}, reject(ConflictingID, "event_id", "event "+s.Event.ID+" is already held with other content")
	}
	if validate {
		if err := Validate(s.Event); err != nil {
			return Outcome{}, err
		}
	}
	held := &heldEvent{Event: s.Event, body: sha256.Sum256(s.Body)}
	p.events[s.Event.ID] = held
	e := &held.Event
	if p.SignedAfterRevocation(e) != nil {
		p.revokedOut[e.ID] = true
		return Outcome{Status: Applied}, nil
	}
	key := RecordID(e.Kind)
	p.byRecord[key] = append(p.byRecord[key], e)
	if tr, ok := e.Kind.(*TestRecorded); ok && tr.RetestOf != "" {
		if p.retests[tr.RetestOf] == nil {
			p.retests[tr.RetestOf] = map[string]bool{}
		}
		p.retests[tr.RetestOf][tr.TestID] = true
	}
	p.recompute(key, e.Kind)
	out := Outcome{Status: Applied, Missing: p.Missing(e)}
	if len(out.Missing) > 0 {
		out.Status = Waiting
	}
	return out, nil
}

// RecordID returns the id of the record an event of kind k is about: the
// spec, reference, equipment, test... ("" for the project set-up), as its
// descriptor says.
func RecordID(k Kind) string {
	if d := descriptorOf(k); d != nil {
		return d.Record(k)
	}
	return ""
}

// Missing returns the records e refers to that this replica does not hold:
// for revision ids, the revision must be part of its test's history.
func (p *Projection) Missing(e *Event) []string {
	d := descriptorOf(e.Kind)
	if d == nil {
		return nil
	}
	var out []string
	for _, id := range d.refs(e.Kind) {
		if id != "" && !p.holds(id) {
			out = append(out, id)
		}
	}
	return out
}

func (p *Projection) holds(id string) bool {
	// Any one of the maps answers yes. The records the events most applied
	// name come first (a test names its reference and spec, a review its
	// test and revision), so that most ids are found in a few look-ups
	// rather than after all the others.
	if _, ok := p.tests[id]; ok {
		return true
	}
	if _, ok := p.specs[id]; ok {
		return true
	}
	if _, ok := p.refs[id]; ok {
		return true
	}
	if s, ok := p.events[id]; ok && p.heldRevision(s) {
		return true
	}
	if _, ok := p.equipment[id]; ok {
		return true
	}
	if _, ok := p.placements[id]; ok {
		return true
	}
	if _, ok := p.corrections[id]; ok {
		return true
	}
	_, ok := p.borrow[id]
	return ok
}

// heldRevision reports whether s is a revision of a test that is part of
// the test's history.
func (p *Projection) heldRevision(s *heldEvent) bool {
	var testID string
	switch k := s.Event.Kind.(type) {
	case *TestRecorded:
		testID = k.TestID
	case *TestCorrected:
		testID = k.TestID
	default:
		return false
	}
	t, ok := p.tests[testID]
	return ok && t.hasRevision(s.Event.ID)
}

// recompute rebuilds the record key from its events, as the descriptor
// of kind says, then the tests that depend on it.
func (p *Projection) recompute(key string, kind Kind) {
	evs := p.byRecord[key]
	slices.SortFunc(evs, order)
	if d := descriptorOf(kind); d == nil || !d.rebuild(p, key, evs) {
		return
	}
	deps := p.deps[key]
	if len(deps) == 0 {
		return
	}
	done := make(map[string]bool, deps.len())
	for _, chunk := range deps {
		for _, dep := range chunk {
			if !done[dep] {
				done[dep] = true
				p.recomputeTest(dep, true, false)
			}
		}
	}
}

// depList is a list of test ids in chunks of at most depChunk, so that the
// list of a record every test names (a spec, a reference) grows without
// copying the ids it holds each time it outgrows its room. A short list is
// one chunk that grows as a slice does.
type depList [][]string

const depChunk = 1024

func (l depList) add(id string) depList {
	switch n := len(l); {
	case n == 0:
		l = append(l, nil)
	case len(l[n-1]) == depChunk: // a long list: the next chunk whole at once
		l = append(l, make([]string, 0, depChunk))
	}
	l[len(l)-1] = append(l[len(l)-1], id)
	return l
}

func (l depList) len() int {
	n := 0
	for _, c := range l {
		n += len(c)
	}
	return n
}

func setOrDelete[T any](m map[string]*T, key string, v *T) map[string]*T {
	if v == nil {
		delete(m, key)
	} else {
		m[key] = v
	}
	return m
}

// recomputeTest rebuilds a test; with cascade, the tests that retest it
// too, since whether a retest retests a failure depends on the test it
// names (one level is enough: a test's verdict never depends on its retests).
// own says the rebuild is for an event about the test itself: every other
// change that touches a test's grade (a record it names, the set-up, the
// test it retests) rebuilds it at once, so its earlier grade still holds
// when its current revision is the same.
func (p *Projection) recomputeTest(id string, cascade, own bool) {
	was := p.tests[id]
	t := p.buildTest(p.byRecord[id], was, own)
	if cascade {
		defer func() {
			for r := range p.retests[id] {
				p.recomputeTest(r, false, false)
			}
		}()
	}
	p.byID.touched(id, len(p.tests))
	if t == nil {
		delete(p.tests, id)
		return
	}
	p.addDeps(was, t)
	p.tests[id] = t
}

// addDeps notes the records test t names that its earlier build, was, did
// not: revisions are only ever added to a test, so a rebuild for a review
// or a void adds nothing.
func (p *Projection) addDeps(was, t *Test) {
	if was != nil && len(was.Revisions) == len(t.Revisions) && was.RetestOf == t.RetestOf {
		return
	}
	var buf [16]string
	noted := buf[:0] // what the earlier build named, then what this adds
	named := func(x *Test, fn func(string)) {
		for i := range x.Revisions {
			c := x.Revisions[i].Content
			fn(c.ReferenceID)
			fn(c.SpecID)
			fn(c.EquipmentID)
			fn(c.PlacementID)
			if c.Readings.Nuclear != nil {
				fn(c.Readings.Nuclear.CorrectionID)
			}
		}
		fn(x.RetestOf)
	}
	if was != nil {
		named(was, func(id string) {
			if id != "" && !slices.Contains(noted, id) {
				noted = append(noted, id)
			}
		})
	}
	named(t, func(on string) {
		if on != "" && !slices.Contains(noted, on) {
			noted = append(noted, on)
			p.deps[on] = p.deps[on].add(t.ID)
		}
	})
}

// createsRecord reports whether events of kind k create the record they are
// about, so that its id belongs to the first event that recorded it (the
// descriptor's Creates).
func createsRecord(k Kind) bool {
	d := descriptorOf(k)
	return d != nil && d.Creates
}

// Claimed returns a ConflictingID rejection when e would create a record
// whose id an event this replica holds already created: a record id
// belongs to its first recorder for good, whoever records it again and
// whatever the hybrid time of the second recording. It returns nil for an
// event that is held already or creates nothing. The server refuses such
// an event on push and a device refuses to make one, so no ledger holds
// two creations of one id.
func (p *Projection) Claimed(e *Event) *Rejection {
	if !createsRecord(e.Kind) || p.Has(e.ID) {
		return nil
	}
	key := RecordID(e.Kind)
	for _, o := range p.byRecord[key] {
		if createsRecord(o.Kind) && o.ID != e.ID {
			return reject(ConflictingID, "record_id", fmt.Sprintf("%s %s was already recorded by %s in event %s; a record id belongs to its first recorder",
				e.Kind.KindName(), key, o.Author, o.ID))
		}
	}
	return nil
}
