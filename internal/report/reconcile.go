package report

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"strings"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"

	"tamp/internal/earthwork"
	"tamp/internal/ledger"
)

// Confidence is the two-sided confidence level of the intervals on mean
// densities, from which the range on the bank volume still needed comes.
const Confidence = 0.95

// Mean is a mean density with its spread: the sample's standard deviation
// and the half-width of the Confidence interval on the mean,
// t(1 - (1 - Confidence)/2, n - 1) s / sqrt(n) (Student's t; zero when n < 2).
type Mean struct {
	Value     float64 // kg/m3
	StdDev    float64 // kg/m3, n - 1 in the denominator
	N         int
	HalfWidth float64 // kg/m3
}

func meanOf(values []float64) Mean {
	m := Mean{N: len(values)}
	if m.N == 0 {
		return m
	}
	m.Value = stat.Mean(values, nil)
	if m.N >= 2 {
		m.StdDev = stat.StdDev(values, nil)
		t := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(m.N - 1)}.Quantile(1 - (1-Confidence)/2)
		m.HalfWidth = t * m.StdDev / math.Sqrt(float64(m.N))
	}
	return m
}

// Range is an estimate with the low and high ends of its range.
type Range struct {
	Estimate, Low, High float64
}

// RangeMethod says how the range on the bank volume still needed is
// computed.
const RangeMethod = "the remaining compacted volume is converted at the fill's volume-weighted mean dry density so far over the borrow's mean bank dry density; " +
	"the range takes each mean at the ends of its 95 % Student's t confidence interval and combines them at their extremes (interval arithmetic): " +
	"low = remaining x (fill - h_fill) / (bank + h_bank), high = remaining x (fill + h_fill) / (bank - h_bank); " +
	"the fill interval is taken around the volume-weighted mean from the spread of the final tests"

// Scope says what a balance covers.
type Scope string

// The scopes of a balance.
const (
	SourceScope  Scope = "borrow_source"
	FeatureScope Scope = "feature"
)

// Balance is the reconciliation of one borrow source or one feature.
type Balance struct {
	Scope Scope
	// ID is the borrow source's id or the feature's name; Name its name.
	ID, Name string
	// Source is the borrow source (for a feature, the one its remaining
	// volume is planned from), nil when there is none.
	Source          *ledger.BorrowSource
	CompactedVolume float64 // m3 placed
	// Fill is the volume-weighted mean dry density of the final tests on
	// the placements (each placement's mean weighted by its compacted
	// volume; placements with no final test carry no weight), with the
	// spread of those tests.
	FillDensity Mean
	BankDensity Mean    // from the source's bank tests
	BankVolume  float64 // m3 of borrow consumed, by dry mass
	// LooseHauled is the loose volume hauled, m3, from the haul records:
	// for a feature, those that name a placement of it.
	LooseHauled   float64
	LooseExpected float64 // m3 loose the dry mass implies (zero without a loose density)
	// Balance holds the shrinkage and swell from the densities, each with
	// its definition in the project's convention.
	Balance earthwork.Balance
	// HauledSwellPercent is the swell the haul records imply:
	// (loose hauled - bank volume consumed) / bank volume consumed; zero
	// without hauls.
	HauledSwellPercent float64
	// DesignShrinkagePercent is the shrinkage the design assumed, under
	// the project's convention (for a source, weighted by the design
	// volumes of the features planned from it); zero when none is set.
	DesignShrinkagePercent float64
	DesignVolume           float64 // m3 compacted; zero when no design is set
	Remaining              float64 // m3 compacted still to place
	// StillNeeded is the bank volume still needed for the remaining volume,
	// with its range (RangeMethod).
	StillNeeded Range
	Convention  earthwork.Convention
	Notes       []string // what could not be computed, and why
}

