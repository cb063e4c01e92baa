package web

import (
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"errors"
	"fmt"
	"io"
	"math"
	"math/big"
	"net"
	"net/http"
	"net/http/httptest"
	"net/url"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"tamp/client"
	"tamp/internal/soil"
	"tamp/internal/words"
)

// The fixture's units: US customary, with the exact factors of the
// international foot and pound (NIST SP 811).
const (
	foot  = 0.3048
	pound = 0.45359237
	pcf   = pound / (foot * foot * foot)
)

// hostile is free text meant to break a page: markup, quotes, an
// ampersand, C0 controls, a right-to-left override.
const hostile = "<script>alert(1)</script> \"quoted\" 'single' & \x07bell \x1b[31mred \u202eevil"

// fixtureDay is the day the fixture's tests are taken, and its clock.
const fixtureDay = "2031-06-03"

var fixtureNow = time.Date(2031, 6, 3, 21, 0, 0, 0, time.UTC) // 15:00 in Denver

// fixture is a device store on a real SQLite file holding one project
// whose names and remarks are hostile: an inspector's four tests (a pass,
// a failure and its passing retest, a test corrected after a typing
// error), then the store's user becomes the office, who reviews them.
type fixture struct {
	path, project string
	pass, fail    string // ids
	retest, fixed string
}

