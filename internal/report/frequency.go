package report

import (
	"cmp"
	"math"
	"slices"

	"tamp/internal/ledger"
)

// RuleKind names a spec's test frequency rule.
type RuleKind string

// The frequency rules a spec can set.
const (
	// VolumeRule asks one test per VolumePerTest of compacted volume.
	VolumeRule RuleKind = "volume"
	// AreaRule asks one test per AreaPerTest of the lift's plan area.
	AreaRule RuleKind = "area"
	// LengthRule asks one test per LengthPerTest along the alignment.
	LengthRule RuleKind = "length"
	// PerLiftRule asks at least MinTestsPerLift tests of every lift.
	PerLiftRule RuleKind = "per_lift"
)

// Rule is one frequency rule of a spec applied to one lift.
type Rule struct {
	Kind RuleKind
	// Per is the spec's quantity per test, SI (m3, m2 or m); for
	// PerLiftRule, the count of tests each lift needs.
	Per float64
	// Quantity is the lift's volume, plan area or length, SI; 1 (the
	// lift) for PerLiftRule; zero when not known.
	Quantity float64
	// Required is ceil(Quantity / Per), or Per for PerLiftRule; zero when
	// the rule does not apply.
	Required int
	// Applies is false when the lift's quantity is not known; Why says
	// what is missing.
	Applies bool
	Why     string
}

// Frequency is the test count of one placement against one spec.
type Frequency struct {
	Placement *ledger.Placement
	SpecID    string
	// Rules are the spec's rules in the order volume, area, length, per
	// lift; only the rules the spec sets.
	Rules []Rule
	// Required is the most any applicable rule asks; Taken the final tests
	// of the placement against the spec (see Finals); Shortfall is
	// Required - Taken when positive.
	Required, Taken, Shortfall int
}

// ceilTests is ceil(q / per), with a tolerance so that an exact multiple
// stored with floating noise (1,500 yd3 over 500 yd3 in m3) does not round
// up.
func ceilTests(q, per float64) int { return int(math.Ceil(q/per - 1e-9)) }

// rules applies the frequency rules of spec to the placement pl.
func rules(spec *ledger.Spec, pl *ledger.PlacementSummary) []Rule {
	var out []Rule
	perQuantity := func(kind RuleKind, per, q float64, why string) {
		if per <= 0 {
			return
		}
		r := Rule{Kind: kind, Per: per, Quantity: max(q, 0)}
		if q > 0 {
			r.Applies, r.Required = true, ceilTests(q, per)
		} else {
			r.Why = why
		}
		out = append(out, r)
	}
	perQuantity(VolumeRule, spec.VolumePerTest, pl.CompactedVolume, "the placement records no compacted volume")
	area, why := pl.Area, ""
	if area <= 0 {
		switch st := pl.Stations; {
		case !pl.HasStations:
			area, why = 0, "the placement records neither an area nor stations"
		case st.To-st.From <= 0:
			area, why = 0, "the placement records no area and its stations give no length"
		case st.OffsetRight-st.OffsetLeft <= 0:
			area, why = 0, "the placement records no area and its offsets give no width"
		default:
			area = (st.To - st.From) * (st.OffsetRight - st.OffsetLeft)
		}
	}
	perQuantity(AreaRule, spec.AreaPerTest, area, why)
	length, why := 0.0, "the placement records no stations"
	if st := pl.Stations; pl.HasStations {
		length, why = st.To-st.From, "the placement's stations give no length"
	}
	perQuantity(LengthRule, spec.LengthPerTest, length, why)
	if n := spec.MinTestsPerLift; n > 0 {
		out = append(out, Rule{Kind: PerLiftRule, Per: float64(n), Quantity: 1, Required: int(n), Applies: true})
	}
	return out
}