// Reconcile balances, for each borrow source and then each feature, the
// compacted volume placed with the bank volume consumed and the loose
// volume hauled, through dry mass, from final tests only, and for the
// features the set-up designs, the bank volume still needed for the rest
// with its range. One pass over the tests and one over the placements.
func Reconcile(p *ledger.Projection) ([]Balance, error) {
	conv := earthwork.BankBasis
	var designs []ledger.FeatureDesign
	if su := p.SetUp(); su != nil {
		conv, designs = su.Shrinkage, su.Features
	}

	// Final tests' dry densities by placement, in id order, in a slice
	// indexed by the placements' handles (ledger.TestRows).
	// One pass: a failure, which a retest later in the pass may replace,
	// is held with its place in its placement's list and put there after
	// the pass if it is final, so that the densities keep id order.
	type place struct {
		list *[]float64
		at   int
	}
	var finals finalsPass[place]
	rows := p.TestRows()
	byPlacement := make([]*[]float64, rows.NumHandles()) // by placement handle
	room := 0
	for i := range rows.Rows {
		r := &rows.Rows[i]
		finals.note(r)
		pl := r.Placement
		if pl == 0 || !(r.DryDensity > 0) {
			continue
		}
		cur := byPlacement[pl]
		if cur == nil {
			// Placements are alike in their count of tests: room for as
			// many as the most any placement met so far took, rather than
			// growing test by test.
			list := make([]float64, 0, room)
			cur = &list
			byPlacement[pl] = cur
		}
		if why, decided := finals.judge(r, place{cur, len(*cur)}); decided && why == "" {
			*cur = append(*cur, r.DryDensity)
			room = max(room, len(*cur))
		}
	}
	var final []*heldFailure[place]
	for h, why := range finals.decided() {
		if why == "" {
			final = append(final, h)
		}
	}
	// Last held first: a failure put in its place moves none held before it.
	for _, h := range slices.Backward(final) {
		*h.at.list = slices.Insert(*h.at.list, h.at.at, h.row.DryDensity)
	}

	type acc struct {
		volume, weighted, weight float64
		tests                    []float64
		n                        int // the final tests of its placements
		untested                 int
		sources                  []string // the ids of the sources its placements came from, each once
	}
	add := func(a *acc, pl *ledger.PlacementSummary, ds []float64, mean float64) {
		a.volume += pl.CompactedVolume
		if !slices.Contains(a.sources, pl.BorrowSourceID) {
			a.sources = append(a.sources, pl.BorrowSourceID)
		}
		if len(ds) == 0 {
			a.untested++
			return
		}
		a.weighted += pl.CompactedVolume * mean
		a.weight += pl.CompactedVolume
		if a.tests == nil {
			a.tests = make([]float64, 0, a.n)
		}
		a.tests = append(a.tests, ds...)
	}
	bySource, byFeature := map[string]*acc{}, map[string]*acc{}
	sourceAcc, featureAcc := lastFew[acc]{m: bySource}, lastFew[acc]{m: byFeature}
	_, handles := rows.Placements()
	placements := rows.PlacementSummaries()
	// Each placement's final densities and their mean, and its balances,
	// found once for both passes and both the source's balance and the
	// feature's.
	dens, means := make([][]float64, len(placements)), make([]float64, len(placements))
	accs := make([][2]*acc, len(placements))
	for i := range placements {
		pl := &placements[i]
		if h := handles[i]; h != 0 && byPlacement[h] != nil {
			dens[i] = *byPlacement[h]
			means[i] = stat.Mean(dens[i], nil)
		}
		if pl.BorrowSourceID != "" {
			accs[i][0] = sourceAcc.get(pl.BorrowSourceID)
		}
		if pl.Feature != "" {
			accs[i][1] = featureAcc.get(pl.Feature)
		}
	}
	// Twice over the placements: first to size each balance's tests, so
	// that they are gathered in one allocation, then to add them up.
	for pass := range 2 {
		for i := range placements {
			for _, a := range accs[i] {
				switch {
				case a == nil:
				case pass == 0:
					a.n += len(dens[i])
				default:
					add(a, &placements[i], dens[i], means[i])
				}
			}
		}
	}
	looseBySource, looseByFeature := lastFew[float64]{m: map[string]*float64{}}, lastFew[float64]{m: map[string]*float64{}}
	_, haulPlacements := rows.Hauls()
	for i, h := range rows.HaulSummaries() {
		v := float64(h.Loads) * h.LooseVolumePerLoad
		*looseBySource.get(h.BorrowSourceID) += v
		if haulPlacements[i] != nil {
			*looseByFeature.get(h.Feature) += v
		}
	}
	borrow := p.BorrowSources()
	sources := map[string]*ledger.BorrowSource{}
	for _, s := range borrow {
		sources[s.ID] = s
	}

	fill := func(b *Balance, a *acc) {
		if a == nil {
			return
		}
		b.CompactedVolume = a.volume
		if a.weight > 0 {
			b.FillDensity = meanOf(a.tests)
			b.FillDensity.Value = a.weighted / a.weight
		}
		if a.untested > 0 {
			b.Notes = append(b.Notes, fmt.Sprintf("%d placement(s) have no final test; their volume is taken at the mean of the others", a.untested))
		}
	}
	balance := func(b *Balance, bank *ledger.BorrowSource) error {
		if bank != nil {
			b.BankDensity = meanOf(bank.BankDryDensities)
		}
		switch {
		case b.CompactedVolume == 0:
			return nil
		case b.FillDensity.N == 0:
			b.Notes = append(b.Notes, "no final test with a dry density on its placements: no bank volume")
			return nil
		case bank == nil:
			b.Notes = append(b.Notes, "no single borrow source: no bank volume")
			return nil
		case b.BankDensity.N == 0:
			b.Notes = append(b.Notes, fmt.Sprintf("borrow source %q has no bank test: no bank volume", bank.Name))
			return nil
		}
		bal, err := earthwork.Reconcile(earthwork.Placement{CompactedVolume: b.CompactedVolume, CompactedDryDensity: b.FillDensity.Value,
			BankDryDensity: b.BankDensity.Value, LooseDryDensity: bank.LooseDryDensity, Convention: conv})
		if err != nil {
			return fmt.Errorf("report: reconcile %s %s: %w", b.Scope, b.Name, err)
		}
		b.Balance, b.BankVolume, b.LooseExpected = bal, bal.BankVolume, bal.LooseVolume
		return nil
	}
	need := func(b *Balance, design ledger.FeatureDesign, bank *ledger.BorrowSource) {
		b.DesignVolume, b.DesignShrinkagePercent = design.DesignVolume, design.DesignShrinkagePercent
		b.Remaining = max(0, design.DesignVolume-b.CompactedVolume)
		if b.Remaining == 0 {
			return
		}
		f, k := b.FillDensity, Mean{}
		if bank != nil {
			k = meanOf(bank.BankDryDensities)
		}
		switch {
		case f.N == 0:
			b.Notes = append(b.Notes, "no final test yet: the bank volume still needed is unknown")
			return
		case bank == nil || k.N == 0:
			b.Notes = append(b.Notes, "no planned borrow source with bank tests: the bank volume still needed is unknown")
			return
		}
		b.StillNeeded = Range{Estimate: b.Remaining * f.Value / k.Value,
			Low: b.Remaining * (f.Value - f.HalfWidth) / (k.Value + k.HalfWidth), High: math.Inf(1)}
		if k.Value > k.HalfWidth {
			b.StillNeeded.High = b.Remaining * (f.Value + f.HalfWidth) / (k.Value - k.HalfWidth)
		}
		if f.N < 2 || k.N < 2 {
			b.Notes = append(b.Notes, "fewer than two tests on a density: its spread is unknown and the range holds only the other's")
		}
	}

	var out []Balance
	// Features, keyed by name, in name order: the designed and the placed.
	design := map[string]ledger.FeatureDesign{}
	for _, d := range designs {
		design[d.Feature] = d
	}
	names := make([]string, 0, len(byFeature)+len(design))
	for n := range byFeature {
		names = append(names, n)
	}
	for n := range design {
		if byFeature[n] == nil {
			names = append(names, n)
		}
	}
	slices.Sort(names)
	var features []Balance
	planned := map[string][]*Balance{} // source id -> the features planned from it
	for _, n := range names {
		b := Balance{Scope: FeatureScope, ID: n, Name: n, Convention: conv}
		a := byFeature[n]
		fill(&b, a)
		d, designed := design[n]
		// The bank volume taken is at the density of the source the lifts
		// came from (when they came from one); the volume still needed at
		// the planned source's, or that one's when the design names none.
		var placedFrom *ledger.BorrowSource
		if a != nil && len(a.sources) == 1 {
			placedFrom = sources[a.sources[0]]
		}
		bank := placedFrom
		if designed && d.BorrowSourceID != "" {
			bank = sources[d.BorrowSourceID]
			if bank == nil {
				b.Notes = append(b.Notes, fmt.Sprintf("the planned borrow source %s is not on this replica", d.BorrowSourceID))
			}
		}
		b.LooseHauled = looseByFeature.sum(n)
		if err := balance(&b, placedFrom); err != nil {
			return nil, err
		}
		b.Source = bank
		if designed {
			need(&b, d, bank)
		}
		features = append(features, b)
	}
	for i := range features {
		if s := features[i].Source; s != nil && features[i].DesignVolume > 0 {
			planned[s.ID] = append(planned[s.ID], &features[i])
		}
	}

	for _, src := range borrow {
		b := Balance{Scope: SourceScope, ID: src.ID, Name: src.Name, Source: src, Convention: conv, LooseHauled: looseBySource.sum(src.ID)}
		fill(&b, bySource[src.ID])
		if err := balance(&b, src); err != nil {
			return nil, err
		}
		var weight float64
		var unknown []string
		for _, f := range planned[src.ID] {
			if f.Remaining > 0 && f.StillNeeded.Estimate == 0 {
				unknown = append(unknown, f.Name)
			}
			b.DesignVolume += f.DesignVolume
			b.Remaining += f.Remaining
			b.StillNeeded.Estimate += f.StillNeeded.Estimate
			b.StillNeeded.Low += f.StillNeeded.Low
			b.StillNeeded.High += f.StillNeeded.High
			b.DesignShrinkagePercent += f.DesignShrinkagePercent * f.DesignVolume
			if f.DesignShrinkagePercent > 0 {
				weight += f.DesignVolume
			}
		}
		if len(unknown) > 0 {
			b.Notes = append(b.Notes, fmt.Sprintf("the bank volume still needed leaves out %s, whose need is not known yet (see each feature)",
				strings.Join(unknown, ", ")))
		}
		if weight > 0 {
			b.DesignShrinkagePercent /= weight
		} else {
			b.DesignShrinkagePercent = 0
		}
		out = append(out, b)
	}
	for i := range out {
		out[i].hauledSwell()
	}
	for i := range features {
		features[i].hauledSwell()
	}
	slices.SortStableFunc(out, func(a, b Balance) int { return cmp.Compare(a.Name, b.Name) })
	return append(out, features...), nil
}

// lastFew finds values by key in m, making those it lacks, and keeps the
// last few keys found at hand: a project has a few sources and features,
// met in turn, whose keys would otherwise be hashed again at every
// placement.
type lastFew[V any] struct {
	m    map[string]*V
	keys [4]string
	vals [4]*V
	next int
}

func (c *lastFew[V]) get(key string) *V {
	for i, k := range c.keys {
		if c.vals[i] != nil && k == key {
			return c.vals[i]
		}
	}
	v := c.m[key]
	if v == nil {
		v = new(V)
		c.m[key] = v
	}
	c.keys[c.next], c.vals[c.next] = key, v
	c.next = (c.next + 1) % len(c.keys)
	return v
}

// sum is the value of key, zero when there is none.
func (c *lastFew[V]) sum(key string) V {
	if v := c.m[key]; v != nil {
		return *v
	}
	var zero V
	return zero
}

func (b *Balance) hauledSwell() {
	if b.LooseHauled > 0 && b.BankVolume > 0 {
		b.HauledSwellPercent = 100 * (b.LooseHauled - b.BankVolume) / b.BankVolume
	}
}
