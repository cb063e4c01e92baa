// Package soil computes what an in-place density test and its laboratory
// reference say about a soil: phase relations, moisture content, the
// in-place density methods, compaction curves, oversize correction and
// one-point checks. It is pure arithmetic over SI values (kg, m, m3, kg/m3,
// moisture in percent) and imports nothing of storage or transport.
//
// # Units
//
// Every value inside is SI. [System] converts at the edges with the exact
// factors of the international foot and pound (NIST SP 811 appendix B):
// 1 ft = 0.3048 m, 1 lb = 0.45359237 kg, so 1 pcf = 16.018463 kg/m3 and
// 1 yd3 = 0.764554857984 m3. The density of water is the project's choice:
// 62.4 pcf, 62.43 pcf, 1000 kg/m3, or [WaterAt] a temperature.
//
// # Moisture
//
// An oven-dry moisture ([OvenDry], ASTM D2216 / AASHTO T 265) is the mass of
// water driven off divided by the mass of the dry soil. A nuclear gauge
// (ASTM D6938) measures the wet density and the mass of water per unit
// volume M; dry = wet - M and w = M / dry. The gauge's moisture depends on
// the material's chemistry (hydrogen in other forms than free water reads
// as water), so it is corrected per material and gauge ([MoistureCorrection],
// an offset in points or a ratio, [DeriveCorrection] from paired oven tests).
//
// # In-place density
//
// Each method's Compute returns an [InPlace] with wet density, dry density
// = wet / (1 + w), moisture, and the intermediate [Step]s a reviewer needs;
// its Densities returns the same without the steps, for a caller that
// grades a test without showing its arithmetic:
//
//   - [Nuclear] (ASTM D6938): direct transmission with the probe lowered
//     into a punched hole (up to 300 mm / 12 in), or backscatter from the
//     surface; two readings taken with the gauge turned 90 degrees are
//     averaged when they agree. Nuclear gauges hold licensed radioactive
//     sources; their use, transport and storage follow the licensee's
//     radiation-safety programme, outside this package.
//   - [SandCone] (ASTM D1556 / AASHTO T 191): a hole is dug and the soil
//     weighed; calibrated sand of known bulk density ([SandDensity]) fills
//     it through a cone; sand in hole = sand used - the cone's correction,
//     hole volume = sand in hole / sand density, wet density = soil / volume.
//   - [DriveCylinder] (ASTM D2937): a thin-walled cylinder of known volume is
//     driven into the soil and the core weighed.
//   - [RubberBalloon] (ASTM D2167): the hole's volume is read off the
//     apparatus as the change in its reading.
//   - [WetDensityTest]: a wet density measured by other means.
//
// # Laboratory references
//
// A compaction test (ASTM D698 / AASHTO T 99 standard effort, ASTM D1557 /
// AASHTO T 180 modified) compacts specimens at several moistures; [FitCurve]
// fits a parabola around the highest points and returns its peak, the
// maximum dry density and optimum moisture, and says whether the points
// bracket the peak and which lie above zero air voids. [Procedure.Scope]
// gives the mould, blows and oversize each method allows. [CorrectForOversize]
// and [FineFraction] apply ASTM D4718 / AASHTO T 224 in both directions.
// [Family.OnePoint] selects a reference from a family of curves for a
// one-point specimen (AASHTO T 272), which must lie at 80-100 % of optimum.
//
// Errors are *valid.FieldError values naming the field and the rule; test
// for them with errors.Is(err, valid.ErrInput). Results support, and never
// replace, review by qualified personnel; the project's specifications and
// local codes govern.
package soil
