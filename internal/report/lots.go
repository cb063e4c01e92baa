package report

import (
	"cmp"
	"fmt"
	"slices"
	"strconv"
	"strings"
	"time"

	"tamp/internal/ledger"
	"tamp/internal/qc"
	"tamp/internal/valid"
)

// LotScope says what makes a lot. The zero scope makes one lot per lift:
// per placement and spec. With Feature set, one lot per spec of the tests
// of that feature within the bounds; a zero bound is unbounded. A test
// belongs to a feature and a lift by its placement's, or, when it names no
// placement this replica holds, by its own Feature and LiftNumber; to a day
// by its Day. With a lift bound set, a test of no known lift (0) is out.
type LotScope struct {
	Feature          string
	LiftFrom, LiftTo uint32
	DayFrom, DayTo   string // YYYY-MM-DD, inclusive
}

// validate reports the first broken rule of the scope as a
// *valid.FieldError.
func (s LotScope) validate() error {
	if s.Feature == "" {
		for _, b := range []struct {
			field string
			set   bool
		}{{"lift_from", s.LiftFrom != 0}, {"lift_to", s.LiftTo != 0}, {"day_from", s.DayFrom != ""}, {"day_to", s.DayTo != ""}} {
			if b.set {
				return valid.Missing("feature", "is required with "+b.field+": a lot of several lifts or days is of one feature")
			}
		}
	}
	if s.LiftFrom != 0 && s.LiftTo != 0 && s.LiftFrom > s.LiftTo {
		return valid.Fail("lift_from", float64(s.LiftFrom), fmt.Sprintf("must not be above lift_to (%d)", s.LiftTo))
	}
	for _, d := range []struct{ field, v string }{{"day_from", s.DayFrom}, {"day_to", s.DayTo}} {
		if _, err := time.Parse(time.DateOnly, d.v); d.v != "" && err != nil {
			return &valid.FieldError{Field: d.field, Value: d.v, Rule: "must be a date written YYYY-MM-DD"}
		}
	}
	if s.DayFrom != "" && s.DayTo != "" && s.DayFrom > s.DayTo {
		return &valid.FieldError{Field: "day_from", Value: s.DayFrom, Rule: "must not be after day_to (" + s.DayTo + ")"}
	}
	return nil
}

// holds reports whether t, on the placement pl (nil for none), is in the
// feature scope s. It reads the test only when pl is nil or the scope
// bounds days: a report asks it of every test of the project.
func (s LotScope) holds(t *ledger.Test, pl *ledger.Placement) bool {
	var feature string
	var lift uint32
	if pl != nil {
		feature, lift = pl.Feature, pl.LiftNumber
	} else {
		feature, lift = t.Content.Feature, t.Content.LiftNumber
	}
	switch {
	case feature != s.Feature:
		return false
	case (s.LiftFrom != 0 || s.LiftTo != 0) && (lift == 0 || lift < s.LiftFrom || (s.LiftTo != 0 && lift > s.LiftTo)):
		return false
	case s.DayFrom != "" && t.Day < s.DayFrom, s.DayTo != "" && t.Day > s.DayTo:
		return false
	}
	return true
}

// name says the feature scope in words: "embankment lifts 2–5,
// 2026-07-01 to 2026-07-07".
func (s LotScope) name() string {
	var b strings.Builder
	b.WriteString(s.Feature)
	switch from, to := s.LiftFrom, s.LiftTo; {
	case from != 0 && from == to:
		fmt.Fprintf(&b, " lift %d", from)
	case from != 0 && to != 0:
		fmt.Fprintf(&b, " lifts %d–%d", from, to)
	case from != 0:
		fmt.Fprintf(&b, " lifts %d and above", from)
	case to != 0:
		fmt.Fprintf(&b, " lifts up to %d", to)
	}
	switch from, to := s.DayFrom, s.DayTo; {
	case from != "" && from == to:
		fmt.Fprintf(&b, ", %s", from)
	case from != "" && to != "":
		fmt.Fprintf(&b, ", %s to %s", from, to)
	case from != "":
		fmt.Fprintf(&b, ", from %s", from)
	case to != "":
		fmt.Fprintf(&b, ", up to %s", to)
	}
	return b.String()
}

// liftName names a one-lift lot: "embankment lift 3".
func liftName(pl *ledger.Placement) string {
	if pl.LiftNumber == 0 {
		return pl.Feature + ", placement " + pl.ID
	}
	return pl.Feature + " lift " + strconv.FormatUint(uint64(pl.LiftNumber), 10)
}

