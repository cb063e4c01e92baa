package report

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"

	"tamp/internal/ledger"
	"tamp/internal/qc"
	"tamp/internal/soil"
)

// AuditOptions says when and with what the audit runs.
type AuditOptions struct {
	// AsOf is the time a failure's age for the retest window is taken at:
	// the time of the audit. A zero AsOf finds no failure overdue.
	AsOf time.Time
	// Skews maps an event id to the pushing device's clock skew,
	// microseconds (device minus server), for the entries the server flagged
	// beyond the project's limit.
	Skews map[string]int64
}

// FindingCode names what an audit finding is about.
type FindingCode string

// The audit findings. Each is something for the QA manager to look into:
// the ledger shows it happened, not why, and none of them is by itself a
// judgement of the work.
const (
	// FailureNotRetested: a failing test (not itself a retest) is still
	// open longer than the project's retest window after it was taken: no
	// retest in its chain passed and counts (graded, neither voided nor
	// returned by the office), it was not voided, and QA accepted no
	// exception on its current revision. The fill it stands for may have
	// been covered by the next lift without proof it was reworked.
	FailureNotRetested FindingCode = "failure_not_retested"
	// RetestAwayFromFailure: a retest (not voided) was taken farther from
	// the test it retests than the project's retest distance, so it may not
	// have tested the reworked area. Measured between satellite positions
	// when both tests carry one, else in plan from station and offset.
	RetestAwayFromFailure FindingCode = "retest_away_from_failure"
	// RetestOnOtherLift: a retest names another placement, feature or lift
	// number than the test it retests: it tested other fill.
	RetestOnOtherLift FindingCode = "retest_on_other_lift"
	// RetestBeforeOriginal: a retest is dated, by hybrid time or by its
	// device's clock, before the test it retests: a retest cannot precede
	// its failure, so a clock, a link or the record is wrong.
	RetestBeforeOriginal FindingCode = "retest_before_original"
	// PassingTestRetested: a test that passes was retested. A pass needs no
	// retest; retesting one can be a search for a better number.
	PassingTestRetested FindingCode = "passing_test_retested"
	// FailureVoidedWithoutAcceptance: a test that graded fail (now, or in
	// any revision) was voided, and nobody who was a QA manager on the
	// project when they did so accepted an exception for it. Voiding is
	// how a wrong record is withdrawn; it is not how a failure is closed.
	FailureVoidedWithoutAcceptance FindingCode = "failure_voided_without_acceptance"
	// CorrectionTurnedFailIntoPass: a correction of a test grades pass
	// where the revision it superseded graded fail. Corrections are
	// allowed and kept in history; this one changed the outcome, so its
	// reason deserves a look.
	CorrectionTurnedFailIntoPass FindingCode = "correction_turned_fail_into_pass"
	// DeviceResultMismatch: the results the field device showed disagree
	// with those recomputed from the recorded readings: the inspector may
	// have acted on a different number than the record holds.
	DeviceResultMismatch FindingCode = "device_result_mismatch"
	// ClockSkew: the server found the device that pushed an entry with its
	// clock off the server's by more than the project's limit. The entry
	// keeps the time its device showed; its hybrid time orders it.
	ClockSkew FindingCode = "clock_skew"
	// ReviewerNotOfficeOrQA: a review was made by someone whose role on the
	// project at the time was neither office nor QA, or who had no recorded
	// role.
	ReviewerNotOfficeOrQA FindingCode = "reviewer_not_office_or_qa"
)

// FindingTitle says each finding code in the trade's words.
var FindingTitle = map[FindingCode]string{
	FailureNotRetested:             "failure not retested in time",
	RetestAwayFromFailure:          "retest away from the failure",
	RetestOnOtherLift:              "retest on another lift",
	RetestBeforeOriginal:           "retest dated before the test it retests",
	PassingTestRetested:            "passing test retested",
	FailureVoidedWithoutAcceptance: "failure voided without QA acceptance",
	CorrectionTurnedFailIntoPass:   "correction turned a fail into a pass",
	DeviceResultMismatch:           "device results disagree with the readings",
	ClockSkew:                      "device clock off the server's",
	ReviewerNotOfficeOrQA:          "reviewed by someone neither office nor QA",
}

