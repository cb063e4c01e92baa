package ledger

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"strings"
	"time"

	"tamp/internal/qc"
	"tamp/internal/soil"
)

// Revision is one revision of a test: the original or a correction.
type Revision struct {
	EventID    string
	Supersedes string // empty for the original
	Reason     string
	Author     string
	HLC        HLC
	// Content is the revision's event's own content, shared with the held
	// event: never change it through the pointer.
	Content *TestContent
}

// ReviewStatus is where a test's current revision stands with the office.
type ReviewStatus string

// The review statuses.
const (
	Unreviewed ReviewStatus = "unreviewed"
	Approved   ReviewStatus = "approved"
	Returned   ReviewStatus = "returned"
)

// Review is one office review.
type Review struct {
	EventID  string
	Author   string
	HLC      HLC
	Revision string
	Decision Decision
	Comment  string
}

// Exception is a QA manager's acceptance of a failing revision.
type Exception struct {
	EventID  string
	Author   string
	Revision string
	Reason   string
}

// Void is one voiding of a test.
type Void struct {
	EventID string
	Author  string
	Reason  string
}

// Review flags of a test, beside those of package qc.
const (
	// ConcurrentRevisions: two revisions supersede the same base.
	ConcurrentRevisions = "concurrent_revisions"
	// DeviceResultMismatch: the device's reported results disagree with
	// those recomputed from the readings.
	DeviceResultMismatch = "device_result_mismatch"
	// DuplicateTestID: two events recorded a test with the same id.
	DuplicateTestID = "duplicate_test_id"
	// CorrectedByOther: a revision's author is not the test's.
	CorrectedByOther = "corrected_by_other"
	// SelfReview: a review's author recorded the test.
	SelfReview = "self_review"
	// RetestOfPassingTest: the test retests one that did not fail.
	RetestOfPassingTest = "retest_of_passing_test"
	// GaugeCalibrationLapsed: the gauge's calibration had lapsed on the test's day.
	GaugeCalibrationLapsed = "gauge_calibration_lapsed"
	// NoStandardCount: no accepted standard count of the gauge on the test's day.
	NoStandardCount = "no_standard_count"
	// CannotGrade: the readings could not be graded against the reference.
	CannotGrade = "cannot_grade"
)

// Test is an in-place density test with its history.
type Test struct {
	ID         string
	Author     string
	Device     string
	HLC        HLC
	DeviceTime time.Time
	Day        string // YYYY-MM-DD of DeviceTime in the project's time zone
	RetestOf   string
	// Revisions holds every revision connected to the original, in event
	// order; Unattached, corrections whose base this replica does not hold.
	Revisions  []Revision
	Unattached []string `json:",omitempty"`
	Current    string   // event id of the current revision
	// Content is the current revision's, shared with it and its event:
	// never change it through the pointer.
	Content *TestContent
	// Result is recomputed from the current revision's readings against
	// the reference and spec it names.
	Result       qc.Result
	Voids        []Void   `json:",omitempty"`
	Reviews      []Review `json:",omitempty"`
	ReviewStatus ReviewStatus
	// Exceptions are QA acceptances; one of the current revision closes the
	// test's failure without a retest.
	Exceptions []Exception `json:",omitempty"`
	// Flags are for review: conflicts, disagreements, equipment; the
	// result's own flags are in Result.Flags.
	Flags []qc.Finding `json:",omitempty"`
	// Missing are the records the current revision names that this replica
	// does not hold; while any is missing the verdict is pending.
	Missing []string `json:",omitempty"`
}

// ExceptionAccepted reports whether QA accepted the current revision as it
// stands.
func (t *Test) ExceptionAccepted() bool {
	for _, x := range t.Exceptions {
		if x.Revision == t.Current {
			return true
		}
	}
	return false
}

// Voided reports whether the test was voided.
func (t *Test) Voided() bool { return len(t.Voids) > 0 }

func (t *Test) hasRevision(id string) bool {
	_, ok := t.Revision(id)
	return ok
}

// Revision returns a revision by event id.
func (t *Test) Revision(id string) (Revision, bool) {
	for _, r := range t.Revisions {
		if r.EventID == id {
			return r, true
		}
	}
	return Revision{}, false
}

