package web

import (
	"cmp"
	"fmt"
	"math"
	"net/http"
	"net/url"
	"slices"

	"tamp/client"
	"tamp/internal/soil"
)

// plot.go: the day's tests located, as a table, as a plan by station and
// offset, and as a plot of their satellite positions drawn here, with no
// map tiles (which need a network).

// plot is a drawing of points in an SVG box, laid out in Go and drawn by
// the template (which escapes every label).
type plot struct {
	Title          string
	Desc           string
	W, H           float64 // the box
	X0, Y0, X1, Y1 float64 // the plotting area
	XLabel, YLabel string
	XTicks, YTicks []tick
	Points         []point
	Scale          *scaleBar
	North          bool
}

type tick struct {
	Pos   float64
	Label string
}

type point struct {
	X, Y   float64
	Class  string  // pass, fail, pending or void
	Label  string  // the short id drawn beside it
	LX, LY float64 // where the label is drawn, from the point
	Title  string  // what a pointer or a screen reader is told
	Href   string
}

// placeLabels puts each point's label beside it where it overlaps no
// label placed before (tests retaken at one spot share a point), and
// orders the points so failures are drawn last, on top.
func placeLabels(ps []point) {
	slices.SortStableFunc(ps, func(a, b point) int {
		return cmp.Compare(drawOrder[a.Class], drawOrder[b.Class])
	})
	type box struct{ x0, y0, x1, y1 float64 }
	var placed []box
	for i := range ps {
		p := &ps[i]
		w := 7.5 * float64(len(p.Label))
		for _, off := range [][2]float64{{9, -8}, {9, 12}, {-9 - w, -8}, {-9 - w, 12}, {9, 26}, {-9 - w, 26}, {9, -22}, {9, 40}} {
			b := box{p.X + off[0], p.Y + off[1] - 11, p.X + off[0] + w, p.Y + off[1] + 2}
			free := true
			for _, q := range placed {
				if b.x0 < q.x1 && q.x0 < b.x1 && b.y0 < q.y1 && q.y0 < b.y1 {
					free = false
					break
				}
			}
			p.LX, p.LY = off[0], off[1]
			if free {
				break
			}
		}
		placed = append(placed, box{p.X + p.LX, p.Y + p.LY - 11, p.X + p.LX + w, p.Y + p.LY + 2})
	}
}

// drawOrder draws passes first and failures last.
var drawOrder = map[string]int{"pass": 0, "pending": 1, "void": 2, "fail": 3}

type scaleBar struct {
	X, Y, Len float64
	Label     string
}

// The box every plot is laid out in, in SVG user units.
const (
	plotW, plotH = 960.0, 420.0
	padL, padR   = 80.0, 30.0
	padT, padB   = 30.0, 60.0
)

// niceStep is a round tick spacing (1, 2 or 5 times a power of ten) giving
// about n ticks over span.
func niceStep(span float64, n int) float64 {
	if span <= 0 || n <= 0 {
		return 1
	}
	raw := span / float64(n)
	p := math.Pow(10, math.Floor(math.Log10(raw)))
	for _, m := range []float64{1, 2, 5, 10} {
		if m*p >= raw {
			return m * p
		}
	}
	return 10 * p
}

// ticks are the multiples of step within [lo, hi].
func ticks(lo, hi, step float64) []float64 {
	var out []float64
	for v := math.Ceil(lo/step) * step; v <= hi+step*1e-9 && len(out) < 50; v += step {
		out = append(out, v)
	}
	return out
}

// spread widens [lo, hi] by a margin, and to a least width.
func spread(lo, hi, least float64) (float64, float64) {
	if hi-lo < least {
		mid := (lo + hi) / 2
		lo, hi = mid-least/2, mid+least/2
	}
	m := (hi - lo) * 0.06
	return lo - m, hi + m
}

// located is a test with where it was taken.
type located struct {
	t     client.Test
	label string
	title string
}

