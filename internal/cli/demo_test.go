package cli

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/google/go-cmp/cmp"
	"go.uber.org/goleak"

	"tamp/client"
	"tamp/internal/qc"
	"tamp/internal/soil"
)

// demoOut is `tamp demo --json` as a script reads it.
type demoOut struct {
	Project     string `json:"project"`
	Day         string `json:"day"`
	Units       string `json:"units"`
	VolumeUnit  string `json:"volume_unit"`
	DensityUnit string `json:"density_unit"`
	Devices     []struct {
		Name          string `json:"name"`
		Person        string `json:"person"`
		Role          string `json:"role"`
		DeviceID      string `json:"device_id"`
		TestsRecorded int    `json:"tests_recorded"`
		VerifiedSeq   uint64 `json:"verified_seq"`
		VerifiedHead  string `json:"verified_head"`
		Pending       int    `json:"pending"`
		InAgreement   bool   `json:"in_agreement"`
	} `json:"devices"`
	TestsRecorded int `json:"tests_recorded"`
	TestsInLedger int `json:"tests_in_ledger"`
	Retests       int `json:"retests"`
	Failures      int `json:"failures"`
	OpenFailures  int `json:"open_failures"`
	Corrections   int `json:"corrections"`
	Conflicts     int `json:"conflicts"`
	Reviews       struct {
		Approved   int `json:"approved"`
		Returned   int `json:"returned"`
		Unreviewed int `json:"unreviewed"`
		Queue      int `json:"queue"`
	} `json:"reviews"`
	ClockSkewEntries   int    `json:"clock_skew_entries"`
	LedgerEntries      uint64 `json:"ledger_entries"`
	LedgerHead         string `json:"ledger_head"`
	DevicesInAgreement bool   `json:"devices_in_agreement"`
	Reconciliation     []struct {
		Source              string  `json:"source"`
		CompactedVolume     float64 `json:"compacted_volume"`
		CompactedDryDensity float64 `json:"compacted_dry_density"`
		Tests               int     `json:"tests"`
		BankDryDensity      float64 `json:"bank_dry_density"`
		BankVolume          float64 `json:"bank_volume"`
	} `json:"reconciliation"`
	Kept *struct {
		OfficeStore    string   `json:"office_store"`
		Ledger         string   `json:"ledger"`
		Files          []string `json:"files"`
		GeoJSONSkipped int      `json:"geojson_skipped"`
	} `json:"kept"`
}

// demoDate pins the day played, so that runs compare.
const demoDate = "2025-10-21"

func runDemo(t *testing.T, args ...string) demoOut {
	t.Helper()
	out, errOut, err := run(t, append([]string{"demo", "--json", "--date", demoDate}, args...)...)
	if err != nil {
		t.Fatalf("tamp demo --json: %v\n%s", err, errOut)
	}
	var d demoOut
	if err := json.Unmarshal([]byte(out), &d); err != nil {
		t.Fatalf("tamp demo --json printed no JSON object: %v\n%s", err, out)
	}
	return d
}

// demoNear reports whether got, printed at one decimal, is want rounded.
func demoNear(got, want float64) bool { return math.Abs(got-want) <= 0.05+1e-9 }

// demoBankDry computes a bank test's dry density (kg/m3) by hand from
// its readings, apart from the library: the hole's volume is the sand in
// it over the sand's bulk density (ASTM D1556 sec. 12), the cylinder's is
// pi d^2 / 4 x length (ASTM D2937), and dry density is wet density /
// (1 + w/100).
func demoBankDry(t *testing.T, r client.Readings) float64 {
	t.Helper()
	var mass, volume, w float64
	switch {
	case r.SandCone != nil:
		s := r.SandCone
		used := s.SandUsed
		if used == 0 {
			used = s.InitialMass - s.FinalMass
		}
		mass, volume, w = s.SoilMass, (used-s.ConeCorrection)/s.SandDensity, s.Moisture
	case r.DriveCylinder != nil:
		c := r.DriveCylinder
		mass, volume, w = c.SoilMass, math.Pi*c.Diameter*c.Diameter/4*c.Length, c.Moisture
	case r.RubberBalloon != nil:
		b := r.RubberBalloon
		mass, volume, w = b.SoilMass, b.FinalReading-b.InitialReading, b.Moisture
	default:
		t.Fatalf("a bank test by %s: the test computes sand cone, drive cylinder and rubber balloon only", r.Method())
	}
	return mass / volume / (1 + w/100)
}