// Finding is one thing the audit found, with the ledger entries it rests
// on, so that a reader can look each one up.
type Finding struct {
	Code    FindingCode
	TestID  string // the test it concerns; "" for an entry not about a test
	Message string // in plain words: the tests (short ids), people (user ids), times, distances, reasons
	Entries []string
}

// The roles that review tests.
const (
	roleOffice = "office"
	roleQA     = "qa"
)

// Findings audits a project's ledger: every failure followed up in time, in
// the right place and on the right lift; nothing altered after the fact to
// turn a fail into a pass; no failure withdrawn without QA's acceptance;
// device results, clocks and reviewers as they should be. It returns one
// finding per occurrence, sorted by the time of the test each concerns (an
// entry not about a test by its own time), then code, then message.
//
// The findings support, and never replace, review by qualified personnel;
// the project's specifications and local codes govern what must be done
// about each one.
func Findings(p *ledger.Projection, o AuditOptions) []Finding {
	a := audit{p: p, o: o, loc: time.UTC, sys: soil.SI, names: map[string]string{}, roles: map[string][]ledger.RoleChange{}}
	var su *ledger.ProjectSetUp
	if s := p.SetUp(); s != nil {
		su = &s.ProjectSetUp
		if l, err := time.LoadLocation(s.TimeZone); err == nil {
			a.loc = l
		}
		if s.Units == soil.US {
			a.sys = soil.US
		}
	}
	for _, d := range p.Devices() {
		if d.UserName != "" {
			a.names[d.UserID] = d.UserName
		}
		a.roles[d.UserID] = append(a.roles[d.UserID], d.Roles...)
	}
	a.within, a.distance = su.RetestWithinOrDefault(), su.RetestDistanceOrDefault()
	a.distanceText = a.dist(a.distance)
	// One pass over the tests' rows; whether a failure was closed by a
	// retest is asked once the pass has indexed every retest.
	rows := p.TestRows()
	a.rows, a.reviewers = rows, make([]reviewer, rows.NumHandles())
	for i := range rows.Rows {
		r := &rows.Rows[i]
		// Most tests are a pass of one revision, unflagged, no retest:
		// nothing to file or look at, told without a call.
		if r.State&(lookAt|ledger.RowReviewed) == 0 && r.Retested == nil {
			continue
		}
		a.retests.add(r)
		a.test(r, &rows.Audit[i])
	}
	a.retests.done(p, rows)
	for _, r := range a.open {
		a.notRetested(r)
	}
	a.clockSkews()
	slices.SortFunc(a.out, func(x, y located) int {
		return cmp.Or(byTime(x.at, y.at), cmp.Compare(x.Code, y.Code), cmp.Compare(x.Message, y.Message),
			slices.Compare(x.Entries, y.Entries))
	})
	out := make([]Finding, len(a.out))
	for i, f := range a.out {
		out[i] = f.Finding
	}
	return out
}

// located is a finding with the test that places it in time (for an entry
// not about a held test, a stand-in with the entry's id and hybrid time).
type located struct {
	Finding
	at *ledger.Test
}

type audit struct {
	p        *ledger.Projection
	o        AuditOptions
	within   time.Duration
	distance float64
	out      []located
	chain    retestChain       // walks a failure's retests, buffers kept
	direct   []*ledger.TestRow // a failure's own retests, buffer kept
	// distanceText is the retest distance in words, written once.
	distanceText string
	retests      retestIndex
	open         []*ledger.TestRow              // failures older than the retest window, unless a retest closed them
	loc          *time.Location                 // the project's time zone
	sys          soil.System                    // the project's units
	names        map[string]string              // user id -> name, from the ledger's introductions
	roles        map[string][]ledger.RoleChange // user id -> the roles introductions of their devices record
	// lastUser is the user roleAt looked up last, with their roles.
	lastUser  string
	lastRoles []ledger.RoleChange
	rows      ledger.TestRows
	reviewers []reviewer // by the handle of the user (ledger.AuditRow.Reviewer)
}

// reviewer is when a user's role became office or QA for good.
type reviewer struct {
	known bool
	// from is the time of the role change from which on every one is to
	// office or QA; never when there is none, or when two of the user's
	// role changes share a time (which of them holds is then for roleAt).
	from  ledger.HLC
	never bool
}

