package web

import (
	"cmp"
	"errors"
	"fmt"
	"net/http"
	"net/url"
	"slices"
	"strconv"
	"strings"
	"time"

	"tamp/client"
	"tamp/internal/soil"
	"tamp/internal/words"
)

// testpage.go: one test with its readings, arithmetic, limits, history
// and retest chain, and the office's review of it.

// line is a labelled value: a reading, a step, a fact.
type line struct {
	Label string
	Value string
	Unit  string
	Href  string // a link, for facts that name another page
}

// limitRow is one limit a test was judged against, beside the value it
// judged.
type limitRow struct {
	What     string
	Value    string
	Limit    string
	Conforms string // "conforms", "does not conform" or "not graded"
	Class    string // pass, fail or pending
}

// historyRow is one entry of a test's history.
type historyRow struct {
	When    string
	By      string
	Entry   string
	Text    string   // the reason or the comment
	Changes []string // for a correction: what it changed, "label: old -> new"
	at      time.Time
}

// chainRow is a test of a retest chain.
type chainRow struct {
	ID, Short string
	Taken     string
	Where     string
	Verdict   verdict
	Review    string
	Depth     int // 0 the original failure, 1 its retest, ...
	This      bool
}

// testPage is a test's page.
type testPage struct {
	ID, Short   string
	Verdict     verdict
	Method      string
	Facts       []line
	Readings    []line
	Steps       []line
	Grading     []string // the grade's arithmetic, as sentences with the numbers
	Limits      []limitRow
	SpecName    string
	Reasons     []string
	Flags       []client.Finding
	Missing     []string
	Review      string
	LastComment string
	CanReview   bool
	WhyNot      string
	Comment     string // the comment typed, shown again after a refused review
	Error       string // why a review was refused
	History     []historyRow
	Chain       []chainRow
	Nuclear     bool
}

// test is a test's page: GET /test/{id}.
func (s *Server) test(w http.ResponseWriter, r *http.Request, v *view) error {
	notice := ""
	switch r.URL.Query().Get("reviewed") {
	case "approve":
		notice = "Approved. The review is signed on this device and waits in its outbox until the next tamp sync."
	case "return":
		notice = "Returned to its inspector with your comment. The review is signed on this device and waits in its outbox until the next tamp sync."
	}
	return s.showTest(w, r, v, http.StatusOK, notice, testPage{})
}

// showTest renders a test's page; form carries what a refused review
// typed (Comment, Error).
func (s *Server) showTest(w http.ResponseWriter, r *http.Request, v *view, status int, notice string, form testPage) error {
	id := r.PathValue("id")
	t, err := v.st.Test(v.project, id)
	if errors.Is(err, client.ErrNotFound) {
		return notFound(fmt.Sprintf("No test %q in this project on this device. Sync to get the crew's latest tests.", id))
	}
	if err != nil {
		return err
	}
	p := v.testPage(t)
	p.Comment, p.Error = form.Comment, form.Error
	f := s.frame(r, v, "Test "+p.Short, "", t.Day, p)
	f.Notice = notice
	return s.render(w, status, "test.html", f)
}

func (v *view) testPage(t client.Test) testPage {
	c, res := t.Content, t.Result
	p := testPage{ID: t.ID, Short: words.ShortID(t.ID), Verdict: verdictOf(t), Method: words.Method(res.Method), Review: reviewWord(t.ReviewStatus),
		Flags: append(slices.Clone(res.Flags), t.Flags...), Missing: slices.Clone(t.Missing), Nuclear: nuclear(res.Method)}
	p.Facts = v.facts(t)
	p.Readings = v.readingLines(c)
	if steps, err := v.st.Steps(v.project, t.ID); err == nil {
		for _, st := range steps {
			q := quantityOf[st.Quantity]
			p.Steps = append(p.Steps, line{Label: st.Name, Value: v.u.num(q, st.Value), Unit: v.u.unit(q)})
		}
	}
	p.Grading = v.grading(c, res)
	p.Limits, p.SpecName = v.limits(res), visible(res.Limits.SpecName)
	for _, f := range res.Reasons {
		p.Reasons = append(p.Reasons, visible(f.Message))
	}
	for i, f := range p.Flags {
		p.Flags[i] = client.Finding{Code: visible(f.Code), Message: visible(f.Message)}
	}
	for i, m := range p.Missing {
		p.Missing[i] = visible(m)
	}
	if n := len(t.Reviews); n > 0 {
		p.LastComment = visible(t.Reviews[n-1].Comment)
	}
	user := v.st.User()
	switch {
	case t.Voided:
		p.WhyNot = "This test was voided: it is out of the record and needs no review."
	case user == "":
		p.WhyNot = "This device has no user to sign a review for; enrol it first (tamp enroll)."
	case t.Author == user:
		p.WhyNot = "You recorded this test, and no one reviews a test they recorded: another member of the office reviews it."
	default:
		p.CanReview = true
	}
	p.History = v.history(t)
	p.Chain = v.chain(t)
	return p
}

