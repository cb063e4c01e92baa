// Package exports writes a project's tests in open formats for the people
// and programs that work outside tamp: a CSV of tests (RFC 4180) with every
// raw reading and computed value of each test's current revision, a CSV of
// each test's history, a GeoJSON FeatureCollection (RFC 7946) of the tests
// taken with a satellite position, and the JSON of a report.
//
// It works on the public types of package client (client.Test with its
// revisions, voids, reviews and exceptions, and its client.Result), so a
// device and the office export the same way. Values arrive in SI and are
// written in the chosen unit system (soil.US or soil.SI) at the resolution
// the test methods report (soil.System.Places), rounded half away from
// zero, as plain numbers with the unit in the column or property name
// (dry_density_pcf), so a spreadsheet reads numbers. A value that does not
// apply (a reading of another method, a relative compaction while the
// reference has not reached the device) is an empty cell.
//
// # Text cells and spreadsheets
//
// A spreadsheet treats a cell that starts with =, +, -, @, a tab or a
// carriage return as a formula, and a formula in a field record can run
// commands on the reader's computer. Every text cell (names, ids, remarks,
// reasons: anything a person typed) that starts with one of those
// characters, or with an apostrophe, is written with one apostrophe in
// front of it. A spreadsheet shows such a cell as text and hides the
// apostrophe, so a person sees what was typed; a program reading the file
// removes one leading apostrophe (CellText) to get the text back exactly.
// Number cells are tamp's own formatting and are never prefixed: a
// negative offset or moisture deviation stays a number.
//
// # Positions
//
// GeoJSON coordinates are [longitude, latitude] in WGS84 decimal degrees,
// rounded to 7 places (about a centimetre). A test without a position, or
// with one outside [-180, 180] x [-90, 90], is never given a made-up point:
// TestsGeoJSON leaves it out of the collection and returns it as skipped,
// for the caller to report. A test's elevation is kept in its properties
// and never written as a third coordinate: RFC 7946 reads a third
// coordinate as height above the WGS84 ellipsoid, while a test's elevation
// is taken from the project's own datum (or is a depth below one).
//
// The functions are safe for concurrent use; each writes only to its own
// writer.
package exports