// reviewsFine reports whether the reviews of a test are all, by its audit
// row r, by a user who was office or QA when making them: then reviewers would
// find nothing. False means they must be looked at.
func (a *audit) reviewsFine(r *ledger.AuditRow) bool {
	if r.Reviewer == 0 {
		return false
	}
	rv := &a.reviewers[r.Reviewer]
	if !rv.known {
		roles := slices.SortedFunc(slices.Values(a.roles[a.rows.ID(r.Reviewer)]), func(x, y ledger.RoleChange) int { return x.HLC.Compare(y.HLC) })
		rv.known, rv.never = true, true
		for i := len(roles) - 1; i >= 0 && (roles[i].Role == roleOffice || roles[i].Role == roleQA); i-- {
			rv.from, rv.never = roles[i].HLC, false
		}
		for i := 1; i < len(roles); i++ {
			if roles[i].HLC == roles[i-1].HLC {
				rv.never = true
			}
		}
	}
	// Every review's wall time is at least FirstReview: after from, the
	// latest role change at or before each review is office or QA.
	return !rv.never && r.FirstReview > rv.from.Wall
}

// roleAt is the user's role at time at, as ledger.Projection.RoleAt gives
// it, from the roles gathered once for the audit.
func (a *audit) roleAt(user string, at ledger.HLC) (role, eventID string) {
	// Reviews come in runs by one person: the last user's roles are kept
	// at hand rather than looked up for each review.
	if a.lastRoles == nil || user != a.lastUser {
		a.lastUser, a.lastRoles = user, a.roles[user]
		if a.lastRoles == nil {
			a.lastRoles = []ledger.RoleChange{}
		}
	}
	var best ledger.HLC
	for _, r := range a.lastRoles {
		if r.HLC.Compare(at) <= 0 && (role == "" || r.HLC.Compare(best) > 0) {
			role, eventID, best = r.Role, r.EventID, r.HLC
		}
	}
	return role, eventID
}

func (a *audit) add(at *ledger.Test, code FindingCode, testID, msg string, entries ...string) {
	a.out = append(a.out, located{Finding: Finding{Code: code, TestID: testID, Message: msg, Entries: entries}, at: at})
}

// lookAt are the bits of a row whose test a rule looks at, reviews aside.
const lookAt = ledger.RowFail | ledger.RowRetest | ledger.RowVoided | ledger.RowRevised | ledger.RowFlagged

// test runs every rule about one test, reading the test itself only when
// its row says a rule has something to look at: most tests are a pass of
// one revision, unflagged, reviewed by office or QA if at all.
func (a *audit) test(r *ledger.TestRow, audit *ledger.AuditRow) {
	reviews := r.State&ledger.RowReviewed != 0 && !a.reviewsFine(audit)
	if r.State&lookAt == 0 && !reviews {
		return
	}
	t := r.Test
	var grades map[string]qc.Result // nil for a test of one revision, whose only verdict is t.Result's
	if r.State&ledger.RowRevised != 0 {
		grades = a.grades(t)
	}
	if a.overdue(r, audit) {
		a.open = append(a.open, r)
	}
	if r.Retested != nil {
		a.retest(r, audit)
	}
	if r.State&ledger.RowVoided != 0 {
		a.voidedFailure(t, grades)
	}
	if grades != nil { // a test of one revision has no correction to look at
		a.corrections(t, grades)
	}
	if r.State&ledger.RowFlagged != 0 {
		for _, f := range t.Flags {
			if f.Code == ledger.DeviceResultMismatch {
				a.add(t, DeviceResultMismatch, t.ID, f.Message, t.Current)
			}
		}
	}
	if reviews {
		a.reviewed(t)
	}
}

// grades returns the verdict of each revision of a test with more than one
// (the current one as the projection graded it); nil for a test with one,
// whose only verdict is t.Result's.
func (a *audit) grades(t *ledger.Test) map[string]qc.Result {
	if len(t.Revisions) < 2 {
		return nil
	}
	g := make(map[string]qc.Result, len(t.Revisions))
	for _, r := range t.Revisions {
		if r.EventID == t.Current {
			g[r.EventID] = t.Result
		} else {
			g[r.EventID] = a.p.Assess(*r.Content, t.Day, t.RetestOf).Result
		}
	}
	return g
}

