package web

import (
	"bytes"
	"errors"
	"html"
	"html/template"
	"net/http"
	"regexp"
	"strings"

	"tamp/client"
	"tamp/internal/chart"
)

// charts.go: the moisture-density chart of each laboratory reference and
// the run chart of each spec, drawn by package chart and set inline in the
// page as SVG.

// figure is a chart set in the page.
type figure struct {
	Title   string
	Series  string
	SVG     template.HTML // nil when there was nothing to draw
	Nothing string        // why nothing was drawn
}

// chartsPage is the charts of a day, or of the whole project.
type chartsPage struct {
	Date      string
	All       bool
	Days      []dayLink
	Moisture  []figure
	Run       []figure
	TestCount int
}

// charts is GET /charts?date= (the day's tests) or /charts?all=1 (every
// test of the project).
func (s *Server) charts(w http.ResponseWriter, r *http.Request, v *view) error {
	f, err := readDayFilter(r.URL.Query())
	if err != nil {
		return err
	}
	all := v.st.Tests(v.project)
	f.Date = v.pickDay(f.Date, all)
	p := chartsPage{Date: f.Date, All: r.URL.Query().Get("all") == "1", Days: days(all, f.Date)}
	tests := all
	if !p.All {
		tests = v.st.TestsOn(v.project, f.Date)
	}
	var kept []client.Test
	for _, t := range tests {
		if !t.Voided {
			kept = append(kept, t)
		}
	}
	p.TestCount = len(kept)
	su, _ := v.st.SetUp(v.project)
	o := chart.Options{Units: v.u.sys, Water: su.WaterDensity, Location: v.loc}
	// The charts draw names as text: what would not show is written out
	// first, as everywhere on the page.
	specs := v.st.Specs(v.project)
	for i := range specs {
		specs[i].Name = visible(specs[i].Name)
	}
	for _, ref := range v.st.References(v.project) {
		ref.Material, ref.LabSampleID = visible(ref.Material), visible(ref.LabSampleID)
		var of []client.Test
		for _, t := range kept {
			if t.Content.ReferenceID == ref.ID {
				of = append(of, t)
			}
		}
		if len(of) == 0 {
			continue
		}
		ch, err := chart.MoistureDensity(ref, mostNamed(specs, of), of, o)
		p.Moisture = append(p.Moisture, figureOf("Moisture-density: "+referenceName(ref), ch, err))
	}
	for _, sp := range specs {
		var of []client.Test
		for _, t := range kept {
			if t.Content.SpecID == sp.ID {
				of = append(of, t)
			}
		}
		if len(of) == 0 {
			continue
		}
		ch, err := chart.RunChart(of, sp, o)
		p.Run = append(p.Run, figureOf("Relative compaction over time: "+sp.Name, ch, err))
	}
	title := "Charts of " + f.Date
	if p.All {
		title = "Charts of every test"
	}
	return s.render(w, http.StatusOK, "charts.html", s.frame(r, v, title, "charts", f.Date, p))
}

// mostNamed is the spec most of the tests name (the first by name on a
// tie), or none.
func mostNamed(specs []client.Spec, tests []client.Test) client.Spec {
	count := map[string]int{}
	for _, t := range tests {
		count[t.Content.SpecID]++
	}
	var best client.Spec
	for _, sp := range specs {
		if count[sp.ID] > count[best.ID] {
			best = sp
		}
	}
	return best
}

// figureOf sets a chart in the page, or says why there is none.
func figureOf(title string, ch *chart.Chart, err error) figure {
	f := figure{Title: title}
	switch {
	case errors.Is(err, chart.ErrNoData):
		f.Nothing = "Nothing to draw yet: no graded test, or no maximum dry density."
		return f
	case err != nil:
		f.Nothing = "This chart could not be drawn: " + err.Error()
		return f
	}
	f.Series = visible(strings.Join(ch.Series, "; "))
	svg, err := inlineSVG(ch)
	if err != nil {
		f.Nothing = "This chart could not be drawn: " + err.Error()
		return f
	}
	f.SVG = svg
	return f
}

// svgSize matches the fixed size of a chart's root element, which the
// page's style replaces so the chart fits the column.
var svgSize = regexp.MustCompile(`^<svg width="[^"]*" height="[^"]*"`)

// inlineSVG renders a chart as an svg element for the page: the XML
// prologue dropped, the fixed size left to the style, and the title given
// to assistive technology. Package chart's SVG escapes every text it
// draws (vgsvg writes text through html.EscapeString), so the markup is
// trusted as it is.
func inlineSVG(ch *chart.Chart) (template.HTML, error) {
	var b bytes.Buffer
	if err := ch.WriteSVG(&b); err != nil {
		return "", err
	}
	s := b.String()
	i := strings.Index(s, "<svg")
	if i < 0 {
		return "", errors.New("web: the chart's SVG has no svg element")
	}
	s = s[i:]
	label := html.EscapeString(visible(strings.ReplaceAll(ch.Title, "\n", ", ")))
	s = svgSize.ReplaceAllString(s, `<svg class="chart" role="img" aria-label="`+label+`"`)
	return template.HTML(s), nil
}