// Acceptance is a lot's outcome against the spec's acceptance limit.
type Acceptance string

// The outcomes of a lot.
const (
	// Accepted: every characteristic's percent within limits reaches the
	// spec's LotAcceptancePWL.
	Accepted Acceptance = "accepted"
	// Rejected: a characteristic's percent within limits falls below it.
	Rejected Acceptance = "rejected"
	// NoAcceptanceLimit: the spec sets no LotAcceptancePWL; the estimate
	// is for information.
	NoAcceptanceLimit Acceptance = "no_acceptance_limit"
	// NotEstimated: the spec sets a limit but the lot has no estimate
	// (too few final results, or nothing to estimate); Lot.Why says why.
	NotEstimated Acceptance = "not_estimated"
)

// Quality is one characteristic of a lot against its limits.
type Quality struct {
	// Values are the final tests' values, in the order of Lot.Tests:
	// relative compaction in percent, or moisture in the spec's basis
	// (points from optimum, or percent of optimum).
	Values       []float64
	Lower, Upper *float64 // the spec's limits; nil for none
	// PWL is the estimate; nil when the lot has fewer than qc.MinLotSize
	// final results.
	PWL *qc.Lot
}

// Lot is the statistical acceptance of the final tests of one lot against
// one spec.
type Lot struct {
	// Name says the lot in words: "embankment lift 3".
	Name    string
	Feature string
	// Placement is the lift of a one-lift lot; nil for a lot of a scope.
	Placement *ledger.Placement
	SpecID    string
	// Tests are the lot's final tests, oldest first.
	Tests []*ledger.Test
	// Compaction is relative compaction against the spec's minimum (a
	// lower limit only); nil when the spec sets none. Moisture is against
	// the spec's moisture window; nil when the spec sets none.
	Compaction, Moisture *Quality
	// Acceptance is the outcome against AcceptancePWL, the spec's
	// LotAcceptancePWL (zero for none).
	Acceptance    Acceptance
	AcceptancePWL float64
	// LeftOut are the lot's tests that are not final, oldest first, each
	// with why.
	LeftOut []LeftOut
	// Why says why the lot has no estimate, or why it was rejected.
	Why string
}

// LeftOut is a test left out of its lot.
type LeftOut struct {
	TestID     string
	Reason     Reason
	ReplacedBy string // for ReworkedAndRetested, the earliest retest that counts
}

