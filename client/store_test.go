package client

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"github.com/google/uuid"

	"tamp/internal/ledger"
	"tamp/internal/qc"
	"tamp/internal/soil"
)

// clock is a settable test clock.
type clock struct{ t time.Time }

func (c *clock) now() time.Time { return c.t }

type seeded struct{ r *rand.ChaCha8 }

func (s seeded) Read(p []byte) (int, error) { return s.r.Read(p) }

func newSeeded(seed byte) seeded {
	var k [32]byte
	k[0] = seed
	return seeded{rand.NewChaCha8(k)}
}

type env struct {
	t       *testing.T
	path    string
	clock   *clock
	store   *Store
	project string
	spec    string
	ref     string
}

func pcf(v float64) float64 { return v * soil.PoundPerCubicFoot }

// newEnv opens a store on a temporary file with a project, a spec and a
// reference, as a device holds them after its first sync.
func newEnv(t *testing.T, user string) *env {
	t.Helper()
	e := &env{t: t, path: filepath.Join(t.TempDir(), "device.db"),
		clock: &clock{time.Date(2026, 9, 14, 13, 30, 0, 0, time.UTC)}}
	e.open(user)
	e.project = e.store.NewID()
	ctx := context.Background()
	e.tick()
	if err := e.store.SetUpProject(ctx, e.project, ProjectSetUp{Name: "Juniper Wash detention basin", Units: USCustomary,
		WaterDensity: soil.Water624, TimeZone: "America/Denver"}); err != nil {
		t.Fatal(err)
	}
	e.tick()
	spec, err := e.store.DefineSpec(ctx, e.project, Spec{Name: "basin embankment", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"})
	if err != nil {
		t.Fatal(err)
	}
	e.tick()
	ref, err := e.store.AddReference(ctx, e.project, Reference{Material: "tan clayey sand", Standard: ASTMD698, Method: "A", Edition: 2012,
		MaxDryDensity: pcf(116.0), OptimumMoisture: 13.5})
	if err != nil {
		t.Fatal(err)
	}
	e.spec, e.ref = spec, ref
	return e
}

func (e *env) open(user string) {
	e.t.Helper()
	s, err := Open(context.Background(), e.path, Options{User: user, Now: e.clock.now, Rand: newSeeded(7)})
	if err != nil {
		e.t.Fatal(err)
	}
	e.store = s
	e.t.Cleanup(func() { s.Close() })
}

// tick moves the clock on a minute, as between two entries.
func (e *env) tick() { e.clock.t = e.clock.t.Add(time.Minute) }

// rec records an entry of any kind, as the typed methods do.
func (e *env) rec(k ledger.Kind) ledger.Signed {
	e.t.Helper()
	e.tick()
	s, _, err := e.store.recordEntry(context.Background(), e.project, k)
	if err != nil {
		e.t.Fatal(err)
	}
	return s
}

// sandCone gives readings of dry density dry pcf at moisture w.
func sandCone(dry, w float64) Readings {
	sd := pcf(99.0)
	used, cone := 7.00*soil.Pound, 0.53*soil.Pound
	vol := (used - cone) / sd
	return Readings{SandCone: &SandCone{SandDensity: sd, SandUsed: used, ConeCorrection: cone,
		SoilMass: pcf(dry) * (1 + w/100) * vol, Moisture: w}}
}

func (e *env) test(dry, w float64) TestResult {
	e.t.Helper()
	e.clock.t = e.clock.t.Add(20 * time.Minute)
	r, err := e.store.RecordTest(context.Background(), TestInput{Project: e.project, Readings: sandCone(dry, w),
		ReferenceID: e.ref, SpecID: e.spec, Feature: "embankment", LiftNumber: 6, LiftThickness: 8 * soil.Inch,
		Location: Location{Station: 410 * soil.Foot, Offset: 15 * soil.Foot}})
	if err != nil {
		e.t.Fatal(err)
	}
	return r
}

func TestRecordTestResultAtOnce(t *testing.T) {
	e := newEnv(t, "ines")
	r := e.test(111.6, 12.0) // C1: RC 96.2 %, -1.5 points -> pass
	if r.Result.Verdict != Pass {
		t.Fatalf("verdict = %v %v", r.Result.Verdict, r.Result.Reasons)
	}
	if got := r.Result.RelativeCompaction; got < 96.15 || got > 96.25 {
		t.Errorf("RC = %v, want 96.2 (C1)", got)
	}
	if len(r.Steps) == 0 {
		t.Error("no arithmetic steps returned")
	}
	e.store.mu.Lock()
	tt, ok := e.store.view(e.project).Test(r.TestID)
	e.store.mu.Unlock()
	if !ok {
		t.Fatal("the test is not in the view")
	}
	if tt.Content.DeviceResults == nil || tt.Content.DeviceResults.Verdict != qc.Pass || hasFlag(findingsOf(tt.Flags), FlagDeviceResultMismatch) {
		t.Errorf("device results travel with the test and agree: %+v flags %v", tt.Content.DeviceResults, tt.Flags)
	}
}

func hasFlag(fs []Finding, code string) bool {
	for _, f := range fs {
		if f.Code == code {
			return true
		}
	}
	return false
}

func TestPendingUntilReferenceArrives(t *testing.T) {
	e := newEnv(t, "ines")
	ref := e.store.NewID()
	r, err := e.store.RecordTest(context.Background(), TestInput{Project: e.project, Readings: sandCone(110, 12), ReferenceID: ref, SpecID: e.spec})
	if err != nil {
		t.Fatal(err)
	}
	if r.Result.Verdict != Pending || len(r.Missing) != 1 || r.Missing[0] != ref {
		t.Fatalf("without its reference: %v, missing %v", r.Result.Verdict, r.Missing)
	}
	if _, err := e.store.AddReference(context.Background(), e.project, Reference{ID: ref, Material: "new borrow", Standard: ASTMD698, Method: "A",
		MaxDryDensity: pcf(118), OptimumMoisture: 12.5}); err != nil {
		t.Fatal(err)
	}
	tt, _ := e.store.Test(e.project, r.TestID)
	if tt.Result.Verdict != Fail { // 110 / 118 = 93.2 %
		t.Errorf("after the reference arrived: %v", tt.Result.Verdict)
	}
}

func TestCorrectVoidRetestRules(t *testing.T) {
	e := newEnv(t, "ines")
	ctx := context.Background()
	pass := e.test(112, 13)
	fail := e.test(104, 13)
	if fail.Result.Verdict != Fail {
		t.Fatalf("104 pcf: %v", fail.Result.Verdict)
	}
	_, err := e.store.CorrectTest(ctx, e.project, fail.TestID, " ", func(*TestInput) {})
	wantEntryError(t, "correction without a reason", err, ErrReasonRequired, "invalid_field", "reason", "")
	wantEntryError(t, "void without a reason", e.store.VoidTest(ctx, e.project, fail.TestID, ""), ErrReasonRequired, "invalid_field", "reason", "")
	if _, err := e.store.RecordRetest(ctx, e.project, pass.TestID, RetestInput{Readings: sandCone(113, 13)}); !errors.Is(err, ErrNotFailing) {
		t.Errorf("retest of a passing test: %v", err)
	}
	if _, err := e.store.CorrectTest(ctx, e.project, e.store.NewID(), "x", func(*TestInput) {}); !errors.Is(err, ErrNotFound) {
		t.Errorf("correction of an unknown test: %v", err)
	}
	// Another user on the same device may not edit ines's test.
	e.store.Close()
	e.open("omar")
	_, err = e.store.CorrectTest(ctx, e.project, fail.TestID, "typo", func(*TestInput) {})
	wantEntryError(t, "correction by another user", err, ErrNotAuthor, "permission_denied", "", "own_tests_only")
	wantEntryError(t, "void by another user", e.store.VoidTest(ctx, e.project, fail.TestID, "not mine"), ErrNotAuthor, "permission_denied", "", "own_tests_only")
	e.store.Close()
	e.open("ines")
	if err := e.store.VoidTest(ctx, e.project, pass.TestID, "tested the wrong lift"); err != nil {
		t.Fatal(err)
	}
	if _, err := e.store.CorrectTest(ctx, e.project, pass.TestID, "typo", func(*TestInput) {}); !errors.Is(err, ErrVoided) {
		t.Errorf("correction of a voided test: %v", err)
	}
	_, err = e.store.CorrectTest(ctx, e.project, fail.TestID, "soil mass", func(c *TestInput) { c.Readings.SandCone.SoilMass = -2 })
	wantField(t, "impossible correction", err, "readings.soil_mass")
	tt, _ := e.store.Test(e.project, fail.TestID)
	if len(tt.Revisions) != 1 {
		t.Errorf("a refused correction left %d revisions", len(tt.Revisions))
	}
}

func TestOutboxAndRejected(t *testing.T) {
	e := newEnv(t, "ines")
	ctx := context.Background()
	start := e.clock.t
	r := e.test(112, 13)
	o, err := e.store.Outbox(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if o.Pending != 4 || !o.Oldest.Equal(start.Add(-2*time.Minute)) {
		t.Errorf("outbox = %+v, want 4 entries, oldest at %v", o, start.Add(-2*time.Minute))
	}
	if age := o.Age(e.clock.t); age != 22*time.Minute {
		t.Errorf("age = %v", age)
	}
	ev, _ := e.store.Test(e.project, r.TestID)
	e.store.mu.Lock()
	err = e.store.markRejected(ctx, ev.Current, "permission_denied", "inspector is not a member of this project")
	e.store.mu.Unlock()
	if err != nil {
		t.Fatal(err)
	}
	rs, err := e.store.Rejected(ctx)
	if err != nil || len(rs) != 1 || rs[0].RecordID != r.TestID || rs[0].Reason != "permission_denied" {
		t.Fatalf("rejected = %+v, %v", rs, err)
	}
	if _, err := e.store.Test(e.project, r.TestID); !errors.Is(err, ErrNotFound) {
		t.Errorf("a rejected test still shows in the view: %v", err)
	}
	// It survives a restart.
	e.store.Close()
	e.open("")
	rs, _ = e.store.Rejected(ctx)
	if len(rs) != 1 {
		t.Fatalf("after reopening: %d rejected", len(rs))
	}
	if err := e.store.Discard(ctx, rs[0].EventID); err != nil {
		t.Fatal(err)
	}
	if err := e.store.Discard(ctx, rs[0].EventID); !errors.Is(err, ErrNotRejected) {
		t.Errorf("second discard: %v", err)
	}
	if rs, _ := e.store.Rejected(ctx); len(rs) != 0 {
		t.Errorf("after discard: %+v", rs)
	}
}

func TestIdentityAndCountersPersist(t *testing.T) {
	e := newEnv(t, "ines")
	id, key := e.store.DeviceID(), e.store.PublicKey()
	a := e.rec(&ledger.TestVoided{TestID: e.store.NewID(), Reason: "x"})
	e.store.Close()
	e.clock.t = e.clock.t.Add(-time.Hour) // the device clock is set back
	e.open("")
	if e.store.DeviceID() != id || !e.store.PublicKey().Equal(key) || e.store.User() != "ines" {
		t.Fatal("identity changed across reopen")
	}
	b := e.rec(&ledger.TestVoided{TestID: e.store.NewID(), Reason: "y"})
	if b.Event.DeviceSeq != a.Event.DeviceSeq+1 {
		t.Errorf("device seq %d after %d", b.Event.DeviceSeq, a.Event.DeviceSeq)
	}
	if b.Event.HLC.Compare(a.Event.HLC) <= 0 {
		t.Errorf("hybrid time ran backwards across a restart: %v after %v", b.Event.HLC, a.Event.HLC)
	}
}

func TestMultipleProjects(t *testing.T) {
	e := newEnv(t, "ines")
	other := e.store.NewID()
	if err := e.store.SetUpProject(context.Background(), other, ProjectSetUp{Name: "Ridge Road widening", Units: SI}); err != nil {
		t.Fatal(err)
	}
	e.test(112, 13)
	if ps := e.store.Projects(); len(ps) != 2 {
		t.Errorf("projects = %v", ps)
	}
	if n := len(e.store.Today(other)); n != 0 {
		t.Errorf("the other project shows %d tests", n)
	}
	if n := len(e.store.Today(e.project)); n != 1 {
		t.Errorf("today = %d tests", n)
	}
}

func TestEquipmentChecks(t *testing.T) {
	e := newEnv(t, "ines")
	ctx := context.Background()
	gauge := e.store.NewID()
	if _, err := e.store.RegisterEquipment(ctx, e.project, Equipment{ID: gauge, Kind: NuclearGaugeEquipment, Model: "MD-9",
		SerialNumber: "G-4410", CalibrationDue: "2026-09-01"}); err != nil {
		t.Fatal(err)
	}
	nuclear := Readings{Nuclear: &NuclearGauge{ProbeDepth: 6 * soil.Inch, OvenMoisture: ptr(13.0),
		Readings: []GaugeReading{{WetDensity: pcf(126.5), WaterPerVolume: pcf(14.1)}}}}
	in := TestInput{Project: e.project, Readings: nuclear, ReferenceID: e.ref, SpecID: e.spec, EquipmentID: gauge, LiftThickness: 8 * soil.Inch}
	r, err := e.store.RecordTest(ctx, in)
	if err != nil {
		t.Fatal(err)
	}
	if !hasFlag(r.Flags, FlagGaugeCalibrationLapsed) || !hasFlag(r.Flags, FlagNoStandardCount) {
		t.Errorf("lapsed gauge without a count: flags %v", r.Flags)
	}
	day := "2026-09-14"
	if err := e.store.RecordStandardCount(ctx, e.project, StandardCount{EquipmentID: gauge, Date: day, DensityCount: 2790, MoistureCount: 655, Accepted: true}); err != nil {
		t.Fatal(err)
	}
	if _, err := e.store.RegisterEquipment(ctx, e.project, Equipment{ID: gauge, Kind: NuclearGaugeEquipment, Model: "MD-9",
		SerialNumber: "G-4410", CalibrationDue: "2027-09-01"}); err != nil { // recalibrated
		t.Fatal(err)
	}
	r, err = e.store.RecordTest(ctx, in)
	if err != nil {
		t.Fatal(err)
	}
	if hasFlag(r.Flags, FlagGaugeCalibrationLapsed) || hasFlag(r.Flags, FlagNoStandardCount) {
		t.Errorf("calibrated gauge with a count: flags %v", r.Flags)
	}
}

func ptr(v float64) *float64 { return &v }

func TestExceptionClosesFailure(t *testing.T) {
	e := newEnv(t, "ines")
	fail := e.test(104, 13)
	if n := len(e.store.OpenFailures(e.project)); n != 1 {
		t.Fatalf("open failures = %d", n)
	}
	e.store.Close()
	e.open("quinn") // QA accepts it: no one decides on their own test
	if err := e.store.AcceptException(context.Background(), e.project, fail.TestID, "accepted by the engineer of record"); err != nil {
		t.Fatal(err)
	}
	if n := len(e.store.OpenFailures(e.project)); n != 0 {
		t.Errorf("open failures after an accepted exception = %d", n)
	}
}

func TestBatchesBoundCountAndBytes(t *testing.T) {
	ev := func(n int) outboxEvent { return outboxEvent{body: make([]byte, n), sig: make([]byte, 64)} }
	var evs []outboxEvent
	for range 7 {
		evs = append(evs, ev(100))
	}
	if got := batches(evs, 3); len(got) != 3 || len(got[0]) != 3 || len(got[2]) != 1 {
		t.Errorf("7 events by 3: %d batches", len(got))
	}
	big := []outboxEvent{ev(3 << 20), ev(3 << 20), ev(10)}
	if got := batches(big, 500); len(got) != 2 || len(got[0]) != 1 || len(got[1]) != 2 {
		t.Errorf("two 3 MiB events: %v batches", len(got))
	}
	if got := batches(nil, 500); len(got) != 1 || len(got[0]) != 0 {
		t.Errorf("an empty outbox makes %d pushes, want one empty push", len(got))
	}
}

// A device refuses to record a second creation of a record id it holds
// (issue 10, rule 2): the id belongs to its first recorder.
func TestRecordRefusesTakenTestID(t *testing.T) {
	e := newEnv(t, "inspector")
	id := e.store.NewID()
	first := e.rec(&ledger.TestRecorded{TestID: id, Content: TestInput{Readings: sandCone(110, 12), SpecID: e.spec, ReferenceID: e.ref}.content()})
	_, _, err := e.store.recordEntry(context.Background(), e.project, &ledger.TestRecorded{TestID: id,
		Content: TestInput{Readings: sandCone(95, 18), SpecID: e.spec, ReferenceID: e.ref}.content()})
	wantEntryError(t, "second recording of test "+id, err, ErrInvalid, "conflicting_id", "record_id", "")
	if tt, _ := e.store.Test(e.project, id); tt.Current != first.Event.ID {
		t.Errorf("current revision %s, want the first recording %s", tt.Current, first.Event.ID)
	}
}

// Two openers of one store file (the review page beside a command) both
// record: each entry takes the next number and a later hybrid time from
// the file itself, so neither write is refused and the numbers run on.
func TestTwoOpenersRecordInTurn(t *testing.T) {
	e := newEnv(t, "ines")
	first := e.store
	second, err := Open(context.Background(), e.path, Options{Now: e.clock.now, Rand: newSeeded(9)})
	if err != nil {
		t.Fatal(err)
	}
	defer second.Close()
	var seqs []uint64
	var last ledger.HLC
	for i, s := range []*Store{first, second, first, second} {
		e.tick()
		sg, _, err := s.recordEntry(context.Background(), e.project, &ledger.TestVoided{TestID: s.NewID(), Reason: fmt.Sprintf("entry %d", i)})
		if err != nil {
			t.Fatalf("entry %d: %v", i, err)
		}
		if i > 0 && sg.Event.HLC.Compare(last) <= 0 {
			t.Errorf("entry %d's hybrid time %v is not after %v", i, sg.Event.HLC, last)
		}
		last = sg.Event.HLC
		seqs = append(seqs, sg.Event.DeviceSeq)
	}
	for i := 1; i < len(seqs); i++ {
		if seqs[i] != seqs[i-1]+1 {
			t.Fatalf("device sequence numbers %v, want consecutive", seqs)
		}
	}
	out, err := first.Outbox(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if out.Pending < 4 {
		t.Errorf("outbox holds %d pending entries, want the four recorded", out.Pending)
	}
}

// Two openers recording at the same time (the page's review while a command
// records) take turns at the file's write lock: every entry is kept, each
// with its own number.
func TestTwoOpenersRecordAtOnce(t *testing.T) {
	e := newEnv(t, "ines")
	second, err := Open(context.Background(), e.path, Options{Rand: newSeeded(11)})
	if err != nil {
		t.Fatal(err)
	}
	defer second.Close()
	const each = 15
	errs := make(chan error, 2*each)
	var wg sync.WaitGroup
	for _, s := range []*Store{e.store, second} {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range each {
				_, _, err := s.recordEntry(context.Background(), e.project, &ledger.TestVoided{TestID: uuid.Must(uuid.NewV7()).String(), Reason: fmt.Sprint(i)})
				errs <- err
			}
		}()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		if err != nil {
			t.Fatal(err)
		}
	}
	third, err := Open(context.Background(), e.path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer third.Close()
	var n, distinct int
	if err := third.db.Reader().QueryRow(`SELECT COUNT(*), COUNT(DISTINCT device_seq) FROM events WHERE kind = 'test_voided'`).Scan(&n, &distinct); err != nil {
		t.Fatal(err)
	}
	if n != 2*each || distinct != n {
		t.Errorf("%d entries kept with %d distinct numbers, want %d each", n, distinct, 2*each)
	}
}
