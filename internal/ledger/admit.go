package ledger

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/reflect/protoreflect"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/soil"
)

// Bounds on the values of a new entry. They refuse what no real test,
// apparatus or clock produces, and catch a unit keyed wrong; they are far
// wider than any specification, which the project's own specs and local
// codes govern.
const (
	// MinDensity and MaxDensity bound a soil's wet (bulk) density in place,
	// the density a gauge reads and a curve point's dry density, kg/m3.
	// 500 kg/m3 (31 pcf) is below the loosest dry granular soil; no
	// mineral soil placed as fill comes near it. 3500 kg/m3 (218 pcf) is
	// the densest soil solids tamp accepts (specific gravity soil.MaxGs,
	// 3.5) with no voids at all: soil, a mix of solids, water and air,
	// cannot be denser than its solids.
	MinDensity = 500.0
	MaxDensity = soil.MaxGs * 1000
	// MaxWaterPerVolume bounds a gauge's mass of water per unit volume,
	// kg/m3: a volume of soil holds at most its own volume of water.
	MaxWaterPerVolume = 1000.0
	// MinSandDensity and MaxSandDensity bound the bulk density of a sand
	// cone's calibrated sand, kg/m3: the clean, dry, uniform sands the
	// method uses pour at about 1300 to 1700 kg/m3.
	MinSandDensity = 1000.0
	MaxSandDensity = 2000.0
	// MaxTestMass bounds each mass of an in-place test's readings, kg; and
	// MaxTestVolume and MaxTestLength its volume readings (m3) and the
	// cylinder's dimensions (m). A field density test digs and weighs a few
	// kilograms from a hole of a few litres, tens with the largest
	// apparatus; these are far above any, and below what grams keyed as
	// kilograms, litres as cubic metres or millimetres as metres give.
	MaxTestMass   = 200.0
	MaxTestVolume = 0.1
	MaxTestLength = 1.0
	// MaxRelativeCompaction bounds a device's reported relative
	// compaction, percent: the densest test over the loosest reference
	// (MaxDensity / MinDensity).
	MaxRelativeCompaction = 100 * MaxDensity / MinDensity
	// MaxTimeAhead is how far a new entry's hybrid time and device time may
	// run ahead of the clock of the replica receiving it. An entry's hybrid
	// time orders it against every other: one far in the future would win
	// every later conflict and pull every replica's clock forward with it.
	// Device clocks are kept within minutes (a skew beyond the project's
	// limit is flagged); a day allows a clock set to the wrong time zone
	// and refuses one set to the wrong day, year or century.
	MaxTimeAhead = 24 * time.Hour
)

// MinWallTime is the earliest hybrid time and device time of a new entry:
// no tamp device made an entry before 2000, and a clock that reads earlier
// has been reset to its epoch (1970 for most devices) by a flat battery or
// a factory reset.
var MinWallTime = time.Date(2000, 1, 1, 0, 0, 0, 0, time.UTC)

// Admit checks what an entry offered to a ledger must satisfy beyond
// Validate: that its signed body holds only fields and enum values this
// version of tamp knows and only finite numbers, and that its values lie
// within the bounds of this file. A device runs it (through Seal) when it
// makes an entry, and the server on every pushed entry it does not hold
// yet, with CheckAhead against its own clock. Errors are *Rejection values
// naming the field and the rule: UnknownKind for what only a newer version
// can read, InvalidField or ImpossibleReadings for a value out of bounds.
//
// Events already held in a ledger are read with Validate alone (Open,
// Projection.Apply), and a push of one is answered "already present":
// a signed history cannot be changed, so a bound added later applies to new
// entries and never makes a stored ledger unreadable.
func Admit(s Signed) error {
	return admit(s.Event, s.Body)
}

func admit(e Event, body []byte) error {
	if r := checkWire(body, bodyDescriptor); r != nil {
		r.Field = entryField(r.Field)
		return r
	}
	return checkBounds(e)
}

var (
	bodyDescriptor = (&pb.EventBody{}).ProtoReflect().Descriptor()
	kinds          = bodyDescriptor.Oneofs().ByName("kind").Fields()
)

// entryField names a field of the body as the entry's own: without the
// event kind, and without a test's "content".
func entryField(path string) string {
	if kind, rest, ok := strings.Cut(path, "."); ok && kinds.ByName(protoreflect.Name(kind)) != nil {
		path = rest
	}
	return strings.TrimPrefix(path, "content.")
}

