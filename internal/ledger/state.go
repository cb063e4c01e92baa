package ledger

import (
	"bytes"
	"crypto/sha256"
	"encoding/json"
	"fmt"
	"iter"
	"slices"
	"time"

	"tamp/internal/qc"
	"tamp/internal/soil"
)

// Record is the provenance of a record: the event that created it, and any
// other events that created a record with the same id (a conflict: the
// earliest in event order wins, the others stay in history and are flagged).
type Record struct {
	EventID     string
	Author      string
	HLC         HLC
	Conflicting []string `json:",omitempty"`
}

func provenance[K Kind](evs []*Event) (K, Record, bool) {
	var first K
	var rec Record
	var firstBody []byte // marshalled only when a second creator appears
	found := false
	for _, e := range evs {
		k, ok := e.Kind.(K)
		if !ok {
			continue
		}
		if !found {
			first, rec, found = k, Record{EventID: e.ID, Author: e.Author, HLC: e.HLC}, true
			continue
		}
		if firstBody == nil {
			firstBody, _ = json.Marshal(first)
		}
		if b, _ := json.Marshal(k); !bytes.Equal(b, firstBody) {
			rec.Conflicting = append(rec.Conflicting, e.ID)
		}
	}
	return first, rec, found
}

// DefaultClockSkewLimit is the device clock skew flagged when a project sets
// none.
const DefaultClockSkewLimit = 5 * time.Minute

// DefaultRetestWithin is the time within which the retest audit expects a
// failing test to be retested, voided or accepted when a project sets none:
// a working day and a half of rework and retest, our choice (common practice
// is "before the next lift is placed", which the ledger cannot see).
const DefaultRetestWithin = 48 * time.Hour

// DefaultRetestDistance is the distance between a failing test and its
// retest beyond which the audit reports the retest as away from the
// failure, when a project sets none: metres, our choice (a retest belongs
// in the reworked area, within a few metres of the failure: common
// practice).
const DefaultRetestDistance = 10.0

// RetestWithinOrDefault returns the project's retest window.
func (s *ProjectSetUp) RetestWithinOrDefault() time.Duration {
	if s == nil || s.RetestWithin <= 0 {
		return DefaultRetestWithin
	}
	return s.RetestWithin
}

// RetestDistanceOrDefault returns the project's retest distance, metres.
func (s *ProjectSetUp) RetestDistanceOrDefault() float64 {
	if s == nil || s.RetestDistance <= 0 {
		return DefaultRetestDistance
	}
	return s.RetestDistance
}

// SetUp is the project's current set-up: the latest set-up event wins.
type SetUp struct {
	ProjectSetUp
	EventID string
	History []string // earlier set-up events
}

func buildSetUp(evs []*Event) *SetUp {
	var s *SetUp
	for _, e := range evs {
		k, ok := e.Kind.(*ProjectSetUp)
		if !ok {
			continue
		}
		if s != nil {
			s.History = append(s.History, s.EventID)
		} else {
			s = &SetUp{}
		}
		s.ProjectSetUp, s.EventID = *k, e.ID
	}
	return s
}

// Spec is a defined specification.
type Spec struct {
	SpecDefined
	Record
	spec qc.Spec
}

// QC returns the spec as package qc grades with it.
func (s *Spec) QC() qc.Spec { return s.spec }

func buildSpec(evs []*Event) *Spec {
	k, rec, ok := provenance[*SpecDefined](evs)
	if !ok {
		return nil
	}
	spec, err := k.Spec()
	if err != nil { // Validate refused such events; keep the record visible
		spec = qc.Spec{Name: k.Name}
	}
	return &Spec{SpecDefined: *k, Record: rec, spec: spec}
}

// Reference is a laboratory reference with its effective maximum dry
// density and optimum moisture: as reported, or fitted to its points.
type Reference struct {
	ReferenceAdded
	Record
	MaxDry    float64 // kg/m3
	Optimum   float64 // percent
	Fit       *soil.Fit
	Bracketed bool
	Flags     []qc.Finding `json:",omitempty"`
}

