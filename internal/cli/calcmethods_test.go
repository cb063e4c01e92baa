package cli

import (
	"bytes"
	"context"
	"encoding/json"
	"strings"
	"testing"
)

// unrounded reads one of the "unrounded" values of calc JSON.
func unrounded(t *testing.T, m map[string]any, key string, want, tol float64) {
	t.Helper()
	u, ok := m["unrounded"].(map[string]any)
	if !ok {
		t.Fatalf("unrounded = %v, want an object", m["unrounded"])
	}
	field(t, u, key, want, tol)
}

// step returns the value of the step whose name starts with prefix.
func step(t *testing.T, m map[string]any, prefix string) (float64, string) {
	t.Helper()
	list, _ := m["steps"].([]any)
	for _, s := range list {
		sm, _ := s.(map[string]any)
		if name, _ := sm["name"].(string); strings.HasPrefix(name, prefix) {
			v, _ := sm["value"].(float64)
			unit, _ := sm["unit"].(string)
			return v, unit
		}
	}
	t.Fatalf("no step %q in %v", prefix, m["steps"])
	return 0, ""
}

// B3 [formula] ASTM D2937 (CHECKS.md row B3; the standard's wording from
// memory): volume = pi d^2 / 4 x L, wet = mass / volume, dry = wet / (1 + w).
// 101.6 mm x 127.0 mm, 2150 g, w 15 %: volume 1029.6 cm3, wet 2.088 g/cm3,
// dry 1.816 g/cm3.
func TestCalcDriveCylinderB3(t *testing.T) {
	m := runJSON(t, "calc", "test", "--units", "si", "--cylinder-diameter", "101.6", "--cylinder-length", "127.0",
		"--soil-mass", "2150", "--moisture", "15")
	if m["method"] != "drive_cylinder" || m["units"] != "si" {
		t.Errorf("method %v units %v, want drive_cylinder si", m["method"], m["units"])
	}
	if v, unit := step(t, m, "cylinder volume"); unit != "cm3" || v < 1029.55 || v > 1029.65 {
		t.Errorf("cylinder volume = %v %s, want 1029.6 cm3", v, unit)
	}
	field(t, m, "wet_density", 2088, 0.5)
	field(t, m, "dry_density", 1816, 0.5)
	unrounded(t, m, "wet_density", 2088, 1) // 0.001 g/cm3
	unrounded(t, m, "dry_density", 1816, 1)
	if m["verdict"] != "pending" {
		t.Errorf("verdict = %v, want pending (no reference)", m["verdict"])
	}
}

// Worked by hand from ASTM D2937's relations (the relations [formula], their
// wording from memory), in US units and graded:
//
//	volume = pi x 4.000^2 / 4 x 5.000 = 62.832 in3 = 62.832 / 1728 = 0.036361 ft3
//	wet    = 4.40 lb / 0.036361 ft3 = 121.01 pcf
//	dry    = 121.01 / (1 + 12.0/100) = 108.04 pcf
//	RC     = 108.04 / 115.0 = 93.95 %, rounds to 94 < 95: fail
//	moisture 12.0 - 13.0 = -1.0 points, within -2,2
func TestCalcDriveCylinderUSGraded(t *testing.T) {
	m := runJSON(t, "calc", "test", "--cylinder-diameter", "4.000", "--cylinder-length", "5.000", "--soil-mass", "4.40",
		"--moisture", "12.0", "--mdd", "115.0", "--omc", "13.0", "--min-rc", "95", "--moisture-window", "-2,2")
	if v, unit := step(t, m, "cylinder volume"); unit != "ft3" || v < 0.0363605 || v > 0.0363615 {
		t.Errorf("cylinder volume = %v %s, want 0.036361 ft3", v, unit)
	}
	field(t, m, "wet_density", 121.0, 1e-9)
	field(t, m, "dry_density", 108.0, 1e-9)
	unrounded(t, m, "wet_density", 121.01, 0.005)
	unrounded(t, m, "dry_density", 108.04, 0.005)
	field(t, m, "relative_compaction", 94.0, 1e-9)
	field(t, m, "moisture_deviation", -1.0, 1e-9)
	if m["verdict"] != "fail" {
		t.Errorf("verdict = %v, want fail", m["verdict"])
	}
	if got := codes(m, "reasons"); len(got) != 1 || got[0] != "compaction_below_minimum" {
		t.Errorf("reasons = %v, want [compaction_below_minimum]", got)
	}
}

