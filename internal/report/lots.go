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
// feature scope s.
func (s LotScope) holds(t *ledger.Test, pl *ledger.Placement) bool {
	feature, lift := t.Content.Feature, t.Content.LiftNumber
	if pl != nil {
		feature, lift = pl.Feature, pl.LiftNumber
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
	finals := finalsOf(p)
	type key struct{ placement, spec string }
	type left struct {
		t *ledger.Test
		o LeftOut
	}
	type group struct {
		pl    *ledger.Placement
		final []*ledger.Test
		left  []left
	}
	groups := map[key]*group{}
	// A lot's tests mostly follow one another in id order: the last
	// placement and group are kept at hand.
	var lastPlacement string
	var pl *ledger.Placement
	var lastKey key
	var g *group
	for t := range p.AllTests() {
		c := t.Content
		if c.SpecID == "" {
			continue
		}
		if c.PlacementID != lastPlacement {
			lastPlacement, pl = c.PlacementID, nil
			if c.PlacementID != "" {
				pl, _ = p.Placement(c.PlacementID)
			}
		}
		k := key{spec: c.SpecID}
		switch {
		case scope.Feature != "":
			if !scope.holds(t, pl) {
				continue
			}
		case pl == nil:
			continue
		default:
			k.placement = pl.ID
		}
		if g == nil || k != lastKey {
			if g = groups[k]; g == nil {
				g = &group{}
				if k.placement != "" {
					g.pl = pl
				}
				groups[k] = g
			}
			lastKey = k
		}
		switch why, by := finals.Why(t); {
		case why == "":
			g.final = append(g.final, t)
		default:
			o := LeftOut{TestID: t.ID, Reason: why}
			if by != nil {
				o.ReplacedBy = by.ID
			}
			g.left = append(g.left, left{t, o})
		}
	}
	keys := make([]key, 0, len(groups))
	for k := range groups {
		keys = append(keys, k)
	}
	slices.SortFunc(keys, func(a, b key) int { return cmp.Or(cmp.Compare(a.placement, b.placement), cmp.Compare(a.spec, b.spec)) })
	out := make([]Lot, 0, len(keys))
	name := scope.name()
	for _, k := range keys {
		g := groups[k]
		sortByTime(g.final)
		slices.SortFunc(g.left, func(a, b left) int { return byTime(a.t, b.t) })
		l := Lot{Name: name, Feature: scope.Feature, Placement: g.pl, SpecID: k.spec, Tests: g.final}
		if g.pl != nil {
			l.Name, l.Feature = liftName(g.pl), g.pl.Feature
		}
		if len(g.left) > 0 {
			l.LeftOut = make([]LeftOut, 0, len(g.left))
			for _, o := range g.left {
				l.LeftOut = append(l.LeftOut, o.o)
			}
		}
		l.estimate(p)
		out = append(out, l)
	}
	return out, nil
}

// values returns room for n values: nil for none, as appending gives.
func values(n int) []float64 {
	if n == 0 {
		return nil
	}
	return make([]float64, 0, n)
}

// estimate fills the lot's characteristics, their estimates and the
// acceptance from its final tests and spec.
func (l *Lot) estimate(p *ledger.Projection) {
	l.Acceptance = NotEstimated
	spec, ok := p.Spec(l.SpecID)
	if !ok {
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
		l.Compaction = &Quality{Lower: limit(s.MinCompaction), Values: values(len(l.Tests))}
		for _, t := range l.Tests {
			l.Compaction.Values = append(l.Compaction.Values, t.Result.RelativeCompaction)
		}
	}
	if s.MoistureLow != nil || s.MoistureHigh != nil {
		l.Moisture = &Quality{Lower: limit(s.MoistureLow), Upper: limit(s.MoistureHigh), Values: values(len(l.Tests))}
		for _, t := range l.Tests {
			v := t.Result.MoistureDeviation
			if s.MoistureBasis == qc.PercentOfOptimum {
				v = t.Result.MoisturePercentOfOptimum
			}
			l.Moisture.Values = append(l.Moisture.Values, v)
		}
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