// overdue reports whether the row's test is a failure still open by itself
// (not a retest, not voided, no exception) longer than the retest window; a
// retest may yet have closed it (see notRetested), from the row and its
// audit row alone.
func (a *audit) overdue(r *ledger.TestRow, audit *ledger.AuditRow) bool {
	if r.State&(ledger.RowFail|ledger.RowRetest|ledger.RowVoided|ledger.RowExceptionAccepted) != ledger.RowFail {
		return false
	}
	at := time.Unix(0, audit.DeviceTime)
	if audit.DeviceTime == ledger.NoDeviceTime {
		at = r.Test.DeviceTime
	}
	return a.o.AsOf.Sub(at) > a.within
}

// notRetested finds an overdue failure (see overdue), of the row r, that
// no retest closed.
func (a *audit) notRetested(r *ledger.TestRow) {
	if a.closedByRetest(r) {
		return
	}
	t := r.Test
	age := a.o.AsOf.Sub(t.DeviceTime)
	a.add(t, FailureNotRetested, t.ID, fmt.Sprintf(
		"test %s failed (relative compaction %.1f %%) at %s by its device's clock and is still open %s later, as of %s: no passing retest, no QA exception, not voided; the project's retest window is %s",
		shortRef(t.ID), t.Result.RelativeCompaction, a.stamp(t.DeviceTime), span(age.Round(time.Minute)), a.stamp(a.o.AsOf), span(a.within)),
		recording(t))
}

// closedByRetest reports whether a retest in t's chain (retests of retests
// included) passed and counts.
func (a *audit) closedByRetest(t *ledger.TestRow) bool {
	// Mostly a retest of the failure itself closed it: those first, the
	// rest of the chain only when none did.
	a.direct = a.retests.of(a.direct[:0], t.Test)
	for _, r := range a.direct {
		if r.State.Counts() && r.State&ledger.RowPass != 0 {
			return true
		}
	}
	for _, r := range a.chain.of(&a.retests, t) {
		if r.State.Counts() && r.State&ledger.RowPass != 0 {
			return true
		}
	}
	return false
}

// retest runs the rules about the retest of the row (with its audit row),
// of the test row.Retested. It reads the two tests only when the rows,
// which compare them (ledger.RowRetestSameLift and the others), show a
// rule to look at.
func (a *audit) retest(row *ledger.TestRow, audit *ledger.AuditRow) {
	s := row.State
	away := s&ledger.RowVoided == 0 && audit.RetestDistance > a.distance
	if !away && s&(ledger.RowRetestSameLift|ledger.RowRetestInOrder|ledger.RowRetestOfPass) == ledger.RowRetestSameLift|ledger.RowRetestInOrder {
		return
	}
	r, orig, pr := row.Test, row.Retested, row.Placement
	entries := func() []string { return []string{recording(orig), recording(r)} }
	voided := ""
	if r.Voided() {
		voided = " (since voided)"
	}
	if away {
		a.add(r, RetestAwayFromFailure, r.ID, fmt.Sprintf("retest %s is %s from test %s, which it retests (%s), beyond the project's retest distance of %s",
			shortRef(r.ID), a.dist(audit.RetestDistance), shortRef(orig.ID), basis(s&ledger.RowRetestSatellite != 0), a.distanceText), entries()...)
	}
	// A retest is mostly on its failure's placement: its handle then
	// serves both.
	po := pr
	if orig.Content.PlacementID != r.Content.PlacementID {
		po, _ = a.rows.Handle(orig.Content.PlacementID)
	}
	lr, lo := a.liftOf(r.Content, pr), a.liftOf(orig.Content, po)
	if lr.placement != "" && lo.placement != "" && lr.placement != lo.placement ||
		lr.feature != "" && lo.feature != "" && lr.feature != lo.feature ||
		lr.number != 0 && lo.number != 0 && lr.number != lo.number {
		a.add(r, RetestOnOtherLift, r.ID, fmt.Sprintf("retest %s%s is on %s; test %s, which it retests, is on %s",
			shortRef(r.ID), voided, lr, shortRef(orig.ID), lo), entries()...)
	}
	var before []string
	if r.HLC.Compare(orig.HLC) < 0 {
		before = append(before, fmt.Sprintf("hybrid time %s, before %s", a.hlcStamp(r.HLC), a.hlcStamp(orig.HLC)))
	}
	if r.DeviceTime.Before(orig.DeviceTime) {
		before = append(before, fmt.Sprintf("device time %s, before %s", a.stamp(r.DeviceTime), a.stamp(orig.DeviceTime)))
	}
	if len(before) > 0 {
		a.add(r, RetestBeforeOriginal, r.ID, fmt.Sprintf("retest %s%s is dated before test %s, which it retests: %s",
			shortRef(r.ID), voided, shortRef(orig.ID), strings.Join(before, "; ")), entries()...)
	}
	if orig.Result.Verdict == qc.Pass {
		a.add(r, PassingTestRetested, r.ID, fmt.Sprintf("retest %s%s by %s retests test %s, which passed (relative compaction %.1f %%)",
			shortRef(r.ID), voided, a.who(r.Author), shortRef(orig.ID), orig.Result.RelativeCompaction), entries()...)
	}
}

