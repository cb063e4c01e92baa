package exports

import (
	"encoding/json"
	"fmt"
	"io"
	"math"

	"tamp/client"
	"tamp/internal/soil"
)

// Skipped is a test TestsGeoJSON left out of the collection, and why.
type Skipped struct {
	TestID string `json:"test_id"`
	Reason string `json:"reason"`
}

// The reasons a test is skipped.
const (
	NoPosition         = "no satellite position recorded"
	PositionOutOfRange = "satellite position outside longitude [-180, 180] or latitude [-90, 90]"
)

// number is a JSON number written at a fixed number of decimals, or null.
type number struct {
	v      float64
	places int
	ok     bool
}

func (n number) MarshalJSON() ([]byte, error) {
	s := fixed(n.v, n.places)
	if !n.ok || s == "" {
		return []byte("null"), nil
	}
	return []byte(s), nil
}

func (u units) number(q soil.Quantity, v float64, ok bool) number {
	return number{u.sys.FromSI(q, v), u.sys.Places(q), ok}
}

type featureCollection struct {
	Type     string    `json:"type"`
	Features []feature `json:"features"`
}

type feature struct {
	Type       string     `json:"type"`
	ID         string     `json:"id"`
	Geometry   point      `json:"geometry"`
	Properties properties `json:"properties"`
}

type point struct {
	Type        string    `json:"type"`
	Coordinates [2]number `json:"coordinates"` // longitude, latitude
}

type properties struct {
	TestID             string   `json:"test_id"`
	Day                string   `json:"day"`
	Verdict            string   `json:"verdict"`
	Reasons            []string `json:"reasons"`
	RelativeCompaction number   `json:"relative_compaction_pct"`
	DryDensity         number   `json:"dry_density"`
	DensityUnit        string   `json:"dry_density_unit"`
	Feature            string   `json:"feature"`
	Lift               uint32   `json:"lift"`
	Station            number   `json:"station"`
	Offset             number   `json:"offset"`
	Elevation          number   `json:"elevation"`
	LengthUnit         string   `json:"length_unit"`
	Method             string   `json:"method"`
	RetestOf           string   `json:"retest_of"`
	Voided             bool     `json:"voided"`
	ReviewStatus       string   `json:"review_status"`
}

// TestsGeoJSON writes the tests taken with a satellite position as an RFC
// 7946 FeatureCollection: one Point feature per test, in the order given,
// at [longitude, latitude] (WGS84 degrees, 7 decimals), its id the test's
// id, with the current revision's verdict and reasons, relative compaction
// (percent), dry density (with its unit), feature, lift, station, offset
// and elevation (with their unit, sys's), day, method, retest_of, voided
// and review status as properties. A value that does not apply is null.
// Tests without a position, or with one out of range, are not in the
// collection: they are returned, with the reason, for the caller to
// report. The output holds nothing beyond RFC 7946's members and the
// features' properties. It returns the first write error.
func TestsGeoJSON(w io.Writer, tests []client.Test, sys soil.System) ([]Skipped, error) {
	u := units{sys}
	fc := featureCollection{Type: "FeatureCollection", Features: []feature{}}
	var skipped []Skipped
	for _, t := range tests {
		p := t.Content.Location.Position
		switch {
		case p == nil:
			skipped = append(skipped, Skipped{t.ID, NoPosition})
			continue
		case !inRange(p.Longitude, 180) || !inRange(p.Latitude, 90):
			skipped = append(skipped, Skipped{t.ID, PositionOutOfRange})
			continue
		}
		r := t.Result
		densities := r.DryDensity != 0 || r.WetDensity != 0
		graded := densities && r.MaxDryDensity != 0
		reasons := codes(r.Reasons)
		loc := t.Content.Location
		fc.Features = append(fc.Features, feature{
			Type: "Feature", ID: t.ID,
			Geometry: point{Type: "Point", Coordinates: [2]number{{p.Longitude, 7, true}, {p.Latitude, 7, true}}},
			Properties: properties{
				TestID: t.ID, Day: t.Day, Verdict: string(r.Verdict), Reasons: reasons,
				RelativeCompaction: u.number(soil.Percent, r.RelativeCompaction, graded),
				DryDensity:         u.number(soil.Density, r.DryDensity, densities), DensityUnit: sys.Unit(soil.Density),
				Feature: t.Content.Feature, Lift: t.Content.LiftNumber,
				Station: u.number(soil.Length, loc.Station, true), Offset: u.number(soil.Length, loc.Offset, true),
				Elevation: u.number(soil.Length, loc.Elevation, true), LengthUnit: sys.Unit(soil.Length),
				Method: string(t.Content.Readings.Method()), RetestOf: t.RetestOf, Voided: t.Voided, ReviewStatus: string(t.ReviewStatus),
			},
		})
	}
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(fc); err != nil {
		return skipped, fmt.Errorf("exports: geojson: %w", err)
	}
	return skipped, nil
}

// inRange says v is a finite number within [-limit, limit].
func inRange(v, limit float64) bool {
	return !math.IsNaN(v) && v >= -limit && v <= limit
}
