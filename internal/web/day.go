package web

import (
	"cmp"
	"fmt"
	"net/http"
	"net/url"
	"slices"
	"strconv"
	"time"

	"tamp/client"
	"tamp/internal/soil"
	"tamp/internal/words"
)

// day.go: the day's tests, filtered and sorted, and the same list laid out
// for print.

// option is one choice of a filter's menu.
type option struct {
	Value, Label string
	Selected     bool
}

// dayLink is a day that holds tests, for the menu of days.
type dayLink struct {
	Date    string
	Count   int
	Current bool
}

// row is one test in a list.
type row struct {
	ID, Short string
	Time      string // HH:MM in the project's time zone
	Station   string
	Offset    string
	Feature   string
	Lift      uint32
	Method    string
	Dry       string
	Moisture  string
	RC        string
	Limit     string
	Verdict   verdict
	Review    string
	Returned  bool
	By        string
	RetestOf  string // the original's short id, for a retest
	RetestID  string
	Retests   int
	Flags     int // flags for review: the arithmetic's and the record's
	Remarks   string

	station float64
	taken   time.Time
}

// rowOf lays a test out for a list.
func (v *view) rowOf(t client.Test) row {
	res, c := t.Result, t.Content
	r := row{ID: t.ID, Short: words.ShortID(t.ID), Time: t.Taken.In(v.loc).Format("15:04"), Station: v.u.station(c.Location.Station),
		Offset: v.u.offset(c.Location.Offset), Feature: visible(c.Feature), Lift: c.LiftNumber, Method: methodShort[res.Method],
		Dry: v.u.show(soil.Density, res.DryDensity), Moisture: v.u.show(soil.Percent, res.Moisture), RC: "-",
		Limit: cmp.Or(words.CompactionLimit(res.Limits), "-"), Verdict: verdictOf(t), Review: reviewWord(t.ReviewStatus),
		Returned: t.ReviewStatus == client.Returned, By: v.who(t.Author), Retests: len(t.Retests), Flags: len(res.Flags) + len(t.Flags), Remarks: visible(c.Remarks),
		station: c.Location.Station, taken: t.Taken}
	if graded(res) {
		r.RC = v.u.show(soil.Percent, res.RelativeCompaction)
	}
	if t.RetestOf != "" {
		r.RetestOf, r.RetestID = words.ShortID(t.RetestOf), t.RetestOf
	}
	return r
}

// dayFilter is what the day's list is narrowed to and sorted by, as the
// query string gives it.
type dayFilter struct {
	Date      string
	Feature   string
	Lift      string
	Verdict   string // pass, fail, pending, voided or empty for all
	Inspector string // a user id
	Sort      string // station (the default) or time
}

// verdictChoices are the verdict filter's values and labels.
var verdictChoices = []option{{Value: "", Label: "any verdict"}, {Value: "fail", Label: "FAIL only"}, {Value: "pass", Label: "PASS only"},
	{Value: "pending", Label: "NOT GRADED only"}, {Value: "voided", Label: "VOIDED only"}}

// readDayFilter reads and checks the query; a value that breaks a rule is
// refused with the parameter's name and the rule.
func readDayFilter(q url.Values) (dayFilter, error) {
	f := dayFilter{Date: q.Get("date"), Feature: q.Get("feature"), Lift: q.Get("lift"), Verdict: q.Get("verdict"),
		Inspector: q.Get("inspector"), Sort: cmp.Or(q.Get("sort"), "station")}
	if f.Date != "" {
		if _, err := time.Parse(time.DateOnly, f.Date); err != nil {
			return f, badRequest(fmt.Sprintf("date %q: write the day as YYYY-MM-DD.", f.Date))
		}
	}
	if f.Lift != "" {
		if _, err := strconv.ParseUint(f.Lift, 10, 32); err != nil {
			return f, badRequest(fmt.Sprintf("lift %q: a lift is a whole number.", f.Lift))
		}
	}
	if !slices.ContainsFunc(verdictChoices, func(o option) bool { return o.Value == f.Verdict }) {
		return f, badRequest(fmt.Sprintf("verdict %q: choose pass, fail, pending or voided, or leave it out for all.", f.Verdict))
	}
	if f.Sort != "station" && f.Sort != "time" {
		return f, badRequest(fmt.Sprintf("sort %q: sort by station or by time.", f.Sort))
	}
	return f, nil
}