// greatCircle is the measure of the retest distance between two satellite
// positions (ledger.GreatCircle), which the rows of the tests hold.
var greatCircle = ledger.GreatCircle

// basis says in words what a retest distance is measured between.
func basis(satellite bool) string {
	if satellite {
		return "great-circle distance between their satellite positions"
	}
	return "plan distance from station and offset"
}

// lift is the fill a test stands on: its placement, and the feature and
// lift number the test names or, failing that, its placement records.
type lift struct {
	placement, feature string
	number             uint32
}

func (l lift) String() string {
	var parts []string
	if l.placement != "" {
		parts = append(parts, "placement "+shortRef(l.placement))
	}
	if l.feature != "" {
		parts = append(parts, l.feature)
	}
	if l.number != 0 {
		parts = append(parts, fmt.Sprintf("lift %d", l.number))
	}
	if len(parts) == 0 {
		return "no recorded lift"
	}
	return strings.Join(parts, ", ")
}

// liftOf is the lift of content c, whose placement's handle is h: what
// the placement records (zero when not held) fills what c leaves out.
func (a *audit) liftOf(c *ledger.TestContent, h ledger.Handle) lift {
	pl := a.rows.Lift(h)
	return lift{placement: c.PlacementID, feature: cmp.Or(c.Feature, pl.Feature), number: cmp.Or(c.LiftNumber, pl.Number)}
}

func (a *audit) voidedFailure(t *ledger.Test, grades map[string]qc.Result) {
	if !t.Voided() {
		return
	}
	failed := t.Result.Verdict == qc.Fail
	for _, g := range grades {
		failed = failed || g.Verdict == qc.Fail
	}
	if !failed {
		return
	}
	var others []string
	for _, x := range t.Exceptions {
		role := a.roleAtEvent(x.Author, x.EventID)
		if role == roleQA {
			return
		}
		others = append(others, fmt.Sprintf("%s (%s)", a.who(x.Author), roleWords(role)))
	}
	entries := []string{recording(t)}
	var voids []string
	for _, v := range t.Voids {
		entries = append(entries, v.EventID)
		voids = append(voids, fmt.Sprintf("by %s (%q)", a.who(v.Author), v.Reason))
	}
	msg := fmt.Sprintf("test %s graded fail and was voided %s, and no QA manager accepted an exception for it",
		shortRef(t.ID), strings.Join(voids, " and "))
	if len(others) > 0 {
		msg += "; the exception accepted by " + strings.Join(others, ", ") + " was not by QA"
	}
	a.add(t, FailureVoidedWithoutAcceptance, t.ID, msg, entries...)
}

func (a *audit) corrections(t *ledger.Test, grades map[string]qc.Result) {
	for _, r := range t.Revisions {
		if r.Supersedes == "" {
			continue
		}
		was, now := grades[r.Supersedes], grades[r.EventID]
		if was.Verdict != qc.Fail || now.Verdict != qc.Pass {
			continue
		}
		device := " at"
		if ev, ok := a.p.Event(r.EventID); ok {
			device = fmt.Sprintf(" at %s by the device's clock,", a.stamp(ev.DeviceTime))
		}
		a.add(t, CorrectionTurnedFailIntoPass, t.ID, fmt.Sprintf(
			"test %s: the correction by %s%s hybrid time %s, turned a fail (relative compaction %.1f %%) into a pass (%.1f %%); reason given: %q",
			shortRef(t.ID), a.who(r.Author), device, a.hlcStamp(r.HLC), was.RelativeCompaction, now.RelativeCompaction, r.Reason),
			r.Supersedes, r.EventID)
	}
}

