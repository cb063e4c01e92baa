package cli

import (
	"bytes"
	"context"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"tamp/client"
	"tamp/internal/soil"
	"tamp/internal/words"
)

// Each set-up command's happy path and main errors, with names for
// records and errors that say which value was wrong and what to do.
func TestSetUpCommands(t *testing.T) {
	c := newCrew(t, "Basalt Ridge reservoir", "si")
	c.member("qa", "Quinn Ashby", "qa")
	c.member("office", "Otto Brandt", "office")

	holds(t, "spec add", c.as("qa", "spec", "add", "--name", "core", "--min-rc", "98.0", "--moisture-window", "0,3", "--volume-per-test", "400"),
		`spec "core" defined`)
	holds(t, "a second spec of the name", c.fails("qa", "spec", "add", "--name", "Core", "--min-rc", "95"), `--name "Core": the project has a spec of that name already`)
	holds(t, "a limit that is no number", c.fails("qa", "spec", "add", "--name", "shell", "--min-rc", "95x"), "--min-rc 95x:", "plain decimal number")
	holds(t, "a window without a comma", c.fails("qa", "spec", "add", "--name", "shell", "--moisture-window", "2"), "--moisture-window", "LO,HI")
	var specs []struct {
		Name          string
		MinCompaction string  `json:"min_compaction"`
		MoistureHigh  string  `json:"moisture_high"`
		VolumePerTest float64 `json:"volume_per_test"`
		Units         string
	}
	decode(t, c.as("qa", "spec", "list", "--json"), &specs)
	if len(specs) != 1 || specs[0].MinCompaction != "98.0" || specs[0].MoistureHigh != "3" || specs[0].VolumePerTest != 400 || specs[0].Units != "si" {
		t.Errorf("spec list --json: %+v", specs)
	}
	holds(t, "spec list", c.as("qa", "spec", "list"), "SPEC", "core", "min 98.0 %", "+0 to +3 points of optimum", "400.0 m3")

	holds(t, "reference add (reported)", c.as("qa", "reference", "add", "--sample", "B-3", "--material", "clayey gravel", "--standard", "ASTM D1557",
		"--method", "C", "--mdd", "2140", "--omc", "7.2"), "maximum dry density 2140 kg/m3 at 7.2 % optimum moisture, as reported")
	holds(t, "reference with both", c.fails("qa", "reference", "add", "--material", "x", "--standard", "D698", "--method", "A",
		"--points", "10:1800,12:1850,14:1820", "--mdd", "1850", "--omc", "12"), "not both")
	holds(t, "reference with an unknown standard", c.fails("qa", "reference", "add", "--material", "x", "--standard", "D999", "--method", "A",
		"--mdd", "1850", "--omc", "12"), `--standard "D999"`, "ASTM D698")
	holds(t, "reference with a bad method letter", c.fails("qa", "reference", "add", "--material", "x", "--standard", "D698", "--method", "F",
		"--mdd", "1850", "--omc", "12"), "--method F:", "methods A, B, C")
	holds(t, "reference point without a colon", c.fails("qa", "reference", "add", "--material", "x", "--standard", "D698", "--method", "A",
		"--points", "10-1800"), "--points 10-1800: item 1", "W:D")
	holds(t, "reference list", c.as("qa", "reference", "list"), "B-3 clayey gravel", "ASTM D1557 C", "2140 kg/m3", "Quinn Ashby")

	holds(t, "borrow add", c.as("qa", "borrow", "add", "--name", "South terrace", "--bank-test", "1950:8.0,1990:9.0"),
		`borrow source "South terrace" added`, "bank dry density 1816 kg/m3")
	holds(t, "borrow without bank tests", c.fails("qa", "borrow", "add", "--name", "North terrace"), "--bank-test", "at least one")
	holds(t, "borrow list", c.as("qa", "borrow", "list"), "South terrace", "1816 kg/m3")
	c.as("qa", "sync")
	c.as("office", "sync")

	holds(t, "equipment add", c.as("office", "equipment", "add", "--kind", "nuclear-gauge", "--model", "MD-4", "--serial", "51002",
		"--calibration-due", "2000-01-31"), "calibration due 2000-01-31")
	holds(t, "a recalibration", c.as("office", "equipment", "add", "--kind", "nuclear-gauge", "--model", "MD-4", "--serial", "51002",
		"--calibration-due", "2099-01-31"), "(recalibrated)")
	holds(t, "equipment of an unknown kind", c.fails("office", "equipment", "add", "--kind", "laser", "--serial", "1"), `--kind "laser"`, "nuclear-gauge")
	holds(t, "a date typed wrong", c.fails("office", "equipment", "add", "--kind", "balance", "--serial", "B1", "--calibration-due", "31/01/2099"),
		"--calibration-due", "YYYY-MM-DD")
	c.as("office", "equipment", "add", "--kind", "balance", "--serial", "B1")
	var eqs []struct {
		Name              string
		CalibrationDue    string `json:"calibration_due"`
		CalibrationLapsed bool   `json:"calibration_lapsed"`
	}
	decode(t, c.as("office", "equipment", "list", "--json"), &eqs)
	if len(eqs) != 2 || eqs[1].Name != "MD-4 51002" || eqs[1].CalibrationDue != "2099-01-31" || eqs[1].CalibrationLapsed {
		t.Errorf("equipment list --json: %+v (the recalibration's due date stands)", eqs)
	}
	holds(t, "a count of a balance", c.fails("office", "equipment", "count", "--gauge", "B1", "--density-count", "1", "--moisture-count", "1"),
		"is a balance, not a nuclear gauge")
	holds(t, "a count of an unknown gauge", c.fails("office", "equipment", "count", "--gauge", "99999", "--density-count", "1", "--moisture-count", "1"),
		`--gauge "99999": no equipment by that name or id`, `"MD-4 51002"`)

	holds(t, "placement add", c.as("office", "placement", "add", "--feature", "core", "--lift", "12", "--volume", "850", "--thickness", "300", "--borrow", "South terrace",
		"--placed-on", "2031-05-02"), `placement "core lift 12" recorded`, "850.0 m3 compacted, placed 2031-05-02")
	holds(t, "placement from an unknown source", c.fails("office", "placement", "add", "--feature", "core", "--lift", "13", "--volume", "10",
		"--thickness", "300", "--borrow", "Nowhere"), `--borrow "Nowhere": no borrow source by that name`, `"South terrace"`)
	holds(t, "placement without a thickness", c.fails("office", "placement", "add", "--feature", "core", "--lift", "13", "--volume", "10"), "--thickness")
	holds(t, "placement without a volume", c.fails("office", "placement", "add", "--feature", "core", "--lift", "13", "--thickness", "300"), "--volume")
	holds(t, "haul add", c.as("office", "haul", "add", "--borrow", "south terrace", "--loads", "60", "--load-volume", "10", "--placement", "core lift 12"),
		"60 loads of 10.0 m3 loose", "600.0 m3 in all")
	holds(t, "haul list", c.as("office", "haul", "list"), "South terrace", "60", "core lift 12")
	holds(t, "placement list in US units", c.as("office", "placement", "list", "--units", "us"), "core lift 12", "1111.8 yd3")
	holds(t, "bad units", c.fails("office", "placement", "list", "--units", "metric"), `--units "metric"`, "us", "si")

	// The office may not define a spec: the device keeps the entry, the
	// server refuses it, and the sync summary names the refusal.
	c.as("office", "spec", "add", "--name", "shell", "--min-rc", "95")
	holds(t, "a refused entry in the summary", c.as("office", "sync"), "1 entry refused by the server and kept on this device",
		"spec_defined", "rule role_may_make_entry")
	holds(t, "status", c.as("office", "status"), `"Basalt Ridge reservoir"`, "rejected", "role_may_make_entry")
}