// facts are the test's who, when, where and against what.
func (v *view) facts(t client.Test) []line {
	c := t.Content
	where := v.u.station(c.Location.Station) + ", offset " + v.u.offset(c.Location.Offset)
	if c.Location.Elevation != 0 {
		where += ", elevation " + v.u.show(soil.Length, c.Location.Elevation)
	}
	out := []line{{Label: "taken", Value: localTime(t.Taken, v.loc) + " by " + v.who(t.Author) + " (the device's clock)"},
		{Label: "station", Value: where}}
	if pos := c.Location.Position; pos != nil {
		out = append(out, line{Label: "satellite position", Value: fmt.Sprintf("%.6f, %.6f (within %s)", pos.Latitude, pos.Longitude,
			v.u.show(soil.Length, pos.Accuracy))})
	}
	if c.Location.Description != "" {
		out = append(out, line{Label: "where, in words", Value: visible(c.Location.Description)})
	}
	feature := cmp.Or(visible(c.Feature), "-") + ", lift " + strconv.FormatUint(uint64(c.LiftNumber), 10)
	if c.LiftThickness > 0 {
		feature += ", " + v.u.show(soil.Depth, c.LiftThickness) + " thick"
	}
	out = append(out, line{Label: "feature", Value: feature})
	spec, ref, eq, place := v.names(c)
	if place != "" {
		out = append(out, line{Label: "placement", Value: place})
	}
	out = append(out, line{Label: "specification", Value: cmp.Or(spec, "-")}, line{Label: "laboratory reference", Value: cmp.Or(ref, "-")},
		line{Label: "equipment", Value: cmp.Or(eq, "-")})
	if t.RetestOf != "" {
		out = append(out, line{Label: "retest of", Value: "test " + words.ShortID(t.RetestOf), Href: "/test/" + url.PathEscape(t.RetestOf)})
	}
	if c.Remarks != "" {
		out = append(out, line{Label: "remarks", Value: visible(c.Remarks)})
	}
	return out
}

// names returns the names of the spec, reference, equipment and placement
// content names, or a note that the device lacks one.
func (v *view) names(c client.TestInput) (spec, ref, eq, place string) {
	missing := func(id string) string {
		if id == "" {
			return ""
		}
		return "(not on this device: " + words.ShortID(id) + ")"
	}
	spec, ref, eq, place = missing(c.SpecID), missing(c.ReferenceID), missing(c.EquipmentID), missing(c.PlacementID)
	for _, s := range v.st.Specs(v.project) {
		if s.ID == c.SpecID {
			spec = visible(s.Name)
		}
	}
	for _, r := range v.st.References(v.project) {
		if r.ID == c.ReferenceID {
			ref = referenceName(r)
		}
	}
	for _, e := range v.st.Equipment(v.project) {
		if e.ID == c.EquipmentID {
			eq = strings.TrimSpace(strings.ReplaceAll(string(e.Kind), "_", " ") + " " + e.SerialNumber)
			if e.Model != "" {
				eq += " (" + e.Model + ")"
			}
			eq = visible(eq)
		}
	}
	for _, p := range v.st.Placements(v.project) {
		if p.ID == c.PlacementID {
			place = placementName(p)
		}
	}
	return spec, ref, eq, place
}

// referenceName names a laboratory reference: its material and sample.
func referenceName(r client.LabReference) string {
	name := cmp.Or(r.Material, "reference "+words.ShortID(r.ID))
	if r.LabSampleID != "" {
		name += " (" + r.LabSampleID + ")"
	}
	return visible(name)
}

// placementName names a placement: its feature and lift.
func placementName(p client.Placement) string {
	return visible(cmp.Or(p.Feature, "placement")) + ", lift " + strconv.FormatUint(uint64(p.LiftNumber), 10)
}

