package cli

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"strings"
	"testing"
)

// run drives the command line in-process and returns stdout, stderr and
// the error.
func run(t *testing.T, args ...string) (string, string, error) {
	t.Helper()
	var out, errOut bytes.Buffer
	err := Run(context.Background(), args, &out, &errOut)
	return out.String(), errOut.String(), err
}

func runJSON(t *testing.T, args ...string) map[string]any {
	t.Helper()
	out, _, err := run(t, append(args, "--json")...)
	if err != nil {
		t.Fatalf("tamp %s: %v", strings.Join(args, " "), err)
	}
	var m map[string]any
	if err := json.Unmarshal([]byte(out), &m); err != nil {
		t.Fatalf("output is not one JSON object: %v\n%s", err, out)
	}
	return m
}

func field(t *testing.T, m map[string]any, key string, want, tol float64) {
	t.Helper()
	v, ok := m[key].(float64)
	if !ok {
		t.Errorf("%s = %v (%T), want a number", key, m[key], m[key])
		return
	}
	if math.Abs(v-want) > tol {
		t.Errorf("%s = %v, want %v (tol %g)", key, v, want, tol)
	}
}

func codes(m map[string]any, key string) []string {
	var cs []string
	list, _ := m[key].([]any)
	for _, f := range list {
		if fm, ok := f.(map[string]any); ok {
			cs = append(cs, fm["code"].(string))
		}
	}
	return cs
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

// B1 [formula] ASTM D1556 / AASHTO T 191, graded as C1 [pub] AASHTO M 57
// sec. 4.2.2 would grade it.
func TestCalcSandConeB1(t *testing.T) {
	m := runJSON(t, "calc", "test", "--sand-used", "7.00", "--cone-correction", "0.53", "--sand-density", "99.0",
		"--soil-mass", "8.11", "--moisture", "11.11", "--mdd", "116.0", "--omc", "13.5", "--min-rc", "95", "--moisture-window", "-2,2")
	if m["units"] != "us" || m["method"] != "sand_cone" {
		t.Errorf("units %v method %v", m["units"], m["method"])
	}
	field(t, m, "wet_density", 124.09, 0.05)
	field(t, m, "dry_density", 111.69, 0.05)
	field(t, m, "moisture", 11.1, 0.05)
	field(t, m, "max_dry_density", 116.0, 1e-9)
	field(t, m, "optimum_moisture", 13.5, 1e-9)
	field(t, m, "relative_compaction", 96.3, 0.05)
	field(t, m, "moisture_deviation", -2.4, 0.05)
	if m["verdict"] != "pass" {
		t.Errorf("verdict = %v, want pass (-2.39 points rounds to -2 against the limit -2)", m["verdict"])
	}
}

// B2 [formula] AASHTO T 191, in SI.
func TestCalcSandConeSIB2(t *testing.T) {
	m := runJSON(t, "calc", "test", "--units", "si", "--sand-used", "4090", "--cone-correction", "1580", "--sand-density", "1450",
		"--soil-mass", "3650", "--moisture", "10.5")
	field(t, m, "wet_density", 2109, 0.5)
	field(t, m, "dry_density", 1908, 0.5)
	if m["verdict"] != "pending" || m["relative_compaction"] != nil {
		t.Errorf("no reference: verdict %v RC %v, want pending and null", m["verdict"], m["relative_compaction"])
	}
}

// B5 [pub] relations of ASTM D6938 sec. 1; numbers [formula].
func TestCalcNuclearB5(t *testing.T) {
	m := runJSON(t, "calc", "test", "--wet-density", "130.0", "--water-per-volume", "14.0")
	field(t, m, "dry_density", 116.0, 0.05)
	field(t, m, "moisture", 12.1, 0.05)
	if !contains(codes(m, "flags"), "nuclear_moisture_uncorrected") {
		t.Errorf("flags = %v, want nuclear_moisture_uncorrected", codes(m, "flags"))
	}
	m = runJSON(t, "calc", "test", "--wet-density", "130.0", "--water-per-volume", "14.0", "--moisture-offset", "1.43")
	field(t, m, "dry_density", 114.5, 0.05)
	if contains(codes(m, "flags"), "nuclear_moisture_uncorrected") {
		t.Error("corrected reading flagged as uncorrected")
	}
}

// C1 [pub] rule of AASHTO M 57 sec. 4.2.2; C2 [pub] AASHTO R 11 / ASTM E29.
func TestCalcRoundingC1C2(t *testing.T) {
	m := runJSON(t, "calc", "test", "--wet-density", "124.992", "--moisture", "12.0", "--mdd", "116.0", "--omc", "13.5",
		"--min-rc", "95", "--moisture-window", "-2,2")
	field(t, m, "dry_density", 111.6, 0.05)
	field(t, m, "relative_compaction", 96.2, 0.05)
	field(t, m, "moisture_deviation", -1.5, 0.05)
	if m["verdict"] != "pass" {
		t.Errorf("C1 verdict = %v", m["verdict"])
	}
	// RC 94.6: dry 94.6 against an MDD of 100.
	base := []string{"calc", "test", "--wet-density", "94.6", "--moisture", "0", "--mdd", "100", "--omc", "10"}
	if m := runJSON(t, append(base, "--min-rc", "95")...); m["verdict"] != "pass" {
		t.Errorf("C2 94.6 against 95: %v %v", m["verdict"], m["reasons"])
	}
	m = runJSON(t, append(base, "--min-rc", "95.0")...)
	if m["verdict"] != "fail" || !contains(codes(m, "reasons"), "compaction_below_minimum") {
		t.Errorf("C2 94.6 against 95.0: %v %v", m["verdict"], codes(m, "reasons"))
	}
	m = runJSON(t, "calc", "test", "--wet-density", "120", "--moisture", "10.0", "--mdd", "116", "--omc", "13.5", "--moisture-window", "-2,2")
	if !contains(codes(m, "reasons"), "moisture_below_window") {
		t.Errorf("-3.5 points: reasons %v", codes(m, "reasons"))
	}
	m = runJSON(t, "calc", "test", "--wet-density", "130", "--moisture", "16.6", "--mdd", "116", "--omc", "13.5", "--moisture-window", "-2,2")
	if !contains(codes(m, "reasons"), "moisture_above_window") {
		t.Errorf("+3.1 points: reasons %v", codes(m, "reasons"))
	}
}

// A5 [formula]; flagging points above ZAV is [practice].
func TestCalcZeroAirVoidsA5(t *testing.T) {
	m := runJSON(t, "calc", "test", "--wet-density", "141.25", "--moisture", "13", "--gs", "2.65", "--mdd", "128", "--omc", "12")
	field(t, m, "zero_air_voids_density", 122.99, 0.05)
	if !contains(codes(m, "flags"), "above_zero_air_voids") {
		t.Errorf("flags = %v, want above_zero_air_voids", codes(m, "flags"))
	}
	m = runJSON(t, "calc", "test", "--wet-density", "140", "--moisture", "12", "--gs", "2.65", "--mdd", "128", "--omc", "12")
	if contains(codes(m, "flags"), "above_zero_air_voids") {
		t.Error("125 pcf at 12 % (below ZAV 125.46) flagged")
	}
}

// D3 [formula] AASHTO T 224 / ASTM D4718: the reference is corrected.
func TestCalcOversizeD3(t *testing.T) {
	m := runJSON(t, "calc", "test", "--wet-density", "135", "--moisture", "11", "--mdd", "120.0", "--omc", "14.0",
		"--oversize-percent", "20", "--oversize-gs", "2.65", "--oversize-moisture", "2")
	field(t, m, "max_dry_density", 127.0, 0.05)
	field(t, m, "optimum_moisture", 11.6, 0.05)
}

// F2 [formula]: dry-mass balance.
func TestCalcVolumeF2(t *testing.T) {
	m := runJSON(t, "calc", "volume", "--compacted-volume", "10000", "--compacted-dry-density", "112.1",
		"--bank-dry-density", "101.5", "--loose-dry-density", "84.0")
	field(t, m, "bank_volume", 11044.3, 0.1)
	field(t, m, "loose_volume", 13345.2, 0.1)
	field(t, m, "shrinkage_percent", 9.46, 0.01)
	field(t, m, "swell_percent", 20.83, 0.01)
	for _, k := range []string{"shrinkage_definition", "swell_definition"} {
		if s, _ := m[k].(string); !strings.Contains(s, "=") {
			t.Errorf("%s = %q", k, m[k])
		}
	}
}

// E4 and E5 [formula].
func TestCalcPWLE4E5(t *testing.T) {
	m := runJSON(t, "calc", "pwl", "--values", "96.0,97.5,94.5,98.0,95.5", "--lower", "95.0")
	field(t, m, "mean", 96.3, 1e-9)
	field(t, m, "std_dev", 1.4405, 0.0001)
	field(t, m, "quality_index_lower", 0.9025, 0.0001)
	field(t, m, "pwl", 80.70, 0.05)
	if m["quality_index_upper"] != nil {
		t.Errorf("quality_index_upper = %v, want null", m["quality_index_upper"])
	}
	m = runJSON(t, "calc", "pwl", "--values", "-1.2,0.4,1.5,-0.3,2.4", "--lower", "-2", "--upper", "2")
	field(t, m, "quality_index_upper", 1.010, 0.0005)
	field(t, m, "quality_index_lower", 1.795, 0.0005)
	field(t, m, "pwl", 83.93, 0.05)
}

func TestCalcTextHasUnitsAndCautions(t *testing.T) {
	out, _, err := run(t, "calc", "test", "--wet-density", "130.0", "--water-per-volume", "14.0", "--mdd", "120", "--omc", "13", "--min-rc", "95")
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"pcf", "%", "licensed radioactive sources", "qualified personnel", "AASHTO R 11", "Verdict: PASS"} {
		if !strings.Contains(out, want) {
			t.Errorf("text output lacks %q:\n%s", want, out)
		}
	}
	out, _, err = run(t, "calc", "volume", "--compacted-volume", "100", "--compacted-dry-density", "1800", "--bank-dry-density", "1600", "--units", "si")
	if err != nil || !strings.Contains(out, "m3") {
		t.Errorf("volume text: %v\n%s", err, out)
	}
}