// The project commands: create needs the units and a name; use finds a
// project by name; an unknown name lists the projects on the device; a
// member cannot create a project.
func TestProjectCommands(t *testing.T) {
	c := newCrew(t, "Basalt Ridge reservoir", "si")
	holds(t, "create without units", c.fails("admin", "project", "create", "--name", "Second"), "--units", "us", "si")
	holds(t, "create without a name", c.fails("admin", "project", "create", "--units", "si"), "--name")
	holds(t, "an unknown time zone", c.fails("admin", "project", "create", "--name", "Second", "--units", "si", "--time-zone", "Mars/Olympus"),
		`--time-zone "Mars/Olympus"`, "IANA")
	c.as("admin", "project", "create", "--name", "Obsidian Flat pad", "--units", "us")
	var list []struct {
		Name, Units string
		Current     bool
	}
	decode(t, c.as("admin", "project", "list", "--json"), &list)
	if len(list) != 2 {
		t.Fatalf("project list: %+v", list)
	}
	for _, p := range list {
		if p.Current != (p.Name == "Obsidian Flat pad") {
			t.Errorf("the project created last is current: %+v", list)
		}
	}
	holds(t, "use", c.as("admin", "project", "use", "basalt ridge reservoir"), `working on project "Basalt Ridge reservoir"`)
	holds(t, "an unknown project", c.fails("admin", "project", "use", "Nowhere"), `--project "Nowhere": no project of that name`,
		`"Obsidian Flat pad"`, `"Basalt Ridge reservoir"`)
	holds(t, "project list", c.as("admin", "project", "list"), "*  Basalt Ridge reservoir  si")
	// The remembered project is the one later commands work on; --project
	// chooses another and is remembered in turn.
	holds(t, "spec list in the remembered project", c.as("admin", "spec", "list"), "SPEC")
	c.as("admin", "spec", "list", "--project", "Obsidian Flat pad")
	holds(t, "project list after --project", c.as("admin", "project", "list"), "*  Obsidian Flat pad")

	// A fresh project has ledger entries: export and verify work.
	file := filepath.Join(c.dir, "obsidian.tamp")
	holds(t, "export of a fresh project", c.as("admin", "export", "--out", file), "events of project \"Obsidian Flat pad\"")
	holds(t, "verify", must(t, "verify", file), "ok: project")

	c.member("insp", "Ines Cardenas", "inspector")
	if err := c.fails("insp", "project", "create", "--name", "Mine", "--units", "si"); !strings.Contains(err, "server_admin") {
		t.Errorf("an inspector created a project: %s", err)
	}
}

