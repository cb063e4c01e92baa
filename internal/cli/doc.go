// Package cli is the tamp command line: the commands inspectors, office
// staff and QA managers run, built on spf13/cobra (help and shell completion
// for bash, zsh, fish and PowerShell come with it). cmd/tamp only calls Run.
//
// Text that users or devices chose (names, reasons, ids, server messages)
// is printed with its control characters escaped (\n, \t, \x1b, \u202e;
// a backslash as \\), so it can neither forge a line or a column of the
// tab-separated output nor drive the terminal. A server certificate that
// fails verification is reported with its problem and what to do about it.
//
// # The project's commands
//
// The commands of each role's day (project, spec, reference, equipment,
// borrow, test, placement, haul, review, qa, sync, status) are built on
// the public API of package tamp/client alone: they open the device's store
// (--store, else $TAMP_STORE, else tamp/device.db in the user's config
// directory), find the project by name or id (--project, remembered in the
// store's settings), and show and take values in the project's units
// (--units us|si overrides them), converted at this edge with the exact
// factors of package soil and shown at the resolution the test methods
// report. Records appear by name (specs, references by lab sample id or
// material, equipment by serial number, placements as "FEATURE lift N",
// people by the names the ledger's enrolment entries give), tests by the
// last eight characters of their id. Read commands print aligned tables,
// or JSON with --json. Errors are tamp's own sentences (shownError): which
// flag and value were wrong and what to do, with the values escaped.
// format.go holds the printing helpers the commands share.
//
// # tamp calc
//
// tamp calc computes with no project or server, so an inspector can check a
// number on the fill and a script can grade a test. Its flags and JSON
// fields are fixed so that others can script them.
//
// tamp calc test takes the readings of one in-place density test. The
// method follows from the readings given:
//
//   - Sand cone (ASTM D1556, AASHTO T 191). A hole is dug in the lift and the
//     soil from it weighed (--soil-mass). Calibrated sand poured through a cone
//     fills the hole; the sand that left the jug (--sand-used) less what fills
//     the cone and base plate (--cone-correction) is the sand in the hole, and
//     that divided by the sand's bulk density (--sand-density, from its
//     calibration) is the hole's volume. Wet density is soil mass over hole
//     volume.
//   - Nuclear gauge (ASTM D6938). The gauge reads the wet density and the
//     mass of water per unit volume M (--water-per-volume); dry density is wet
//     less M and moisture is M over dry. The gauge's moisture depends on the
//     material (hydrogen bound in minerals or organics reads as water), so it
//     is corrected by an offset found from oven-dry comparisons
//     (--moisture-offset); an uncorrected reading is flagged. Nuclear gauges
//     are licensed radioactive sources: their use, transport and storage follow
//     the licensee's radiation-safety programme.
//   - Drive cylinder (ASTM D2937). A thin-walled cylinder of known inside
//     diameter (--cylinder-diameter) is driven into the lift and the soil
//     core in it (--cylinder-length) weighed (--soil-mass); its volume is
//     pi d^2 / 4 x L, and wet density is mass over volume.
//   - Rubber balloon (ASTM D2167). The apparatus measures the hole's volume
//     as the difference of its volume readings before and after
//     (--balloon-final minus --balloon-initial); wet density is the soil's
//     mass over it.
//   - A wet density measured by any other means, with its moisture
//     (--wet-density --moisture).
//
// Inputs no soil can give (a wet density outside the ledger's physical
// bounds, a dry density at or above the solids' density for --gs) are
// refused with the flag, the value and the bound, not graded.
//
// tamp calc curve fits a compaction curve to its points (--points
// W:D,...): a least-squares parabola around the highest point, whose peak
// is the maximum dry density and optimum moisture. It says whether the
// points bracket the peak (flag unbracketed_curve, naming the side that
// needs another point) and flags a point above the zero-air-voids line for
// --gs (above_zero_air_voids).
//
// Dry density is wet density / (1 + w). Against a laboratory reference
// (--mdd maximum dry density, --omc optimum moisture, from a standard or
// modified compaction test) the test's relative compaction is dry density
// over maximum dry density, and its moisture deviation is moisture less
// optimum, in points. Where the field material holds particles larger than
// the laboratory method's sieve (--oversize-percent), the reference is
// corrected to the whole material first (ASTM D4718, AASHTO T 224). With the
// specific gravity of the solids (--gs), the zero-air-voids density is
// computed and a test lying above it is flagged: it would need more than
// 100 % saturation, so a reading, the moisture or the reference is wrong.
//
// The verdict is pass when the relative compaction meets --min-rc and the
// deviation lies in --moisture-window, each decided on the value rounded to
// the last place of the limit as written (AASHTO R 11 / ASTM E29).
//
// tamp calc volume relates the compacted volume placed, the bank volume
// taken from borrow and the loose volume hauled through dry density, with
// shrinkage and swell defined in words beside the figures. tamp calc pwl
// estimates a lot's percent within limits.
//
// Results support, and never replace, review by qualified personnel; the
// project's specifications and local codes govern every acceptance limit.
package cli