// Bad input: an error naming the flag and the rule, nothing on stdout.
func TestCalcBadInput(t *testing.T) {
	for _, c := range []struct {
		name string
		args []string
		want string
	}{
		{"negative soil mass", []string{"calc", "test", "--sand-used", "7", "--cone-correction", "0.5", "--sand-density", "99", "--soil-mass", "-8", "--moisture", "11"}, "--soil-mass -8: must be greater than zero"},
		{"cone above sand", []string{"calc", "test", "--sand-used", "0.4", "--cone-correction", "0.5", "--sand-density", "99", "--soil-mass", "8", "--moisture", "11"}, "--cone-correction"},
		{"missing sand density", []string{"calc", "test", "--sand-used", "7", "--cone-correction", "0.5", "--soil-mass", "8", "--moisture", "11"}, "sand-density"},
		{"NaN density", []string{"calc", "test", "--wet-density", "NaN", "--moisture", "11"}, "--wet-density NaN: must be a finite number"},
		{"moisture over 100", []string{"calc", "test", "--wet-density", "120", "--moisture", "140"}, "--moisture 140: must be between 0 % and 100 %"},
		{"Gs out of range", []string{"calc", "test", "--wet-density", "120", "--moisture", "10", "--gs", "4.1"}, "--gs 4.1: must be between 2 and 3.5"},
		{"bad limit", []string{"calc", "test", "--wet-density", "120", "--moisture", "10", "--mdd", "116", "--omc", "13", "--min-rc", "ninety"}, "--min-rc ninety"},
		{"bad window", []string{"calc", "test", "--wet-density", "120", "--moisture", "10", "--mdd", "116", "--omc", "13", "--moisture-window", "2"}, "moisture-window"},
		{"mdd without omc", []string{"calc", "test", "--wet-density", "120", "--moisture", "10", "--mdd", "116"}, "omc"},
		{"M above wet", []string{"calc", "test", "--wet-density", "50", "--water-per-volume", "55"}, "--water-per-volume 55: must be less than wet_density"},
		{"units", []string{"calc", "test", "--units", "metric", "--wet-density", "120", "--moisture", "10"}, "units"},
		{"zero volume density", []string{"calc", "volume", "--compacted-volume", "100", "--compacted-dry-density", "112", "--bank-dry-density", "0"}, "--bank-dry-density 0: must be greater than zero"},
		{"pwl too few", []string{"calc", "pwl", "--values", "96,97", "--lower", "95"}, "at least 3"},
		{"pwl not a number", []string{"calc", "pwl", "--values", "96,x,97", "--lower", "95"}, "values"},
		{"not a number", []string{"calc", "test", "--wet-density", "abc"}, "wet-density"},
	} {
		t.Run(c.name, func(t *testing.T) {
			out, _, err := run(t, c.args...)
			if err == nil {
				t.Fatalf("no error; stdout:\n%s", out)
			}
			if out != "" {
				t.Errorf("stdout not empty on error:\n%s", out)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error = %q, want it to contain %q", err, c.want)
			}
		})
	}
}