// The field commands' main errors say which flag and value were wrong and
// what to do, and change nothing.
func TestTestCommandErrors(t *testing.T) {
	c := newCrew(t, "Cinder Butte interchange", "us")
	c.member("qa", "Quinn Ashby", "qa")
	insp := c.member("insp", "Ines Cardenas", "inspector")
	c.member("other", "Olek Duarte", "inspector")
	c.member("office", "Otto Brandt", "office")
	c.as("qa", "spec", "add", "--name", "embankment", "--min-rc", "95", "--moisture-window", "-2,2")
	c.as("qa", "reference", "add", "--sample", "L-12", "--material", "brown silty sand", "--standard", "D698", "--method", "A", "--mdd", "116.0", "--omc", "12.0")
	c.as("qa", "sync")
	c.as("insp", "sync")
	c.as("other", "sync")

	where := []string{"--station", "12+40", "--feature", "embankment", "--lift", "2", "--spec", "embankment", "--reference", "L-12"}
	rec := func(who string, args ...string) string {
		var r recordedJSONDecoded
		decode(t, c.as(who, append(append([]string{"test", "record", "--json"}, where...), args...)...), &r)
		return r.ShortID
	}
	try := func(args ...string) string {
		return c.fails("insp", append(append([]string{"test", "record"}, where...), args...)...)
	}
	holds(t, "no method", try("--wet-density", "120", "--moisture", "10"), "--method")
	holds(t, "an unknown method", try("--method", "laser"), `--method "laser"`, "sand-cone")
	holds(t, "a reading missing", try("--method", "sand-cone", "--sand-used", "7", "--cone-correction", "0.5", "--sand-density", "99", "--moisture", "11"),
		"--soil-mass: required for a sand cone")
	holds(t, "a reading of another method", try("--method", "wet-density", "--wet-density", "120", "--moisture", "10", "--probe-depth", "8"),
		"--probe-depth does not apply to a wet density as measured test")
	holds(t, "three gauge readings", try("--method", "nuclear-direct", "--wet-density", "120,121,122", "--water-per-volume", "12,12,12"), "give one reading, or two")
	holds(t, "an impossible wet density", try("--method", "wet-density", "--wet-density", "400", "--moisture", "10"), "--wet-density 400:", "wet_density")
	holds(t, "a station typed wrong", try("--method", "wet-density", "--wet-density", "120", "--moisture", "10", "--station", "12+140"),
		`--station "12+140"`, "12+34.5")
	holds(t, "an unknown spec", try("--method", "wet-density", "--wet-density", "120", "--moisture", "10", "--spec", "subgrade"),
		`--spec "subgrade": no spec by that name`, `"embankment"`)
	if len(c.as("insp", "test", "today", "--json")) > 3 {
		t.Error("a refused test was stored")
	}

	pass := rec("insp", "--method", "wet-density", "--wet-density", "125.0", "--moisture", "11.0")
	fail := rec("insp", "--method", "wet-density", "--wet-density", "118.0", "--moisture", "11.0")
	holds(t, "a correction without a reason", c.fails("insp", "test", "correct", pass, "--moisture", "11.5"), "--reason")
	holds(t, "a void without a reason", c.fails("insp", "test", "void", pass), "--reason")
	holds(t, "a retest of a passing test", c.fails("insp", "test", "retest", pass, "--method", "wet-density", "--wet-density", "125", "--moisture", "11"),
		"did not fail (PASS)", "record a new test")
	holds(t, "a retest that changes the lift", c.fails("insp", "test", "retest", fail, "--method", "wet-density", "--wet-density", "125",
		"--moisture", "11", "--lift", "3"), "--lift", "keeps the original's")
	holds(t, "an unknown test", c.fails("insp", "test", "show", "ffffffff"), `test "ffffffff": no test`)
	c.as("insp", "sync")
	c.as("other", "sync")
	holds(t, "a correction of another's test", c.fails("other", "test", "correct", pass, "--moisture", "11.5", "--reason", "typo"),
		"was recorded by Ines Cardenas", "only they may correct")
	holds(t, "a void of another's test", c.fails("other", "test", "void", pass, "--reason", "duplicate"), "was recorded by Ines Cardenas")
	c.as("office", "sync")
	holds(t, "a return without a comment", c.fails("office", "review", "return", pass), "--comment")
	holds(t, "an exception on a test QA has not synced", c.fails("qa", "qa", "accept", fail, "--reason", "fine"), "no test", "sync")
	c.as("qa", "sync")
	holds(t, "an exception without a reason", c.fails("qa", "qa", "accept", fail), "--reason")
	holds(t, "an exception on a pass", c.fails("qa", "qa", "accept", pass, "--reason", "fine"), "did not fail")
	holds(t, "an exception", c.as("qa", "qa", "accept", fail, "--reason", "outside the structural zone; engineer accepts 96 %"), "accepted as it stands")
	_ = insp
}