// Lots estimates, for each lot of the scope, the percent of the lot within
// the spec's limits (percent within limits, AASHTO R 9, with the estimator
// of qc.PercentWithinLimits): relative compaction against the minimum and,
// when the spec sets a moisture window, moisture against it, in the spec's
// basis as grading applies it (qc.Grade): the deviation from optimum in
// points, or the moisture as a percent of optimum. A lot holds final tests
// only (see Finals); its other tests are in LeftOut with the reason.
//
// With a spec's LotAcceptancePWL, a lot is Accepted when every
// characteristic reaches it, else Rejected. A lot with fewer than
// qc.MinLotSize final results, whose spec sets no limit to estimate
// against or has not reached this replica, or whose moisture window has no
// width, is returned without an estimate, with Why. A test that names no
// spec is in no lot; in the default scope, neither is a test that names no
// placement this replica holds. Sorted by placement (one-lift lots), then
// spec.
//
// Lots returns a *valid.FieldError (wrapped, errors.Is valid.ErrInput)
// naming the field of a scope that breaks a rule. One pass over the tests:
// linear in the size of the project.
func Lots(p *ledger.Projection, scope LotScope) ([]Lot, error) {
	if err := scope.validate(); err != nil {
		return nil, fmt.Errorf("report: lots: %w", err)
	}
	type key struct{ placement, spec ledger.Handle }
	type left struct {
		r *ledger.TestRow
		o LeftOut
	}
	type group struct {
		pl    *ledger.Placement
		spec  *ledger.Spec // nil when this replica does not hold it
		kinds valueKinds   // what the spec sets, looked up once for the lot
		final []*ledger.Test
		last  *ledger.TestRow // the final test joined last
		left  []left
		// values are the final tests' values of the characteristics the
		// spec sets, gathered as the tests join, while each is at hand,
		// rather than in a second pass over the lot.
		values values
		// unsorted is set when a final test joins out of time order; the
		// check too is made as tests join.
		unsorted bool
	}
	join := func(g *group, r *ledger.TestRow) {
		if g.last != nil && !g.unsorted && rowTime(g.last, r) > 0 {
			g.unsorted = true
		}
		g.final, g.last = append(g.final, r.Test), r
		g.values.add(g.kinds, r.RelativeCompaction, r.MoistureDeviation, r.MoisturePercentOfOptimum)
	}
	// Lots are alike in size: a new lot has room for as many final tests
	// as the one before it took, rather than growing test by test.
	room := 0
	groups := map[key]*group{}
	// The lots in the order the pass met them: tests and placements take
	// ids of the same kind, mostly in time order, so that this is mostly
	// the order of the output already.
	var keys []key
	// One pass over the tests' rows; a failure joins its lot or LeftOut
	// once the pass has met every retest that may replace it.
	var finals finalsPass[*group]
	rows := p.TestRows()
	// The placements by handle, each looked up once: the tests name a
	// placement by handle (nil: not looked up yet; none: not held).
	pls := make([]*ledger.Placement, rows.NumHandles())
	none := &ledger.Placement{}
	var lastKey key
	var g *group
	for i := range rows.Rows {
		r := &rows.Rows[i]
		finals.note(r)
		if r.Spec == 0 {
			continue
		}
		var pl *ledger.Placement
		if r.Placement != 0 {
			if pl = pls[r.Placement]; pl == nil {
				if pl, _ = p.Placement(rows.ID(r.Placement)); pl == nil {
					pl = none
				}
				pls[r.Placement] = pl
			}
			if pl == none {
				pl = nil
			}
		}
		k := key{spec: r.Spec}
		switch {
		case scope.Feature != "":
			if !scope.holds(r.Test, pl) {
				continue
			}
		case pl == nil:
			continue
		default:
			k.placement = r.Placement
		}
		if g == nil || k != lastKey {
			if g != nil {
				room = len(g.final)
			}
			if g = groups[k]; g == nil {
				g = &group{final: make([]*ledger.Test, 0, room)}
				if k.placement != 0 {
					g.pl = pl
				}
				if spec, ok := p.Spec(rows.ID(k.spec)); ok {
					g.spec, g.kinds = spec, kindsOf(spec)
					g.values = newValues(g.kinds, room)
				}
				groups[k] = g
				keys = append(keys, k)
			}
			lastKey = k
		}
		switch why, decided := finals.judge(r, g); {
		case !decided:
		case why == "":
			join(g, r)
		default:
			g.left = append(g.left, left{r, LeftOut{TestID: r.ID, Reason: why}})
		}
	}
	// The failures join their lots last, out of order: join notes it.
	for h, why := range finals.decided() {
		if why == "" {
			join(h.at, h.row)
		} else {
			h.at.left = append(h.at.left, left{h.row, LeftOut{TestID: h.row.ID, Reason: why, ReplacedBy: h.by.ID}})
		}
	}
	byID := func(a, b key) int {
		return cmp.Or(cmp.Compare(rows.ID(a.placement), rows.ID(b.placement)), cmp.Compare(rows.ID(a.spec), rows.ID(b.spec)))
	}
	if !slices.IsSortedFunc(keys, byID) {
		slices.SortFunc(keys, byID)
	}
	out := make([]Lot, 0, len(keys))
	name := scope.name()
	for _, k := range keys {
		g := groups[k]
		if g.unsorted {
			slices.SortFunc(g.final, byTime)
			g.values = values{}
			for _, t := range g.final {
				g.values.add(g.kinds, t.Result.RelativeCompaction, t.Result.MoistureDeviation, t.Result.MoisturePercentOfOptimum)
			}
		}
		slices.SortFunc(g.left, func(a, b left) int { return rowTime(a.r, b.r) })
		l := Lot{Name: name, Feature: scope.Feature, Placement: g.pl, SpecID: rows.ID(k.spec), Tests: g.final}
		if g.pl != nil {
			l.Name, l.Feature = liftName(g.pl), g.pl.Feature
		}
		if len(g.left) > 0 {
			l.LeftOut = make([]LeftOut, 0, len(g.left))
			for _, o := range g.left {
				l.LeftOut = append(l.LeftOut, o.o)
			}
		}
		if len(l.Tests) == 0 { // nil for none, as appending to nothing gives
			l.Tests, g.values = nil, values{}
		}
		l.estimate(g.spec, g.values)
		out = append(out, l)
	}
	return out, nil
}

