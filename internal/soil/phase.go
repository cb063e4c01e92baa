package soil

import (
	"fmt"

	"tamp/internal/valid"
)

// Limits on inputs that no soil test can produce. Moisture above 100 % does
// occur in organic soils, but tamp's methods and specs are for earthwork
// fill, where such a value is a typing error.
const (
	MinGs       = 2.0
	MaxGs       = 3.5
	MaxMoisture = 100.0
)

func checkMoisture(field string, w float64) error {
	return valid.Range(field, w, 0, MaxMoisture, " %")
}

func checkGs(field string, gs float64) error {
	return valid.Range(field, gs, MinGs, MaxGs, "")
}

// DryDensity returns the dry density of soil of wet (bulk) density wet at
// moisture content w (percent): dry = wet / (1 + w/100).
func DryDensity(wet, w float64) (float64, error) {
	if err := valid.First(valid.Positive("wet_density", wet), checkMoisture("moisture", w)); err != nil {
		return 0, fmt.Errorf("soil: dry density: %w", err)
	}
	return wet / (1 + w/100), nil
}

// ZeroAirVoids returns the dry density at which soil of specific gravity gs
// and moisture w (percent) would be fully saturated:
// rho_zav = Gs * rho_w / (1 + w Gs / 100).
func ZeroAirVoids(gs, w, water float64) (float64, error) {
	if err := valid.First(checkGs("gs", gs), checkMoisture("moisture", w), valid.Positive("water_density", water)); err != nil {
		return 0, fmt.Errorf("soil: zero air voids: %w", err)
	}
	return gs * water / (1 + w*gs/100), nil
}

// Phases holds the volume relations of a soil specimen.
type Phases struct {
	VoidRatio    float64 // e = Gs rho_w / rho_d - 1
	Porosity     float64 // n = e / (1 + e), percent
	Saturation   float64 // S = w Gs / e, percent; above 100 % means an inconsistent input
	ZeroAirVoids float64 // dry density at S = 100 % for this moisture, kg/m3
}

// PhaseRelations returns the void ratio, porosity, degree of saturation and
// zero-air-voids density for dry density dry (kg/m3), moisture w (percent),
// specific gravity gs and water density water (kg/m3). A dry density at or
// above the density of the solids themselves is refused.
func PhaseRelations(dry, w, gs, water float64) (Phases, error) {
	if err := valid.First(valid.Positive("dry_density", dry), checkMoisture("moisture", w),
		checkGs("gs", gs), valid.Positive("water_density", water)); err != nil {
		return Phases{}, fmt.Errorf("soil: phase relations: %w", err)
	}
	solids := gs * water
	if dry >= solids {
		return Phases{}, fmt.Errorf("soil: phase relations: %w",
			valid.Fail("dry_density", dry, fmt.Sprintf("must be below the density of the solids (Gs x water = %.1f kg/m3)", solids)))
	}
	e := solids/dry - 1
	return Phases{
		VoidRatio:    e,
		Porosity:     100 * e / (1 + e),
		Saturation:   w * gs / e,
		ZeroAirVoids: solids / (1 + w*gs/100),
	}, nil
}
