package report

import (
	"cmp"
	"math"
	"slices"

	"tamp/internal/ledger"
)

// Frequency is the test count of one placement against its spec.
type Frequency struct {
	Placement *ledger.Placement
	SpecID    string
	Tests     int // graded, not voided, not retests
	Required  int // ceil(compacted volume / volume per test)
	Shortfall int // Required - Tests when positive
}

// TestFrequency compares, for every placement whose tests name a spec with a
// required frequency, the tests taken with the tests the spec asks for.
// Retests do not count toward frequency (common practice).
func TestFrequency(p *ledger.Projection) []Frequency {
	counts := map[string]map[string]int{} // placement -> spec -> tests
	for _, t := range p.Tests() {
		c := t.Content
		if t.Voided() || t.RetestOf != "" || c.PlacementID == "" || c.SpecID == "" {
			continue
		}
		if counts[c.PlacementID] == nil {
			counts[c.PlacementID] = map[string]int{}
		}
		counts[c.PlacementID][c.SpecID]++
	}
	var out []Frequency
	for _, pl := range p.Snapshot().Placements {
		for specID, n := range counts[pl.ID] {
			spec, ok := p.Spec(specID)
			if !ok || spec.VolumePerTest <= 0 {
				continue
			}
			req := int(math.Ceil(pl.CompactedVolume/spec.VolumePerTest - 1e-9))
			out = append(out, Frequency{Placement: pl, SpecID: specID, Tests: n, Required: req, Shortfall: max(0, req-n)})
		}
	}
	slices.SortFunc(out, func(a, b Frequency) int {
		return cmp.Or(cmp.Compare(a.Placement.ID, b.Placement.ID), cmp.Compare(a.SpecID, b.SpecID))
	})
	return out
}