// An inspector working on two devices corrects the same test on both
// before syncing: the syncs and status name the conflict, and test show
// keeps both corrections.
func TestSyncNamesConflicts(t *testing.T) {
	c := newCrew(t, "Cinder Butte interchange", "us")
	user := c.member("tablet", "Ines Cardenas", "inspector")
	c.enrol("laptop", user)
	var r recordedJSONDecoded
	decode(t, c.as("tablet", "test", "record", "--json", "--method", "wet-density", "--wet-density", "125.0", "--moisture", "11.0",
		"--station", "12+40", "--feature", "embankment", "--lift", "2"), &r)
	c.as("tablet", "sync")
	c.as("laptop", "sync")
	c.as("tablet", "test", "correct", r.ShortID, "--moisture", "11.5", "--reason", "oven moisture came back")
	c.as("laptop", "test", "correct", r.ShortID, "--moisture", "10.5", "--reason", "typo in the moisture")
	c.as("tablet", "sync")
	out := c.as("laptop", "sync")
	holds(t, "the sync of the second device", out, "conflict: test "+r.ShortID, "both changes are kept", "tamp test show "+r.ShortID)
	holds(t, "the first device's next sync", c.as("tablet", "sync"), "conflict: test "+r.ShortID)
	holds(t, "status", c.as("tablet", "status"), "conflict: test "+r.ShortID)
	var st struct {
		UserName string `json:"user_name"`
		Projects []struct {
			Name      string
			Conflicts []string
		}
	}
	decode(t, c.as("tablet", "status", "--json"), &st)
	if st.UserName != "Ines Cardenas" || len(st.Projects) != 1 || st.Projects[0].Name != "Cinder Butte interchange" ||
		len(st.Projects[0].Conflicts) != 1 || words.ShortID(st.Projects[0].Conflicts[0]) != r.ShortID {
		t.Errorf("status --json: %+v", st)
	}
	holds(t, "test show", c.as("tablet", "test", "show", r.ShortID), "oven moisture came back", "typo in the moisture", "concurrent_revisions")
}

