package ledger

import (
	"crypto/ed25519"
	"errors"
	"fmt"
	"strings"
	"time"

	"github.com/google/uuid"

	"tamp/internal/qc"
	"tamp/internal/soil"
	"tamp/internal/valid"
)

// Validate checks that an event is whole and its values possible. It does
// not look at other events: references to records are checked by the
// projection. Errors are *Rejection values with InvalidField or
// ImpossibleReadings.
func Validate(e Event) error {
	if err := checkID("event_id", e.ID, true); err != nil {
		return err
	}
	if err := checkID("project_id", e.Project, false); err != nil {
		return err
	}
	switch {
	case strings.TrimSpace(e.Author) == "":
		return reject(InvalidField, "author_id", "is required")
	case strings.TrimSpace(e.Device) == "":
		return reject(InvalidField, "device_id", "is required")
	case e.DeviceSeq == 0:
		return reject(InvalidField, "device_seq", "must count from 1")
	case e.PrevDeviceSeq >= e.DeviceSeq:
		return reject(InvalidField, "prev_device_seq", "must be below device_seq: it names the device's previous entry in the project")
	case e.HLC.Wall <= 0:
		return reject(InvalidField, "hlc", "must be set")
	}
	if e.Kind == nil {
		return reject(UnknownKind, "kind", "the event holds no kind")
	}
	d := descriptorOf(e.Kind)
	if d == nil {
		return reject(UnknownKind, "kind", fmt.Sprintf("unknown event kind %T", e.Kind))
	}
	return d.validate(e.Kind)
}

func (k *TestRecorded) validate() error {
	if err := checkID("test_id", k.TestID, false); err != nil {
		return err
	}
	if err := optionalID("retest_of", k.RetestOf); err != nil {
		return err
	}
	if k.RetestOf == k.TestID {
		return reject(InvalidField, "retest_of", "a test cannot retest itself")
	}
	return k.Content.validate()
}

func (k *TestCorrected) validate() error {
	if err := firstErr(checkID("test_id", k.TestID, false), checkID("supersedes", k.Supersedes, true), required("reason", k.Reason)); err != nil {
		return err
	}
	return k.Content.validate()
}

func (k *TestVoided) validate() error {
	return firstErr(checkID("test_id", k.TestID, false), required("reason", k.Reason))
}

func (k *TestReviewed) validate() error {
	if err := firstErr(checkID("test_id", k.TestID, false), checkID("revision", k.Revision, true)); err != nil {
		return err
	}
	switch k.Decision {
	case Approve:
	case Return:
		if err := required("comment", k.Comment); err != nil {
			return reject(InvalidField, "comment", "is required when a test is returned")
		}
	default:
		return reject(InvalidField, "decision", "must be approve or return")
	}
	return nil
}

func (k *ExceptionAccepted) validate() error {
	return firstErr(checkID("test_id", k.TestID, false), checkID("revision", k.Revision, true), required("reason", k.Reason))
}

func (k *DeviceEnrolled) validate() error {
	if err := firstErr(checkID("device_id", k.DeviceID, false), required("user_id", k.UserID)); err != nil {
		return err
	}
	if len(k.PublicKey) != ed25519.PublicKeySize {
		return reject(InvalidField, "public_key", "must be a 32-byte Ed25519 key")
	}
	return nil
}

func (k *DeviceRevoked) validate() error {
	if err := checkID("device_id", k.DeviceID, false); err != nil {
		return err
	}
	if k.Effective.UnixMicro() <= 0 {
		return reject(InvalidField, "effective_micros", "is required")
	}
	return nil
}

func firstErr(errs ...*Rejection) error {
	for _, err := range errs {
		if err != nil {
			return err
		}
	}
	return nil
}

func required(field, v string) *Rejection {
	if strings.TrimSpace(v) == "" {
		return reject(InvalidField, field, "is required")
	}
	return nil
}

// checkID checks a UUID; v7 requires a time-ordered UUIDv7.
func checkID(field, id string, v7 bool) *Rejection {
	u, err := uuid.Parse(id)
	if err != nil || len(id) != 36 {
		return reject(InvalidField, field, fmt.Sprintf("must be a UUID, not %q", id))
	}
	if v7 && u.Version() != 7 {
		return reject(InvalidField, field, fmt.Sprintf("must be a UUIDv7, not version %d", u.Version()))
	}
	return nil
}

func optionalID(field, id string) *Rejection {
	if id == "" {
		return nil
	}
	return checkID(field, id, false)
}