// readingLines are a test's raw readings as the inspector entered them,
// in the project's units, with its oversize and lift thickness.
func (v *view) readingLines(c client.TestInput) []line {
	u := v.u
	q := func(label string, qty soil.Quantity, val float64) line {
		return line{Label: label, Value: u.num(qty, val), Unit: u.unit(qty)}
	}
	var out []line
	r := c.Readings
	switch {
	case r.Nuclear != nil:
		n := r.Nuclear
		mode := "direct transmission"
		if n.Backscatter {
			mode = "backscatter"
		}
		out = append(out, line{Label: "geometry", Value: mode})
		if n.ProbeDepth > 0 {
			out = append(out, q("probe depth", soil.Depth, n.ProbeDepth))
		}
		for i, g := range n.Readings {
			k := ""
			if len(n.Readings) > 1 {
				k = fmt.Sprintf(" (reading %d)", i+1)
			}
			out = append(out, q("wet density"+k, soil.Density, g.WetDensity), q("water per volume"+k, soil.Density, g.WaterPerVolume))
		}
		if n.Agreement > 0 {
			out = append(out, q("readings agree within", soil.Density, n.Agreement))
		}
		if n.CorrectionID != "" {
			out = append(out, line{Label: "moisture correction", Value: "applied (" + words.ShortID(n.CorrectionID) + ")"})
		}
		if n.OvenMoisture != nil {
			out = append(out, q("oven-dry moisture", soil.Percent, *n.OvenMoisture))
		}
	case r.SandCone != nil:
		sc := r.SandCone
		out = append(out, q("sand bulk density", soil.Density, sc.SandDensity))
		if sc.SandUsed > 0 {
			out = append(out, q("sand used", soil.Mass, sc.SandUsed))
		} else {
			out = append(out, q("apparatus before", soil.Mass, sc.InitialMass), q("apparatus after", soil.Mass, sc.FinalMass))
		}
		out = append(out, q("cone correction", soil.Mass, sc.ConeCorrection), q("soil from the hole", soil.Mass, sc.SoilMass),
			q("moisture", soil.Percent, sc.Moisture))
	case r.DriveCylinder != nil:
		d := r.DriveCylinder
		out = append(out, q("cylinder diameter", soil.Depth, d.Diameter), q("core length", soil.Depth, d.Length),
			q("soil in the cylinder", soil.Mass, d.SoilMass), q("moisture", soil.Percent, d.Moisture))
	case r.RubberBalloon != nil:
		b := r.RubberBalloon
		out = append(out, q("initial reading", soil.SmallVolume, b.InitialReading), q("final reading", soil.SmallVolume, b.FinalReading),
			q("soil from the hole", soil.Mass, b.SoilMass), q("moisture", soil.Percent, b.Moisture))
	case r.WetDensity != nil:
		out = append(out, q("wet density", soil.Density, r.WetDensity.WetDensity), q("moisture", soil.Percent, r.WetDensity.Moisture))
	}
	if o := c.Oversize; o != nil {
		out = append(out, q("oversize", soil.Percent, o.Percent), line{Label: "oversize bulk specific gravity", Value: fixed(o.BulkSpecificGravity, 3)},
			q("oversize moisture", soil.Percent, o.Moisture))
	}
	return out
}

// contentLines are everything a revision holds, for comparing revisions.
func (v *view) contentLines(c client.TestInput) []line {
	out := v.readingLines(c)
	out = append(out, line{Label: "station", Value: v.u.station(c.Location.Station)}, line{Label: "offset", Value: v.u.offset(c.Location.Offset)},
		line{Label: "elevation", Value: v.u.show(soil.Length, c.Location.Elevation)}, line{Label: "feature", Value: visible(c.Feature)},
		line{Label: "lift", Value: strconv.FormatUint(uint64(c.LiftNumber), 10)}, line{Label: "lift thickness", Value: v.u.show(soil.Depth, c.LiftThickness)},
		line{Label: "remarks", Value: visible(c.Remarks)}, line{Label: "where, in words", Value: visible(c.Location.Description)})
	spec, ref, eq, _ := v.names(c)
	out = append(out, line{Label: "specification", Value: spec}, line{Label: "laboratory reference", Value: ref}, line{Label: "equipment", Value: eq})
	if p := c.Location.Position; p != nil {
		out = append(out, line{Label: "satellite position", Value: fmt.Sprintf("%.6f, %.6f", p.Latitude, p.Longitude)})
	}
	return out
}