func (t *Test) flag(code, msg string) {
	t.Flags = append(t.Flags, qc.Finding{Code: code, Message: msg})
}

// buildTest derives a test from all events about it (sorted in event
// order), or nil when no event recorded it. was is the test's earlier
// build, or nil: its revisions are shared when they are the same, and with
// graded (nothing it was graded against has changed since) so is its grade
// when its current revision is the same.
func (p *Projection) buildTest(evs []*Event, was *Test, graded bool) *Test {
	var t *Test
	var original *Event
	var corrections []*Event
	for _, e := range evs {
		switch k := e.Kind.(type) {
		case *TestRecorded:
			if t != nil {
				t.flag(DuplicateTestID, fmt.Sprintf("event %s records the same test id again; the earlier record stands", e.ID))
				continue
			}
			original = e
			t = &Test{ID: k.TestID, Author: e.Author, Device: e.Device, HLC: e.HLC, DeviceTime: e.DeviceTime, RetestOf: k.RetestOf}
		case *TestCorrected:
			corrections = append(corrections, e)
		}
	}
	if t == nil {
		return nil
	}
	if len(corrections) == 0 && was != nil && len(was.Revisions) == 1 && was.Revisions[0].EventID == original.ID {
		// A rebuild for a review, a void or an acceptance: the history is
		// the earlier build's, which no one changes once built.
		t.Revisions = was.Revisions
	} else {
		k := original.Kind.(*TestRecorded)
		t.Revisions = make([]Revision, 1, 1+len(corrections))
		t.Revisions[0] = Revision{EventID: original.ID, Author: original.Author, HLC: original.HLC, Content: &k.Content}
	}

	if len(corrections) == 0 { // most tests: the original stands
		t.Current, t.Content = t.Revisions[0].EventID, t.Revisions[0].Content
	} else {
		p.attach(t, corrections)
	}

	t.ReviewStatus = Unreviewed
	for _, e := range evs {
		switch k := e.Kind.(type) {
		case *TestVoided:
			t.Voids = append(t.Voids, Void{EventID: e.ID, Author: e.Author, Reason: k.Reason})
		case *ExceptionAccepted:
			t.Exceptions = append(t.Exceptions, Exception{EventID: e.ID, Author: e.Author, Revision: k.Revision, Reason: k.Reason})
		case *TestReviewed:
			t.Reviews = append(t.Reviews, Review{EventID: e.ID, Author: e.Author, HLC: e.HLC, Revision: k.Revision, Decision: k.Decision, Comment: k.Comment})
			if e.Author == t.Author {
				t.flag(SelfReview, fmt.Sprintf("review %s is by the test's own author", e.ID))
			}
			if k.Revision == t.Current { // events are in order, so the last one stands
				t.ReviewStatus = Approved
				if k.Decision == Return {
					t.ReviewStatus = Returned
				}
			}
		}
	}
	if graded && was != nil && was.Current == t.Current && was.Revisions[0].EventID == t.Revisions[0].EventID {
		// The same revision of the same original (so the same content, day
		// and retest) against the same records: the same grade.
		t.Day, t.Result, t.Missing = was.Day, was.Result, was.Missing
		for _, f := range was.Flags {
			if gradeFlag(f.Code) {
				t.Flags = append(t.Flags, f)
			}
		}
	} else {
		t.Day = p.day(t.DeviceTime)
		p.grade(t)
	}
	slices.SortFunc(t.Flags, func(a, b qc.Finding) int {
		return cmp.Or(cmp.Compare(a.Code, b.Code), cmp.Compare(a.Message, b.Message))
	})
	return t
}