func checkDate(field, d string, needed bool) *Rejection {
	if d == "" && !needed {
		return nil
	}
	if _, err := time.Parse(time.DateOnly, d); err != nil {
		return reject(InvalidField, field, fmt.Sprintf("must be a date YYYY-MM-DD, not %q", d))
	}
	return nil
}

// fieldErr turns an arithmetic package's error into a rejection.
func fieldErr(reason Reason, prefix string, err error) error {
	if err == nil {
		return nil
	}
	var fe *valid.FieldError
	if errors.As(err, &fe) {
		return &Rejection{Reason: reason, Field: prefix + fe.Field, Detail: fe.Rule, Err: err}
	}
	return &Rejection{Reason: reason, Field: prefix, Detail: err.Error(), Err: err}
}

func (k *ProjectSetUp) validate() error {
	if err := required("name", k.Name); err != nil {
		return err
	}
	if k.Units != soil.US && k.Units != soil.SI {
		return reject(InvalidField, "units", "must be us or si")
	}
	if k.WaterDensity != 0 {
		if err := valid.Range("water_density", k.WaterDensity, 950, 1010, " kg/m3"); err != nil {
			return fieldErr(InvalidField, "", err)
		}
	}
	if k.ClockSkewLimit < 0 {
		return reject(InvalidField, "clock_skew_limit_seconds", "must not be negative")
	}
	if k.TimeZone != "" {
		if _, err := time.LoadLocation(k.TimeZone); err != nil {
			return reject(InvalidField, "time_zone", fmt.Sprintf("must be an IANA time zone name, not %q", k.TimeZone))
		}
	}
	if k.RetestWithin < 0 {
		return reject(InvalidField, "retest_within_seconds", "must not be negative")
	}
	if err := valid.NonNegative("retest_distance", k.RetestDistance); err != nil {
		return fieldErr(InvalidField, "", err)
	}
	seen := map[string]bool{}
	for i, f := range k.Features {
		prefix := fmt.Sprintf("features[%d].", i)
		if err := firstErr(required(prefix+"feature", f.Feature), optionalID(prefix+"borrow_source_id", f.BorrowSourceID)); err != nil {
			return err
		}
		if seen[f.Feature] {
			return reject(InvalidField, prefix+"feature", fmt.Sprintf("%q is designed twice; give each feature once", f.Feature))
		}
		seen[f.Feature] = true
		if err := valid.First(valid.Positive("design_volume", f.DesignVolume),
			valid.Range("design_shrinkage_percent", f.DesignShrinkagePercent, 0, 99, " %")); err != nil {
			return fieldErr(InvalidField, prefix, err)
		}
	}
	return nil
}

func (k *SpecDefined) validate() error {
	if err := firstErr(checkID("spec_id", k.ID, false), required("name", k.Name)); err != nil {
		return err
	}
	_, err := k.Spec()
	if err != nil {
		return fieldErr(InvalidField, "", err)
	}
	return fieldErr(InvalidField, "", valid.First(valid.NonNegative("suspect_compaction", k.SuspectCompaction),
		valid.NonNegative("volume_per_test", k.VolumePerTest), valid.NonNegative("area_per_test", k.AreaPerTest),
		valid.NonNegative("length_per_test", k.LengthPerTest), valid.Range("lot_acceptance_pwl", k.LotAcceptancePWL, 0, 100, " %")))
}

// Spec returns the qc.Spec the definition describes.
func (k *SpecDefined) Spec() (qc.Spec, error) {
	s := qc.Spec{Name: k.Name, MoistureBasis: k.MoistureBasis, SuspectCompaction: k.SuspectCompaction}
	for _, l := range []struct {
		field, text string
		dst         **qc.Limit
	}{{"min_compaction", k.MinCompaction, &s.MinCompaction}, {"moisture_low", k.MoistureLow, &s.MoistureLow}, {"moisture_high", k.MoistureHigh, &s.MoistureHigh}} {
		if l.text == "" {
			continue
		}
		v, err := qc.ParseLimit(l.field, l.text)
		if err != nil {
			return qc.Spec{}, err
		}
		*l.dst = &v
	}
	if s.MoistureLow != nil && s.MoistureHigh != nil && s.MoistureLow.Value > s.MoistureHigh.Value {
		return qc.Spec{}, valid.Fail("moisture_high", s.MoistureHigh.Value, "must not be below moisture_low")
	}
	return s, nil
}

