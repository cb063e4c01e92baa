package soil

import "testing"

// Reports write stations in the trade's notation and values at the
// resolution the methods report (ASTM D698 sec. 11: dry density to
// 0.1 pcf, moisture to 0.1 %), rounded half away from zero.
func TestShowAndStation(t *testing.T) {
	for _, c := range []struct {
		sys  System
		q    Quantity
		si   float64
		want string
	}{
		{US, Density, 112.04 * PoundPerCubicFoot, "112.0 pcf"},
		{US, Density, 112.05 * PoundPerCubicFoot, "112.1 pcf"},
		{SI, Density, 1794.0678978835354, "1794 kg/m3"},
		{SI, Percent, 95.25, "95.3 %"},
		{US, Volume, 500 * CubicYard, "500.0 yd3"},
	} {
		if got := c.sys.Show(c.q, c.si); got != c.want {
			t.Errorf("%v Show(%v, %v) = %q, want %q", c.sys, c.q, c.si, got, c.want)
		}
	}
	for _, c := range []struct {
		sys  System
		m    float64
		want string
	}{
		{US, 1234.5 * Foot, "12+34.50"},
		{SI, 1234.5, "1+234.50"},
		{SI, 15, "0+015.00"},
		{US, -50 * Foot, "-0+50.00"},
	} {
		if got := c.sys.Station(c.m); got != c.want {
			t.Errorf("%v Station(%v) = %q, want %q", c.sys, c.m, got, c.want)
		}
	}
}