// attach adds to t the corrections whose base it holds, picks its current
// revision and flags concurrent revisions and corrections by others.
func (p *Projection) attach(t *Test, corrections []*Event) {
	// Attach corrections whose base is held; repeat until none attaches, so
	// the result does not depend on the order corrections arrived in.
	attached := map[string]bool{t.Revisions[0].EventID: true}
	children := map[string]int{}
	for progress := true; progress; {
		progress = false
		for _, e := range corrections {
			k := e.Kind.(*TestCorrected)
			if attached[e.ID] || !attached[k.Supersedes] {
				continue
			}
			attached[e.ID] = true
			children[k.Supersedes]++
			t.Revisions = append(t.Revisions, Revision{EventID: e.ID, Supersedes: k.Supersedes, Reason: k.Reason, Author: e.Author, HLC: e.HLC, Content: &k.Content})
			progress = true
		}
	}
	for _, e := range corrections {
		if !attached[e.ID] {
			t.Unattached = append(t.Unattached, e.ID)
		}
	}
	slices.SortFunc(t.Revisions[1:], func(a, b Revision) int {
		return order(&p.events[a.EventID].Event, &p.events[b.EventID].Event)
	})

	// The current revision is the latest leaf in event order.
	var current *Revision
	var currentEvent *Event
	for i := range t.Revisions {
		r := &t.Revisions[i]
		if children[r.EventID] > 0 {
			continue
		}
		ev := &p.events[r.EventID].Event
		if current == nil || order(ev, currentEvent) > 0 {
			current, currentEvent = r, ev
		}
	}
	t.Current, t.Content = current.EventID, current.Content
	for base, n := range children {
		if n > 1 {
			t.flag(ConcurrentRevisions, fmt.Sprintf("%d revisions supersede revision %s; the latest stands and all stay in history", n, base))
		}
	}
	for _, r := range t.Revisions[1:] {
		if r.Author != t.Author {
			t.flag(CorrectedByOther, fmt.Sprintf("revision %s is by %s, not the test's author %s", r.EventID, r.Author, t.Author))
		}
	}
}

// location is the project's time zone, loaded when the set-up arrived
// (loading one reads the zone database: a cost for every test built).
func (p *Projection) location() *time.Location {
	if p.loc != nil {
		return p.loc
	}
	return time.UTC
}

func (p *Projection) water() float64 {
	if p.setup != nil && p.setup.WaterDensity != 0 {
		return p.setup.WaterDensity
	}
	return soil.Water1000
}

func (p *Projection) units() soil.System {
	if p.setup != nil && p.setup.Units != 0 {
		return p.setup.Units
	}
	return soil.SI
}

// Assessment is the grade of one revision's content: the recomputed result,
// the review flags it raises, the records it names that are not held, and
// the arithmetic's steps.
type Assessment struct {
	Result  qc.Result
	Flags   []qc.Finding
	Missing []string
	Steps   []soil.Step
}

// Assess grades test content as this projection would: against the
// reference and spec it names, on day (YYYY-MM-DD, for the gauge checks),
// as a retest of retestOf when that is set. A device calls it to show a
// result before it records the test.
func (p *Projection) Assess(c TestContent, day, retestOf string) Assessment {
	return p.assess(&c, day, retestOf, true)
}

// assess is Assess, with the arithmetic's steps only when steps is set: a
// test's grade in the projection never shows them.
func (p *Projection) assess(c *TestContent, day, retestOf string, steps bool) Assessment {
	var a Assessment
	flag := func(code, msg string) { a.Flags = append(a.Flags, qc.Finding{Code: code, Message: msg}) }
	var corr *soil.MoistureCorrection
	if n := c.Readings.Nuclear; n != nil && n.CorrectionID != "" {
		if k, ok := p.corrections[n.CorrectionID]; ok {
			corr = &k.Correction
		} else {
			a.Missing = append(a.Missing, n.CorrectionID)
		}
	}
	inplace, err := c.Readings.compute(corr, steps)
	if err != nil {
		a.Result = qc.Result{Verdict: qc.Pending}
		flag(CannotGrade, err.Error())
		return a
	}
	a.Steps = inplace.Steps
	in := qc.Input{Test: inplace, Water: p.water(), Units: p.units(), LiftThickness: c.LiftThickness, Oversize: c.Oversize}
	ref, refOK := p.refs[c.ReferenceID]
	if refOK {
		in.Reference, in.Gs = ref.qc(), ref.Gs
	} else if c.ReferenceID != "" {
		a.Missing = append(a.Missing, c.ReferenceID)
	}
	spec, specOK := p.specs[c.SpecID]
	if specOK {
		in.Spec = spec.QC()
	} else if c.SpecID != "" {
		a.Missing = append(a.Missing, c.SpecID)
	}
	res, err := qc.Grade(in)
	if err != nil {
		in.Reference, in.Oversize = qc.Reference{}, nil
		res, _ = qc.Grade(in)
		flag(CannotGrade, err.Error())
	}
	if !refOK || !specOK || len(a.Missing) > 0 {
		res.Verdict, res.Reasons = qc.Pending, nil
	}
	a.Result = res

	if c.EquipmentID != "" {
		if eq, ok := p.equipment[c.EquipmentID]; !ok {
			a.Missing = append(a.Missing, c.EquipmentID)
		} else if eq.Kind == NuclearGauge {
			if eq.CalibrationLapsedOn(day) {
				flag(GaugeCalibrationLapsed, fmt.Sprintf("gauge %s's calibration was due %s, before the test on %s", eq.SerialNumber, eq.CalibrationDue, day))
			}
			if !eq.CountAcceptedOn(day) {
				flag(NoStandardCount, fmt.Sprintf("no accepted standard count of gauge %s is recorded for %s", eq.SerialNumber, day))
			}
		}
	}
	if c.PlacementID != "" {
		if _, ok := p.placements[c.PlacementID]; !ok {
			a.Missing = append(a.Missing, c.PlacementID)
		}
	}
	if retestOf != "" {
		if orig, ok := p.tests[retestOf]; !ok {
			a.Missing = append(a.Missing, retestOf)
		} else if orig.Result.Verdict == qc.Pass {
			flag(RetestOfPassingTest, fmt.Sprintf("test %s, which this retests, passed", retestOf))
		}
	}
	return a
}