// TestFrequency compares, for every placement and every spec that applies
// to it (the placement's own spec, and every spec a test on it names), the
// final tests taken with the most any of the spec's frequency rules asks.
// A rule whose lift quantity is not recorded is listed as not applicable
// with why. A placement with a spec and no test is listed with none taken;
// a spec that sets no frequency rule, or that this replica does not hold
// yet, is left out. Final tests count (see Finals): a failure replaced by
// its retest counts once, through the retest; a voided, returned or
// ungraded test does not count. Sorted by placement, then spec.
func TestFrequency(p *ledger.Projection) []Frequency {
	// One pass over the tests' rows; a failure is counted once the pass
	// has met every retest that may replace it.
	type count struct {
		specs *specCounts
		i     int
	}
	var finals finalsPass[count]
	rows := p.TestRows()
	named := make([]*specCounts, rows.NumHandles()) // placement handle -> the specs its tests name
	for i := range rows.Rows {
		r := &rows.Rows[i]
		finals.note(r)
		if r.Placement == 0 || r.Spec == 0 {
			continue
		}
		cur := named[r.Placement]
		if cur == nil {
			cur = &specCounts{}
			named[r.Placement] = cur
		}
		// The spec applies to the placement, final or not.
		k := cur.add(r.Spec)
		if why, ok := finals.judge(r, count{cur, k}); ok && why == "" {
			(*cur)[k].final++
		}
	}
	for h, why := range finals.decided() {
		if why == "" {
			(*h.at.specs)[h.at.i].final++
		}
	}
	var out []Frequency
	placements, handles := rows.Placements() // sorted by id, and specs below: the output is sorted
	summaries := rows.PlacementSummaries()
	// The specs by handle, and the spec a placement names without a
	// handle (no test names it), each looked up once.
	var lastSpec string
	var lastHandle ledger.Handle
	var lastHeld *ledger.Spec
	var hs []ledger.Handle
	type specOf struct {
		id   string
		spec *ledger.Spec
		h    ledger.Handle // 0 for a spec no test names
	}
	var list []specOf // the specs of a placement, in id order
	for i, pl := range placements {
		var specs specCounts
		if h := handles[i]; h != 0 && named[h] != nil {
			specs = *named[h]
		}
		hs = hs[:0]
		for _, c := range specs {
			hs = append(hs, c.spec)
		}
		// The placement's own spec, unless a test on it names that one.
		var own *ledger.Spec // when it has no handle
		sum := &summaries[i]
		if sum.SpecID != "" {
			if sum.SpecID != lastSpec {
				lastSpec, lastHeld = sum.SpecID, nil
				var ok bool
				if lastHandle, ok = rows.Handle(sum.SpecID); !ok {
					lastHeld, _ = p.Spec(sum.SpecID)
				}
			}
			switch {
			case lastHandle == 0:
				own = lastHeld
			case !slices.Contains(hs, lastHandle):
				hs = append(hs, lastHandle)
			}
		}
		// The specs that have handles in id order, and the one without
		// (which no test names) in its place among them.
		slices.SortFunc(hs, rows.CompareIDs)
		list = list[:0]
		for _, h := range hs {
			list = append(list, specOf{rows.ID(h), rows.Spec(h), h})
		}
		if own != nil {
			at, _ := slices.BinarySearchFunc(list, sum.SpecID, func(n specOf, id string) int { return cmp.Compare(n.id, id) })
			list = slices.Insert(list, at, specOf{sum.SpecID, own, 0})
		}
		for _, n := range list {
			spec, id := n.spec, n.id
			if spec == nil {
				continue
			}
			rs := rules(spec, sum)
			if len(rs) == 0 {
				continue
			}
			f := Frequency{Placement: pl, SpecID: id, Rules: rs, Taken: specs.taken(n.h)}
			for _, r := range rs {
				f.Required = max(f.Required, r.Required)
			}
			f.Shortfall = max(0, f.Required-f.Taken)
			out = append(out, f)
		}
	}
	return out
}

// specCounts are the specs the tests of one placement name, each with its
// count of final tests: a few, so a list.
type specCounts []specCount

type specCount struct {
	spec  ledger.Handle
	final int
}

// add notes a test naming spec and returns the spec's index.
func (s *specCounts) add(spec ledger.Handle) int {
	if i := slices.IndexFunc(*s, func(c specCount) bool { return c.spec == spec }); i >= 0 {
		return i
	}
	*s = append(*s, specCount{spec: spec})
	return len(*s) - 1
}

func (s specCounts) taken(spec ledger.Handle) int {
	if i := slices.IndexFunc(s, func(c specCount) bool { return c.spec == spec }); i >= 0 {
		return s[i].final
	}
	return 0
}