// checkWire refuses, anywhere in the encoded message b of descriptor md,
// a field this version does not know (or one encoded as another type,
// which decoding keeps as unknown), an enum value it does not define and a
// number that is not finite, naming the field within the message. It reads
// the encoding as it is, allocating nothing unless it refuses.
func checkWire(b []byte, md protoreflect.MessageDescriptor) *Rejection {
	for off := 0; off < len(b); {
		num, typ, n := protowire.ConsumeTag(b[off:])
		if n < 0 {
			return reject(Malformed, "", "the event body does not decode")
		}
		at := off
		off += n
		m := protowire.ConsumeFieldValue(num, typ, b[off:])
		if m < 0 {
			return reject(Malformed, "", "the event body does not decode")
		}
		v := b[off : off+m]
		off += m
		fd := md.Fields().ByNumber(num)
		if fd == nil || !wireFits(fd, typ) {
			return reject(UnknownKind, "#"+strconv.Itoa(int(num)), fmt.Sprintf(
				"the entry holds field number %d (%d bytes), which this version of tamp does not know: it was made by a newer "+
					"version, and this one cannot check or grade what it cannot read (upgrade the server before the devices)", num, m))
		}
		if r := checkWireValue(fd, typ, v); r != nil {
			r.Field = join(wireName(b[:at], fd), r.Field)
			return r
		}
	}
	return nil
}

// wireFits reports whether a field of fd's kind may be encoded as typ.
func wireFits(fd protoreflect.FieldDescriptor, typ protowire.Type) bool {
	want := protowire.VarintType
	switch fd.Kind() {
	case protoreflect.MessageKind, protoreflect.StringKind, protoreflect.BytesKind:
		want = protowire.BytesType
	case protoreflect.GroupKind:
		want = protowire.StartGroupType
	case protoreflect.DoubleKind, protoreflect.Fixed64Kind, protoreflect.Sfixed64Kind:
		want = protowire.Fixed64Type
	case protoreflect.FloatKind, protoreflect.Fixed32Kind, protoreflect.Sfixed32Kind:
		want = protowire.Fixed32Type
	}
	return typ == want || fd.IsList() && want != protowire.BytesType && want != protowire.StartGroupType && typ == protowire.BytesType
}

// checkWireValue checks one encoded value v of field fd; the field of a
// rejection is relative to fd.
func checkWireValue(fd protoreflect.FieldDescriptor, typ protowire.Type, v []byte) *Rejection {
	switch fd.Kind() {
	case protoreflect.MessageKind:
		inner, _ := protowire.ConsumeBytes(v)
		return checkWire(inner, fd.Message())
	case protoreflect.DoubleKind, protoreflect.FloatKind, protoreflect.EnumKind:
	default:
		return nil
	}
	if typ == protowire.BytesType { // packed
		v, _ = protowire.ConsumeBytes(v)
	}
	for len(v) > 0 {
		var n int
		switch fd.Kind() {
		case protoreflect.DoubleKind:
			var x uint64
			x, n = protowire.ConsumeFixed64(v)
			if f := math.Float64frombits(x); n > 0 && (math.IsNaN(f) || math.IsInf(f, 0)) {
				return reject(InvalidField, "", fmt.Sprintf("must be a finite number, not %v", f))
			}
		case protoreflect.FloatKind:
			var x uint32
			x, n = protowire.ConsumeFixed32(v)
			if f := float64(math.Float32frombits(x)); n > 0 && (math.IsNaN(f) || math.IsInf(f, 0)) {
				return reject(InvalidField, "", fmt.Sprintf("must be a finite number, not %v", f))
			}
		case protoreflect.EnumKind:
			var x uint64
			x, n = protowire.ConsumeVarint(v)
			if n > 0 && fd.Enum().Values().ByNumber(protoreflect.EnumNumber(int32(x))) == nil {
				return reject(UnknownKind, "", fmt.Sprintf("value %d is not one this version of tamp knows: the entry was made by a newer version "+
					"(upgrade the server before the devices)", int32(x)))
			}
		}
		if n < 0 {
			return reject(Malformed, "", "the event body does not decode")
		}
		v = v[n:]
	}
	return nil
}

// wireName names field fd of the message whose encoding before it is
// before, with its index when it is repeated.
func wireName(before []byte, fd protoreflect.FieldDescriptor) string {
	name := string(fd.Name())
	if !fd.IsList() {
		return name
	}
	i := 0
	for len(before) > 0 {
		num, typ, n := protowire.ConsumeTag(before)
		if n < 0 {
			break
		}
		m := protowire.ConsumeFieldValue(num, typ, before[n:])
		if m < 0 {
			break
		}
		if num == fd.Number() {
			i++
		}
		before = before[n+m:]
	}
	return fmt.Sprintf("%s[%d]", name, i)
}