// changes lists what a revision changed from the one it corrects.
func (v *view) changes(from, to client.TestInput) []string {
	show := func(l line) string { return strings.TrimSpace(l.Value + " " + l.Unit) }
	before := map[string]string{}
	for _, l := range v.contentLines(from) {
		before[l.Label] = show(l)
	}
	var out []string
	seen := map[string]bool{}
	for _, l := range v.contentLines(to) {
		seen[l.Label] = true
		if old, ok := before[l.Label]; !ok {
			out = append(out, l.Label+": "+show(l)+" (new)")
		} else if old != show(l) {
			out = append(out, l.Label+": "+cmp.Or(old, "(none)")+" → "+cmp.Or(show(l), "(none)"))
		}
	}
	for _, l := range v.contentLines(from) {
		if !seen[l.Label] {
			out = append(out, l.Label+": "+show(l)+" (removed)")
		}
	}
	return out
}

// grading is the grade's own arithmetic, with the numbers, in the
// project's units.
func (v *view) grading(c client.TestInput, res client.Result) []string {
	u := v.u
	d := func(x float64) string { return u.num(soil.Density, x) }
	pc := func(x float64) string { return fixed(x, 1) }
	var out []string
	if !graded(res) {
		return nil
	}
	if c.Oversize != nil {
		out = append(out, fmt.Sprintf("maximum dry density and optimum moisture corrected for %s %% oversize (ASTM D4718 / AASHTO T 224): %s %s at %s %%",
			pc(c.Oversize.Percent), d(res.MaxDryDensity), u.unit(soil.Density), pc(res.OptimumMoisture)))
	}
	out = append(out, fmt.Sprintf("relative compaction = dry density / maximum dry density × 100 = %s / %s × 100 = %s %%",
		d(res.DryDensity), d(res.MaxDryDensity), pc(res.RelativeCompaction)))
	if res.Limits.MoistureBasis == client.PercentOfOptimum {
		out = append(out, fmt.Sprintf("moisture against optimum = moisture / optimum × 100 = %s / %s × 100 = %s %% of optimum",
			pc(res.Moisture), pc(res.OptimumMoisture), pc(res.MoisturePercentOfOptimum)))
	} else {
		out = append(out, fmt.Sprintf("moisture against optimum = moisture − optimum = %s − %s = %s", pc(res.Moisture), pc(res.OptimumMoisture),
			moistureAgainstOptimum(res)))
	}
	if res.ZeroAirVoids > 0 {
		out = append(out, fmt.Sprintf("zero-air-voids density at this moisture = %s %s; saturation %s %%", d(res.ZeroAirVoids), u.unit(soil.Density),
			pc(res.Saturation)))
	}
	return out
}

// limits are the limits applied, each beside the value it judged.
func (v *view) limits(res client.Result) []limitRow {
	failed := map[string]bool{}
	for _, f := range res.Reasons {
		failed[f.Code] = true
	}
	judge := func(codes ...string) (string, string) {
		if !graded(res) {
			return "not graded", "pending"
		}
		for _, c := range codes {
			if failed[c] {
				return "does not conform", "fail"
			}
		}
		return "conforms", "pass"
	}
	var out []limitRow
	if l := words.CompactionLimit(res.Limits); l != "" {
		word, class := judge(client.ReasonCompactionBelowMinimum)
		value := "-"
		if graded(res) {
			value = v.u.show(soil.Percent, res.RelativeCompaction)
		}
		out = append(out, limitRow{What: "relative compaction", Value: value, Limit: l, Conforms: word, Class: class})
	}
	if l := words.MoistureLimit(res.Limits); l != "" {
		word, class := judge(client.ReasonMoistureBelowWindow, client.ReasonMoistureAboveWindow)
		value := "-"
		if graded(res) {
			value = moistureAgainstOptimum(res)
		}
		out = append(out, limitRow{What: "moisture against optimum", Value: value, Limit: l, Conforms: word, Class: class})
	}
	return out
}