// tamp sync on a device that holds no project (an administrator's, just
// enrolled) says so and says what to do.
func TestSyncWithoutProjects(t *testing.T) {
	addr, code := startServer(t)
	store := filepath.Join(t.TempDir(), "admin.db")
	must(t, "enroll", "--store", store, "--server", addr, "--plaintext", "--code", code)
	holds(t, "sync", must(t, "sync", "--store", store), "holds no project yet", "tamp project create")
	holds(t, "sync --json", must(t, "sync", "--store", store, "--json"), "[]")
}

// --server alone uses the CA file and the plaintext setting given at
// enrolment: against a plaintext loopback server, sync with --server and
// no --plaintext works.
func TestServerFlagKeepsEnrolmentSettings(t *testing.T) {
	c := newCrew(t, "Cinder Butte interchange", "us")
	holds(t, "sync --server", c.as("admin", "sync", "--server", c.addr), `"Cinder Butte interchange": sent`)
}

// Output to a buffer (not a terminal) has no progress bar, and nothing
// on standard error.
func TestSyncQuietOffTerminal(t *testing.T) {
	c := newCrew(t, "Cinder Butte interchange", "us")
	var out, errOut bytes.Buffer
	if err := Run(context.Background(), []string{"sync", "--store", c.admin}, &out, &errOut); err != nil {
		t.Fatal(err)
	}
	if errOut.Len() != 0 || strings.Contains(out.String(), "\r") {
		t.Errorf("sync wrote progress off a terminal: stdout %q, stderr %q", out.String(), errOut.String())
	}
}

