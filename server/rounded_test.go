package server_test

import (
	"context"
	"math"
	"slices"
	"strings"
	"testing"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/server"
)

// The QA manager's reports over gRPC come in the project's units at the
// methods' resolution (dry density to 0.1 pcf, percentages to 0.1: ASTM
// D698 sec. 11), verdicts and codes in words, and say the same as the
// office laptop's copy computes offline.
func TestReportsRoundedInProjectUnits(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Juniper Hollow pad")
	qa, office, ann := c.device("quinn", server.QA), c.device("olga", server.Office), c.device("ann", server.Inspector)
	cc := c.conn("")
	ctx := context.Background()
	_, ref := setUp(t, c, qa, project)
	spec, err := qa.DefineSpec(ctx, project, client.Spec{Name: "pad, 1 per 40 m3, 3 per lift", MinCompaction: "95", MoistureLow: "-2",
		MoistureHigh: "2", VolumePerTest: 40, MinTestsPerLift: 3, LotAcceptancePWL: 50})
	if err != nil {
		t.Fatal(err)
	}
	pit, err := qa.MeasureBorrowSource(ctx, project, client.BorrowSource{Name: "south pit",
		BankTests: []client.Readings{coneReadings(99, 9), coneReadings(101, 9)}, LooseDryDensity: pcf(83), ReferenceID: ref})
	if err != nil {
		t.Fatal(err)
	}
	syncOK(t, qa, cc, project)
	syncOK(t, office, cc, project)
	pad, err := office.RecordPlacement(ctx, project, client.Placement{Feature: "pad", LiftNumber: 1, Thickness: 0.25,
		CompactedVolume: 200, BorrowSourceID: pit, PlacedOn: "2026-09-14", SpecID: spec})
	if err != nil {
		t.Fatal(err)
	}
	syncOK(t, office, cc, project)
	syncOK(t, ann, cc, project)
	var failed string
	for i, dry := range []float64{112.04, 113.2, 104.0, 111.6} {
		r, err := ann.RecordTest(ctx, client.TestInput{Project: project, SpecID: spec, ReferenceID: ref, PlacementID: pad,
			Readings: coneReadings(dry, 13), Feature: "pad", LiftNumber: 1, Location: client.Location{Station: 100 + 10*float64(i)}})
		if err != nil {
			t.Fatal(err)
		}
		if r.Result.Verdict == client.Fail {
			failed = r.TestID
		}
	}
	if failed == "" {
		t.Fatal("no failing test")
	}
	// A retest 30 m away from its failure: the audit finds it.
	if _, err := ann.RecordRetest(ctx, project, failed, client.RetestInput{Readings: coneReadings(112.5, 13),
		Location: &client.Location{Station: 150}}); err != nil {
		t.Fatal(err)
	}
	syncOK(t, ann, cc, project)
	syncOK(t, office, cc, project)
	rctx, err := office.CallContext(ctx)
	if err != nil {
		t.Fatal(err)
	}
	rs := pb.NewLedgerReadServiceClient(cc)

	rounded := func(what string, m *pb.Measure, places int, unit string) {
		t.Helper()
		f := math.Pow(10, float64(places))
		if m == nil || m.GetUnit() != unit || math.Abs(m.GetValue()*f-math.Round(m.GetValue()*f)) > 1e-6 || !strings.HasSuffix(m.GetText(), " "+unit) {
			t.Errorf("%s = %v, want a value to %d places in %s", what, m, places, unit)
		}
	}

	queue, err := rs.ListReviewQueue(rctx, &pb.ListReviewQueueRequest{ProjectId: project})
	if err != nil {
		t.Fatal(err)
	}
	if queue.GetUnits() != "us" || len(queue.GetLines()) != 5 || len(queue.GetLines()) != len(queue.GetTests()) {
		t.Fatalf("review queue: %d lines in %q for %d tests, want 5 in us", len(queue.GetLines()), queue.GetUnits(), len(queue.GetTests()))
	}
	for _, l := range queue.GetLines() {
		rounded("queued dry density", l.GetDryDensity(), 1, "pcf")
		if l.GetVerdict() != "pass" && l.GetVerdict() != "fail" {
			t.Errorf("verdict %q, want a word", l.GetVerdict())
		}
	}

	audit, err := rs.GetRetestAudit(rctx, &pb.GetRetestAuditRequest{ProjectId: project})
	if err != nil {
		t.Fatal(err)
	}
	if audit.GetUnits() != "us" || len(audit.GetChains()) != 1 {
		t.Fatalf("audit %v", audit)
	}
	ch := audit.GetChains()[0]
	rounded("failed dry density", ch.GetFailed().GetDryDensity(), 1, "pcf")
	rounded("failed relative compaction", ch.GetFailed().GetRelativeCompaction(), 1, "%")
	rounded("retest distance", ch.GetRetestDistance(), 2, "ft")
	if ch.GetFailed().GetVerdict() != "fail" || ch.GetRetests()[0].GetVerdict() != "pass" || ch.GetClosure() != "retested" ||
		ch.GetFailed().GetStation() != "3+93.70" {
		t.Errorf("chain %v", ch)
	}
	var codesOnline []string
	for _, f := range audit.GetFindings() {
		codesOnline = append(codesOnline, f.GetCode()+" "+f.GetTestId())
		if f.GetTitle() == "" || len(f.GetEntries()) == 0 {
			t.Errorf("finding %v has no title or entries", f)
		}
	}
	offline, err := office.AuditFindings(ctx, project)
	if err != nil {
		t.Fatal(err)
	}
	var codesOffline []string
	for _, f := range offline {
		codesOffline = append(codesOffline, f.Code+" "+f.TestID)
	}
	if !slices.Contains(codesOnline, "retest_away_from_failure "+ch.GetRetests()[0].GetTestId()) || !slices.Equal(codesOnline, codesOffline) {
		t.Errorf("findings on the server %q, offline %q; want the retest away from its failure in both", codesOnline, codesOffline)
	}

	freq, err := rs.GetTestFrequency(rctx, &pb.GetTestFrequencyRequest{ProjectId: project})
	if err != nil {
		t.Fatal(err)
	}
	// 200 m3 at one per 40 m3 is 5 (VolumePerTest 40 m3 = 52.3 yd3); 3 per
	// lift asks fewer. Four final tests: the failure counts through its
	// retest.
	if len(freq.GetRows()) != 1 {
		t.Fatalf("frequency %v", freq)
	}
	fr := freq.GetRows()[0]
	if fr.GetRequired() != 5 || fr.GetTaken() != 4 || fr.GetShortfall() != 1 || fr.GetStatus() != "short" || fr.GetPlacement() != "pad lift 1" ||
		len(fr.GetRules()) != 2 || fr.GetRules()[0].GetRule() != "one test per 52.3 yd3" {
		t.Errorf("frequency row %v", fr)
	}
	rounded("lift volume", fr.GetRules()[0].GetQuantity(), 1, "yd3")

	lots, err := rs.GetLots(rctx, &pb.GetLotsRequest{ProjectId: project})
	if err != nil {
		t.Fatal(err)
	}
	if len(lots.GetLots()) != 1 || len(lots.GetLots()[0].GetQualities()) != 2 || len(lots.GetLots()[0].GetLeftOut()) != 1 ||
		lots.GetLots()[0].GetLeftOut()[0].GetReasonText() == "" {
		t.Fatalf("lots %v", lots)
	}
	q := lots.GetLots()[0].GetQualities()[0]
	if q.GetCharacteristic() != "relative compaction" || q.GetN() != 4 || q.GetLimits() != "at least 95 %" {
		t.Errorf("quality %v", q)
	}
	rounded("PWL", q.GetPwl(), 1, "%")
	_, err = rs.GetLots(rctx, &pb.GetLotsRequest{ProjectId: project, Feature: "pad", LiftFrom: 5, LiftTo: 2})
	if status.Code(err) != codes.InvalidArgument || !strings.Contains(err.Error(), "lift") {
		t.Errorf("lifts 5 to 2: %v, want InvalidArgument naming the lift bound", err)
	}

	rec, err := rs.GetReconciliation(rctx, &pb.GetReconciliationRequest{ProjectId: project})
	if err != nil {
		t.Fatal(err)
	}
	var scopes []string
	for _, r := range rec.GetRows() {
		scopes = append(scopes, r.GetScope()+" "+r.GetName())
		rounded(r.GetName()+" compacted", r.GetCompactedVolume(), 1, "yd3")
		rounded(r.GetName()+" fill density", r.GetFillDryDensity(), 1, "pcf")
		if len(r.GetFactors()) == 0 || !strings.Contains(r.GetFactors()[0].GetDefinition(), "shrinkage = ") {
			t.Errorf("%s factors %v, want shrinkage beside its definition", r.GetName(), r.GetFactors())
		}
	}
	if !slices.Equal(scopes, []string{"borrow_source south pit", "feature pad"}) {
		t.Errorf("reconciliation rows %q", scopes)
	}
}