func (k *ReferenceAdded) validate() error {
	if err := checkID("reference_id", k.ID, false); err != nil {
		return err
	}
	if _, err := k.Procedure.Scope(); err != nil {
		return fieldErr(InvalidField, "", err)
	}
	if k.Gs != 0 {
		if err := valid.Range("specific_gravity", k.Gs, soil.MinGs, soil.MaxGs, ""); err != nil {
			return fieldErr(InvalidField, "", err)
		}
	}
	if (k.MaxDryDensity == 0) != (k.OptimumMoisture == 0) {
		return reject(InvalidField, "optimum_moisture", "max_dry_density and optimum_moisture are reported together, or both left to the fit")
	}
	if k.MaxDryDensity != 0 {
		if err := valid.First(valid.Range("max_dry_density", k.MaxDryDensity, 500, 3000, " kg/m3"),
			valid.Range("optimum_moisture", k.OptimumMoisture, 0.1, soil.MaxMoisture, " %")); err != nil {
			return fieldErr(ImpossibleReadings, "", err)
		}
	}
	if len(k.Points) == 0 && k.MaxDryDensity == 0 {
		return reject(InvalidField, "points", "a reference needs its curve points or a reported maximum dry density and optimum")
	}
	if len(k.Points) > 0 {
		if _, err := soil.FitCurve(soil.Curve{Procedure: k.Procedure, Points: k.Points}); err != nil {
			return fieldErr(ImpossibleReadings, "", err)
		}
	}
	return nil
}

func (k *EquipmentRegistered) validate() error {
	if err := checkID("equipment_id", k.ID, false); err != nil {
		return err
	}
	if k.Kind < NuclearGauge || k.Kind > Balance {
		return reject(InvalidField, "kind", "must be a known kind of equipment")
	}
	return firstErr(required("serial_number", k.SerialNumber), checkDate("calibration_due", k.CalibrationDue, false))
}

func (k *StandardCountRecorded) validate() error {
	if err := firstErr(checkID("equipment_id", k.EquipmentID, false), checkDate("date", k.Date, true)); err != nil {
		return err
	}
	return fieldErr(InvalidField, "", valid.First(valid.Positive("density_count", k.DensityCount), valid.Positive("moisture_count", k.MoistureCount)))
}

func (k *MoistureCorrectionSet) validate() error {
	if err := firstErr(checkID("correction_id", k.ID, false), checkID("equipment_id", k.EquipmentID, false),
		checkID("reference_id", k.ReferenceID, false)); err != nil {
		return err
	}
	if _, err := k.Correction.Apply(10); err != nil {
		return fieldErr(InvalidField, "", err)
	}
	return nil
}

func (k *BorrowSourceMeasured) validate() error {
	if err := firstErr(checkID("borrow_source_id", k.ID, false), required("name", k.Name), optionalID("reference_id", k.ReferenceID)); err != nil {
		return err
	}
	if len(k.BankTests) == 0 {
		return reject(InvalidField, "bank_tests", "at least one in-place test of the bank is required")
	}
	for i, r := range k.BankTests {
		if _, err := r.densities(nil); err != nil {
			return prefixed(err, fmt.Sprintf("bank_tests[%d].", i))
		}
	}
	return fieldErr(ImpossibleReadings, "", valid.NonNegative("loose_dry_density", k.LooseDryDensity))
}

func prefixed(err error, prefix string) error {
	var r *Rejection
	if errors.As(err, &r) {
		c := *r
		c.Field = prefix + c.Field
		return &c
	}
	return err
}

func (k *LiftPlacementRecorded) validate() error {
	if err := firstErr(checkID("placement_id", k.ID, false), required("feature", k.Feature),
		optionalID("borrow_source_id", k.BorrowSourceID), checkDate("placed_on", k.PlacedOn, false), optionalID("spec_id", k.SpecID)); err != nil {
		return err
	}
	if k.Stations != nil {
		if err := valid.First(valid.Finite("stations.from", k.Stations.From), valid.Finite("stations.to", k.Stations.To)); err != nil {
			return fieldErr(InvalidField, "", err)
		}
		if k.Stations.To < k.Stations.From {
			return reject(InvalidField, "stations.to", "must not be below stations.from")
		}
	}
	return fieldErr(InvalidField, "", valid.First(valid.NonNegative("area", k.Area), valid.Positive("thickness", k.Thickness),
		valid.Positive("compacted_volume", k.CompactedVolume)))
}

