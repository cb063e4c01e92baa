package ledger

import (
	"hash/maphash"
	"math"
	"sync/atomic"
	"time"
	"unicode/utf8"

	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/qc"
	"tamp/internal/soil"
)

// Every replica decodes every event it stores or pulls, and the kinds that
// make up a project (tests recorded, corrected and reviewed) are read here
// straight from the wire, without the generated messages proto.Unmarshal
// builds by reflection. Whatever this file is not sure to read exactly as
// proto.Unmarshal and FromProto would goes through them instead.

// decodeEvent decodes an event body. A body that does not decode is a
// Malformed *Rejection; a body of no known kind is FromProto's UnknownKind
// *Rejection.
func decodeEvent(body []byte) (Event, error) {
	if e, ok := decodeBody(body); ok {
		return e, nil
	}
	var m pb.EventBody
	if err := proto.Unmarshal(body, &m); err != nil {
		return Event{}, &Rejection{Reason: Malformed, Field: "body", Detail: "the event body does not decode", Err: err}
	}
	return FromProto(&m)
}

// decodeBody decodes a body of kind test_recorded, test_corrected or
// test_reviewed into the Event proto.Unmarshal and FromProto give. It
// returns ok false, leaving the body to them, for any other kind and for
// anything they might read otherwise or refuse: a field this version does
// not know, a wire type other than the field's, a singular field or a
// message met twice (which they would overwrite or merge), two members of a
// oneof, a string that is not UTF-8, a malformed tag, varint or length.
func decodeBody(b []byte) (Event, bool) {
	var e Event
	var wall int64
	m := wireMsg{b: b}
	for m.next() {
		switch m.num {
		case 1:
			e.ID = m.str()
		case 2:
			e.Project = m.istr()
		case 3:
			e.Author = m.istr()
		case 4:
			e.Device = m.istr()
		case 5:
			e.DeviceSeq = m.varint()
		case 6:
			m.check(decodeHLC(m.msg(), &e.HLC))
		case 7:
			wall = int64(m.varint())
		case 8:
			e.PrevDeviceSeq = m.varint()
		case 9:
			e.ResignedFrom = m.str()
		case 25, 26, 28: // members of the oneof kind
			p := m.msg()
			if e.Kind != nil {
				m.fail()
				break
			}
			var ok bool
			switch m.num {
			case 25:
				e.Kind, ok = decodeTestRecorded(p)
			case 26:
				e.Kind, ok = decodeTestCorrected(p)
			default:
				e.Kind, ok = decodeTestReviewed(p)
			}
			m.check(ok)
		default:
			m.fail()
		}
	}
	if !m.done() || e.Kind == nil {
		return Event{}, false
	}
	e.DeviceTime = time.UnixMicro(wall).UTC()
	return e, true
}

// wireMsg reads the fields of one message in order. Each accessor reads
// the current field's value and records a fault when the field breaks a
// rule decodeBody keeps; once faulted, next stops.
type wireMsg struct {
	b    []byte
	num  protowire.Number
	typ  protowire.Type
	seen uint64 // the singular fields met, by number
	bad  bool
}

// next moves to the next field; false at the end and after a fault.
func (m *wireMsg) next() bool {
	if m.bad || len(m.b) == 0 {
		return false
	}
	if c := m.b[0]; c < 0x80 && c >= 8 { // a one-byte tag of a field numbered 1 to 15
		m.b, m.num, m.typ = m.b[1:], protowire.Number(c>>3), protowire.Type(c&7)
		return true
	}
	num, typ, n := protowire.ConsumeTag(m.b)
	if n < 0 || num >= 64 { // every field read here is numbered below 64
		m.bad = true
		return false
	}
	m.b, m.num, m.typ = m.b[n:], num, typ
	return true
}

func (m *wireMsg) fail() { m.bad = true }

// check records a fault when a nested message did not decode.
func (m *wireMsg) check(ok bool) {
	if !ok {
		m.bad = true
	}
}

// done reports whether the whole message was read without a fault.
func (m *wireMsg) done() bool { return !m.bad && len(m.b) == 0 }

// once reports whether the current field, a singular one, is met for the
// first time and has wire type typ, and records a fault when not.
func (m *wireMsg) once(typ protowire.Type) bool {
	bit := uint64(1) << m.num
	if m.bad || m.typ != typ || m.seen&bit != 0 {
		m.bad = true
		return false
	}
	m.seen |= bit
	return true
}

func (m *wireMsg) varint() uint64 {
	if !m.once(protowire.VarintType) {
		return 0
	}
	v, n := protowire.ConsumeVarint(m.b)
	if n < 0 {
		m.bad = true
		return 0
	}
	m.b = m.b[n:]
	return v
}