func (a *audit) reviewed(t *ledger.Test) {
	for _, rv := range t.Reviews {
		role, intro := a.roleAt(rv.Author, rv.HLC)
		if role == roleOffice || role == roleQA {
			continue
		}
		entries := []string{rv.EventID}
		if intro != "" {
			entries = append(entries, intro)
		}
		decision := "approved"
		if rv.Decision == ledger.Return {
			decision = "returned"
		}
		who := "who had no role recorded on the project then"
		if role != "" {
			who = "whose role on the project then was " + role
		}
		a.add(t, ReviewerNotOfficeOrQA, t.ID, fmt.Sprintf("test %s was %s at %s by %s, %s",
			shortRef(t.ID), decision, a.hlcStamp(rv.HLC), a.who(rv.Author), who), entries...)
	}
}

// roleAtEvent is the author's role at the hybrid time of a held event.
func (a *audit) roleAtEvent(author, eventID string) string {
	ev, ok := a.p.Event(eventID)
	if !ok {
		return ""
	}
	role, _ := a.roleAt(author, ev.HLC)
	return role
}

func roleWords(role string) string {
	if role == "" {
		return "no role recorded"
	}
	return role
}

func (a *audit) clockSkews() {
	for id, skew := range a.o.Skews {
		e, ok := a.p.Event(id)
		if !ok {
			continue
		}
		var testID string
		switch k := e.Kind.(type) {
		case *ledger.TestRecorded:
			testID = k.TestID
		case *ledger.TestCorrected:
			testID = k.TestID
		case *ledger.TestVoided:
			testID = k.TestID
		case *ledger.TestReviewed:
			testID = k.TestID
		case *ledger.ExceptionAccepted:
			testID = k.TestID
		}
		at, held := a.p.Test(testID)
		if testID == "" || !held {
			at = &ledger.Test{ID: e.ID, HLC: e.HLC}
		}
		d := time.Duration(skew) * time.Microsecond
		side := "ahead of"
		if d < 0 {
			side = "behind"
		}
		about := ""
		if testID != "" {
			about = " about test " + shortRef(testID)
		}
		a.add(at, ClockSkew, testID, fmt.Sprintf("device clock %s %s the server's: entry %s (%s%s) by %s from device %s, dated %s by that clock",
			span(d.Round(time.Second)), side, shortRef(e.ID), strings.ReplaceAll(e.Kind.KindName(), "_", " "), about, a.who(e.Author), a.device(e.Device),
			a.stamp(e.DeviceTime)), e.ID)
	}
}

// recording is the event that recorded a test.
func recording(t *ledger.Test) string { return t.Revisions[0].EventID }

// shortRef is the part of an id a person reads: its last eight characters,
// from the random part of a UUIDv7.
func shortRef(id string) string {
	if len(id) <= 8 {
		return id
	}
	return id[len(id)-8:]
}

// stamp writes a time in the project's time zone, to the minute.
func (a *audit) stamp(t time.Time) string { return t.In(a.loc).Format("2006-01-02 15:04 MST") }

func (a *audit) hlcStamp(h ledger.HLC) string { return a.stamp(time.UnixMicro(h.Wall)) }

// dist writes a distance (m) in the project's length unit at 0.1.
func (a *audit) dist(m float64) string {
	return strconv.FormatFloat(math.Round(a.sys.FromSI(soil.Length, m)*10)/10, 'f', 1, 64) + " " + a.sys.Unit(soil.Length)
}

// who names a user as the ledger's introductions of their devices do, or
// by the short id when none does.
func (a *audit) who(user string) string {
	if n := a.names[user]; n != "" {
		return n
	}
	return "user " + shortRef(user)
}

// device names a device as the ledger introduced it, or by its short id.
func (a *audit) device(id string) string {
	if d, ok := a.p.Device(id); ok && d.Name != "" {
		return fmt.Sprintf("%q", d.Name)
	}
	return shortRef(id)
}

// span says a duration in days and hours from three days on (9 d 18 h),
// else without its zero tail: 48h, 50h30m, 7m12s.
func span(d time.Duration) string {
	if d.Abs() >= 72*time.Hour {
		days, hours := int(d.Abs()/(24*time.Hour)), int(d.Abs()%(24*time.Hour)/time.Hour)
		if hours == 0 {
			return fmt.Sprintf("%d d", days)
		}
		return fmt.Sprintf("%d d %d h", days, hours)
	}
	s := d.Abs().String()
	if strings.HasSuffix(s, "m0s") {
		s = s[:len(s)-2]
	}
	if strings.HasSuffix(s, "h0m") {
		s = s[:len(s)-2]
	}
	return s
}