// B4 [formula] ASTM D2167 (CHECKS.md row B4; wording from memory): volume =
// final reading - initial reading. 1020 -> 2850 cm3, 3600 g, w 9 %: volume
// 1830 cm3, wet 1.967 g/cm3, dry 1.805 g/cm3.
func TestCalcRubberBalloonB4(t *testing.T) {
	m := runJSON(t, "calc", "test", "--units", "si", "--balloon-initial", "1020", "--balloon-final", "2850",
		"--soil-mass", "3600", "--moisture", "9")
	if m["method"] != "rubber_balloon" {
		t.Errorf("method = %v, want rubber_balloon", m["method"])
	}
	if v, unit := step(t, m, "hole volume"); unit != "cm3" || v != 1830 {
		t.Errorf("hole volume = %v %s, want 1830 cm3", v, unit)
	}
	unrounded(t, m, "wet_density", 1967, 1)
	unrounded(t, m, "dry_density", 1805, 1)
}

// Worked by hand from ASTM D2167's relation (volume = final - initial; the
// wording from memory), in US units and graded:
//
//	volume = 0.0980 - 0.0350 = 0.0630 ft3
//	wet    = 7.85 lb / 0.0630 ft3 = 124.60 pcf
//	dry    = 124.60 / 1.100 = 113.28 pcf
//	RC     = 113.28 / 118.0 = 96.0 %: pass against 95; moisture 10.0 - 11.5 = -1.5
func TestCalcRubberBalloonUSGraded(t *testing.T) {
	m := runJSON(t, "calc", "test", "--balloon-initial", "0.0350", "--balloon-final", "0.0980", "--soil-mass", "7.85",
		"--moisture", "10.0", "--mdd", "118.0", "--omc", "11.5", "--min-rc", "95", "--moisture-window", "-2,2")
	if v, unit := step(t, m, "hole volume"); unit != "ft3" || v < 0.06299995 || v > 0.06300005 {
		t.Errorf("hole volume = %v %s, want 0.063 ft3", v, unit)
	}
	unrounded(t, m, "wet_density", 124.60, 0.005)
	field(t, m, "dry_density", 113.3, 1e-9)
	field(t, m, "relative_compaction", 96.0, 1e-9)
	field(t, m, "moisture_deviation", -1.5, 1e-9)
	if m["verdict"] != "pass" {
		t.Errorf("verdict = %v %v, want pass", m["verdict"], m["reasons"])
	}
}