// history is a test's entries in time order.
func (v *view) history(t client.Test) []historyRow {
	var h []historyRow
	byEvent := map[string]client.Revision{}
	for _, r := range t.Revisions {
		byEvent[r.EventID] = r
	}
	for i, r := range t.Revisions {
		row := historyRow{When: localTime(r.Time, v.loc), By: v.who(r.Author), Entry: "corrected", Text: visible(r.Reason), at: r.Time}
		if i == 0 || r.Supersedes == "" {
			row.Entry = "recorded"
		} else if base, ok := byEvent[r.Supersedes]; ok {
			row.Changes = v.changes(base.Content, r.Content)
		}
		if r.EventID == t.Current && len(t.Revisions) > 1 {
			row.Entry += " (stands)"
		}
		h = append(h, row)
	}
	for _, x := range t.Voids {
		h = append(h, historyRow{When: "-", By: v.who(x.Author), Entry: "voided", Text: visible(x.Reason)})
	}
	for _, r := range t.Reviews {
		what := "approved"
		if r.Decision == client.Return {
			what = "returned"
		}
		if r.Revision != t.Current {
			what += " (an earlier revision)"
		}
		h = append(h, historyRow{When: localTime(r.Time, v.loc), By: v.who(r.Author), Entry: what, Text: visible(r.Comment), at: r.Time})
	}
	for _, x := range t.Exceptions {
		h = append(h, historyRow{When: "-", By: v.who(x.Author), Entry: "exception accepted by QA", Text: visible(x.Reason)})
	}
	slices.SortStableFunc(h, func(a, b historyRow) int {
		if a.at.IsZero() || b.at.IsZero() {
			return 0
		}
		return a.at.Compare(b.at)
	})
	return h
}

// chain is the retest chain t belongs to: the original failure first,
// then each retest in the order taken, retests of retests below their
// test. A test that is neither a retest nor retested has none.
func (v *view) chain(t client.Test) []chainRow {
	if t.RetestOf == "" && len(t.Retests) == 0 {
		return nil
	}
	root := t
	for range 100 { // a chain longer than this is not followed further
		if root.RetestOf == "" {
			break
		}
		up, err := v.st.Test(v.project, root.RetestOf)
		if err != nil {
			break // the original has not reached this device
		}
		root = up
	}
	var out []chainRow
	seen := map[string]bool{}
	var walk func(x client.Test, depth int)
	walk = func(x client.Test, depth int) {
		if seen[x.ID] {
			return
		}
		seen[x.ID] = true
		out = append(out, chainRow{ID: x.ID, Short: words.ShortID(x.ID), Taken: localTime(x.Taken, v.loc),
			Where: v.u.station(x.Content.Location.Station) + ", " + v.u.offset(x.Content.Location.Offset), Verdict: verdictOf(x),
			Review: reviewWord(x.ReviewStatus), Depth: depth, This: x.ID == t.ID})
		var next []client.Test
		for _, id := range x.Retests {
			if rt, err := v.st.Test(v.project, id); err == nil {
				next = append(next, rt)
			}
		}
		slices.SortFunc(next, func(a, b client.Test) int { return a.Taken.Compare(b.Taken) })
		for _, rt := range next {
			walk(rt, depth+1)
		}
	}
	walk(root, 0)
	return out
}

// review records the office's decision on a test: POST
// /test/{id}/review with token, decision (approve or return) and comment.
func (s *Server) review(w http.ResponseWriter, r *http.Request, v *view) error {
	if err := s.checkWrite(w, r); err != nil {
		return err
	}
	id := r.PathValue("id")
	t, err := v.st.Test(v.project, id)
	if errors.Is(err, client.ErrNotFound) {
		return notFound(fmt.Sprintf("No test %q in this project on this device; nothing was recorded.", id))
	}
	if err != nil {
		return err
	}
	if t.Voided {
		return badRequest("This test was voided: it is out of the record and takes no review; nothing was recorded.")
	}
	comment := strings.TrimSpace(r.PostForm.Get("comment"))
	var d client.Decision
	switch r.PostForm.Get("decision") {
	case "approve":
		d = client.Approve
	case "return":
		d = client.Return
		if comment == "" {
			return s.showTest(w, r, v, http.StatusBadRequest, "", testPage{Error: "comment: say why the test is returned, so its inspector can correct it. Nothing was recorded."})
		}
	default:
		return badRequest("decision: choose approve or return; nothing was recorded.")
	}
	err = v.st.ReviewTest(r.Context(), v.project, t.ID, d, comment)
	var ee *client.EntryError
	switch {
	case errors.Is(err, client.ErrOwnTest):
		return forbidden("You recorded this test, and no one reviews a test they recorded; nothing was recorded.")
	case errors.As(err, &ee):
		msg := visible(ee.Message)
		if ee.Field != "" {
			msg = ee.Field + ": " + msg
		}
		return s.showTest(w, r, v, http.StatusBadRequest, "", testPage{Comment: comment, Error: msg + " Nothing was recorded."})
	case err != nil:
		return err
	}
	http.Redirect(w, r, "/test/"+url.PathEscape(t.ID)+"?reviewed="+string(d), http.StatusSeeOther)
	return nil
}
