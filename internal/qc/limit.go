package qc

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"tamp/internal/valid"
)

// Limit is a specified limiting value as written, keeping the number of
// decimal places it was written with: "95" and "95.0" are different limits.
type Limit struct {
	Value  float64
	Places int    // decimals written after the point
	Text   string // the limit as written
}

// ParseLimit reads a limit as written ("95", "95.0", "-2", "+1.5"). Field
// names the input in the error.
func ParseLimit(field, s string) (Limit, error) {
	t := strings.TrimSpace(s)
	if t == "" {
		return Limit{}, fmt.Errorf("qc: %w", valid.Missing(field, "must be a number such as 95 or 95.0"))
	}
	v, err := strconv.ParseFloat(t, 64)
	if err != nil || strings.ContainsAny(t, "eExXpPiInN_") {
		return Limit{}, fmt.Errorf("qc: %w", valid.Missing(field, fmt.Sprintf("must be a plain decimal number such as 95 or 95.0, not %q", s)))
	}
	if err := valid.Finite(field, v); err != nil {
		return Limit{}, fmt.Errorf("qc: %w", err)
	}
	places := 0
	if i := strings.IndexByte(t, '.'); i >= 0 {
		places = len(t) - i - 1
	}
	if places > 6 {
		return Limit{}, fmt.Errorf("qc: %w", valid.Fail(field, v, "must be written with at most 6 decimals"))
	}
	return Limit{Value: v, Places: places, Text: strings.TrimPrefix(t, "+")}, nil
}

// MustLimit is ParseLimit for limits written in code; it panics on a bad one.
func MustLimit(s string) Limit {
	l, err := ParseLimit("limit", s)
	if err != nil {
		panic(err)
	}
	return l
}

func (l Limit) String() string { return l.Text }

// Round rounds v to the limit's last written place by the rounding method of
// ASTM E29 / AASHTO R 11: to the nearest value, and a discarded part of
// exactly five to the even digit (the exact-five rule from memory). Floating
// noise below a millionth of the last place is ignored, so a computed 94.5
// that is stored as 94.4999999999 is treated as 94.5.
func (l Limit) Round(v float64) float64 {
	scale := math.Pow(10, float64(l.Places))
	s := math.Round(v*scale*1e6) / 1e6
	return math.RoundToEven(s) / scale
}

// Format writes v at the limit's places.
func (l Limit) Format(v float64) string { return strconv.FormatFloat(v, 'f', l.Places, 64) }

// AtLeast reports whether v, rounded to the limit's places, is at or above it.
func (l Limit) AtLeast(v float64) bool { return l.Round(v) >= l.Value }

// AtMost reports whether v, rounded to the limit's places, is at or below it.
func (l Limit) AtMost(v float64) bool { return l.Round(v) <= l.Value }
