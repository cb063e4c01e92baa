package soil

import (
	"fmt"
	"math"
	"strconv"

	"tamp/internal/valid"
)

// Exact factors from the international yard and pound (1959), as NIST SP 811
// appendix B lists them. Go evaluates these constant expressions exactly and
// rounds once to float64.
const (
	Metre           = 1.0
	Foot            = 0.3048 * Metre
	Inch            = Foot / 12
	Kilogram        = 1.0
	Pound           = 0.45359237 * Kilogram
	Gram            = 0.001 * Kilogram
	CubicMetre      = 1.0
	CubicFoot       = Foot * Foot * Foot
	CubicYard       = 27 * CubicFoot
	CubicCentimetre = 1e-6 * CubicMetre
	// PoundPerCubicFoot is one pcf in kg/m3 (16.018463...).
	PoundPerCubicFoot = Pound / CubicFoot
	// GramPerCubicCentimetre is one g/cm3 in kg/m3.
	GramPerCubicCentimetre = Gram / CubicCentimetre
)

// System is a project's unit system. Values inside tamp are always SI
// (kg, m, m3, kg/m3); a System converts at the edges.
type System int

const (
	US System = iota + 1 // US customary: lb, ft, ft3, yd3, pcf
	SI                   // SI: g, m, cm3, m3, kg/m3
)

// ParseSystem reads "us" or "si".
func ParseSystem(s string) (System, error) {
	switch s {
	case "us":
		return US, nil
	case "si":
		return SI, nil
	}
	return 0, valid.Missing("units", fmt.Sprintf("must be us or si, not %q", s))
}

func (s System) String() string {
	switch s {
	case US:
		return "us"
	case SI:
		return "si"
	}
	return fmt.Sprintf("System(%d)", int(s))
}

// Quantity is the kind of a value, which decides its unit in a System.
type Quantity int

const (
	Density     Quantity = iota + 1 // pcf or kg/m3
	Mass                            // lb or g (a test's masses)
	SmallVolume                     // ft3 or cm3 (a hole, a mould)
	Volume                          // yd3 or m3 (earthwork)
	Length                          // ft or m
	Depth                           // in or mm (probe depth, lift thickness)
	Percent                         // moisture, compaction: no unit conversion
	Ratio                           // dimensionless
)

var unitTable = map[System]map[Quantity]struct {
	name   string
	factor float64 // SI value of one unit
}{
	US: {
		Density: {"pcf", PoundPerCubicFoot}, Mass: {"lb", Pound}, SmallVolume: {"ft3", CubicFoot},
		Volume: {"yd3", CubicYard}, Length: {"ft", Foot}, Depth: {"in", Inch},
		Percent: {"%", 1}, Ratio: {"", 1},
	},
	SI: {
		Density: {"kg/m3", 1}, Mass: {"g", Gram}, SmallVolume: {"cm3", CubicCentimetre},
		Volume: {"m3", CubicMetre}, Length: {"m", Metre}, Depth: {"mm", 0.001},
		Percent: {"%", 1}, Ratio: {"", 1},
	},
}

// Unit names the unit of q in s ("pcf", "cm3", "%").
func (s System) Unit(q Quantity) string { return unitTable[s][q].name }

// ToSI converts v, given in s's unit for q, to SI.
func (s System) ToSI(q Quantity, v float64) float64 { return v * unitTable[s][q].factor }

// FromSI converts the SI value v to s's unit for q.
func (s System) FromSI(q Quantity, v float64) float64 { return v / unitTable[s][q].factor }

// Places is the number of decimals tamp reports for q in s, following the
// resolution the test methods report at: dry density to 0.1 pcf or 1 kg/m3,
// moisture and relative compaction to 0.1 % (ASTM D698 sec. 11, D6938; the
// kg/m3 resolution is from memory).
func (s System) Places(q Quantity) int {
	switch q {
	case Density:
		if s == US {
			return 1
		}
		return 0
	case Percent:
		return 1
	case Mass:
		if s == US {
			return 2
		}
		return 1
	case SmallVolume:
		if s == US {
			return 6
		}
		return 1
	case Volume:
		return 1
	case Length:
		return 2
	case Depth:
		return 1
	}
	return 4
}

// Water densities a project may choose (kg/m3). The trade's two US values
// are both in use; 1000 kg/m3 is the SI convention.
const (
	Water624  = 62.4 * PoundPerCubicFoot
	Water6243 = 62.43 * PoundPerCubicFoot
	Water1000 = 1000.0
)

// WaterAt returns the density of air-free water at temperature t (degrees
// Celsius, 0-40) in kg/m3, from the formula of Tanaka et al. (2001),
// Metrologia 38, 301, recommended by the CIPM.
func WaterAt(t float64) (float64, error) {
	if err := valid.Range("water_temperature", t, 0, 40, " C"); err != nil {
		return 0, fmt.Errorf("soil: %w", err)
	}
	const (
		a1 = -3.983035 // degrees C
		a2 = 301.797   // degrees C
		a3 = 522528.9  // degrees C squared
		a4 = 69.34881  // degrees C
		a5 = 999.974950
	)
	return a5 * (1 - (t+a1)*(t+a1)*(t+a2)/(a3*(t+a4))), nil
}

// Round returns the SI value v in s's unit for q, rounded half away from
// zero to q's places.
func (s System) Round(q Quantity, v float64) float64 {
	f := math.Pow(10, float64(s.Places(q)))
	return math.Round(s.FromSI(q, v)*f) / f
}

// Show writes the SI value v in s's unit for q at q's resolution, with the
// unit: "101.3 pcf", "95.2 %"; "-" for NaN or an infinity.
func (s System) Show(q Quantity, v float64) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "-"
	}
	t := strconv.FormatFloat(s.Round(q, v), 'f', s.Places(q), 64)
	if u := s.Unit(q); u != "" {
		return t + " " + u
	}
	return t
}

// Station writes a station (SI metres along the alignment) in the trade's
// notation: hundreds of feet (12+34.50) in US units, kilometres (1+234.50)
// in SI.
func (s System) Station(m float64) string {
	v := s.FromSI(Length, m)
	step := 100.0
	width := 5 // "34.50"
	if s == SI {
		step, width = 1000, 6 // "234.50"
	}
	sign := ""
	if v < 0 {
		sign, v = "-", -v
	}
	v = math.Round(v*100) / 100
	whole := math.Floor(v / step)
	rest := v - whole*step
	return fmt.Sprintf("%s%.0f+%0*.2f", sign, whole, width, rest)
}