func TestCalcNewMethodsText(t *testing.T) {
	out, _, err := run(t, "calc", "test", "--cylinder-diameter", "4", "--cylinder-length", "5", "--soil-mass", "4.40", "--moisture", "12")
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"Drive cylinder (ASTM D2937)", "ft3", "pcf", "not graded", "qualified personnel"} {
		if !strings.Contains(out, want) {
			t.Errorf("drive cylinder text lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "radioactive") {
		t.Errorf("drive cylinder text carries the nuclear caution:\n%s", out)
	}
	out, _, err = run(t, "calc", "test", "--units", "si", "--balloon-initial", "1020", "--balloon-final", "2850", "--soil-mass", "3600", "--moisture", "9")
	if err != nil || !strings.Contains(out, "Rubber balloon (ASTM D2167)") || !strings.Contains(out, "1830.0 cm3") {
		t.Errorf("rubber balloon text: %v\n%s", err, out)
	}
}

// C3 [formula] (CHECKS.md row C3): points on the exact parabola
// dry = 110.0 - 0.6 (w - 15)^2 pcf give MDD 110.0 pcf at OMC 15.0 %.
func TestCalcCurveC3(t *testing.T) {
	// w = 11, 13, 15, 17, 19: 100.4, 107.6, 110.0, 107.6, 100.4.
	m := runJSON(t, "calc", "curve", "--points", "11:100.4,13:107.6,15:110.0,17:107.6,19:100.4")
	field(t, m, "max_dry_density", 110.0, 1e-9)
	field(t, m, "optimum_moisture", 15.0, 1e-9)
	if m["bracketed"] != true {
		t.Errorf("bracketed = %v, want true", m["bracketed"])
	}
	if fl, ok := m["flags"].([]any); !ok || len(fl) != 0 {
		t.Errorf("flags = %v, want []", m["flags"])
	}
	// The same parabola at w = 12, 14, 16.5, 19 (104.6, 109.4, 108.65,
	// 100.4), unsymmetric: the highest measured point (109.4 at 14) is not
	// the answer; the fitted peak is.
	m = runJSON(t, "calc", "curve", "--points", "16.5:108.65,12:104.6,19:100.4,14:109.4")
	field(t, m, "max_dry_density", 110.0, 1e-9)
	field(t, m, "optimum_moisture", 15.0, 1e-9)
	unrounded(t, m, "max_dry_density", 110.0, 1e-6)
	unrounded(t, m, "optimum_moisture", 15.0, 1e-6)
}

// A parabola through three points, fitted by hand (no published row): with
// x = w - 13 the points (10, 1800) (13, 1900) (16, 1840) kg/m3 are
// (-3, 1800) (0, 1900) (3, 1840), so
//
//	c0 = 1900
//	c1 = (1840 - 1800) / (2 x 3) = 6.6667
//	c2 = (1840 + 1800 - 2 x 1900) / (2 x 3^2) = -8.8889
//	x at the peak = -c1 / (2 c2) = 0.375, OMC = 13.375 -> 13.4 %
//	MDD = 1900 + 6.6667 x 0.375 - 8.8889 x 0.375^2 = 1901.25 -> 1901 kg/m3
func TestCalcCurveThreePointsSI(t *testing.T) {
	m := runJSON(t, "calc", "curve", "--units", "si", "--points", "10:1800,13:1900,16:1840")
	field(t, m, "max_dry_density", 1901, 1e-9)
	field(t, m, "optimum_moisture", 13.4, 1e-9)
	unrounded(t, m, "max_dry_density", 1901.25, 1e-6)
	unrounded(t, m, "optimum_moisture", 13.375, 1e-6)
	if m["bracketed"] != true || m["units"] != "si" {
		t.Errorf("bracketed %v units %v", m["bracketed"], m["units"])
	}
}

// A curve whose highest point is its wettest does not bracket optimum
// ([practice], CHECKS.md "Method scope" note): flagged, not refused. The
// parabola through (8, 100) (10, 104) (12, 107) has c1 = 1.75, c2 = -0.125
// about w = 10, a peak at w = 17 (outside 8-12) of 110.125 pcf.
func TestCalcCurveUnbracketed(t *testing.T) {
	m := runJSON(t, "calc", "curve", "--points", "8:100,10:104,12:107")
	if m["bracketed"] != false {
		t.Errorf("bracketed = %v, want false", m["bracketed"])
	}
	if got := codes(m, "flags"); len(got) != 1 || got[0] != "unbracketed_curve" {
		t.Errorf("flags = %v, want [unbracketed_curve]", got)
	}
	unrounded(t, m, "optimum_moisture", 17, 1e-6)
	unrounded(t, m, "max_dry_density", 110.125, 1e-6)
	fl := m["flags"].([]any)[0].(map[string]any)
	if msg, _ := fl["message"].(string); !strings.Contains(msg, "wetter") {
		t.Errorf("message = %q, want it to say to add a wetter point", msg)
	}
}

// A5 [formula] (CHECKS.md row A5): with Gs 2.65 and water 62.4 pcf the
// zero-air-voids density is 125.46 pcf at 12 % and 122.99 pcf at 13 %; a
// point of 125.0 pcf is plausible at 12 % and flagged at 13 % ([practice]).
func TestCalcCurveAboveZeroAirVoidsA5(t *testing.T) {
	m := runJSON(t, "calc", "curve", "--gs", "2.65", "--points", "9:119.0,11:123.0,13:125.0,15:117.0")
	if got := codes(m, "flags"); len(got) != 1 || got[0] != "above_zero_air_voids" {
		t.Fatalf("flags = %v, want [above_zero_air_voids]", got)
	}
	msg, _ := m["flags"].([]any)[0].(map[string]any)["message"].(string)
	if !strings.Contains(msg, "13.0 %") || !strings.Contains(msg, "123.0 pcf") {
		t.Errorf("message = %q, want the point's moisture and the ZAV density 123.0 pcf", msg)
	}
	m = runJSON(t, "calc", "curve", "--gs", "2.65", "--points", "10:119.0,12:125.0,14:118.0")
	if got := codes(m, "flags"); len(got) != 0 {
		t.Errorf("125.0 pcf at 12 %% (ZAV 125.46) flagged: %v", got)
	}
}

func TestCalcCurveText(t *testing.T) {
	out, _, err := run(t, "calc", "curve", "--points", "11:100.4,13:107.6,15:110.0,17:107.6,19:100.4")
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"110.0 pcf", "15.0 %", "bracketed", "yes", "qualified personnel", "0.1 pcf"} {
		if !strings.Contains(out, want) {
			t.Errorf("curve text lacks %q:\n%s", want, out)
		}
	}
	out, _, err = run(t, "calc", "curve", "--units", "si", "--points", "8:1600,10:1660,12:1700")
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"kg/m3", "unbracketed_curve", "no"} {
		if !strings.Contains(out, want) {
			t.Errorf("unbracketed SI curve text lacks %q:\n%s", want, out)
		}
	}
}