func (m *wireMsg) double() float64 {
	if !m.once(protowire.Fixed64Type) {
		return 0
	}
	v, n := protowire.ConsumeFixed64(m.b)
	if n < 0 {
		m.bad = true
		return 0
	}
	m.b = m.b[n:]
	return math.Float64frombits(v)
}

// payload returns a length-delimited field's bytes, of a repeated field
// (which may occur any number of times) or a singular one.
func (m *wireMsg) payload(repeated bool) []byte {
	if repeated {
		if m.bad || m.typ != protowire.BytesType {
			m.bad = true
			return nil
		}
	} else if !m.once(protowire.BytesType) {
		return nil
	}
	if len(m.b) > 0 && m.b[0] < 0x80 { // a length below 128
		n := 1 + int(m.b[0])
		if n > len(m.b) {
			m.bad = true
			return nil
		}
		v := m.b[1:n]
		m.b = m.b[n:]
		return v
	}
	v, n := protowire.ConsumeBytes(m.b)
	if n < 0 {
		m.bad = true
		return nil
	}
	m.b = m.b[n:]
	return v
}

// msg returns the bytes of a singular message field.
func (m *wireMsg) msg() []byte { return m.payload(false) }

// str returns a string field, which proto3 requires to be UTF-8.
func (m *wireMsg) str() string {
	v := m.payload(false)
	if !utf8.Valid(v) {
		m.bad = true
		return ""
	}
	return string(v)
}

// istr returns a string field as intern gives it.
func (m *wireMsg) istr() string {
	v := m.payload(false)
	if !utf8.Valid(v) {
		m.bad = true
		return ""
	}
	return internBytes(v)
}

// interned holds strings intern returned lately, in the set of two slots
// a hash of their bytes picks, the latest first: a project's events name
// the same few projects, authors, devices, specs, references and features
// over and over, and a string found here costs neither the allocation of
// string(b) nor intern's lookup. Slots are read and written one at a time,
// so goroutines racing on a set may lose an entry, never return a wrong one.
var interned struct {
	seed  maphash.Seed
	slots [512]atomic.Pointer[string]
}

func init() { interned.seed = maphash.MakeSeed() }

// internBytes returns intern(string(b)).
func internBytes(b []byte) string {
	if len(b) == 0 {
		return ""
	}
	set := interned.slots[2*(maphash.Bytes(interned.seed, b)%(uint64(len(interned.slots))/2)):][:2]
	first := set[0].Load()
	if first != nil && *first == string(b) {
		return *first
	}
	if p := set[1].Load(); p != nil && *p == string(b) {
		return *p
	}
	s := intern(string(b))
	set[1].Store(first)
	set[0].Store(&s)
	return s
}

// doubleAt reads the current field into dst[num-1] when its number is
// 1 to len(dst): a message whose first fields are doubles. It reports
// whether the field was one of them.
func (m *wireMsg) doubleAt(dst ...*float64) bool {
	if m.num < 1 || int(m.num) > len(dst) {
		return false
	}
	*dst[m.num-1] = m.double()
	return true
}

// doubles decodes a message of doubles only, numbered 1, 2, ... in the
// order of dst.
func doubles(b []byte, dst ...*float64) bool {
	m := wireMsg{b: b}
	for m.next() {
		if !m.doubleAt(dst...) {
			m.fail()
		}
	}
	return m.done()
}

func decodeHLC(b []byte, h *HLC) bool {
	m := wireMsg{b: b}
	for m.next() {
		switch m.num {
		case 1:
			h.Wall = int64(m.varint())
		case 2:
			h.Logical = uint32(m.varint())
		default:
			m.fail()
		}
	}
	return m.done()
}

func decodeTestRecorded(b []byte) (Kind, bool) {
	k := &TestRecorded{}
	m := wireMsg{b: b}
	for m.next() {
		switch m.num {
		case 1:
			k.TestID = m.str()
		case 2:
			m.check(decodeContent(m.msg(), &k.Content))
		case 3:
			k.RetestOf = m.str()
		default:
			m.fail()
		}
	}
	return k, m.done()
}

func decodeTestCorrected(b []byte) (Kind, bool) {
	k := &TestCorrected{}
	m := wireMsg{b: b}
	for m.next() {
		switch m.num {
		case 1:
			k.TestID = m.str()
		case 2:
			k.Supersedes = m.str()
		case 3:
			k.Reason = m.str()
		case 4:
			m.check(decodeContent(m.msg(), &k.Content))
		default:
			m.fail()
		}
	}
	return k, m.done()
}

func decodeTestReviewed(b []byte) (Kind, bool) {
	k := &TestReviewed{}
	m := wireMsg{b: b}
	for m.next() {
		switch m.num {
		case 1:
			k.TestID = m.str()
		case 2:
			k.Revision = m.str()
		case 3:
			k.Decision = Decision(int32(m.varint())) // an enum is an int32 on the wire
		case 4:
			k.Comment = m.str()
		default:
			m.fail()
		}
	}
	return k, m.done()
}

