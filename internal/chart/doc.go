// Package chart draws the QA manager's charts of a project from the field
// library's values (tamp/client): a moisture-density chart per laboratory
// reference and a run chart of relative compaction over time.
//
// A moisture-density chart shows the reference's compaction curve (the
// parabola fitted near its peak, with the laboratory's points), the
// zero-air-voids line for the reference's specific gravity, the spec's
// moisture window about optimum, the minimum relative compaction as a dry
// density, and the field tests graded against the reference. A run chart
// shows each test's relative compaction against the time the device took it,
// with the spec's minimum.
//
// Every chart is meant to be read when printed in black and white: a passing
// test is a filled circle and a failing one a cross, and the reference lines
// differ by dash pattern, so colour only repeats what shape and dash already
// say. Axes are labelled with their units in the unit system asked for;
// values given to the package are SI (kg/m3, percent), as the client keeps
// them.
//
// A Chart renders as SVG (vgsvg) or PNG (vgimg) at a fixed size. The charts
// are drawn with gonum.org/v1/plot. They support, and never replace, review
// by qualified personnel; the project's specifications govern acceptance.
package chart