// The demo's summary against the ledger it produced: the kept office
// store, opened with the client library, and the kept ledger, verified
// offline, give back every figure; the reconciliation is recomputed by
// hand from the placements, the tests and the bank tests' readings.
func TestDemoSummaryMatchesLedger(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	ctx := context.Background()
	dir := t.TempDir()
	sum := runDemo(t, "--out", dir)

	if sum.Kept == nil || sum.Kept.OfficeStore != filepath.Join(dir, "office.db") || sum.Kept.Ledger != filepath.Join(dir, "ledger.tamp") {
		t.Fatalf("kept %+v, want office.db and ledger.tamp in %s", sum.Kept, dir)
	}
	office, err := client.Open(ctx, sum.Kept.OfficeStore, client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer office.Close()
	project := sum.Project
	if remembered, err := office.Setting(ctx, projectSetting); err != nil || remembered != project {
		t.Errorf("the kept store remembers project %q (%v), want %s", remembered, err, project)
	}

	// The tests, as the office's copy of the ledger holds them.
	tests := office.TestsOn(project, sum.Day)

	// The exports, reports and charts beside it: the CSV has a row per test
	// and parses strictly, the GeoJSON places no test without a position,
	// and each file the summary names is there and not empty.
	names := map[string]bool{}
	for _, f := range sum.Kept.Files {
		names[filepath.Base(f)] = true
		if fi, err := os.Stat(f); err != nil || fi.Size() == 0 {
			t.Errorf("kept file %s: %v", f, err)
		}
	}
	for _, want := range []string{"tests.csv", "history.csv", "tests.geojson", "review_queue.json", "retest_audit.json", "frequency.json",
		"lots.json", "reconciliation.json", "moisture_density_1.svg", "moisture_density_1.png", "run_chart_1.svg", "run_chart_1.png"} {
		if !names[want] {
			t.Errorf("the demo kept no %s: %v", want, sum.Kept.Files)
		}
	}
	if f, err := os.Open(filepath.Join(dir, "tests.csv")); err == nil {
		rows, err := csv.NewReader(f).ReadAll()
		f.Close()
		if err != nil || len(rows) != len(office.Tests(project))+1 {
			t.Errorf("tests.csv: %d rows (%v), want a header and one per test (%d)", len(rows), err, len(office.Tests(project)))
		}
	}
	var fc struct {
		Features []json.RawMessage `json:"features"`
	}
	if b, err := os.ReadFile(filepath.Join(dir, "tests.geojson")); err != nil || json.Unmarshal(b, &fc) != nil ||
		len(fc.Features)+sum.Kept.GeoJSONSkipped != len(office.Tests(project)) {
		t.Errorf("tests.geojson: %d placed and %d skipped of %d tests (%v)", len(fc.Features), sum.Kept.GeoJSONSkipped, len(office.Tests(project)), err)
	}
	var retests, failures, corrections, approved, returned, unreviewed int
	byDevice := map[string]int{}
	for _, tt := range tests {
		byDevice[tt.Device]++
		corrections += len(tt.Revisions) - 1
		switch {
		case tt.RetestOf != "":
			retests++
		case tt.Result.Verdict == client.Fail && !tt.Voided:
			failures++
		}
		switch tt.ReviewStatus {
		case client.Approved:
			approved++
		case client.Returned:
			returned++
		default:
			unreviewed++
		}
	}
	for _, c := range []struct {
		name      string
		got, want int
	}{
		{"tests_in_ledger", sum.TestsInLedger, len(tests)},
		{"tests_recorded", sum.TestsRecorded, len(tests)},
		{"retests", sum.Retests, retests},
		{"failures", sum.Failures, failures},
		{"corrections", sum.Corrections, corrections},
		{"open_failures", sum.OpenFailures, len(office.OpenFailures(project))},
		{"conflicts", sum.Conflicts, len(office.Conflicts(project))},
		{"reviews.approved", sum.Reviews.Approved, approved},
		{"reviews.returned", sum.Reviews.Returned, returned},
		{"reviews.unreviewed", sum.Reviews.Unreviewed, unreviewed},
		{"reviews.queue", sum.Reviews.Queue, len(office.ReviewQueue(project, ""))},
	} {
		if c.got != c.want {
			t.Errorf("%s = %d, the kept ledger gives %d", c.name, c.got, c.want)
		}
	}

	// The day as the story tells it: seven devices; seventeen tests, three
	// of them retests; four failures, one still open; four corrections,
	// two of them the concurrent pair that makes the one conflict; six
	// entries from the tablet whose clock runs fast.
	for _, c := range []struct {
		name      string
		got, want int
	}{
		{"devices", len(sum.Devices), 7}, {"tests_in_ledger", sum.TestsInLedger, 17}, {"retests", sum.Retests, 3},
		{"failures", sum.Failures, 4}, {"open_failures", sum.OpenFailures, 1}, {"corrections", sum.Corrections, 4},
		{"conflicts", sum.Conflicts, 1}, {"reconciliation", len(sum.Reconciliation), 2},
	} {
		if c.got != c.want {
			t.Errorf("the day played gives %s = %d, want %d", c.name, c.got, c.want)
		}
	}

	// Each device's own count agrees with the tests the ledger says it
	// recorded, and every test was recorded by one of the devices listed.
	seen, listed, fast := map[string]bool{}, 0, ""
	for _, dev := range sum.Devices {
		if seen[dev.DeviceID] {
			t.Errorf("device %s listed twice", dev.DeviceID)
		}
		seen[dev.DeviceID] = true
		listed += dev.TestsRecorded
		if dev.TestsRecorded != byDevice[dev.DeviceID] {
			t.Errorf("%s: tests_recorded = %d, the ledger holds %d recorded on it", dev.Name, dev.TestsRecorded, byDevice[dev.DeviceID])
		}
		if dev.Person == "Tobias Wren" {
			fast = dev.DeviceID
		}
	}
	if listed != sum.TestsRecorded || listed != len(tests) {
		t.Errorf("devices' tests_recorded add to %d; tests_recorded = %d, the ledger holds %d", listed, sum.TestsRecorded, len(tests))
	}
	fastEntries := 0
	for _, tt := range tests {
		if tt.Device == fast {
			fastEntries += len(tt.Revisions) // its recordings and corrections: all its entries
		}
	}
	if fast == "" || sum.ClockSkewEntries != fastEntries {
		t.Errorf("clock_skew_entries = %d; the fast tablet (%q) made %d entries", sum.ClockSkewEntries, fast, fastEntries)
	}

	// The chain: the kept store verified it to the head the summary
	// names, every device did, and the kept ledger verifies offline to it.
	st, err := office.Status(ctx, project)
	if err != nil {
		t.Fatal(err)
	}
	if st.Verified.Hash != sum.LedgerHead || st.Verified.Seq != sum.LedgerEntries || len(sum.LedgerHead) != 64 {
		t.Errorf("ledger_head %s at %d; the kept store verified %s at %d", sum.LedgerHead, sum.LedgerEntries, st.Verified.Hash, st.Verified.Seq)
	}
	agree := true
	for _, dev := range sum.Devices {
		ok := dev.VerifiedHead == sum.LedgerHead && dev.VerifiedSeq == sum.LedgerEntries && dev.Pending == 0
		if dev.InAgreement != ok {
			t.Errorf("%s: in_agreement = %v, verified %s at %d with %d pending", dev.Name, dev.InAgreement, dev.VerifiedHead, dev.VerifiedSeq, dev.Pending)
		}
		agree = agree && ok
	}
	if !sum.DevicesInAgreement || !agree {
		t.Errorf("devices_in_agreement = %v; every device at the head: %v; want both", sum.DevicesInAgreement, agree)
	}
	f, err := os.Open(sum.Kept.Ledger)
	if err != nil {
		t.Fatal(err)
	}
	rep, err := client.VerifyExport(f)
	f.Close()
	if err != nil {
		t.Fatalf("the kept ledger: %v", err)
	}
	if rep.Project != project || rep.Head.Hash != sum.LedgerHead || uint64(rep.Events) != sum.LedgerEntries || rep.Tests != sum.TestsInLedger {
		t.Errorf("the kept ledger verifies as project %s, %d events, %d tests, head %s; the summary says %s, %d, %d, %s",
			rep.Project, rep.Events, rep.Tests, rep.Head.Hash, project, sum.LedgerEntries, sum.TestsInLedger, sum.LedgerHead)
	}

	// The reconciliation, by hand: per borrow source, the compacted volume
	// of its lifts, the mean dry density of the graded original tests on
	// them, the mean dry density of its bank tests, and bank volume =
	// compacted volume x fill density / bank density (equal dry mass).
	if sum.Units != "us" || sum.VolumeUnit != "yd3" || sum.DensityUnit != "pcf" {
		t.Errorf("units %s (%s, %s), want the project's: us (yd3, pcf)", sum.Units, sum.VolumeUnit, sum.DensityUnit)
	}
	got := map[string]int{}
	for i, b := range sum.Reconciliation {
		got[b.Source] = i
	}
	placements := office.Placements(project)
	for _, src := range office.BorrowSources(project) {
		i, ok := got[src.Name]
		if !ok {
			t.Errorf("reconciliation: no entry for borrow source %q", src.Name)
			continue
		}
		b := sum.Reconciliation[i]
		var compacted float64
		lifts := map[string]bool{}
		for _, p := range placements {
			if p.BorrowSourceID == src.ID {
				compacted += p.CompactedVolume
				lifts[p.ID] = true
			}
		}
		// The fill density is the volume-weighted mean of each lift's
		// final tests: graded, neither voided nor returned, and not a
		// failure a counting retest replaced.
		replaced := map[string]bool{}
		final := func(tt client.Test) bool {
			return !tt.Voided && tt.ReviewStatus != client.Returned && tt.Result.Verdict != client.Pending
		}
		for _, tt := range tests {
			if tt.RetestOf != "" && final(tt) {
				replaced[tt.RetestOf] = true
			}
		}
		sum, count := map[string]float64{}, map[string]int{}
		n := 0
		for _, tt := range tests {
			if lifts[tt.Content.PlacementID] && final(tt) && !(tt.Result.Verdict == client.Fail && replaced[tt.ID]) {
				sum[tt.Content.PlacementID] += tt.Result.DryDensity
				count[tt.Content.PlacementID]++
				n++
			}
		}
		var fill, weight float64
		for _, p := range placements {
			if count[p.ID] > 0 {
				fill += p.CompactedVolume * sum[p.ID] / float64(count[p.ID])
				weight += p.CompactedVolume
			}
		}
		var bank float64
		for _, r := range src.BankTests {
			bank += demoBankDry(t, r)
		}
		if n == 0 || len(src.BankTests) == 0 {
			t.Fatalf("%s: %d tests on its lifts, %d bank tests; the day gives both", src.Name, n, len(src.BankTests))
		}
		fill /= weight
		bank /= float64(len(src.BankTests))
		us := soil.US
		want := map[string]float64{
			"compacted_volume":      us.FromSI(soil.Volume, compacted),
			"compacted_dry_density": us.FromSI(soil.Density, fill),
			"bank_dry_density":      us.FromSI(soil.Density, bank),
			"bank_volume":           us.FromSI(soil.Volume, compacted*fill/bank),
		}
		for name, g := range map[string]float64{"compacted_volume": b.CompactedVolume, "compacted_dry_density": b.CompactedDryDensity,
			"bank_dry_density": b.BankDryDensity, "bank_volume": b.BankVolume} {
			if !demoNear(g, want[name]) {
				t.Errorf("%s: %s = %.1f, the ledger gives %.3f", src.Name, name, g, want[name])
			}
		}
		if b.Tests != n {
			t.Errorf("%s: tests = %d, the ledger holds %d final tests on its lifts", src.Name, b.Tests, n)
		}
	}
}

// The readings are seeded: two runs on the same day tell the same day,
// figure for figure; only the ids, keys and hashes differ.
func TestDemoSameDayEveryRun(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	same := func(d demoOut) demoOut {
		d.Project, d.LedgerHead = "", ""
		for i := range d.Devices {
			d.Devices[i].DeviceID, d.Devices[i].VerifiedHead = "", ""
		}
		return d
	}
	first, second := runDemo(t), runDemo(t)
	if diff := cmp.Diff(same(first), same(second)); diff != "" {
		t.Errorf("two runs of the same day differ (-first +second):\n%s", diff)
	}
	if first.LedgerHead == second.LedgerHead {
		t.Errorf("two runs share the head %s: each run's devices should make their own keys", first.LedgerHead)
	}
}

// The narrative names the day's steps, prints the QA reports in the
// project's units and carries the cautions.
func TestDemoNarrative(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	out, _, err := run(t, "demo", "--date", demoDate)
	if err != nil {
		t.Fatalf("tamp demo: %v", err)
	}
	for _, want := range []string{
		qc.NuclearCaution, qc.Caution,
		"Della Ferrow, the administrator", "Quentin Arlo, the QA manager", "Odile Brandt, in the office",
		"standard count", "Conflict surfaced", "1 h 00 min ahead of the server", "returned:", "approved",
		"Retest audit", "Test frequency", "Lots", "Volume reconciliation", "short by 2",
		"pcf", "yd3", "ft L", "FAIL: under-compacted", "FAIL: too dry", "PASS",
		"Every device verified the server's hash chain to the same head.",
		"the server has stopped",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("the demo's narrative lacks %q", want)
		}
	}
	if strings.ContainsAny(out, "\x1b\r") {
		t.Error("the demo's narrative holds a control character")
	}
}