// Day returns the date (YYYY-MM-DD) of t in the project's time zone.
func (p *Projection) Day(t time.Time) string { return t.In(p.location()).Format(time.DateOnly) }

// day is Day for Apply, which keeps one string per date: a project's tests
// fall on few dates, and each test holds its day. Readers call Day, which
// changes nothing.
func (p *Projection) day(t time.Time) string {
	y, m, d := t.In(p.location()).Date()
	key := y<<9 | int(m)<<5 | d // month below 16, day below 32
	if s, ok := p.days[key]; ok {
		return s
	}
	s := p.Day(t)
	p.days[key] = s
	return s
}

// gradeFlag reports whether grade raises flags of code, which a rebuild
// that keeps the grade keeps (the other flags come from the test's
// history). Every flag assess or grade raises must be listed.
func gradeFlag(code string) bool {
	switch code {
	case CannotGrade, GaugeCalibrationLapsed, NoStandardCount, RetestOfPassingTest, DeviceResultMismatch:
		return true
	}
	return false
}

// grade recomputes a test's results from its current revision's readings
// and flags a device result that disagrees.
func (p *Projection) grade(t *Test) {
	a := p.assess(t.Content, t.Day, t.RetestOf, false)
	t.Result, t.Missing = a.Result, a.Missing
	t.Flags = append(t.Flags, a.Flags...)
	if d := t.Content.DeviceResults; d != nil {
		if msg := mismatch(d, &a.Result); msg != "" {
			t.flag(DeviceResultMismatch, msg)
		}
	}
}

// Tolerances within which a device's reported results agree with the
// recomputed ones (they differ only by the device's float arithmetic).
const (
	densityTolerance = 0.05 // kg/m3
	percentTolerance = 0.005
)

func mismatch(d *Results, r *qc.Result) string {
	var diffs []string
	cmpv := func(name string, dev, got, tol float64) {
		if math.Abs(dev-got) > tol {
			diffs = append(diffs, fmt.Sprintf("%s %.3f reported, %.3f recomputed", name, dev, got))
		}
	}
	cmpv("wet density", d.WetDensity, r.WetDensity, densityTolerance)
	cmpv("dry density", d.DryDensity, r.DryDensity, densityTolerance)
	cmpv("moisture", d.Moisture, r.Moisture, percentTolerance)
	if d.Verdict != qc.Pending && r.Verdict != qc.Pending {
		cmpv("relative compaction", d.RelativeCompaction, r.RelativeCompaction, percentTolerance)
		if d.Verdict != r.Verdict {
			diffs = append(diffs, fmt.Sprintf("verdict %s reported, %s recomputed", d.Verdict, r.Verdict))
		}
	}
	if len(diffs) == 0 {
		return ""
	}
	return "the device's results disagree with the readings: " + strings.Join(diffs, "; ")
}