// planPlot draws the tests by station (across) and offset (down the page:
// left of the alignment above it, right below), in the project's length
// unit.
func (v *view) planPlot(ts []located) *plot {
	if len(ts) == 0 {
		return nil
	}
	u := v.u
	conv := func(m float64) float64 { return u.sys.FromSI(soil.Length, m) }
	sLo, sHi := math.Inf(1), math.Inf(-1)
	oLo, oHi := 0.0, 0.0 // the alignment is always in view
	for _, x := range ts {
		s, o := conv(x.t.Content.Location.Station), conv(x.t.Content.Location.Offset)
		sLo, sHi, oLo, oHi = min(sLo, s), max(sHi, s), min(oLo, o), max(oHi, o)
	}
	sLo, sHi = spread(sLo, sHi, conv(30))
	oLo, oHi = spread(oLo, oHi, conv(10))
	p := &plot{Title: "Tests by station and offset", W: plotW, H: plotH, X0: padL, Y0: padT, X1: plotW - padR, Y1: plotH - padB,
		XLabel: "station (" + map[bool]string{true: "100 ft", false: "1000 m"}[u.sys == soil.US] + " stations)",
		YLabel: "offset, " + u.unit(soil.Length) + " (L above, R below)",
		Desc:   "Each test drawn at its station along the alignment and its offset from it; the dashed line is the alignment."}
	px := func(s float64) float64 { return p.X0 + (s-sLo)/(sHi-sLo)*(p.X1-p.X0) }
	py := func(o float64) float64 { return p.Y0 + (o-oLo)/(oHi-oLo)*(p.Y1-p.Y0) }
	for _, s := range ticks(sLo, sHi, niceStep(sHi-sLo, 8)) {
		p.XTicks = append(p.XTicks, tick{Pos: px(s), Label: u.station(u.sys.ToSI(soil.Length, s))})
	}
	for _, o := range ticks(oLo, oHi, niceStep(oHi-oLo, 5)) {
		label := fixed(math.Abs(o), 0)
		switch {
		case o < 0:
			label += " L"
		case o > 0:
			label += " R"
		}
		p.YTicks = append(p.YTicks, tick{Pos: py(o), Label: label})
	}
	p.Scale = &scaleBar{X: p.X0, Y: py(0), Len: p.X1 - p.X0, Label: "alignment"}
	for _, x := range ts {
		l := x.t.Content.Location
		p.Points = append(p.Points, point{X: px(conv(l.Station)), Y: py(conv(l.Offset)), Class: verdictOf(x.t).Class, Label: x.label,
			Title: x.title, Href: "/test/" + url.PathEscape(x.t.ID)})
	}
	placeLabels(p.Points)
	return p
}

// earthRadius is the mean radius of the Earth, m (IUGG).
const earthRadius = 6371008.8

