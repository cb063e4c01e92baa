package ledger

import (
	"math"

	"tamp/internal/qc"
)

// The bits of a RowState that compare a retest with the test it retests
// (TestRow.Retested), so that an audit of retests reads neither test when
// the row shows nothing to find. They are unset when Retested is nil.
const (
	// RowRetestOfPass: the test it retests passes.
	RowRetestOfPass RowState = RowFlagged << (1 + iota)
	// RowRetestSameLift: both name the same placement, feature and lift
	// number, so that they stand on one lift whatever the placement says.
	RowRetestSameLift
	// RowRetestInOrder: dated, by hybrid time and by its device's clock,
	// no earlier than the test it retests.
	RowRetestInOrder
	// RowRetestSatellite: AuditRow.RetestDistance is between satellite
	// positions, not in plan (see Separation).
	RowRetestSatellite

	rowLinkBits = RowRetestOfPass | RowRetestSameLift | RowRetestInOrder | RowRetestSatellite
)

// EarthRadius is the mean radius of the Earth, metres (IUGG), that the
// distance between two satellite positions is measured on.
const EarthRadius = 6371008.8

// Separation is the distance between two test locations, metres: between
// their satellite positions when both carry one (satellite true), else in
// plan from station and offset.
func Separation(a, b Location) (metres float64, satellite bool) {
	if a.Position != nil && b.Position != nil {
		return GreatCircle(*a.Position, *b.Position), true
	}
	return math.Hypot(a.Station-b.Station, a.Offset-b.Offset), false
}

// GreatCircle is the haversine distance between two WGS84 positions on a
// sphere of the Earth's mean radius, metres: d = 2 R asin(sqrt(sin²(Δφ/2) +
// cos φ1 cos φ2 sin²(Δλ/2))). Over the few metres between a failure and
// its retest the sphere is well within a satellite fix's accuracy.
func GreatCircle(a, b GeoPosition) float64 {
	rad := math.Pi / 180
	p1, p2 := a.Latitude*rad, b.Latitude*rad
	dp, dl := p2-p1, (b.Longitude-a.Longitude)*rad
	h := math.Pow(math.Sin(dp/2), 2) + math.Cos(p1)*math.Cos(p2)*math.Pow(math.Sin(dl/2), 2)
	return 2 * EarthRadius * math.Asin(math.Sqrt(min(1, h)))
}

// link sets the row's Retested to o and compares the row's test with it,
// the distance into the row's audit.
func (row *TestRow) link(audit *AuditRow, o *Test) {
	row.Retested, audit.RetestDistance = o, 0
	row.State &^= rowLinkBits
	if o == nil {
		return
	}
	t := row.Test
	d, satellite := Separation(o.Content.Location, t.Content.Location)
	audit.RetestDistance = d
	for _, b := range []struct {
		set bool
		bit RowState
	}{
		{o.Result.Verdict == qc.Pass, RowRetestOfPass},
		{t.Content.PlacementID == o.Content.PlacementID && t.Content.Feature == o.Content.Feature && t.Content.LiftNumber == o.Content.LiftNumber, RowRetestSameLift},
		{t.HLC.Compare(o.HLC) >= 0 && !t.DeviceTime.Before(o.DeviceTime), RowRetestInOrder},
		{satellite, RowRetestSatellite},
	} {
		if b.set {
			row.State |= b.bit
		}
	}
}
