package server_test

import (
	"context"
	"fmt"
	"strings"
	"testing"

	"github.com/google/go-cmp/cmp"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/report"
	"tamp/server"
)

// An office laptop that holds the project's ledger answers every report
// offline as the server does: the review queue, the retest audit and the
// volume reconciliation as the read service's RPCs answer them, and test
// frequency and lots as the server's projection gives them.
func TestOfficeReportsOfflineMatchServer(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Sagebrush Flats pad")
	qa, office := c.device("quinn", server.QA), c.device("olga", server.Office)
	ann, bo := c.device("ann", server.Inspector), c.device("bo", server.Inspector)
	cc := c.conn("")
	ctx := context.Background()
	_, ref := setUp(t, c, qa, project)
	spec, err := qa.DefineSpec(ctx, project, client.Spec{Name: "pad, 1 test per 40 m3", MinCompaction: "95", MoistureLow: "-2",
		MoistureHigh: "2", VolumePerTest: 40})
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
	var pads []string
	for i, vol := range []float64{320, 180} {
		pad, err := office.RecordPlacement(ctx, project, client.Placement{Feature: "pad", LiftNumber: uint32(i + 1), Thickness: 0.25,
			CompactedVolume: vol, BorrowSourceID: pit, PlacedOn: "2026-09-14"})
		if err != nil {
			t.Fatal(err)
		}
		pads = append(pads, pad)
	}
	if _, err := office.RecordHaul(ctx, project, client.Haul{BorrowSourceID: pit, Loads: 40, LooseVolumePerLoad: 12, PlacementID: pads[0]}); err != nil {
		t.Fatal(err)
	}
	syncOK(t, office, cc, project)

	// Two inspectors test both lifts; some fail, and are retested or voided.
	syncOK(t, ann, cc, project)
	syncOK(t, bo, cc, project)
	var fails []client.TestResult
	for i, s := range []*client.Store{ann, bo, ann, bo, ann, bo, ann} {
		dry := []float64{112, 104, 113, 111.5, 103, 114, 110.8}[i]
		r, err := s.RecordTest(ctx, client.TestInput{Project: project, SpecID: spec, ReferenceID: ref, PlacementID: pads[i%2],
			Readings: coneReadings(dry, 13), Feature: "pad", Location: client.Location{Station: 100 + 10*float64(i)}})
		if err != nil {
			t.Fatal(err)
		}
		if r.Result.Verdict == client.Fail {
			fails = append(fails, r)
		}
	}
	if len(fails) != 2 {
		t.Fatalf("%d failing tests, want 2", len(fails))
	}
	if _, err := bo.RecordRetest(ctx, project, fails[0].TestID, client.RetestInput{Readings: coneReadings(112, 13),
		Location: &client.Location{Station: 114}}); err != nil {
		t.Fatal(err)
	}
	syncOK(t, ann, cc, project)
	syncOK(t, bo, cc, project)
	syncOK(t, office, cc, project)
	for i, tt := range office.Today(project) {
		if i%3 == 0 {
			if err := office.ReviewTest(ctx, project, tt.ID, client.Approve, ""); err != nil {
				t.Fatal(err)
			}
		}
	}
	syncOK(t, office, cc, project)
	syncOK(t, qa, cc, project)
	if err := qa.AcceptException(ctx, project, fails[1].TestID, "the engineer of record accepts it"); err != nil {
		t.Fatal(err)
	}
	syncOK(t, qa, cc, project)
	syncOK(t, office, cc, project)
	if office.Digest(project) != c.digest() {
		t.Fatal("the office laptop does not hold the server's ledger")
	}

	rctx, err := office.CallContext(ctx)
	if err != nil {
		t.Fatal(err)
	}
	rs := pb.NewLedgerReadServiceClient(cc)

	// Review queue.
	queue, err := rs.ListReviewQueue(rctx, &pb.ListReviewQueueRequest{ProjectId: project})
	if err != nil {
		t.Fatal(err)
	}
	var want, got []string
	for _, s := range queue.GetTests() {
		want = append(want, summaryLine(s.GetTestId(), s.GetRevision(), s.GetResults().GetRelativeCompaction(), s.GetVoided()))
	}
	offline := office.ReviewQueue(project, "")
	for _, tt := range offline {
		got = append(got, summaryLine(tt.ID, tt.Current, tt.Result.RelativeCompaction, tt.Voided))
	}
	if len(want) < 3 || !cmp.Equal(got, want) {
		t.Errorf("review queue offline differs from the server's:\n%s", cmp.Diff(want, got))
	}

	// Retest audit.
	audit, err := rs.AuditRetests(rctx, &pb.AuditRetestsRequest{ProjectId: project})
	if err != nil {
		t.Fatal(err)
	}
	want, got = nil, nil
	for _, ch := range audit.GetChains() {
		line := []string{ch.GetFailed().GetTestId()}
		for _, r := range ch.GetRetests() {
			line = append(line, r.GetTestId())
		}
		want = append(want, fmt.Sprintf("%s closed=%v", strings.Join(line, " "), ch.GetClosed()))
	}
	for _, ch := range office.RetestAudit(project) {
		line := []string{ch.Failed.ID}
		for _, r := range ch.Retests {
			line = append(line, r.ID)
		}
		got = append(got, fmt.Sprintf("%s closed=%v", strings.Join(line, " "), ch.Closure != client.ClosureOpen))
	}
	if len(want) != 2 || !cmp.Equal(got, want) {
		t.Errorf("retest audit offline differs from the server's:\n%s", cmp.Diff(want, got))
	}

	// Volume reconciliation.
	vols, err := rs.ReconcileVolumes(rctx, &pb.ReconcileVolumesRequest{ProjectId: project})
	if err != nil {
		t.Fatal(err)
	}
	all, err := office.Reconcile(project)
	if err != nil {
		t.Fatal(err)
	}
	// The old call answers per borrow source; the feature rows are the new
	// call's (TestReportsRoundedInProjectUnits).
	var bal []client.VolumeBalance
	for _, b := range all {
		if b.Scope == client.BorrowSourceScope {
			bal = append(bal, b)
		}
	}
	if len(bal) != len(vols.GetBalances()) || len(bal) != 1 {
		t.Fatalf("%d balances offline, %d on the server, want 1", len(bal), len(vols.GetBalances()))
	}
	sv, b := vols.GetBalances()[0], bal[0]
	if sv.GetBorrowSourceId() != b.BorrowSourceID || sv.GetCompactedVolume() != b.CompactedVolume || sv.GetBankVolume() != b.BankVolume ||
		sv.GetLooseVolumeHauled() != b.LooseHauled || sv.GetShrinkagePercent() != b.ShrinkagePercent || sv.GetSwellPercent() != b.SwellPercent {
		t.Errorf("reconciliation offline %+v, the server's %v", b, sv)
	}
	if b.CompactedVolume != 500 || b.BankVolume <= 0 || b.LooseHauled != 480 {
		t.Errorf("reconciliation %+v, want 500 m3 placed, a bank volume and 480 m3 hauled", b)
	}

	// Frequency and lots, against the server's projection.
	var sFreq []report.Frequency
	var sLots []report.Lot
	var lotErr error
	if err := c.srv.Inspect(ctx, project, func(p *ledger.Projection) {
		sFreq = report.TestFrequency(p)
		sLots, lotErr = report.Lots(p, report.LotScope{})
	}); err != nil || lotErr != nil {
		t.Fatal(err, lotErr)
	}
	freq := office.Frequency(project)
	if len(freq) != 2 || len(freq) != len(sFreq) {
		t.Fatalf("%d frequencies offline, %d on the server, want 2", len(freq), len(sFreq))
	}
	for i, f := range freq {
		s := sFreq[i]
		if f.Placement.ID != s.Placement.ID || f.SpecID != s.SpecID || f.Taken != s.Taken || f.Required != s.Required || f.Shortfall != s.Shortfall {
			t.Errorf("frequency offline %+v, the server's %+v", f, s)
		}
	}
	if freq[0].Required != 8 || freq[0].Taken != 4 {
		t.Errorf("frequency of the first lift: %d of %d tests, want 4 of 8", freq[0].Taken, freq[0].Required)
	}
	lots, err := office.Lots(project, client.LotScope{})
	if err != nil {
		t.Fatal(err)
	}
	if len(lots) != 2 || len(lots) != len(sLots) {
		t.Fatalf("%d lots offline, %d on the server, want 2", len(lots), len(sLots))
	}
	for i, l := range lots {
		s := sLots[i]
		if l.Placement.ID != s.Placement.ID || !cmp.Equal(l.Values, s.Compaction.Values) || l.PWL != s.Compaction.PWL.PWL || l.Mean != s.Compaction.PWL.Mean ||
			l.QualityIndex != s.Compaction.PWL.QualityLower {
			t.Errorf("lot offline %+v, the server's %+v", l, s)
		}
	}
}

func summaryLine(id, rev string, rc float64, voided bool) string {
	return fmt.Sprintf("%s rev %s RC %v voided=%v", id, rev, rc, voided)
}