func newFixture(t *testing.T) fixture {
	t.Helper()
	ctx := context.Background()
	f := fixture{path: filepath.Join(t.TempDir(), "office.db")}
	clock := fixtureNow.Add(-6 * time.Hour)
	now := func() time.Time { clock = clock.Add(time.Minute); return clock }
	st, err := client.Open(ctx, f.path, client.Options{User: "ines", Now: now})
	if err != nil {
		t.Fatal(err)
	}
	f.project = st.NewID()
	must := func(err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
	}
	must(st.SetUpProject(ctx, f.project, client.ProjectSetUp{Name: "Basin " + hostile, Units: client.USCustomary,
		WaterDensity: 62.4 * pcf, TimeZone: "America/Denver"}))
	spec, err := st.DefineSpec(ctx, f.project, client.Spec{Name: "embankment " + hostile, MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"})
	must(err)
	ref, err := st.AddReference(ctx, f.project, client.Reference{Material: "clayey sand " + hostile, Standard: client.ASTMD698,
		Method: "A", Edition: 2012, MaxDryDensity: 116.0 * pcf, OptimumMoisture: 13.5, SpecificGravity: 2.65})
	must(err)
	// Sand cone: sand of 99.0 pcf, 7.00 lb used, 0.53 lb in the cone.
	cone := func(soilLb, w float64) client.Readings {
		return client.Readings{SandCone: &client.SandCone{SandDensity: 99.0 * pcf, SandUsed: 7.00 * pound,
			ConeCorrection: 0.53 * pound, SoilMass: soilLb * pound, Moisture: w}}
	}
	at := func(station, north, east float64) client.TestInput {
		return client.TestInput{Project: f.project, ReferenceID: ref, SpecID: spec, Feature: "embankment " + hostile, LiftNumber: 6,
			Location: client.Location{Station: station * foot, Offset: -10 * foot,
				Position: &client.GeoPosition{Latitude: 39.5 + north/111195, Longitude: -105.0 + east/(111195*math.Cos(39.5*math.Pi/180)), Accuracy: 2}}}
	}
	in := at(1310, 0, 0)
	in.Readings = cone(8.11, 12.0)
	r, err := st.RecordTest(ctx, in)
	must(err)
	f.pass = r.TestID

	in = at(1260, 100, 0)
	in.Readings, in.Remarks = cone(7.60, 12.4), hostile
	in.Location.Description = "by the outlet " + hostile
	r, err = st.RecordTest(ctx, in)
	must(err)
	f.fail = r.TestID

	in = at(1210, 0, 100)
	in.Readings = cone(6.11, 12.6)
	r, err = st.RecordTest(ctx, in)
	must(err)
	f.fixed = r.TestID
	_, err = st.CorrectTest(ctx, f.project, f.fixed, "soil mass typed as 6.11 lb "+hostile,
		func(in *client.TestInput) { in.Readings.SandCone.SoilMass = 8.11 * pound })
	must(err)

	r, err = st.RecordRetest(ctx, f.project, f.fail, client.RetestInput{Readings: cone(8.30, 12.9), Remarks: "re-rolled"})
	must(err)
	f.retest = r.TestID
	must(st.Close())

	// The office's desk: the same file, its user the office.
	st, err = client.Open(ctx, f.path, client.Options{User: "odile", Now: now})
	must(err)
	must(st.Close())
	return f
}

// serve starts the page over the fixture on 127.0.0.1.
func serve(t *testing.T, f fixture) (*Server, *httptest.Server) {
	t.Helper()
	s, err := New(Options{Store: f.path, Project: f.project, Now: func() time.Time { return fixtureNow }})
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(s)
	t.Cleanup(ts.Close)
	return s, ts
}

// get fetches a page and returns its status and body.
func get(t *testing.T, u string) (int, string) {
	t.Helper()
	resp, err := http.Get(u)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatal(err)
	}
	return resp.StatusCode, string(b)
}

// TestWebEscapesHostileText: every page shows hostile names, remarks,
// reasons and comments as text: markup escaped, controls and the
// right-to-left override written out, no raw script anywhere.
func TestWebEscapesHostileText(t *testing.T) {
	f := newFixture(t)
	_, ts := serve(t, f)
	// A review whose comment is hostile too.
	st, err := client.Open(context.Background(), f.path, client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if err := st.ReviewTest(context.Background(), f.project, f.fail, client.Return, "redo "+hostile); err != nil {
		t.Fatal(err)
	}
	st.Close()

	pages := []string{"day", "day?verdict=fail", "test/" + f.fail, "test/" + f.fixed, "print", "locations", "charts", "queue", "audit",
		"frequency", "lots", "reconciliation"}
	raw := regexp.MustCompile(`(?i)<script|<\/script|[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]|\x{202e}`)
	for _, p := range pages {
		code, body := get(t, ts.URL+"/"+p)
		if code != http.StatusOK {
			t.Errorf("GET /%s: status %d", p, code)
			continue
		}
		if m := raw.FindString(body); m != "" {
			t.Errorf("GET /%s: the page holds %q raw", p, m)
		}
		if !strings.Contains(body, "Basin &lt;script&gt;alert(1)&lt;/script&gt; &#34;quoted&#34; &#39;single&#39; &amp; \\x07bell \\x1b[31mred \\u202eevil") {
			t.Errorf("GET /%s: the project's name is not shown escaped, controls written out", p)
		}
	}
	_, body := get(t, ts.URL+"/test/"+f.fail)
	for _, want := range []string{
		"<dd>&lt;script&gt;alert(1)&lt;/script&gt; &#34;quoted&#34;", // remarks
		"by the outlet &lt;script&gt;",                               // where, in words
		"redo &lt;script&gt;alert(1)&lt;/script&gt;",                 // the office's comment
		"embankment &lt;script&gt;",                                  // spec and feature
	} {
		if !strings.Contains(body, want) {
			t.Errorf("the failing test's page lacks %q", want)
		}
	}
	_, body = get(t, ts.URL+"/test/"+f.fixed)
	if !strings.Contains(body, "soil mass typed as 6.11 lb &lt;script&gt;") {
		t.Errorf("the corrected test's page lacks the correction's reason, escaped")
	}
	_, body = get(t, ts.URL+"/charts")
	if !strings.Contains(body, `<svg class="chart"`) || strings.Contains(body, "<?xml") {
		t.Errorf("the charts are not set inline as svg elements")
	}
	if !strings.Contains(body, "clayey sand &lt;script&gt;") {
		t.Errorf("the chart's text does not hold the material escaped")
	}
}

// token reads the form's token from a test's page.
func token(t *testing.T, ts *httptest.Server, id string) string {
	t.Helper()
	_, body := get(t, ts.URL+"/test/"+id)
	m := regexp.MustCompile(`name="token" value="([^"]+)"`).FindStringSubmatch(body)
	if m == nil {
		t.Fatalf("no token in the review form of test %s", id)
	}
	return m[1]
}

// post sends a review form with the headers given and returns the status,
// without following a redirect.
func post(t *testing.T, ts *httptest.Server, id string, form url.Values, headers map[string]string) int {
	t.Helper()
	req, err := http.NewRequest(http.MethodPost, ts.URL+"/test/"+id+"/review", strings.NewReader(form.Encode()))
	if err != nil {
		t.Fatal(err)
	}
	req.Header.Set("Content-Type", "application/x-www-form-urlencoded")
	for k, v := range headers {
		req.Header.Set(k, v)
	}
	c := &http.Client{CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}
	resp, err := c.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	return resp.StatusCode
}

// reviews returns a test's review count and the store's outbox, read by
// another opener of the file.
func reviews(t *testing.T, f fixture, id string) (int, int) {
	t.Helper()
	st, err := client.Open(context.Background(), f.path, client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	tt, err := st.Test(f.project, id)
	if err != nil {
		t.Fatal(err)
	}
	ob, err := st.Outbox(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	return len(tt.Reviews), ob.Pending
}

// TestWebRefusesForgedPost: a review posted from another site, or
// without the running page's token, is refused with 403 and records
// nothing; the page's own form is recorded.
func TestWebRefusesForgedPost(t *testing.T) {
	f := newFixture(t)
	_, ts := serve(t, f)
	tok := token(t, ts, f.fail)
	_, before := reviews(t, f, f.fail)
	good := url.Values{"token": {tok}, "decision": {"approve"}}
	for _, c := range []struct {
		name    string
		form    url.Values
		headers map[string]string
	}{
		{"another site's page, with the token", good, map[string]string{"Origin": "http://evil.example", "Sec-Fetch-Site": "cross-site"}},
		{"another origin of the same site", good, map[string]string{"Origin": "http://127.0.0.1:1", "Sec-Fetch-Site": "same-site"}},
		{"an old browser's cross-origin post", good, map[string]string{"Origin": "http://evil.example"}},
		{"no token", url.Values{"decision": {"approve"}}, nil},
		{"a wrong token", url.Values{"token": {"forged"}, "decision": {"approve"}}, map[string]string{"Sec-Fetch-Site": "same-origin"}},
	} {
		if code := post(t, ts, f.fail, c.form, c.headers); code != http.StatusForbidden {
			t.Errorf("%s: status %d, want 403", c.name, code)
		}
	}
	if n, pending := reviews(t, f, f.fail); n != 0 || pending != before {
		t.Fatalf("after the refused posts the test holds %d reviews and the outbox %d entries, want 0 and %d", n, pending, before)
	}
	// The page's own form, as a browser sends it.
	if code := post(t, ts, f.fail, url.Values{"token": {tok}, "decision": {"return"}, "comment": {"retest it"}},
		map[string]string{"Origin": ts.URL, "Sec-Fetch-Site": "same-origin"}); code != http.StatusSeeOther {
		t.Errorf("the page's own post: status %d, want 303", code)
	}
	if n, pending := reviews(t, f, f.fail); n != 1 || pending != before+1 {
		t.Errorf("after the page's post the test holds %d reviews and the outbox %d entries, want 1 and %d", n, pending, before+1)
	}
}

// TestWebReviewRules: a return needs a comment; nobody reviews their own
// test; a review made while another opener holds the store is seen by it
// and by a third; the page shows what another opener recorded.
func TestWebReviewRules(t *testing.T) {
	f := newFixture(t)
	_, ts := serve(t, f)
	tok := token(t, ts, f.pass)
	same := map[string]string{"Origin": ts.URL, "Sec-Fetch-Site": "same-origin"}
	if code := post(t, ts, f.pass, url.Values{"token": {tok}, "decision": {"return"}, "comment": {"  "}}, same); code != http.StatusBadRequest {
		t.Errorf("a return without a comment: status %d, want 400", code)
	}
	if code := post(t, ts, f.pass, url.Values{"token": {tok}, "decision": {"maybe"}}, same); code != http.StatusBadRequest {
		t.Errorf("an unknown decision: status %d, want 400", code)
	}

	// Another opener holds the store (as tamp sync does) and records a test
	// of its own user; the page shows it at once.
	ctx := context.Background()
	other, err := client.Open(ctx, f.path, client.Options{Now: func() time.Time { return fixtureNow }})
	if err != nil {
		t.Fatal(err)
	}
	defer other.Close()
	before, err := other.Outbox(ctx)
	if err != nil {
		t.Fatal(err)
	}
	passing, _ := other.Test(f.project, f.pass)
	in := passing.Content
	in.Remarks = "taken by the office"
	own, err := other.RecordTest(ctx, in)
	if err != nil {
		t.Fatal(err)
	}
	if _, body := get(t, ts.URL+"/day"); !strings.Contains(body, words.ShortID(own.TestID)) {
		t.Errorf("the day's list does not show the test another opener recorded")
	}
	if code := post(t, ts, own.TestID, url.Values{"token": {tok}, "decision": {"approve"}}, same); code != http.StatusForbidden {
		t.Errorf("a review of one's own test: status %d, want 403", code)
	}
	if _, body := get(t, ts.URL+"/test/"+own.TestID); !strings.Contains(body, "no one reviews a test they recorded") || strings.Contains(body, `name="decision"`) {
		t.Errorf("the page of the user's own test offers a review")
	}

	// The page approves while the other opener holds the file.
	if code := post(t, ts, f.pass, url.Values{"token": {tok}, "decision": {"approve"}}, same); code != http.StatusSeeOther {
		t.Fatalf("approve: status %d, want 303", code)
	}
	if ob, err := other.Outbox(ctx); err != nil || ob.Pending != before.Pending+2 {
		t.Errorf("the other opener's outbox holds %d entries (%v), want %d: its test and the page's review", ob.Pending, err, before.Pending+2)
	}
	st, err := client.Open(ctx, f.path, client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	if tt, _ := st.Test(f.project, f.pass); tt.ReviewStatus != client.Approved || len(tt.Reviews) != 1 || tt.Reviews[0].Author != "odile" {
		t.Errorf("a third opener sees test %s %s with reviews %+v, want approved once by odile", f.pass, tt.ReviewStatus, tt.Reviews)
	}
	if _, body := get(t, ts.URL+"/test/"+f.pass+"?reviewed=approve"); !strings.Contains(body, "Approved. The review is signed on this device") ||
		!strings.Contains(body, "Now: <strong>approved</strong>") {
		t.Errorf("the test's page after approving does not say so")
	}
}

// TestWebDayList: the filters keep what they name and sort by station; a
// filter that breaks a rule is refused naming the parameter.
func TestWebDayList(t *testing.T) {
	f := newFixture(t)
	_, ts := serve(t, f)
	rows := regexp.MustCompile(`<tr class="r-(\w+)">\s*<td class="nowrap">([0-9.]+&#43;[0-9.]+)<br>`)
	list := func(q string) (classes, stations []string) {
		t.Helper()
		code, body := get(t, ts.URL+"/day?"+q)
		if code != http.StatusOK {
			t.Fatalf("GET /day?%s: status %d", q, code)
		}
		for _, m := range rows.FindAllStringSubmatch(body, -1) {
			classes, stations = append(classes, m[1]), append(stations, strings.ReplaceAll(m[2], "&#43;", "+"))
		}
		return classes, stations
	}
	classes, stations := list("")
	if strings.Join(stations, " ") != "12+10.00 12+60.00 12+60.00 13+10.00" {
		t.Errorf("the day by station: %v, want 12+10, 12+60 (the failure and its retest), 13+10", stations)
	}
	if strings.Join(classes, " ") != "pass fail pass pass" {
		t.Errorf("the day's verdicts: %v", classes)
	}
	if classes, _ := list("verdict=fail"); strings.Join(classes, " ") != "fail" {
		t.Errorf("verdict=fail keeps %v, want the one failure", classes)
	}
	if classes, _ := list("verdict=pass&lift=6&feature=" + url.QueryEscape(visible("embankment "+hostile))); len(classes) != 3 {
		t.Errorf("verdict=pass, lift 6, the feature: %d tests, want 3", len(classes))
	}
	if classes, _ := list("lift=7"); len(classes) != 0 {
		t.Errorf("lift=7 keeps %d tests, want none", len(classes))
	}
	if classes, _ := list("inspector=ines"); len(classes) != 4 {
		t.Errorf("inspector=ines keeps %d tests, want 4", len(classes))
	}
	if _, stations := list("sort=time"); strings.Join(stations, " ") != "13+10.00 12+60.00 12+10.00 12+60.00" {
		t.Errorf("the day by time: %v, want the order taken", stations)
	}
	for q, word := range map[string]string{"date=03-06-2031": "date", "lift=six": "lift", "verdict=maybe": "verdict", "sort=size": "sort"} {
		code, body := get(t, ts.URL+"/day?"+q)
		if code != http.StatusBadRequest || !strings.Contains(body, word+" &#34;") {
			t.Errorf("GET /day?%s: status %d, want 400 naming %s", q, code, word)
		}
	}
}

// TestWebTestPage: the readings, the arithmetic and the limits of a failing
// sand-cone test, checked against a hand computation from ASTM D1556's
// relations [formula]: hole = (7.00 - 0.53) lb / 99.0 pcf = 0.065354 ft3;
// wet = 7.60 / 0.065354 = 116.29 pcf; dry = 116.29 / 1.124 = 103.5 pcf;
// RC = 103.5 / 116.0 = 89.2 %; moisture 12.4 - 13.5 = -1.1 points.
func TestWebTestPage(t *testing.T) {
	f := newFixture(t)
	_, ts := serve(t, f)
	code, body := get(t, ts.URL+"/test/"+f.fail)
	if code != http.StatusOK {
		t.Fatalf("status %d", code)
	}
	text := regexp.MustCompile(`<[^>]+>`).ReplaceAllString(body, " ")
	text = strings.Join(strings.Fields(text), " ")
	for _, want := range []string{
		"sand bulk density 99.0 pcf", "sand used 7.00 lb", "cone correction 0.53 lb", "soil from the hole 7.60 lb", // raw readings
		"hole volume = sand in hole / sand density 0.065354 ft3", // the method's steps
		"wet density 116.3 pcf", "dry density = wet / (1 &#43; w) 103.5 pcf",
		"relative compaction = dry density / maximum dry density × 100 = 103.5 / 116.0 × 100 = 89.2 %",
		"moisture − optimum = 12.4 − 13.5 = -1.1 points",
		"relative compaction 89.2 % min 95 % does not conform", // the limits applied
		"moisture against optimum -1.1 points -2 to &#43;2 points of optimum conforms",
		"FAIL under-compacted",
		"Retest chain",
		"Now: awaiting review",
	} {
		if !strings.Contains(text, want) {
			t.Errorf("the failing test's page lacks %q", want)
		}
	}
	if !strings.Contains(body, `href="/test/`+f.retest+`"`) {
		t.Errorf("the retest chain does not link the retest")
	}
	_, body = get(t, ts.URL+"/test/"+f.fixed)
	if !strings.Contains(body, "soil from the hole: 6.11 lb → 8.11 lb") {
		t.Errorf("the corrected test's history does not say what the correction changed")
	}
	if code, _ := get(t, ts.URL+"/test/no-such-test"); code != http.StatusNotFound {
		t.Errorf("an unknown test: status %d, want 404", code)
	}
}

// TestWebPositionPlot: positions are drawn north up at one scale both ways:
// a test 100 m north of another is as far above it as a test 100 m east is
// to its right, and the scale bar's length is its label.
func TestWebPositionPlot(t *testing.T) {
	v := &view{u: units{sys: soil.SI}}
	lat, lon := 39.5, -105.0
	dLat := 100 / earthRadius * 180 / math.Pi
	dLon := dLat / math.Cos(lat*math.Pi/180)
	mk := func(id string, la, lo float64) located {
		return located{t: client.Test{ID: id, Content: client.TestInput{Location: client.Location{Position: &client.GeoPosition{Latitude: la, Longitude: lo}}}},
			label: id}
	}
	p := v.positionPlot([]located{mk("origin", lat, lon), mk("north", lat+dLat, lon), mk("east", lat, lon+dLon),
		{t: client.Test{ID: "nogps"}, label: "nogps"}})
	if p == nil || len(p.Points) != 3 {
		t.Fatalf("plot %+v, want the three tests with a position", p)
	}
	at := map[string]point{}
	for _, pt := range p.Points {
		at[pt.Label] = pt
	}
	up := at["origin"].Y - at["north"].Y
	right := at["east"].X - at["origin"].X
	if up <= 0 || right <= 0 || math.Abs(up-right)/right > 0.01 || math.Abs(at["north"].X-at["origin"].X) > 0.5 {
		t.Errorf("100 m north is %.2f up, 100 m east %.2f right; want equal and positive, north straight up", up, right)
	}
	var metres float64
	if _, err := fmt.Sscan(p.Scale.Label, &metres); err != nil || math.Abs(p.Scale.Len/(right/100)-metres) > 0.01 {
		t.Errorf("scale bar %q is %.2f units long at %.4f units per metre", p.Scale.Label, p.Scale.Len, right/100)
	}
	if v.positionPlot([]located{{t: client.Test{ID: "x"}}}) != nil {
		t.Errorf("a day without positions has a position plot")
	}
}

// TestWebListen: plain HTTP on loopback only; another address needs TLS.
func TestWebListen(t *testing.T) {
	for _, addr := range []string{"127.0.0.1:0", "localhost:0"} {
		ln, err := Listen(addr, nil)
		if err != nil {
			t.Errorf("Listen(%s): %v", addr, err)
			continue
		}
		if host, _, _ := strings.Cut(ln.Addr().String(), ":"); host != "127.0.0.1" {
			t.Errorf("Listen(%s) listens on %s, want 127.0.0.1", addr, ln.Addr())
		}
		ln.Close()
	}
	for _, addr := range []string{"0.0.0.0:0", ":0", "192.0.2.7:8415", "[::]:0", "tamp.example:8415"} {
		if _, err := Listen(addr, nil); !errors.Is(err, ErrTLSRequired) {
			t.Errorf("Listen(%s) without TLS: %v, want ErrTLSRequired", addr, err)
		}
	}
	if _, err := Listen("127.0.0.1", nil); err == nil {
		t.Errorf("Listen without a port: no error")
	}
}

// TestWebHostCheck: over plain HTTP the page answers only requests that name
// a loopback host, so a site that rebinds its own name to 127.0.0.1 cannot
// read it.
func TestWebHostCheck(t *testing.T) {
	f := newFixture(t)
	_, ts := serve(t, f)
	req, _ := http.NewRequest(http.MethodGet, ts.URL+"/day", nil)
	req.Host = "rebound.example:80"
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusMisdirectedRequest {
		t.Errorf("a request for another host: status %d, want 421", resp.StatusCode)
	}
	resp, err = http.Get(ts.URL + "/day")
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if csp := resp.Header.Get("Content-Security-Policy"); !strings.Contains(csp, "default-src 'none'") || !strings.Contains(csp, "form-action 'self'") {
		t.Errorf("Content-Security-Policy %q allows more than the page needs", csp)
	}
}

// TestWebNeverCreatesAStore: the page never creates a store.
func TestWebNeverCreatesAStore(t *testing.T) {
	p := filepath.Join(t.TempDir(), "none.db")
	if _, err := New(Options{Store: p, Project: "p"}); err == nil {
		t.Fatalf("New on a missing store: no error")
	}
	if _, err := New(Options{Store: p, Project: "p"}); err == nil {
		t.Fatalf("New on a missing store, twice: no error (a store was made)")
	}
}

// TestWebVisible writes out what would not show.
func TestWebVisible(t *testing.T) {
	for in, want := range map[string]string{
		"plain words, ünïcödé and 日本": "plain words, ünïcödé and 日本",
		"a\x00b\x1bc\x7fd":            `a\x00b\x1bc\x7fd`,
		"line\nand\ttab":              "line\nand\ttab",
		"\u202eevil\u2066x\u2069":     `\u202eevil\u2066x\u2069`,
		"bad \xff byte":               `bad \xff byte`,
		"\u0085next":                  `\u0085next`,
	} {
		if got := visible(in); got != want {
			t.Errorf("visible(%q) = %q, want %q", in, got, want)
		}
	}
}

// The audit page lists the audit's findings with the entries they rest
// on: here the correction that turned the third test's failure (6.11 lb of
// soil from the hole) into a pass (8.11 lb), with its reason escaped.
func TestWebAuditFindings(t *testing.T) {
	f := newFixture(t)
	_, ts := serve(t, f)
	code, body := get(t, ts.URL+"/audit")
	if code != http.StatusOK {
		t.Fatalf("GET /audit: %d", code)
	}
	i := strings.Index(body, "correction turned a fail into a pass")
	if i < 0 {
		t.Fatalf("the audit page lacks the correction finding:\n%s", body)
	}
	row := body[i:min(len(body), i+2000)]
	if !strings.Contains(row, words.ShortID(f.fixed)) || !strings.Contains(row, "soil mass typed as 6.11 lb") || strings.Contains(row, "<script>") {
		t.Errorf("the finding's row does not name test %s and its reason, escaped:\n%s", words.ShortID(f.fixed), row)
	}
	if !strings.Contains(body, "retest a failure within 48 h, within 32.81 ft of it") {
		t.Errorf("the audit page does not state the project's retest rules (the defaults: 48 h, 10 m)")
	}
}

// testPKI is a throwaway certificate authority with a server certificate
// for 127.0.0.1 and a client certificate, both signed by it.
type testPKI struct {
	pool           *x509.CertPool
	server, client tls.Certificate
}

func newTestPKI(t *testing.T) testPKI {
	t.Helper()
	key := func() *ecdsa.PrivateKey {
		k, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
		if err != nil {
			t.Fatal(err)
		}
		return k
	}
	caKey := key()
	ca := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "site office CA"}, NotBefore: time.Now().Add(-time.Hour),
		NotAfter: time.Now().Add(time.Hour), IsCA: true, BasicConstraintsValid: true, KeyUsage: x509.KeyUsageCertSign}
	caDER, err := x509.CreateCertificate(rand.Reader, ca, ca, &caKey.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	caCert, _ := x509.ParseCertificate(caDER)
	issue := func(serial int64, usage x509.ExtKeyUsage, ip net.IP) tls.Certificate {
		k := key()
		tmpl := &x509.Certificate{SerialNumber: big.NewInt(serial), Subject: pkix.Name{CommonName: "holder"}, NotBefore: time.Now().Add(-time.Hour),
			NotAfter: time.Now().Add(time.Hour), ExtKeyUsage: []x509.ExtKeyUsage{usage}, KeyUsage: x509.KeyUsageDigitalSignature}
		if ip != nil {
			tmpl.IPAddresses = []net.IP{ip}
		}
		der, err := x509.CreateCertificate(rand.Reader, tmpl, caCert, &k.PublicKey, caKey)
		if err != nil {
			t.Fatal(err)
		}
		return tls.Certificate{Certificate: [][]byte{der}, PrivateKey: k}
	}
	pool := x509.NewCertPool()
	pool.AddCert(caCert)
	return testPKI{pool: pool, server: issue(2, x509.ExtKeyUsageServerAuth, net.ParseIP("127.0.0.1")), client: issue(3, x509.ExtKeyUsageClientAuth, nil)}
}

// Beyond loopback the page is served only over TLS that requires a client
// certificate from the office's authority: TLS alone is refused, and a
// browser without a certificate cannot even read a page (so it never sees
// the form's token), while one holding a certificate can.
func TestWebListenBeyondLoopbackNeedsClientCertificates(t *testing.T) {
	pki := newTestPKI(t)
	plain := &tls.Config{Certificates: []tls.Certificate{pki.server}, MinVersion: tls.VersionTLS12}
	if _, err := Listen("0.0.0.0:0", plain); !errors.Is(err, ErrClientCertRequired) {
		t.Fatalf("Listen beyond loopback with TLS but no client certificates: %v, want ErrClientCertRequired", err)
	}
	strict := plain.Clone()
	strict.ClientAuth, strict.ClientCAs = tls.RequireAndVerifyClientCert, pki.pool
	ln, err := Listen("0.0.0.0:0", strict)
	if err != nil {
		t.Fatal(err)
	}
	f := newFixture(t)
	s, err := New(Options{Store: f.path, Project: f.project, Now: func() time.Time { return fixtureNow }})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- s.Serve(ctx, ln) }()
	defer func() { cancel(); <-done }()
	_, port, _ := net.SplitHostPort(ln.Addr().String())
	url := "https://127.0.0.1:" + port + "/day"
	get := func(certs []tls.Certificate) (*http.Response, error) {
		c := &http.Client{Timeout: 10 * time.Second, Transport: &http.Transport{TLSClientConfig: &tls.Config{RootCAs: pki.pool, Certificates: certs}}}
		return c.Get(url)
	}
	if resp, err := get(nil); err == nil {
		resp.Body.Close()
		t.Errorf("a client without a certificate got %s", resp.Status)
	}
	resp, err := get([]tls.Certificate{pki.client})
	if err != nil {
		t.Fatalf("a client holding a certificate: %v", err)
	}
	resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		t.Errorf("a client holding a certificate got %s", resp.Status)
	}
}