func TestHelpAndCompletion(t *testing.T) {
	out, _, err := run(t, "calc", "test", "--help")
	if err != nil || !strings.Contains(out, "--min-rc") {
		t.Errorf("help: %v\n%s", err, out)
	}
	out, _, err = run(t, "completion", "bash")
	if err != nil || !strings.Contains(out, "bash completion") {
		t.Errorf("completion bash: %v\n%.200s", err, out)
	}
}

// FuzzCalcTest feeds arbitrary flag values to tamp calc test: it must never
// panic, and must print either one JSON object or nothing with an error.
func FuzzCalcTest(f *testing.F) {
	f.Add("125", "12", "", "116", "13.5", "95", "-2,2", "2.65", "")
	f.Add("130", "", "14", "", "", "95.0", ",", "", "20")
	f.Add("NaN", "-1", "1e400", "x", "0", "", "--", "9", "-5")
	f.Fuzz(func(t *testing.T, wet, w, m, mdd, omc, minRC, window, gs, over string) {
		args := []string{"calc", "test", "--json"}
		for _, kv := range [][2]string{{"wet-density", wet}, {"moisture", w}, {"water-per-volume", m}, {"mdd", mdd}, {"omc", omc},
			{"min-rc", minRC}, {"moisture-window", window}, {"gs", gs}, {"oversize-percent", over}} {
			if kv[1] != "" {
				args = append(args, "--"+kv[0]+"="+kv[1])
			}
		}
		if over != "" {
			args = append(args, "--oversize-gs=2.65", "--oversize-moisture=2")
		}
		var out, errOut bytes.Buffer
		err := Run(context.Background(), args, &out, &errOut)
		if err != nil {
			if out.Len() != 0 {
				t.Fatalf("error %v with stdout %q", err, out.String())
			}
			return
		}
		var obj map[string]any
		if jerr := json.Unmarshal(out.Bytes(), &obj); jerr != nil {
			t.Fatalf("stdout is not JSON: %v\n%s", jerr, out.String())
		}
		if v := obj["verdict"]; v != "pass" && v != "fail" && v != "pending" {
			t.Fatalf("verdict %v", v)
		}
	})
}

// The human output prints each limit beside the value judged against it.
func TestCalcTextShowsLimitsBesideValues(t *testing.T) {
	out, _, err := run(t, "calc", "test", "--sand-used", "7.00", "--cone-correction", "0.53", "--sand-density", "99.0", "--soil-mass", "8.11",
		"--moisture", "11.1", "--mdd", "116.0", "--omc", "13.5", "--min-rc", "95.0", "--moisture-window", "-2,2")
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"96.3 %   (min 95.0 %)", "-2.4 points   (window -2 to 2 points)"} {
		if !strings.Contains(out, want) {
			t.Errorf("calc test output lacks %q:\n%s", want, out)
		}
	}
}