// Physically impossible inputs are refused with the flag, the value and the
// bound, never graded. The bounds are the ledger's (internal/ledger/admit.go):
// wet density 500-3500 kg/m3 (31.2-218.5 pcf), masses up to 200 kg,
// cylinder dimensions up to 1 m, volume readings up to 0.1 m3.
func TestCalcRefusesImpossibleInput(t *testing.T) {
	for _, c := range []struct {
		name string
		args []string
		want []string
	}{
		{"kg/m3 typed as pcf", []string{"calc", "test", "--wet-density", "2100", "--moisture", "10"},
			[]string{"--wet-density 2100", "218.5 pcf"}},
		{"wet density too loose in SI", []string{"calc", "test", "--units", "si", "--wet-density", "400", "--moisture", "10"},
			[]string{"--wet-density 400", "500 to 3500 kg/m3"}},
		{"nuclear wet density", []string{"calc", "test", "--wet-density", "3000", "--water-per-volume", "14"},
			[]string{"--wet-density 3000", "218.5 pcf"}},
		{"cylinder gives an impossible wet density", []string{"calc", "test", "--cylinder-diameter", "4", "--cylinder-length", "5",
			"--soil-mass", "40", "--moisture", "10"}, []string{"1100.1 pcf", "--soil-mass 40", "--cylinder-diameter", "218.5 pcf"}},
		{"balloon gives an impossible wet density", []string{"calc", "test", "--units", "si", "--balloon-initial", "1000",
			"--balloon-final", "1100", "--soil-mass", "3600", "--moisture", "9"}, []string{"36000 kg/m3", "--balloon-final", "3500 kg/m3"}},
		{"sand cone gives an impossible wet density", []string{"calc", "test", "--sand-used", "7.00", "--cone-correction", "0.53",
			"--sand-density", "99.0", "--soil-mass", "30", "--moisture", "11"}, []string{"459.0 pcf", "--sand-used", "218.5 pcf"}},
		{"dry density above the solids", []string{"calc", "test", "--wet-density", "150", "--moisture", "1", "--gs", "2.2"},
			[]string{"--gs 2.2", "148.5 pcf", "137.3 pcf", "solids"}},
		{"mdd above the solids", []string{"calc", "test", "--wet-density", "120", "--moisture", "10", "--gs", "2.65", "--mdd", "170", "--omc", "9"},
			[]string{"--mdd 170", "165.4 pcf", "--gs 2.65"}},
		{"mdd in the wrong units", []string{"calc", "test", "--wet-density", "120", "--moisture", "10", "--mdd", "1850", "--omc", "9"},
			[]string{"--mdd 1850", "218.5 pcf"}},
		{"grams keyed with us units", []string{"calc", "test", "--cylinder-diameter", "4", "--cylinder-length", "5", "--soil-mass", "2150", "--moisture", "10"},
			[]string{"--soil-mass 2150", "440.92 lb"}},
		{"millimetres keyed with us units", []string{"calc", "test", "--cylinder-diameter", "101.6", "--cylinder-length", "127", "--soil-mass", "4.4", "--moisture", "10"},
			[]string{"--cylinder-diameter 101.6", "39.4 in"}},
		{"cm3 keyed with us units", []string{"calc", "test", "--balloon-initial", "1020", "--balloon-final", "2850", "--soil-mass", "7.85", "--moisture", "10"},
			[]string{"--balloon-initial 1020", "3.531467 ft3"}},
		{"sand density", []string{"calc", "test", "--units", "si", "--sand-used", "4090", "--cone-correction", "1580", "--sand-density", "2650",
			"--soil-mass", "3650", "--moisture", "10.5"}, []string{"--sand-density 2650", "1000 to 2000 kg/m3"}},
		{"water per volume", []string{"calc", "test", "--units", "si", "--wet-density", "2100", "--water-per-volume", "1200"},
			[]string{"--water-per-volume 1200", "0 to 1000 kg/m3"}},
		{"curve point in the wrong units", []string{"calc", "curve", "--points", "10:1800,13:1900,16:1840"},
			[]string{"--points", "10:1800", "218.5 pcf"}},
		{"curve point above the solids", []string{"calc", "curve", "--gs", "2.65", "--points", "8:150,10:170,12:160"},
			[]string{"--points", "10:170", "165.4 pcf", "--gs 2.65"}},
	} {
		t.Run(c.name, func(t *testing.T) {
			out, _, err := run(t, c.args...)
			if err == nil {
				t.Fatalf("no error; stdout:\n%s", out)
			}
			if out != "" {
				t.Errorf("stdout not empty on error:\n%s", out)
			}
			for _, w := range c.want {
				if !strings.Contains(err.Error(), w) {
					t.Errorf("error = %q, want it to contain %q", err, w)
				}
			}
		})
	}
}