// values are the values of a lot's final tests, in the order of its
// tests, for the characteristics its spec sets: relative compaction when
// the spec sets a minimum, moisture in the spec's basis when it sets a
// window. Each is nil for none, as appending gives.
type values struct {
	compaction, moisture []float64
}

// valueKinds are the characteristics a spec sets: relative compaction
// when it sets a minimum, moisture when it sets a window, and moisture's
// basis (as a percent of optimum, or points from it).
type valueKinds struct {
	compaction, moisture, ofOptimum bool
}

// kindsOf returns the characteristics spec sets.
func kindsOf(spec *ledger.Spec) valueKinds {
	s := spec.QC()
	return valueKinds{compaction: s.MinCompaction != nil, moisture: s.MoistureLow != nil || s.MoistureHigh != nil,
		ofOptimum: s.MoistureBasis == qc.PercentOfOptimum}
}

// newValues returns values with room for n tests of the kinds k.
func newValues(k valueKinds, n int) values {
	var v values
	if n > 0 {
		if k.compaction {
			v.compaction = make([]float64, 0, n)
		}
		if k.moisture {
			v.moisture = make([]float64, 0, n)
		}
	}
	return v
}

// add appends a test's values of the kinds k: its relative compaction,
// and its moisture deviation or percent of optimum.
func (v *values) add(k valueKinds, compaction, deviation, ofOptimum float64) {
	if k.compaction {
		v.compaction = append(v.compaction, compaction)
	}
	if k.moisture {
		m := deviation
		if k.ofOptimum {
			m = ofOptimum
		}
		v.moisture = append(v.moisture, m)
	}
}

// estimate fills the lot's characteristics, their estimates and the
// acceptance from its spec (nil when this replica does not hold it) and
// the values of its final tests.
func (l *Lot) estimate(spec *ledger.Spec, v values) {
	l.Acceptance = NotEstimated
	if spec == nil {
		l.Why = "its spec has not reached this replica"
		return
	}
	l.AcceptancePWL = spec.LotAcceptancePWL
	if l.AcceptancePWL <= 0 {
		l.Acceptance = NoAcceptanceLimit
	}
	s := spec.QC()
	limit := func(x *qc.Limit) *float64 {
		if x == nil {
			return nil
		}
		v := x.Value
		return &v
	}
	if s.MinCompaction != nil {
		l.Compaction = &Quality{Lower: limit(s.MinCompaction), Values: v.compaction}
	}
	if s.MoistureLow != nil || s.MoistureHigh != nil {
		l.Moisture = &Quality{Lower: limit(s.MoistureLow), Upper: limit(s.MoistureHigh), Values: v.moisture}
	}
	switch {
	case l.Compaction == nil && l.Moisture == nil:
		l.Why = "its spec sets neither a minimum relative compaction nor a moisture window"
		return
	case len(l.Tests) < qc.MinLotSize:
		l.Why = fmt.Sprintf("too few results: %d final, and percent within limits needs at least %d", len(l.Tests), qc.MinLotSize)
		return
	}
	var short, failed []string
	for _, c := range []struct {
		name string
		q    *Quality
	}{{"relative compaction", l.Compaction}, {"moisture", l.Moisture}} {
		if c.q == nil {
			continue
		}
		est, err := qc.PercentWithinLimits(c.q.Values, c.q.Lower, c.q.Upper)
		if err != nil { // a window of no width: one lot says so, the others stand
			failed = append(failed, fmt.Sprintf("%s cannot be estimated (%v)", c.name, err))
			continue
		}
		c.q.PWL = &est
		// A tolerance so that a PWL equal to the limit but for floating
		// noise reaches it.
		if l.AcceptancePWL > 0 && est.PWL < l.AcceptancePWL-1e-9 {
			short = append(short, fmt.Sprintf("%s is %.1f %% within limits", c.name, est.PWL))
		}
	}
	switch {
	case len(failed) > 0:
		l.Why = strings.Join(failed, "; ")
	case l.AcceptancePWL <= 0:
	case len(short) > 0:
		l.Acceptance = Rejected
		l.Why = fmt.Sprintf("%s, below the %g %% the spec requires", strings.Join(short, " and "), l.AcceptancePWL)
	default:
		l.Acceptance = Accepted
	}
}