func (k *HaulRecorded) validate() error {
	if err := firstErr(checkID("haul_id", k.ID, false), checkID("borrow_source_id", k.BorrowSourceID, false),
		optionalID("placement_id", k.PlacementID), checkDate("hauled_on", k.HauledOn, false)); err != nil {
		return err
	}
	if k.Loads == 0 {
		return reject(InvalidField, "loads", "must be at least one")
	}
	return fieldErr(InvalidField, "", valid.Positive("loose_volume_per_load", k.LooseVolumePerLoad))
}

func (c *TestContent) validate() error {
	if err := firstErr(optionalID("placement_id", c.PlacementID), optionalID("reference_id", c.ReferenceID),
		optionalID("spec_id", c.SpecID), optionalID("equipment_id", c.EquipmentID)); err != nil {
		return err
	}
	if c.Readings.Nuclear != nil {
		if err := optionalID("readings.correction_id", c.Readings.Nuclear.CorrectionID); err != nil {
			return err
		}
	}
	if _, err := c.Readings.densities(nil); err != nil {
		return prefixed(err, "readings.")
	}
	l := c.Location
	if err := valid.First(valid.Finite("location.station", l.Station), valid.Finite("location.offset", l.Offset),
		valid.Finite("location.elevation", l.Elevation), valid.NonNegative("lift_thickness", c.LiftThickness)); err != nil {
		return fieldErr(InvalidField, "", err)
	}
	if p := l.Position; p != nil {
		if err := valid.First(valid.Range("location.position.latitude", p.Latitude, -90, 90, ""),
			valid.Range("location.position.longitude", p.Longitude, -180, 180, ""),
			valid.NonNegative("location.position.accuracy", p.Accuracy)); err != nil {
			return fieldErr(InvalidField, "", err)
		}
	}
	if o := c.Oversize; o != nil && o.Percent != 0 {
		if _, _, err := soil.CorrectForOversize(1800, 12, *o, soil.Water1000); err != nil {
			return fieldErr(ImpossibleReadings, "", err)
		}
	}
	return nil
}

// Compute returns the in-place result of the readings, applying corr when
// the readings name a moisture correction (corr nil: computed as read). It
// returns a *Rejection: InvalidField when no method or more than one is
// set, ImpossibleReadings when the readings break a rule.
func (r Readings) Compute(corr *soil.MoistureCorrection) (soil.InPlace, error) {
	return r.compute(corr, true)
}

// densities is Compute without the steps, for the checks and grades that
// never show them.
func (r Readings) densities(corr *soil.MoistureCorrection) (soil.InPlace, error) {
	return r.compute(corr, false)
}

func (r Readings) compute(corr *soil.MoistureCorrection, steps bool) (soil.InPlace, error) {
	n := 0
	for _, set := range []bool{r.Nuclear != nil, r.SandCone != nil, r.DriveCylinder != nil, r.RubberBalloon != nil, r.WetDensity != nil} {
		if set {
			n++
		}
	}
	if n != 1 {
		return soil.InPlace{}, reject(InvalidField, "method", "exactly one test method's readings are required")
	}
	var res soil.InPlace
	var err error
	switch {
	case r.Nuclear != nil:
		nr := r.Nuclear
		n := soil.Nuclear{Backscatter: nr.Backscatter, ProbeDepth: nr.ProbeDepth, Readings: nr.Counts, Agreement: nr.Agreement,
			Correction: corr, OvenMoisture: nr.OvenMoisture}
		res, err = pick(steps, n.Compute, n.Densities)
	case r.SandCone != nil:
		res, err = pick(steps, r.SandCone.Compute, r.SandCone.Densities)
	case r.DriveCylinder != nil:
		res, err = pick(steps, r.DriveCylinder.Compute, r.DriveCylinder.Densities)
	case r.RubberBalloon != nil:
		res, err = pick(steps, r.RubberBalloon.Compute, r.RubberBalloon.Densities)
	default:
		res, err = pick(steps, r.WetDensity.Compute, r.WetDensity.Densities)
	}
	if err != nil {
		return soil.InPlace{}, fieldErr(ImpossibleReadings, "", err)
	}
	return res, nil
}

// pick calls withSteps when the steps are wanted, otherwise bare.
func pick(steps bool, withSteps, bare func() (soil.InPlace, error)) (soil.InPlace, error) {
	if steps {
		return withSteps()
	}
	return bare()
}