func join(path, name string) string {
	switch {
	case path == "":
		return name
	case name == "":
		return path
	}
	return path + "." + name
}

// CheckAhead refuses an entry whose hybrid time or device time is more
// than MaxTimeAhead after now, the receiving replica's clock. Stored
// entries are never checked again: it is for admission only.
func CheckAhead(e Event, now time.Time) error {
	limit := now.Add(MaxTimeAhead)
	if hlc := time.UnixMicro(e.HLC.Wall).UTC(); hlc.After(limit) {
		return reject(InvalidField, "hlc", fmt.Sprintf("%s is %s ahead of this server's clock (%s); at most %s is accepted: "+
			"the clock of the device that made it (or of one it synced with) is wrong", hlc.Format(time.RFC3339), ahead(hlc, now),
			now.UTC().Format(time.RFC3339), MaxTimeAhead))
	}
	if dt := e.DeviceTime.UTC(); dt.After(limit) {
		return reject(InvalidField, "device_time", fmt.Sprintf("%s is %s ahead of this server's clock (%s); at most %s is accepted: "+
			"the device's clock is wrong", dt.Format(time.RFC3339), ahead(dt, now), now.UTC().Format(time.RFC3339), MaxTimeAhead))
	}
	return nil
}

// ahead says how far t is after now, in the largest unit that fits.
func ahead(t, now time.Time) string {
	d := t.Sub(now)
	if t.Year()-now.Year() > 1 || d < 0 { // d overflows for centuries
		return fmt.Sprintf("%d years", t.Year()-now.Year())
	}
	if d >= 48*time.Hour {
		return fmt.Sprintf("%d days", int(d/(24*time.Hour)))
	}
	return d.Round(time.Minute).String()
}

// checkBounds checks e's values against the bounds of this file.
func checkBounds(e Event) error {
	if r := checkWall("hlc", time.UnixMicro(e.HLC.Wall)); r != nil {
		return r
	}
	if r := checkWall("device_time", e.DeviceTime); r != nil {
		return r
	}
	switch k := e.Kind.(type) {
	case *ReferenceAdded:
		for i, p := range k.Points {
			if r := inRange(ImpossibleReadings, fmt.Sprintf("points[%d].dry_density", i), p.DryDensity, MinDensity, MaxDensity, "kg/m3", densityWhy); r != nil {
				return r
			}
		}
	case *MoistureCorrectionSet:
		for i, p := range k.Pairs {
			if r := first(inRange(ImpossibleReadings, fmt.Sprintf("pairs[%d].gauge", i), p.Gauge, 0, soil.MaxMoisture, "%", moistureWhy),
				inRange(ImpossibleReadings, fmt.Sprintf("pairs[%d].oven", i), p.Oven, 0, soil.MaxMoisture, "%", moistureWhy)); r != nil {
				return r
			}
		}
	case *BorrowSourceMeasured:
		for i, t := range k.BankTests {
			if r := checkReadings(fmt.Sprintf("bank_tests[%d].", i), t); r != nil {
				return r
			}
		}
		if k.LooseDryDensity != 0 {
			return inRangeErr(ImpossibleReadings, "loose_dry_density", k.LooseDryDensity, MinDensity, MaxDensity, "kg/m3", densityWhy)
		}
	case *TestRecorded:
		return checkContent(k.Content)
	case *TestCorrected:
		return checkContent(k.Content)
	}
	return nil
}

const (
	densityWhy  = "no soil is looser than 500 kg/m3 or denser than its solids (specific gravity at most 3.5)"
	moistureWhy = "soil placed as fill holds less water than its own dry mass"
	massWhy     = "far above any field density test; a unit keyed wrong?"
)

func checkWall(field string, t time.Time) *Rejection {
	if t.Before(MinWallTime) {
		return reject(InvalidField, field, fmt.Sprintf("%s is before %s: the device's clock is wrong (reset to its epoch); set it and record the entry again",
			t.UTC().Format(time.RFC3339), MinWallTime.Format(time.DateOnly)))
	}
	return nil
}

// inRange returns a rejection of reason unless lo <= v <= hi.
func inRange(reason Reason, field string, v, lo, hi float64, unit, why string) *Rejection {
	if v >= lo && v <= hi {
		return nil
	}
	f := func(x float64) string { return strconv.FormatFloat(x, 'g', -1, 64) }
	return reject(reason, field, fmt.Sprintf("%s %s is outside %s to %s %s: %s", f(v), unit, f(lo), f(hi), unit, why))
}

// inRangeErr is inRange as an error (nil when in range).
func inRangeErr(reason Reason, field string, v, lo, hi float64, unit, why string) error {
	if r := inRange(reason, field, v, lo, hi, unit, why); r != nil {
		return r
	}
	return nil
}

