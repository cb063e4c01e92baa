package ledger

import (
	"cmp"
	"slices"
)

// handleRecords are what reports look up by the handles of TestRows, found
// once for every report rather than in each: the placements and specs the
// handles name, the handles' order by id, and every placement and haul
// sorted by id. They are as the projection held them when it held the
// count events of events: the events only grow, so that any Apply that
// could change a placement, a spec or a haul changes the count, and the
// next reader finds them afresh.
type handleRecords struct {
	events     int
	placements []*Placement // by handle; nil when not held
	specs      []*Spec      // by handle; nil when not held
	lifts      []Lift       // by handle; zero when no placement is held
	// rank is each handle's place among the ids the handles name, in id
	// order: comparing ranks compares ids.
	rank []uint32
	// sorted are every placement held, sorted by id, and sortedHandles
	// their handles (0 for one no test names).
	sorted        []*Placement
	sortedHandles []Handle
	// hauls are every haul held, sorted by id, and haulPlacements the
	// placement each names (nil for none or one not held).
	hauls          []*Haul
	haulPlacements []*Placement
	// placed and hauled summarise sorted and hauls, in their order.
	placed []PlacementSummary
	hauled []HaulSummary
}

// PlacementSummary is what a balance of volumes and a count of tests
// against frequency rules read of a placement, laid out together, with
// the ids and names held once for all placements that share them.
type PlacementSummary struct {
	BorrowSourceID, Feature, SpecID string
	CompactedVolume, Area           float64
	// Stations is the placement's when HasStations.
	Stations    StationRange
	HasStations bool
}

// HaulSummary is what a balance of volumes reads of a haul, with the
// feature of the placement it names ("" for none, or one not held).
type HaulSummary struct {
	BorrowSourceID, Feature string
	Loads                   uint32
	LooseVolumePerLoad      float64
}

// PlacementSummaries returns a summary of each placement Placements
// returns, in its order (shared: treat it as read-only).
func (r TestRows) PlacementSummaries() []PlacementSummary { return r.records.placed }

// HaulSummaries returns a summary of each haul Hauls returns, in its order
// (shared: treat it as read-only).
func (r TestRows) HaulSummaries() []HaulSummary { return r.records.hauled }

// Lift is the feature and lift number a placement records, laid out
// together for the placements tests name: a report that groups tests by
// lift reads these rather than each placement, and the feature names are
// held once for all placements of a feature.
type Lift struct {
	Feature string
	Number  uint32
}

// Lift returns the feature and lift number of the placement a handle
// names, zero when the projection holds none by that id (or h is 0).
func (r TestRows) Lift(h Handle) Lift { return r.records.lifts[h] }

// Placement returns the placement a handle names, nil when the projection
// holds none by that id (or h is 0), without a map lookup.
func (r TestRows) Placement(h Handle) *Placement { return r.records.placements[h] }

// Spec returns the spec a handle names, nil when the projection holds none
// by that id (or h is 0), without a map lookup.
func (r TestRows) Spec(h Handle) *Spec { return r.records.specs[h] }

// CompareIDs compares the ids two handles name, as cmp.Compare compares
// the ids, without reading them.
func (r TestRows) CompareIDs(a, b Handle) int {
	return cmp.Compare(r.records.rank[a], r.records.rank[b])
}

// Placements returns every placement the projection holds, sorted by id as
// Projection.Placements gives them, and beside each its handle (0 when no
// test names it). Both are shared: treat them as read-only.
func (r TestRows) Placements() ([]*Placement, []Handle) {
	return r.records.sorted, r.records.sortedHandles
}

// Hauls returns every haul the projection holds, sorted by id as
// Projection.Hauls gives them, and beside each the placement it names (nil
// for none, or one the projection does not hold). Both are shared: treat
// them as read-only.
func (r TestRows) Hauls() ([]*Haul, []*Placement) { return r.records.hauls, r.records.haulPlacements }

// lookUp finds the records of every handle again when p has applied an
// event since they were found, or handles were given since. The records
// are made anew, never changed: a reader may still hold the old ones.
func (r *testRows) lookUp(p *Projection) {
	old := r.records
	if old != nil && old.events == len(p.events) && len(old.placements) == len(r.ids) {
		return
	}
	x := &handleRecords{events: len(p.events), placements: make([]*Placement, len(r.ids)), specs: make([]*Spec, len(r.ids)),
		lifts: make([]Lift, len(r.ids))}
	names := map[string]string{} // each id or name once
	intern := func(s string) string {
		if held, ok := names[s]; ok {
			return held
		}
		names[s] = s
		return s
	}
	for h, id := range r.ids {
		if id == "" {
			continue
		}
		x.placements[h], x.specs[h] = p.placements[id], p.specs[id]
		if pl := x.placements[h]; pl != nil {
			x.lifts[h] = Lift{Feature: intern(pl.Feature), Number: pl.LiftNumber}
		}
	}
	if old != nil && len(old.rank) == len(r.ids) {
		x.rank = old.rank // the same ids
	} else {
		order := make([]Handle, len(r.ids))
		for h := range order {
			order[h] = Handle(h)
		}
		slices.SortFunc(order, func(a, b Handle) int { return cmp.Compare(r.ids[a], r.ids[b]) })
		x.rank = make([]uint32, len(r.ids))
		for i, h := range order {
			x.rank[h] = uint32(i)
		}
	}
	x.sorted = sorted(p.placements)
	x.sortedHandles = make([]Handle, len(x.sorted))
	x.placed = make([]PlacementSummary, len(x.sorted))
	for i, pl := range x.sorted {
		x.sortedHandles[i] = r.handles[pl.ID]
		x.placed[i] = PlacementSummary{BorrowSourceID: intern(pl.BorrowSourceID), Feature: intern(pl.Feature), SpecID: intern(pl.SpecID),
			CompactedVolume: pl.CompactedVolume, Area: pl.Area}
		if pl.Stations != nil {
			x.placed[i].Stations, x.placed[i].HasStations = *pl.Stations, true
		}
	}
	x.hauls = sorted(p.hauls)
	x.haulPlacements = make([]*Placement, len(x.hauls))
	x.hauled = make([]HaulSummary, len(x.hauls))
	for i, h := range x.hauls {
		x.hauled[i] = HaulSummary{BorrowSourceID: intern(h.BorrowSourceID), Loads: h.Loads, LooseVolumePerLoad: h.LooseVolumePerLoad}
		if h.PlacementID != "" {
			x.haulPlacements[i] = p.placements[h.PlacementID]
		}
		if pl := x.haulPlacements[i]; pl != nil {
			x.hauled[i].Feature = intern(pl.Feature)
		}
	}
	r.records = x
}