// Stations and offsets read and print in the trade's notation, in each
// unit system.
func TestStationsAndOffsets(t *testing.T) {
	us, si := units{soil.US}, units{soil.SI}
	for _, tc := range []struct {
		u          units
		in, want   string
		metres     float64
		wantOffset string
	}{
		{us, "12+34.5", "12+34.50", 1234.5 * soil.Foot, ""},
		{us, "1234.5", "12+34.50", 1234.5 * soil.Foot, ""},
		{us, "0+05", "0+05.00", 5 * soil.Foot, ""},
		{si, "1+234.5", "1+234.50", 1234.5, ""},
		{si, "-0+010", "-0+010.00", -10, ""},
	} {
		m, err := tc.u.parseStation("station", tc.in)
		if err != nil || abs(m-tc.metres) > 1e-9 {
			t.Errorf("%s parseStation(%q)=%v, %v, want %v", tc.u.name(), tc.in, m, err, tc.metres)
			continue
		}
		if got := tc.u.station(m); got != tc.want {
			t.Errorf("%s station(%v)=%q, want %q", tc.u.name(), m, got, tc.want)
		}
	}
	for _, bad := range []string{"12+134", "a+10", "12+", "", "1e3"} {
		if _, err := us.parseStation("station", bad); err == nil && bad != "1e3" {
			t.Errorf("parseStation(%q) succeeded", bad)
		}
	}
	for _, tc := range []struct{ in, want string }{{"4.5R", "4.50 ft R"}, {"4.5 l", "4.50 ft L"}, {"-3", "3.00 ft L"}, {"0", "0.00 ft"}} {
		m, err := us.parseOffset("offset", tc.in)
		if err != nil {
			t.Errorf("parseOffset(%q): %v", tc.in, err)
			continue
		}
		if got := us.offset(m); got != tc.want {
			t.Errorf("offset(parseOffset(%q))=%q, want %q", tc.in, got, tc.want)
		}
	}
	if _, err := us.parseOffset("offset", "-3L"); err == nil {
		t.Error("parseOffset accepted a negative left offset")
	}
}

func abs(v float64) float64 {
	if v < 0 {
		return -v
	}
	return v
}

// A table escapes its cells, so a name with a tab or a newline neither
// shifts a column nor forges a row.
func TestTableEscapesCells(t *testing.T) {
	var b bytes.Buffer
	tb := newTable(&b, "NAME", "ROLE")
	tb.row("Ines\tadmin\nForged\trow", "inspector")
	if err := tb.flush(); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(b.String()), "\n")
	if len(lines) != 2 || !strings.Contains(lines[1], `Ines\tadmin\nForged\trow`) {
		t.Errorf("table:\n%s", b.String())
	}
}

// tamp's own error messages keep their lines (what was wrong, what to do),
// while a value typed or chosen by anyone is escaped in them.
func TestErrorsKeepLinesAndEscapeValues(t *testing.T) {
	store := filepath.Join(t.TempDir(), "d.db")
	_, _, err := run(t, "project", "use", "Nowhere\x1b[2J\nforged", "--store", store)
	if err == nil {
		t.Fatal("project use of an unknown project succeeded")
	}
	lines := strings.Split(err.Error(), "\n")
	if len(lines) != 2 || !strings.Contains(lines[0], `Nowhere\x1b[2J\nforged`) || !strings.Contains(lines[1], "holds no project") {
		t.Errorf("error lines: %q", lines)
	}
}

// On a terminal a long push draws a bar of the entries sent, and the pull
// that follows a counter of those received; done clears it.
func TestSyncBarDrawsLongTransfers(t *testing.T) {
	var b bytes.Buffer
	bar := &syncBar{w: &b, on: true, project: "Cinder Butte interchange", start: time.Now()}
	bar.update(client.Progress{Phase: "push", Events: 10, Total: 20}) // short: no bar yet
	if b.Len() != 0 {
		t.Fatalf("a short sync drew: %q", b.String())
	}
	for _, n := range []int{500, 1500, 2500} {
		bar.update(client.Progress{Phase: "push", Events: n, Total: 2500})
	}
	bar.update(client.Progress{Phase: "pull", Events: 3000})
	bar.done()
	if !strings.Contains(b.String(), "Cinder Butte interchange: sending") || !strings.Contains(b.String(), "/2500, ") {
		t.Errorf("the bar drew %q", b.String())
	}
	quiet := &syncBar{w: &b, on: false, start: time.Now().Add(-time.Hour)}
	b.Reset()
	quiet.update(client.Progress{Phase: "push", Events: 2500, Total: 2500})
	quiet.done()
	if b.Len() != 0 {
		t.Errorf("a bar off a terminal drew %q", b.String())
	}
}