// Readings that are not a test, or not a curve: an error naming the flag
// and the rule, nothing on stdout.
func TestCalcNewMethodsBadInput(t *testing.T) {
	for _, c := range []struct {
		name string
		args []string
		want string
	}{
		{"cylinder without length", []string{"calc", "test", "--cylinder-diameter", "4", "--soil-mass", "4.4", "--moisture", "10"},
			"--cylinder-length: is required for a drive-cylinder test"},
		{"cylinder without moisture", []string{"calc", "test", "--cylinder-diameter", "4", "--cylinder-length", "5", "--soil-mass", "4.4"},
			"--moisture: is required for a drive-cylinder test"},
		{"cylinder zero diameter", []string{"calc", "test", "--cylinder-diameter", "0", "--cylinder-length", "5", "--soil-mass", "4.4", "--moisture", "10"},
			"--cylinder-diameter 0: must be greater than zero"},
		{"balloon final below initial", []string{"calc", "test", "--balloon-initial", "0.09", "--balloon-final", "0.03", "--soil-mass", "7", "--moisture", "10"},
			"--balloon-final 0.03: must exceed"},
		{"balloon without soil mass", []string{"calc", "test", "--balloon-initial", "0.03", "--balloon-final", "0.09", "--moisture", "10"},
			"--soil-mass: is required for a rubber-balloon test"},
		{"two methods", []string{"calc", "test", "--balloon-initial", "0.03", "--balloon-final", "0.09", "--cylinder-diameter", "4",
			"--cylinder-length", "5", "--soil-mass", "7", "--moisture", "10"}, "one method"},
		{"cylinder with a wet density", []string{"calc", "test", "--cylinder-diameter", "4", "--cylinder-length", "5", "--soil-mass", "4.4",
			"--moisture", "10", "--wet-density", "120"}, "--wet-density 120: does not apply to a drive-cylinder test"},
		{"soil mass alone", []string{"calc", "test", "--soil-mass", "4.4", "--moisture", "10"}, "--cylinder-diameter"},
		{"curve without points", []string{"calc", "curve"}, "points"},
		{"curve point malformed", []string{"calc", "curve", "--units", "si", "--points", "10:1800,13-1900,16:1840"}, `point 2 ("13-1900")`},
		{"curve point not a number", []string{"calc", "curve", "--points", "10:110,x:112,16:111"}, `point 2 ("x:112")`},
		{"curve too few points", []string{"calc", "curve", "--points", "10:110,12:112"}, "at least 3 points"},
		{"curve same moisture", []string{"calc", "curve", "--points", "10:110,12:112,12:111"}, "different moisture"},
		{"curve no peak", []string{"calc", "curve", "--points", "10:112,12:110,14:112"}, "no peak"},
		{"curve moisture over 100", []string{"calc", "curve", "--points", "10:110,120:112,14:111"}, "point 2"},
		{"curve gs", []string{"calc", "curve", "--gs", "5", "--points", "10:110,12:112,14:111"}, "--gs 5: must be between 2 and 3.5"},
		{"curve units", []string{"calc", "curve", "--units", "metric", "--points", "10:110,12:112,14:111"}, "units"},
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

// FuzzCalcCurve feeds arbitrary points to tamp calc curve: it must never
// panic, and must print either one JSON object with a fitted peak or nothing
// with an error.
func FuzzCalcCurve(f *testing.F) {
	f.Add("11:100.4,13:107.6,15:110.0,17:107.6,19:100.4", "")
	f.Add("8:100,10:104,12:107", "2.65")
	f.Add("10:1800,13:1900,16:1840", "2.7")
	f.Add("NaN:1,:,1e400:2,-1:-1", "x")
	f.Fuzz(func(t *testing.T, points, gs string) {
		args := []string{"calc", "curve", "--json", "--points=" + points}
		if gs != "" {
			args = append(args, "--gs="+gs)
		}
		var out, errOut bytes.Buffer
		if err := Run(context.Background(), args, &out, &errOut); err != nil {
			if out.Len() != 0 {
				t.Fatalf("error %v with stdout %q", err, out.String())
			}
			return
		}
		var obj map[string]any
		if err := json.Unmarshal(out.Bytes(), &obj); err != nil {
			t.Fatalf("stdout is not JSON: %v\n%s", err, out.String())
		}
		if _, ok := obj["max_dry_density"].(float64); !ok {
			t.Fatalf("max_dry_density = %v", obj["max_dry_density"])
		}
		if _, ok := obj["bracketed"].(bool); !ok {
			t.Fatalf("bracketed = %v", obj["bracketed"])
		}
	})
}