// keep reports whether a test passes the filter (its day aside).
func (f dayFilter) keep(t client.Test) bool {
	switch {
	case f.Feature != "" && visible(t.Content.Feature) != f.Feature: // the menu offers names as shown
		return false
	case f.Lift != "" && strconv.FormatUint(uint64(t.Content.LiftNumber), 10) != f.Lift:
		return false
	case f.Inspector != "" && t.Author != f.Inspector:
		return false
	}
	switch f.Verdict {
	case "voided":
		return t.Voided
	case "pass":
		return !t.Voided && t.Result.Verdict == client.Pass
	case "fail":
		return !t.Voided && t.Result.Verdict == client.Fail
	case "pending":
		return !t.Voided && !graded(t.Result)
	}
	return true
}

// query is the filter as a query string, for links that keep it.
func (f dayFilter) query() string {
	q := url.Values{}
	for k, val := range map[string]string{"date": f.Date, "feature": f.Feature, "lift": f.Lift, "verdict": f.Verdict, "inspector": f.Inspector} {
		if val != "" {
			q.Set(k, val)
		}
	}
	if f.Sort != "station" {
		q.Set("sort", f.Sort)
	}
	return q.Encode()
}

// sortRows sorts by station (then offset, then time), or by time.
func sortRows(rows []row, by string) {
	slices.SortStableFunc(rows, func(a, b row) int {
		if by == "time" {
			return a.taken.Compare(b.taken)
		}
		return cmp.Or(cmp.Compare(a.station, b.station), a.taken.Compare(b.taken))
	})
}

// days returns the days that hold tests, latest first, with their counts.
func days(tests []client.Test, current string) []dayLink {
	count := map[string]int{}
	for _, t := range tests {
		count[t.Day]++
	}
	var out []dayLink
	for d, n := range count {
		out = append(out, dayLink{Date: d, Count: n, Current: d == current})
	}
	slices.SortFunc(out, func(a, b dayLink) int { return cmp.Compare(b.Date, a.Date) })
	return out
}

// pickDay is the day asked for, else today when it holds tests, else the
// latest day that does, else today.
func (v *view) pickDay(asked string, tests []client.Test) string {
	if asked != "" {
		return asked
	}
	today, latest := v.today(), ""
	for _, t := range tests {
		if t.Day == today {
			return today
		}
		latest = max(latest, t.Day)
	}
	return cmp.Or(latest, today)
}

// counts sums up a list.
type counts struct {
	Tests, Pass, Fail, Pending, Voided, Retests, Awaiting, Returned int
}

func countOf(ts []client.Test) counts {
	var c counts
	for _, t := range ts {
		c.Tests++
		switch {
		case t.Voided:
			c.Voided++
		case t.Result.Verdict == client.Pass:
			c.Pass++
		case t.Result.Verdict == client.Fail:
			c.Fail++
		default:
			c.Pending++
		}
		if t.RetestOf != "" {
			c.Retests++
		}
		switch {
		case t.Voided:
		case t.ReviewStatus == client.Returned:
			c.Returned++
		case t.ReviewStatus != client.Approved:
			c.Awaiting++
		}
	}
	return c
}

// dayPage is the day's list.
type dayPage struct {
	Filter     dayFilter
	Query      string // the filter as a query string
	Days       []dayLink
	Features   []option
	Lifts      []option
	Verdicts   []option
	Inspectors []option
	Sorts      []option
	All        counts // the day's tests
	Shown      counts // those the filter keeps
	Filtered   bool
	Rows       []row
	Nuclear    bool
}