func decodeContent(b []byte, c *TestContent) bool {
	m := wireMsg{b: b}
	for m.next() {
		switch m.num {
		case 1:
			m.check(decodeReadings(m.msg(), &c.Readings))
		case 2:
			m.check(decodeLocation(m.msg(), &c.Location))
		case 3:
			c.PlacementID = m.istr()
		case 4:
			c.Feature = m.istr()
		case 5:
			c.LiftNumber = uint32(m.varint())
		case 6:
			c.LiftThickness = m.double()
		case 7:
			c.ReferenceID = m.istr()
		case 8:
			c.SpecID = m.istr()
		case 9:
			c.EquipmentID = m.istr()
		case 10:
			o := &soil.Oversize{}
			m.check(doubles(m.msg(), &o.Percent, &o.BulkGs, &o.Moisture))
			c.Oversize = o
		case 11:
			c.Remarks = m.str()
		case 12:
			r := &Results{}
			m.check(decodeResults(m.msg(), r))
			c.DeviceResults = r
		default:
			m.fail()
		}
	}
	return m.done()
}

// decodeReadings reads the oneof method: one member, met once.
func decodeReadings(b []byte, r *Readings) bool {
	set := false
	m := wireMsg{b: b}
	for m.next() {
		if set {
			return false
		}
		set = true
		p := m.msg()
		switch m.num {
		case 1:
			n := &NuclearReadings{}
			m.check(decodeNuclear(p, n))
			r.Nuclear = n
		case 2:
			s := &soil.SandCone{}
			m.check(doubles(p, &s.SandDensity, &s.InitialMass, &s.FinalMass, &s.SandUsed, &s.ConeCorrection, &s.SoilMass, &s.Moisture))
			r.SandCone = s
		case 3:
			d := &soil.DriveCylinder{}
			m.check(doubles(p, &d.Diameter, &d.Length, &d.SoilMass, &d.Moisture))
			r.DriveCylinder = d
		case 4:
			rb := &soil.RubberBalloon{}
			m.check(doubles(p, &rb.InitialReading, &rb.FinalReading, &rb.SoilMass, &rb.Moisture))
			r.RubberBalloon = rb
		case 5:
			w := &soil.WetDensityTest{}
			m.check(doubles(p, &w.WetDensity, &w.Moisture))
			r.WetDensity = w
		default:
			m.fail()
		}
	}
	return m.done()
}

func decodeNuclear(b []byte, n *NuclearReadings) bool {
	m := wireMsg{b: b}
	for m.next() {
		switch m.num {
		case 1:
			n.Backscatter = m.varint() != 0
		case 2:
			n.ProbeDepth = m.double()
		case 3:
			var c soil.NuclearReading
			m.check(doubles(m.payload(true), &c.WetDensity, &c.WaterPerVolume))
			n.Counts = append(n.Counts, c)
		case 4:
			n.Agreement = m.double()
		case 5:
			n.CorrectionID = m.str()
		case 6:
			w := m.double()
			n.OvenMoisture = &w
		default:
			m.fail()
		}
	}
	return m.done()
}

func decodeLocation(b []byte, l *Location) bool {
	m := wireMsg{b: b}
	for m.next() {
		if m.doubleAt(&l.Station, &l.Offset, &l.Elevation) {
			continue
		}
		switch m.num {
		case 4:
			p := &GeoPosition{}
			m.check(doubles(m.msg(), &p.Latitude, &p.Longitude, &p.Accuracy))
			l.Position = p
		case 5:
			l.Description = m.str()
		default:
			m.fail()
		}
	}
	return m.done()
}

func decodeResults(b []byte, r *Results) bool {
	m := wireMsg{b: b}
	for m.next() {
		if m.doubleAt(&r.WetDensity, &r.DryDensity, &r.Moisture, &r.MaxDryDensity, &r.OptimumMoisture,
			&r.RelativeCompaction, &r.MoistureDeviation) {
			continue
		}
		switch m.num {
		case 8:
			r.Verdict = VerdictFromProto(pb.Verdict(int32(m.varint())))
		case 9, 10:
			var f qc.Finding
			m.check(decodeFinding(m.payload(true), &f))
			if m.num == 9 {
				r.Reasons = append(r.Reasons, f)
			} else {
				r.Flags = append(r.Flags, f)
			}
		default:
			m.fail()
		}
	}
	return m.done()
}

func decodeFinding(b []byte, f *qc.Finding) bool {
	m := wireMsg{b: b}
	for m.next() {
		switch m.num {
		case 1:
			f.Code = m.str()
		case 2:
			f.Message = m.str()
		default:
			m.fail()
		}
	}
	return m.done()
}