func buildReference(evs []*Event) *Reference {
	k, rec, ok := provenance[*ReferenceAdded](evs)
	if !ok {
		return nil
	}
	r := &Reference{ReferenceAdded: *k, Record: rec, MaxDry: k.MaxDryDensity, Optimum: k.OptimumMoisture, Bracketed: true}
	if len(k.Points) > 0 {
		c := soil.Curve{Procedure: k.Procedure, Points: k.Points, Gs: k.Gs, Water: soil.Water1000}
		if f, err := soil.FitCurve(c); err == nil {
			r.Fit, r.Bracketed = &f, f.Bracketed
			if r.MaxDry == 0 {
				r.MaxDry, r.Optimum = f.MaxDryDensity, f.OptimumMoisture
			}
			if !f.Bracketed {
				r.Flags = append(r.Flags, qc.Finding{Code: qc.ReferenceNotBracketed, Message: "the curve's points do not bracket its peak"})
			}
			if len(f.AboveZAV) > 0 {
				r.Flags = append(r.Flags, qc.Finding{Code: qc.AboveZeroAirVoids,
					Message: fmt.Sprintf("%d curve point(s) lie above zero air voids for Gs %.2f", len(f.AboveZAV), k.Gs)})
			}
		}
	}
	return r
}

// qc returns the reference as package qc grades with it. The procedure
// points into r, which no one changes once built: a copy would cost every
// test's grade an allocation.
func (r *Reference) qc() qc.Reference {
	return qc.Reference{MaxDryDensity: r.MaxDry, OptimumMoisture: r.Optimum, NotBracketed: !r.Bracketed, Procedure: &r.Procedure}
}

// Equipment is a registered piece of equipment with its standard counts.
type Equipment struct {
	EquipmentRegistered          // the latest registration
	Record                       // the first
	Registrations       []string // every registration event, in order
	Counts              []StandardCountRecorded
}

func buildEquipment(evs []*Event) *Equipment {
	var eq *Equipment
	var counts []StandardCountRecorded
	for _, e := range evs {
		switch k := e.Kind.(type) {
		case *EquipmentRegistered:
			if eq == nil {
				eq = &Equipment{Record: Record{EventID: e.ID, Author: e.Author, HLC: e.HLC}}
			}
			eq.EquipmentRegistered = *k
			eq.Registrations = append(eq.Registrations, e.ID)
		case *StandardCountRecorded:
			counts = append(counts, *k)
		}
	}
	if eq == nil {
		return nil
	}
	eq.Counts = counts
	return eq
}

// CountAcceptedOn reports whether an accepted standard count was recorded
// on date (YYYY-MM-DD).
func (eq *Equipment) CountAcceptedOn(date string) bool {
	for _, c := range eq.Counts {
		if c.Date == date && c.Accepted {
			return true
		}
	}
	return false
}

// CalibrationLapsedOn reports whether the calibration due date lies before
// date (both YYYY-MM-DD, which compare as strings).
func (eq *Equipment) CalibrationLapsedOn(date string) bool {
	return eq.CalibrationDue != "" && date > eq.CalibrationDue
}

// Correction is a nuclear moisture correction.
type Correction struct {
	MoistureCorrectionSet
	Record
}

func buildCorrection(evs []*Event) *Correction {
	k, rec, ok := provenance[*MoistureCorrectionSet](evs)
	if !ok {
		return nil
	}
	return &Correction{MoistureCorrectionSet: *k, Record: rec}
}

// BorrowSource is a borrow source with its mean bank dry density.
type BorrowSource struct {
	BorrowSourceMeasured
	Record
	BankDryDensity float64 // kg/m3, mean of the bank tests
	// BankDryDensities are the dry densities of the bank tests that
	// computed, kg/m3, in the order recorded.
	BankDryDensities []float64 `json:",omitempty"`
}

func (p *Projection) buildBorrow(evs []*Event) *BorrowSource {
	k, rec, ok := provenance[*BorrowSourceMeasured](evs)
	if !ok {
		return nil
	}
	b := &BorrowSource{BorrowSourceMeasured: *k, Record: rec}
	var sum float64
	var n int
	for _, r := range k.BankTests {
		if res, err := r.densities(nil); err == nil {
			sum += res.DryDensity
			n++
			b.BankDryDensities = append(b.BankDryDensities, res.DryDensity)
		}
	}
	if n > 0 {
		b.BankDryDensity = sum / float64(n)
	}
	return b
}

// Placement is a lift placement.
type Placement struct {
	LiftPlacementRecorded
	Record
}

func buildPlacement(evs []*Event) *Placement {
	k, rec, ok := provenance[*LiftPlacementRecorded](evs)
	if !ok {
		return nil
	}
	return &Placement{LiftPlacementRecorded: *k, Record: rec}
}

