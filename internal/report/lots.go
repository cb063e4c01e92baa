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
	// A lot is of a placement and a spec (of no placement in a feature
	// scope): its placement, lift and spec are looked up by the handles of
	// its key when they are needed, rather than held for each lot.
	type key struct{ placement, spec ledger.Handle }
	type group struct {
		fill lotFill
		// prev is the lot made before it with the same handle in latest,
		// -1 for none: the lots are found by the handles that name them,
		// rather than by a map.
		prev int32
		left int32 // the tests left out of it, in lefts
	}
	// The lots, in the order the pass met them: tests and placements take
	// ids of the same kind, mostly in time order, so that this is mostly
	// the order of the output already. A lot is named by its index here.
	var groups []group
	var keys []key
	var lefts []leftAt
	// Lots are alike in size: a new lot has room for as many final tests
	// as the one before it took, rather than growing test by test, carved
	// from a few large blocks rather than allocated lot by lot.
	room := 0
	var tests slab[*ledger.Test]
	var floats slab[float64]
	// One pass over the tests' rows; a failure joins its lot or LeftOut
	// once the pass has met every retest that may replace it.
	var finals finalsPass[int]
	rows := p.TestRows()
	// By the placement handle of a one-lift lot, or the spec handle of a
	// lot of a scope: the last lot made with it, plus one (0 for none).
	latest := make([]int32, rows.NumHandles())
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
	// The fill of lot at, held here while its tests come and written back
	// when a test of another lot comes, rather than written in groups test
	// by test.
	var cur lotFill
	// fast is set when a test of lastKey's placement and spec is in lot
	// at without reading it: a test that is final as it stands (neither a
	// retest nor failed, nor voided, returned or pending) then joins it
	// straight away, as most do.
	fast := false
	const notPlain = ledger.RowFail | ledger.RowVoided | ledger.RowReturned | ledger.RowPending
	for i := range rows.Rows {
		r := &rows.Rows[i]
		if fast && r.Placement == lastPlacement && r.Spec == lastKey.spec && r.Retested == nil && r.State&notPlain == 0 {
			cur.join(r)
			continue
		}
		fast = false
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
				groups[at].fill, room = cur, len(cur.final)
			}
			h := cmp.Or(k.placement, k.spec)
			at = int(latest[h]) - 1
			for at >= 0 && keys[at] != k {
				at = int(groups[at].prev)
			}
			if at < 0 {
				g := group{prev: latest[h] - 1, fill: lotFill{final: tests.take(room)}}
				if spec := rows.Spec(k.spec); spec != nil {
					g.fill.kinds = kindsOf(spec)
					g.fill.values = newValues(g.fill.kinds, room, &floats)
				}
				at = len(groups)
				latest[h] = int32(at) + 1
				groups, keys = append(groups, g), append(keys, k)
			}
			cur, lastKey = groups[at].fill, k
		}
		fast = pl != nil && (scope.Feature == "" || !byDay && inScope)
		switch why, decided := finals.judge(r, at); {
		case !decided:
		case why == "":
			cur.join(r)
		default:
			groups[at].left++
			lefts = append(lefts, leftAt{row: r, at: int32(at), why: why})
		}
	}
	if at >= 0 {
		groups[at].fill = cur
	}
	// The failures join their lots last, out of order: join notes it. Most
	// of them were reworked and retested, and are left out.
	lefts = slices.Grow(lefts, len(finals.held))
	for h, why := range finals.decided() {
		if why == "" {
			groups[h.at].fill.join(h.row)
		} else {
			groups[h.at].left++
			lefts = append(lefts, leftAt{row: h.row, by: h.by, at: int32(h.at), why: why})
		}
	}
	order := make([]int, len(keys))
	for i := range order {
		order[i] = i
	}
	byID := func(a, b int) int {
		ka, kb := keys[a], keys[b]
		return cmp.Or(rows.CompareIDs(ka.placement, kb.placement), rows.CompareIDs(ka.spec, kb.spec))
	}
	if !slices.IsSortedFunc(order, byID) {
		slices.SortFunc(order, byID)
	}
	// The tests left out in the order of the output: by lot, then oldest
	// first. The pass mostly met them so already.
	leftOut := make([]LeftOut, len(lefts))
	if len(lefts) > 0 {
		rank := make([]int32, len(order)) // a lot's place in the output
		for i, gi := range order {
			rank[gi] = int32(i)
		}
		byLot := func(a, b leftAt) int { return cmp.Or(cmp.Compare(rank[a.at], rank[b.at]), rowTime(a.row, b.row)) }
		if !slices.IsSortedFunc(lefts, byLot) {
			slices.SortFunc(lefts, byLot)
		}
		for i, o := range lefts {
			l := &leftOut[i]
			l.TestID, l.Reason = o.row.ID, o.why
			if o.by != nil {
				l.ReplacedBy = o.by.ID
			}
		}
	}
	out := make([]Lot, len(order))
	est := newEstimates(len(order))
	name := scope.name()
	names := liftNames(len(groups), func(i int) (ledger.Lift, string, bool) {
		h := keys[i].placement
		return rows.Lift(h), rows.ID(h), rows.Placement(h) != nil
	})
	from := 0 // the first of leftOut not yet in a lot
	for i, gi := range order {
		g, k := &groups[gi], keys[gi]
		f := &g.fill
		if f.unsorted {
			slices.SortFunc(f.final, byTime)
			f.values = values{}
			for _, t := range f.final {
				f.values.add(f.kinds, t.Result.RelativeCompaction, t.Result.MoistureDeviation, t.Result.MoisturePercentOfOptimum)
			}
		}
		l := &out[i]
		l.Name, l.Feature, l.SpecID, l.Tests = name, scope.Feature, rows.ID(k.spec), f.final
		if pl := rows.Placement(k.placement); pl != nil {
			l.Placement, l.Name, l.Feature = pl, names[gi], rows.Lift(k.placement).Feature
		}
		if g.left > 0 {
			to := from + int(g.left)
			l.LeftOut, from = leftOut[from:to:to], to
		}
		if len(l.Tests) == 0 { // nil for none, as appending to nothing gives
			l.Tests, f.values = nil, values{}
		}
		l.estimate(rows.Spec(k.spec), f.values, &est)
	}
	return out, nil
}

// leftAt is a test left out of lot at, with why, and the retest that
// replaced it (nil for none).
type leftAt struct {
	row, by *ledger.TestRow
	at      int32
	why     Reason
}

// lotFill gathers a lot's final tests as they join, with the values of the
// characteristics its spec sets (kinds), while each test's row is at hand,
// rather than in a second pass over the lot.
type lotFill struct {
	final  []*ledger.Test
	values values
	kinds  valueKinds
	// last is the final test joined last, and unsorted is set when a test
	// joins out of time order: the check too is made as tests join.
	last     *ledger.TestRow
	unsorted bool
}

// join adds the row's test to the lot's final tests.
func (f *lotFill) join(r *ledger.TestRow) {
	// Mostly the walls tell: rowTime only for tests of one wall time.
	if f.last != nil && f.last.HLC.Wall >= r.HLC.Wall {
		f.unsorted = f.unsorted || f.last.HLC.Wall > r.HLC.Wall || rowTime(f.last, r) > 0
	}
	f.final, f.last = append(f.final, r.Test), r
	f.values.add(f.kinds, r.RelativeCompaction, r.MoistureDeviation, r.MoisturePercentOfOptimum)
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
