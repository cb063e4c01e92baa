package valid

import (
	"errors"
	"math"
	"testing"
)

func TestRules(t *testing.T) {
	for _, c := range []struct {
		name string
		err  error
		want string
	}{
		{"positive zero", Positive("soil_mass", 0), "soil_mass = 0: must be greater than zero"},
		{"positive NaN", Positive("soil_mass", math.NaN()), "soil_mass = NaN: must be a finite number"},
		{"non-negative", NonNegative("tare", -1), "tare = -1: must not be negative"},
		{"range", Range("moisture", 120, 0, 100, " %"), "moisture = 120: must be between 0 % and 100 %"},
		{"infinite", Finite("gs", math.Inf(-1)), "gs = -Inf: must be a finite number"},
		{"missing", Missing("sand_used", "is required"), "sand_used: is required"},
	} {
		if c.err == nil || c.err.Error() != c.want {
			t.Errorf("%s: error = %v, want %q", c.name, c.err, c.want)
		}
		if !errors.Is(c.err, ErrInput) {
			t.Errorf("%s: not ErrInput", c.name)
		}
	}
	if err := First(nil, Positive("a", 1), Range("b", 5, 0, 10, "")); err != nil {
		t.Errorf("valid values: %v", err)
	}
	if err := First(nil, Positive("a", -1), Positive("b", -1)); err == nil || err.Error()[0] != 'a' {
		t.Errorf("First = %v, want the first failure", err)
	}
}