// Flags that cannot work are refused before the day is played, and an
// --out directory that holds a store already is left as it was.
func TestDemoRefusals(t *testing.T) {
	dir := t.TempDir()
	store := filepath.Join(dir, "office.db")
	if err := os.WriteFile(store, []byte("someone's store"), 0o600); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		args []string
		want []string
	}{
		{[]string{"--out", dir}, []string{"--out", "office.db", "exists already"}},
		{[]string{"--date", "2025-13-01"}, []string{"--date 2025-13-01", "YYYY-MM-DD"}},
		{[]string{"--date", "1999-06-01"}, []string{"--date 1999-06-01", "from 2001-01-01 to today"}},
		{[]string{"--date", "2999-06-01"}, []string{"--date 2999-06-01", "from 2001-01-01 to today"}},
	} {
		_, _, err := run(t, append([]string{"demo"}, c.args...)...)
		if err == nil {
			t.Errorf("tamp demo %s succeeded", strings.Join(c.args, " "))
			continue
		}
		for _, w := range c.want {
			if !strings.Contains(err.Error(), w) {
				t.Errorf("tamp demo %s: %q, want it to say %q", strings.Join(c.args, " "), err, w)
			}
		}
	}
	if b, err := os.ReadFile(store); err != nil || string(b) != "someone's store" {
		t.Errorf("the existing office.db was changed: %q, %v", b, err)
	}
	if _, err := os.Stat(filepath.Join(dir, "ledger.tamp")); err == nil {
		t.Error("a refused demo wrote ledger.tamp")
	}
}

// demoCancelAt is a writer that cancels a context once the text written to it
// holds a mark: it stops the day at a known step.
type demoCancelAt struct {
	mark   string
	cancel context.CancelFunc
	text   strings.Builder
}

func (c *demoCancelAt) Write(b []byte) (int, error) {
	c.text.Write(b)
	if strings.Contains(c.text.String(), c.mark) {
		c.cancel()
	}
	return len(b), nil
}

// Interrupted mid-day (as by Ctrl-C), the demo returns the cancellation,
// keeps nothing in --out, and leaves nothing running.
func TestDemoStopsWhenCancelled(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	out := &demoCancelAt{mark: "Lunch at the site office", cancel: cancel}
	dir := filepath.Join(t.TempDir(), "kept")
	err := Run(ctx, []string{"demo", "--date", demoDate, "--out", dir}, out, io.Discard)
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("tamp demo cancelled at midday: %v, want context.Canceled", err)
	}
	if strings.Contains(out.text.String(), "The ledger") {
		t.Error("the demo went on to the ledger after it was cancelled")
	}
	if entries, err := os.ReadDir(dir); err == nil && len(entries) > 0 {
		t.Errorf("a cancelled demo kept %d files in --out", len(entries))
	}
}