// positionPlot draws the tests that carry a satellite position, north up,
// at one scale both ways, on a local plane about their mean position (an
// equirectangular projection: ample over a site a few kilometres across).
// It returns nil when no test carries a position.
func (v *view) positionPlot(ts []located) *plot {
	var with []located
	var lat0, lon0 float64
	for _, x := range ts {
		if p := x.t.Content.Location.Position; p != nil {
			with = append(with, x)
			lat0 += p.Latitude
			lon0 += p.Longitude
		}
	}
	if len(with) == 0 {
		return nil
	}
	lat0, lon0 = lat0/float64(len(with)), lon0/float64(len(with))
	rad := math.Pi / 180
	east := func(p *client.GeoPosition) float64 {
		return (p.Longitude - lon0) * rad * math.Cos(lat0*rad) * earthRadius
	}
	north := func(p *client.GeoPosition) float64 { return (p.Latitude - lat0) * rad * earthRadius }
	eLo, eHi, nLo, nHi := math.Inf(1), math.Inf(-1), math.Inf(1), math.Inf(-1)
	for _, x := range with {
		pos := x.t.Content.Location.Position
		eLo, eHi, nLo, nHi = min(eLo, east(pos)), max(eHi, east(pos)), min(nLo, north(pos)), max(nHi, north(pos))
	}
	eLo, eHi = spread(eLo, eHi, 20)
	nLo, nHi = spread(nLo, nHi, 20)
	p := &plot{Title: "Satellite positions", W: plotW, H: plotH, X0: padL, Y0: padT, X1: plotW - padR, Y1: plotH - padB, North: true,
		Desc: fmt.Sprintf("Each test that carries a satellite position, north up, one scale both ways, about %.5f, %.5f.", lat0, lon0)}
	// One scale both ways: the wider extent fills its side, the other is
	// centred.
	k := min((p.X1-p.X0)/(eHi-eLo), (p.Y1-p.Y0)/(nHi-nLo)) // SVG units per metre
	cx, cy := (p.X0+p.X1)/2, (p.Y0+p.Y1)/2
	me, mn := (eLo+eHi)/2, (nLo+nHi)/2
	for _, x := range with {
		pos := x.t.Content.Location.Position
		p.Points = append(p.Points, point{X: cx + (east(pos)-me)*k, Y: cy - (north(pos)-mn)*k, Class: verdictOf(x.t).Class, Label: x.label,
			Title: x.title, Href: "/test/" + url.PathEscape(x.t.ID)})
	}
	placeLabels(p.Points)
	// A scale bar of a round length in the project's unit, about a quarter
	// of the width.
	unitM := v.u.sys.ToSI(soil.Length, 1)
	length := niceStep((p.X1-p.X0)/k/unitM, 4)
	p.Scale = &scaleBar{X: p.X0, Y: p.Y1 + 35, Len: length * unitM * k, Label: fixed(length, 0) + " " + v.u.unit(soil.Length)}
	return p
}

// locationRow is a test in the location table.
type locationRow struct {
	row
	Elevation string
	Position  string
	Accuracy  string
}

// locationsPage is the day's tests located.
type locationsPage struct {
	Date      string
	Days      []dayLink
	Rows      []locationRow
	Plan      *plot
	Positions *plot
	NoGPS     int // tests of the day without a satellite position
}

// locations is GET /locations?date=: the location table and the plots.
func (s *Server) locations(w http.ResponseWriter, r *http.Request, v *view) error {
	f, err := readDayFilter(r.URL.Query())
	if err != nil {
		return err
	}
	f.Feature, f.Lift, f.Verdict, f.Inspector = "", "", "", ""
	page, kept := v.dayList(&f)
	lp := locationsPage{Date: f.Date, Days: page.Days}
	slices.SortStableFunc(kept, func(a, b client.Test) int { return cmp.Compare(a.Content.Location.Station, b.Content.Location.Station) })
	var ls []located
	for _, t := range kept {
		rw := v.rowOf(t)
		lr := locationRow{row: rw, Elevation: v.u.show(soil.Length, t.Content.Location.Elevation), Position: "-", Accuracy: "-"}
		if pos := t.Content.Location.Position; pos != nil {
			lr.Position = fmt.Sprintf("%.6f, %.6f", pos.Latitude, pos.Longitude)
			lr.Accuracy = v.u.show(soil.Length, pos.Accuracy)
		} else {
			lp.NoGPS++
		}
		lp.Rows = append(lp.Rows, lr)
		vd := verdictOf(t)
		title := cmp.Or(vd.Word+" "+vd.Why, vd.Word) + ": test " + rw.Short + " at " + rw.Station + ", " + rw.Offset + ", " + rw.Feature + " lift " + fmt.Sprint(rw.Lift)
		ls = append(ls, located{t: t, label: rw.Short, title: title})
	}
	lp.Plan, lp.Positions = v.planPlot(ls), v.positionPlot(ls)
	return s.render(w, http.StatusOK, "locations.html", s.frame(r, v, "Where the tests of "+f.Date+" were taken", "locations", f.Date, lp))
}