// dayList reads the day's tests and applies the filter.
func (v *view) dayList(f *dayFilter) (page dayPage, kept []client.Test) {
	all := v.st.Tests(v.project)
	f.Date = v.pickDay(f.Date, all)
	ofDay := v.st.TestsOn(v.project, f.Date)
	page = dayPage{Days: days(all, f.Date), All: countOf(ofDay)}
	features, lifts, inspectors := map[string]bool{}, map[uint32]bool{}, map[string]bool{}
	for _, t := range ofDay {
		features[t.Content.Feature], lifts[t.Content.LiftNumber], inspectors[t.Author] = true, true, true
		if f.keep(t) {
			kept = append(kept, t)
			page.Rows = append(page.Rows, v.rowOf(t))
			page.Nuclear = page.Nuclear || nuclear(t.Result.Method)
		}
	}
	sortRows(page.Rows, f.Sort)
	page.Filter, page.Query, page.Shown = *f, f.query(), countOf(kept)
	page.Filtered = f.Feature != "" || f.Lift != "" || f.Verdict != "" || f.Inspector != ""
	page.Features = []option{{Value: "", Label: "every feature", Selected: f.Feature == ""}}
	for _, name := range sortedKeys(features) {
		shown := visible(name)
		page.Features = append(page.Features, option{Value: shown, Label: cmp.Or(shown, "(none named)"), Selected: shown == f.Feature && f.Feature != ""})
	}
	page.Lifts = []option{{Value: "", Label: "every lift", Selected: f.Lift == ""}}
	for _, n := range sortedKeys(lifts) {
		s := strconv.FormatUint(uint64(n), 10)
		page.Lifts = append(page.Lifts, option{Value: s, Label: "lift " + s, Selected: s == f.Lift})
	}
	for _, o := range verdictChoices {
		o.Selected = o.Value == f.Verdict
		page.Verdicts = append(page.Verdicts, o)
	}
	page.Inspectors = []option{{Value: "", Label: "every inspector", Selected: f.Inspector == ""}}
	var people []option
	for id := range inspectors {
		people = append(people, option{Value: id, Label: v.who(id), Selected: id == f.Inspector})
	}
	slices.SortFunc(people, func(a, b option) int { return cmp.Compare(a.Label, b.Label) })
	page.Inspectors = append(page.Inspectors, people...)
	page.Sorts = []option{{Value: "station", Label: "station", Selected: f.Sort == "station"}, {Value: "time", Label: "time taken", Selected: f.Sort == "time"}}
	return page, kept
}

func sortedKeys[K cmp.Ordered, V any](m map[K]V) []K {
	out := make([]K, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	slices.Sort(out)
	return out
}

// day is the day's tests: GET /day?date=&feature=&lift=&verdict=&inspector=&sort=.
func (s *Server) day(w http.ResponseWriter, r *http.Request, v *view) error {
	f, err := readDayFilter(r.URL.Query())
	if err != nil {
		return err
	}
	page, _ := v.dayList(&f)
	return s.render(w, http.StatusOK, "day.html", s.frame(r, v, "Tests of "+f.Date, "day", f.Date, page))
}

// printPage is the day laid out for paper.
type printPage struct {
	dayPage
	Printed  string
	Failures []failureNote
}

// failureNote is a failing test of the printed day and what followed it.
type failureNote struct {
	Short   string
	Station string
	Why     string
	Retests []string // short id and verdict of each retest
	Review  string
}

// printDay is the day for paper: GET /print with the day list's query.
func (s *Server) printDay(w http.ResponseWriter, r *http.Request, v *view) error {
	f, err := readDayFilter(r.URL.Query())
	if err != nil {
		return err
	}
	page, kept := v.dayList(&f)
	p := printPage{dayPage: page, Printed: v.now.In(v.loc).Format("2006-01-02 15:04 MST")}
	slices.SortStableFunc(kept, func(a, b client.Test) int { return cmp.Compare(a.Content.Location.Station, b.Content.Location.Station) })
	for _, t := range kept {
		if t.Voided || t.Result.Verdict != client.Fail {
			continue
		}
		n := failureNote{Short: words.ShortID(t.ID), Station: v.u.station(t.Content.Location.Station) + ", " + v.u.offset(t.Content.Location.Offset),
			Why: gradeOf(t.Result).Why, Review: reviewWord(t.ReviewStatus)}
		for _, id := range t.Retests {
			if rt, err := v.st.Test(v.project, id); err == nil {
				vd := verdictOf(rt)
				n.Retests = append(n.Retests, words.ShortID(id)+" "+vd.Word+" ("+rt.Day+")")
			}
		}
		p.Failures = append(p.Failures, n)
	}
	return s.render(w, http.StatusOK, "print.html", s.frame(r, v, "Tests of "+f.Date, "print", f.Date, p))
}