func checkContent(c TestContent) error {
	if r := checkReadings("readings.", c.Readings); r != nil {
		return r
	}
	d := c.DeviceResults
	if d == nil {
		return nil
	}
	// A device's results are checked against its readings on every replica
	// (a disagreement is flagged); here only what no computation gives is
	// refused. Zero is a value not computed.
	density := func(field string, v, lo float64) *Rejection {
		if v == 0 {
			return nil
		}
		return inRange(ImpossibleReadings, "device_results."+field, v, lo, MaxDensity, "kg/m3", densityWhy)
	}
	moisture := func(field string, v, lo float64, unit string) *Rejection {
		return inRange(ImpossibleReadings, "device_results."+field, v, lo, soil.MaxMoisture, unit, moistureWhy)
	}
	if r := first(density("wet_density", d.WetDensity, MinDensity),
		density("dry_density", d.DryDensity, MinDensity/2), // at most 100 % moisture: at least half the wet density
		density("max_dry_density", d.MaxDryDensity, MinDensity),
		moisture("moisture", d.Moisture, 0, "%"), moisture("optimum_moisture", d.OptimumMoisture, 0, "%"),
		moisture("moisture_deviation", d.MoistureDeviation, -soil.MaxMoisture, "points"),
		inRange(ImpossibleReadings, "device_results.relative_compaction", d.RelativeCompaction, 0, MaxRelativeCompaction, "%",
			"no test is denser than the densest soil over the loosest reference")); r != nil {
		return r
	}
	return nil
}

func first(rs ...*Rejection) *Rejection {
	for _, r := range rs {
		if r != nil {
			return r
		}
	}
	return nil
}

// checkReadings checks a test's readings against the bounds, naming the
// fields after prefix.
func checkReadings(prefix string, r Readings) *Rejection {
	mass := func(field string, v float64) *Rejection {
		return inRange(ImpossibleReadings, prefix+field, v, 0, MaxTestMass, "kg", massWhy)
	}
	var wet float64
	switch {
	case r.Nuclear != nil:
		for i, c := range r.Nuclear.Counts {
			if x := first(inRange(ImpossibleReadings, fmt.Sprintf("%scounts[%d].wet_density", prefix, i), c.WetDensity, MinDensity, MaxDensity, "kg/m3", densityWhy),
				inRange(ImpossibleReadings, fmt.Sprintf("%scounts[%d].water_per_volume", prefix, i), c.WaterPerVolume, 0, MaxWaterPerVolume, "kg/m3",
					"a volume of soil holds at most its own volume of water")); x != nil {
				return x
			}
		}
		return nil
	case r.SandCone != nil:
		s := r.SandCone
		if x := first(inRange(ImpossibleReadings, prefix+"sand_density", s.SandDensity, MinSandDensity, MaxSandDensity, "kg/m3",
			"a calibrated sand pours at about 1300 to 1700 kg/m3"),
			mass("initial_mass", s.InitialMass), mass("final_mass", s.FinalMass), mass("sand_used", s.SandUsed),
			mass("cone_correction", s.ConeCorrection), mass("soil_mass", s.SoilMass)); x != nil {
			return x
		}
		in, err := s.Densities()
		if err != nil {
			return nil // Validate refuses it
		}
		wet = in.WetDensity
	case r.DriveCylinder != nil:
		d := r.DriveCylinder
		length := func(field string, v float64) *Rejection {
			return inRange(ImpossibleReadings, prefix+field, v, 0, MaxTestLength, "m", massWhy)
		}
		if x := first(length("diameter", d.Diameter), length("length", d.Length), mass("soil_mass", d.SoilMass)); x != nil {
			return x
		}
		in, err := d.Densities()
		if err != nil {
			return nil
		}
		wet = in.WetDensity
	case r.RubberBalloon != nil:
		b := r.RubberBalloon
		volume := func(field string, v float64) *Rejection {
			return inRange(ImpossibleReadings, prefix+field, v, 0, MaxTestVolume, "m3", massWhy)
		}
		if x := first(volume("initial_reading", b.InitialReading), volume("final_reading", b.FinalReading), mass("soil_mass", b.SoilMass)); x != nil {
			return x
		}
		in, err := b.Densities()
		if err != nil {
			return nil
		}
		wet = in.WetDensity
	case r.WetDensity != nil:
		wet = r.WetDensity.WetDensity
	default:
		return nil
	}
	return inRange(ImpossibleReadings, prefix+"wet_density", wet, MinDensity, MaxDensity, "kg/m3", densityWhy)
}
