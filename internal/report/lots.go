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

// holds reports whether t, on a placement of the lift l (held false for
// none), is in the feature scope s. It reads the test only when it is on
// no placement held or the scope bounds days (see holdsLift).
func (s LotScope) holds(t *ledger.Test, l ledger.Lift, held bool) bool {
	if !held {
		l = ledger.Lift{Feature: t.Content.Feature, Number: t.Content.LiftNumber}
	}
	return s.holdsLift(l) && !(s.DayFrom != "" && t.Day < s.DayFrom || s.DayTo != "" && t.Day > s.DayTo)
}

// holdsLift reports whether the lift l is in the feature scope s, days
// aside.
func (s LotScope) holdsLift(l ledger.Lift) bool {
	switch lift := l.Number; {
	case l.Feature != s.Feature:
		return false
	case (s.LiftFrom != 0 || s.LiftTo != 0) && (lift == 0 || lift < s.LiftFrom || (s.LiftTo != 0 && lift > s.LiftTo)):
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
	type group struct {
		pl    *ledger.Placement
		lift  ledger.Lift  // pl's
		spec  *ledger.Spec // nil when this replica does not hold it
		kinds valueKinds   // what the spec sets, looked up once for the lot
		final []*ledger.Test
		last  *ledger.TestRow // the final test joined last
		left  int             // the tests left out of it, gathered in lefts
		from  int             // the index in byLot past its tests left out, once they are filed
		// values are the final tests' values of the characteristics the
		// spec sets, gathered as the tests join, while each is at hand,
		// rather than in a second pass over the lot.
		values values
		// unsorted is set when a final test joins out of time order; the
		// check too is made as tests join.
		unsorted bool
	}
	// The lots, in the order the pass met them: tests and placements take
	// ids of the same kind, mostly in time order, so that this is mostly
	// the order of the output already. A lot is named by its index here.
	var groups []group
	var keys []key
	// The tests left out, each with the index of its lot, sorted by lot at
	// the end rather than kept in a list for each.
	type leftAt struct {
		at int
		leftRow
	}
	var lefts []leftAt
	join := func(g *group, r *ledger.TestRow) {
		// rowTime only for tests of one wall time: mostly the walls tell.
		if g.last != nil && !g.unsorted && g.last.HLC.Wall >= r.HLC.Wall && (g.last.HLC.Wall > r.HLC.Wall || rowTime(g.last, r) > 0) {
			g.unsorted = true
		}
		g.final, g.last = append(g.final, r.Test), r
		g.values.add(g.kinds, r.RelativeCompaction, r.MoistureDeviation, r.MoisturePercentOfOptimum)
	}
	// Lots are alike in size: a new lot has room for as many final tests
	// as the one before it took, rather than growing test by test, carved
	// from a few large blocks rather than allocated lot by lot.
	room := 0
	var tests slab[*ledger.Test]
	var floats slab[float64]
	index := map[key]int{}
	// One pass over the tests' rows; a failure joins its lot or LeftOut
	// once the pass has met every retest that may replace it.
	var finals finalsPass[int]
	rows := p.TestRows()
	if scope.Feature == "" { // about a lot per placement named
		groups, keys = make([]group, 0, rows.NumHandles()), make([]key, 0, rows.NumHandles())
	}
	var lastKey key
	// Of the placement of the last row: a placement's tests mostly come
	// together.
	lastPlacement := ledger.Handle(0)
	var pl *ledger.Placement
	var lift ledger.Lift
	inScope := scope.Feature != "" && scope.holdsLift(lift) // when the scope bounds no day and pl is held
	byDay := scope.DayFrom != "" || scope.DayTo != ""
	at := -1 // the lot of lastKey
	for i := range rows.Rows {
		r := &rows.Rows[i]
		finals.note(r)
		if r.Spec == 0 {
			continue
		}
		if r.Placement != lastPlacement {
			lastPlacement, pl, lift = r.Placement, rows.Placement(r.Placement), rows.Lift(r.Placement)
			inScope = scope.Feature != "" && scope.holdsLift(lift)
		}
		k := key{spec: r.Spec}
		switch {
		case scope.Feature != "":
			if pl == nil || byDay {
				if !scope.holds(r.Test, lift, pl != nil) {
					continue
				}
			} else if !inScope {
				continue
			}
		case pl == nil:
			continue
		default:
			k.placement = r.Placement
		}
		if at < 0 || k != lastKey {
			if at >= 0 {
				room = len(groups[at].final)
			}
			var ok bool
			if at, ok = index[k]; !ok {
				g := group{final: tests.take(room)}
				if k.placement != 0 {
					g.pl, g.lift = pl, lift
				}
				if spec := rows.Spec(k.spec); spec != nil {
					g.spec, g.kinds = spec, kindsOf(spec)
					g.values = newValues(g.kinds, room, &floats)
				}
				at = len(groups)
				index[k] = at
				groups, keys = append(groups, g), append(keys, k)
			}
			lastKey = k
		}
		switch why, decided := finals.judge(r, at); {
		case !decided:
		case why == "":
			join(&groups[at], r)
		default:
			groups[at].left++
			lefts = append(lefts, leftAt{at, leftRow{r, LeftOut{TestID: r.ID, Reason: why}}})
		}
	}
	// The failures join their lots last, out of order: join notes it. Most
	// of them were reworked and retested, and are left out.
	lefts = slices.Grow(lefts, len(finals.held))
	for h, why := range finals.decided() {
		g := &groups[h.at]
		if why == "" {
			join(g, h.row)
		} else {
			g.left++
			lefts = append(lefts, leftAt{h.at, leftRow{h.row, LeftOut{TestID: h.row.ID, Reason: why, ReplacedBy: h.by.ID}}})
		}
	}
	order := make([]int, len(keys))
	nLeft := 0
	for i := range order {
		order[i] = i
		groups[i].from = nLeft
		nLeft += groups[i].left
	}
	byLot := make([]leftRow, nLeft)
	for _, l := range lefts {
		g := &groups[l.at]
		byLot[g.from] = l.leftRow
		g.from++
	}
	byID := func(a, b int) int {
		ka, kb := keys[a], keys[b]
		return cmp.Or(rows.CompareIDs(ka.placement, kb.placement), rows.CompareIDs(ka.spec, kb.spec))
	}
	if !slices.IsSortedFunc(order, byID) {
		slices.SortFunc(order, byID)
	}
	out := make([]Lot, len(order))
	leftOut := make([]LeftOut, 0, nLeft)
	est := newEstimates(len(order))
	name := scope.name()
	names := liftNames(len(groups), func(i int) (ledger.Lift, string, bool) {
		return groups[i].lift, rows.ID(keys[i].placement), groups[i].pl != nil
	})
	for i, gi := range order {
		g := &groups[gi]
		if g.unsorted {
			slices.SortFunc(g.final, byTime)
			g.values = values{}
			for _, t := range g.final {
				g.values.add(g.kinds, t.Result.RelativeCompaction, t.Result.MoistureDeviation, t.Result.MoisturePercentOfOptimum)
			}
		}
		l := &out[i]
		*l = Lot{Name: name, Feature: scope.Feature, Placement: g.pl, SpecID: rows.ID(keys[gi].spec), Tests: g.final}
		if g.pl != nil {
			l.Name, l.Feature = names[gi], g.lift.Feature
		}
		if g.left > 0 {
			left := byLot[g.from-g.left : g.from] // from is now past them
			slices.SortFunc(left, func(a, b leftRow) int { return rowTime(a.r, b.r) })
			for _, o := range left {
				leftOut = append(leftOut, o.o)
			}
			l.LeftOut = leftOut[len(leftOut)-len(left) : len(leftOut) : len(leftOut)]
		}
		if len(l.Tests) == 0 { // nil for none, as appending to nothing gives
			l.Tests, g.values = nil, values{}
		}
		l.estimate(g.spec, g.values, &est)
	}
	return out, nil
}

// leftRow is a test left out of its lot, with its row.
type leftRow struct {
	r *ledger.TestRow
	o LeftOut
}

// liftNames names n one-lift lots, lot i being of the lift and
// placement id lift(i) gives (held false for a lot of no one lift, which
// takes no name): "embankment lift 3", or "embankment, placement <id>" for
// a placement of no lift number. The names share one string.
func liftNames(n int, lift func(i int) (l ledger.Lift, placement string, held bool)) []string {
	var b strings.Builder
	ends, size := make([]int, n), 0
	for i := range n {
		if l, _, held := lift(i); held {
			size += len(l.Feature) + len(" lift 1234") // room for most
		}
	}
	b.Grow(size)
	for i := range n {
		if l, id, held := lift(i); held {
			b.WriteString(l.Feature)
			if l.Number == 0 {
				b.WriteString(", placement ")
				b.WriteString(id)
			} else {
				b.WriteString(" lift ")
				var d [10]byte
				b.Write(strconv.AppendUint(d[:0], uint64(l.Number), 10))
			}
		}
		ends[i] = b.Len()
	}
	all, names := b.String(), make([]string, n)
	from := 0
	for i, end := range ends {
		names[i], from = all[from:end], end
	}
	return names
}

// slab hands out slices carved from large blocks, each with the room asked
// and no more, so that a slice outgrowing its room moves out on append
// rather than overwriting the next.
type slab[T any] struct{ free []T }

// slabBlock is the fewest elements a block holds.
const slabBlock = 4096

// take returns an empty slice with room for n elements (nil for none).
func (s *slab[T]) take(n int) []T {
	if n == 0 {
		return nil
	}
	if len(s.free) < n {
		s.free = make([]T, max(n, slabBlock))
	}
	out := s.free[:0:n]
	s.free = s.free[n:]
	return out
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

// newValues returns values with room for n tests of the kinds k, taken
// from s.
func newValues(k valueKinds, n int, s *slab[float64]) values {
	var v values
	if k.compaction {
		v.compaction = s.take(n)
	}
	if k.moisture {
		v.moisture = s.take(n)
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

// estimates hands out what Lot.estimate makes for a lot, from blocks made
// for every lot of a report at once.
type estimates struct {
	qualities []Quality
	lots      []qc.Lot
	limits    []float64
}

// newEstimates has room for n lots.
func newEstimates(n int) estimates {
	return estimates{qualities: make([]Quality, 0, 2*n), lots: make([]qc.Lot, 0, 2*n), limits: make([]float64, 0, 3*n)}
}

// next appends v to *s and returns a pointer to it; s has room for it, so
// that no pointer handed out before moves.
func next[T any](s *[]T, v T) *T {
	if len(*s) == cap(*s) { // more than asked for: a block of its own
		p := new(T)
		*p = v
		return p
	}
	*s = append(*s, v)
	return &(*s)[len(*s)-1]
}

// estimate fills the lot's characteristics, their estimates and the
// acceptance from its spec (nil when this replica does not hold it) and
// the values of its final tests, with the room in e.
func (l *Lot) estimate(spec *ledger.Spec, v values, e *estimates) {
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
		return next(&e.limits, x.Value)
	}
	if s.MinCompaction != nil {
		l.Compaction = next(&e.qualities, Quality{Lower: limit(s.MinCompaction), Values: v.compaction})
	}
	if s.MoistureLow != nil || s.MoistureHigh != nil {
		l.Moisture = next(&e.qualities, Quality{Lower: limit(s.MoistureLow), Upper: limit(s.MoistureHigh), Values: v.moisture})
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
		c.q.PWL = next(&e.lots, est)
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
