// Package valid checks numeric inputs and reports a broken rule as an error
// that names the field and the rule, so every entry point of the arithmetic
// packages answers bad input the same way.
package valid

import (
	"errors"
	"fmt"
	"math"
	"strconv"
)

// ErrInput is the sentinel every *FieldError wraps; test with errors.Is.
var ErrInput = errors.New("invalid input")

// FieldError names the input field, the value given and the rule it breaks.
type FieldError struct {
	Field string // the input's name, in snake case as the command line and JSON spell it
	Value string // the value given, formatted; empty when the rule is about presence
	Rule  string // the rule broken, in plain words
}

func (e *FieldError) Error() string {
	if e.Value == "" {
		return fmt.Sprintf("%s: %s", e.Field, e.Rule)
	}
	return fmt.Sprintf("%s = %s: %s", e.Field, e.Value, e.Rule)
}

// Unwrap lets errors.Is(err, ErrInput) hold.
func (e *FieldError) Unwrap() error { return ErrInput }

// Fail returns a *FieldError for field with value v and rule.
func Fail(field string, v float64, rule string) error {
	return &FieldError{Field: field, Value: strconv.FormatFloat(v, 'g', -1, 64), Rule: rule}
}

// Missing returns a *FieldError saying field is required.
func Missing(field, rule string) error {
	return &FieldError{Field: field, Rule: rule}
}

// Finite fails when v is NaN or infinite.
func Finite(field string, v float64) error {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return Fail(field, v, "must be a finite number")
	}
	return nil
}

// Positive fails unless v is finite and greater than zero.
func Positive(field string, v float64) error {
	if err := Finite(field, v); err != nil {
		return err
	}
	if v <= 0 {
		return Fail(field, v, "must be greater than zero")
	}
	return nil
}

// NonNegative fails unless v is finite and zero or more.
func NonNegative(field string, v float64) error {
	if err := Finite(field, v); err != nil {
		return err
	}
	if v < 0 {
		return Fail(field, v, "must not be negative")
	}
	return nil
}

// Range fails unless v is finite and lo <= v <= hi; unit is appended to the
// bounds in the message ("%" or "").
func Range(field string, v, lo, hi float64, unit string) error {
	if err := Finite(field, v); err != nil {
		return err
	}
	if v < lo || v > hi {
		return Fail(field, v, fmt.Sprintf("must be between %s%s and %s%s",
			strconv.FormatFloat(lo, 'f', -1, 64), unit, strconv.FormatFloat(hi, 'f', -1, 64), unit))
	}
	return nil
}

// First returns the first non-nil error of errs.
func First(errs ...error) error {
	for _, err := range errs {
		if err != nil {
			return err
		}
	}
	return nil
}