// Haul is a haul record.
type Haul struct {
	HaulRecorded
	Record
}

func buildHaul(evs []*Event) *Haul {
	k, rec, ok := provenance[*HaulRecorded](evs)
	if !ok {
		return nil
	}
	return &Haul{HaulRecorded: *k, Record: rec}
}

// Snapshot is the whole state of a projection, every list sorted by id, so
// that two replicas' snapshots compare equal exactly when their states do.
type Snapshot struct {
	SetUp        *SetUp
	Specs        []*Spec
	References   []*Reference
	Equipment    []*Equipment
	Corrections  []*Correction
	BorrowSource []*BorrowSource
	Placements   []*Placement
	Hauls        []*Haul
	Tests        []*Test
	Devices      []*Device `json:",omitempty"`
}

func sorted[T any](m map[string]*T) []*T {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	out := make([]*T, 0, len(m))
	for _, k := range keys {
		out = append(out, m[k])
	}
	return out
}

// Snapshot returns the projection's state. The records are shared with the
// projection: treat them as read-only.
func (p *Projection) Snapshot() Snapshot {
	return Snapshot{SetUp: p.setup, Specs: sorted(p.specs), References: sorted(p.refs), Equipment: sorted(p.equipment),
		Corrections: sorted(p.corrections), BorrowSource: sorted(p.borrow), Placements: sorted(p.placements),
		Hauls: sorted(p.hauls), Tests: p.Tests(), Devices: sorted(p.devices)}
}

// Digest returns a SHA-256 of the projection's state (its Snapshot as JSON).
func (p *Projection) Digest() Hash {
	b, err := json.Marshal(p.Snapshot())
	if err != nil {
		panic(fmt.Sprintf("ledger: marshal snapshot: %v", err))
	}
	return sha256.Sum256(b)
}

// SetUp returns the project's set-up, or nil before one arrives.
func (p *Projection) SetUp() *SetUp { return p.setup }

// Spec returns a spec by id.
func (p *Projection) Spec(id string) (*Spec, bool) { s, ok := p.specs[id]; return s, ok }

// Placement returns a placement by id.
func (p *Projection) Placement(id string) (*Placement, bool) {
	pl, ok := p.placements[id]
	return pl, ok
}

// Reference returns a reference by id.
func (p *Projection) Reference(id string) (*Reference, bool) { r, ok := p.refs[id]; return r, ok }

// Equipment returns equipment by id.
func (p *Projection) Equipment(id string) (*Equipment, bool) { e, ok := p.equipment[id]; return e, ok }

// Test returns a test by id.
func (p *Projection) Test(id string) (*Test, bool) { t, ok := p.tests[id]; return t, ok }

// Tests returns every test, sorted by id. The slice is the caller's; the
// tests are shared with the projection: treat them as read-only.
func (p *Projection) Tests() []*Test {
	s := p.sortedTests()
	return append(make([]*Test, 0, len(s)), s...) // never nil, as sorted gives
}

// AllTests iterates over every test sorted by id, as Tests returns them,
// without copying them out: the order is kept between calls, so a report
// reads the tests without sorting them. The tests are shared with the
// projection: treat them as read-only.
func (p *Projection) AllTests() iter.Seq[*Test] {
	return func(yield func(*Test) bool) {
		for _, t := range p.sortedTests() {
			if !yield(t) {
				return
			}
		}
	}
}

// NumTests returns the number of tests.
func (p *Projection) NumTests() int { return len(p.tests) }

// Placements returns every placement, sorted by id (treat them as
// read-only).
func (p *Projection) Placements() []*Placement { return sorted(p.placements) }

// Hauls returns every haul, sorted by id (treat them as read-only).
func (p *Projection) Hauls() []*Haul { return sorted(p.hauls) }

// BorrowSources returns every borrow source, sorted by id (treat them as
// read-only).
func (p *Projection) BorrowSources() []*BorrowSource { return sorted(p.borrow) }

// RetestsOf returns the ids of the tests that name id in retest_of, sorted.
func (p *Projection) RetestsOf(id string) []string {
	var out []string
	for r := range p.retests[id] {
		if _, ok := p.tests[r]; ok {
			out = append(out, r)
		}
	}
	slices.Sort(out)
	return out
}
