package mobile_test

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"net"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc"

	"tamp/client/mobile"
	"tamp/server"
	"tamp/server/sqlitestore"
)

// tampd starts a server on 127.0.0.1:0 and returns its address and the
// server.
func tampd(t *testing.T) (string, *server.Server) {
	t.Helper()
	st, err := sqlitestore.Open(context.Background(), filepath.Join(t.TempDir(), "ledger.db"), sqlitestore.Options{SynchronousNormal: true})
	if err != nil {
		t.Fatal(err)
	}
	srv := server.New(server.Options{Store: st, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	g := grpc.NewServer(srv.RequestCodec(), grpc.ChainUnaryInterceptor(srv.UnaryInterceptor), grpc.ChainStreamInterceptor(srv.StreamInterceptor))
	srv.Register(g)
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	go g.Serve(lis)
	t.Cleanup(func() { g.Stop(); srv.Close(); st.Close() })
	return lis.Addr().String(), srv
}

type progress struct {
	mu     sync.Mutex
	phases map[string]int64
}

func (p *progress) OnProgress(phase string, entries, bytes, total int64) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.phases[phase] = max(p.phases[phase], entries)
}

type fixedClock struct{ t time.Time }

func (c fixedClock) NowMicros() int64 { return c.t.UnixMicro() }

// payload decodes a facade answer and checks its schema.
func payload(t *testing.T, text, name string, v any) {
	t.Helper()
	var m map[string]json.RawMessage
	if err := json.Unmarshal([]byte(text), &m); err != nil {
		t.Fatalf("%s: %v", text, err)
	}
	if string(m["schema"]) != `"`+mobile.SchemaVersion+`"` {
		t.Errorf("schema %s, want %q", m["schema"], mobile.SchemaVersion)
	}
	if err := json.Unmarshal(m[name], v); err != nil {
		t.Fatalf("%s of %s: %v", name, text, err)
	}
}

// An inspector's day through the facade alone: enrol, record offline and
// see the result at once, sync with progress, read the status and a
// report; a QA manager's set-up first.
func TestFieldDayThroughTheFacade(t *testing.T) {
	addr, srv := tampd(t)
	ctx := context.Background()
	project, err := srv.CreateProject(ctx, "Greasewood Bench pad")
	if err != nil {
		t.Fatal(err)
	}
	enrol := func(name string, role server.Role) *mobile.Store {
		t.Helper()
		user, err := srv.AddUser(ctx, name, false)
		if err != nil {
			t.Fatal(err)
		}
		if err := srv.AddMember(ctx, project, user, role); err != nil {
			t.Fatal(err)
		}
		code, _, err := srv.IssueEnrollmentCode(ctx, user)
		if err != nil {
			t.Fatal(err)
		}
		s, err := mobile.Open(filepath.Join(t.TempDir(), name+".db"), fixedClock{time.Now()})
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { s.Close() })
		if _, err := s.Enroll(addr, "", true, code, name+"'s tablet", mobile.NewCancel()); err != nil {
			t.Fatalf("enrol %s: %v", name, err)
		}
		return s
	}
	qa, insp := enrol("Quade", server.QA), enrol("Ines", server.Inspector)

	spec, err := qa.DefineSpec(project, `{"name": "pad fill", "min_compaction": "95", "moisture_basis": "points_of_optimum", "moisture_low": "-2", "moisture_high": "2"}`)
	if err != nil {
		t.Fatal(err)
	}
	ref, err := qa.AddReference(project, `{"material": "tan silty sand", "standard": "ASTM D698", "method": "A", "max_dry_density": 1858.1, "optimum_moisture": 13.5}`)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := qa.Sync(addr, "", true, project, nil, nil); err != nil {
		t.Fatal(err)
	}
	if _, err := insp.Sync(addr, "", true, project, nil, nil); err != nil {
		t.Fatal(err)
	}

	// Measured wet density 2000 kg/m3 at 12 %: dry density = 2000 / 1.12 =
	// 1785.7 kg/m3 (phase relation, ASTM D2216/D6938); relative compaction
	// = 1785.7 / 1858.1 x 100 = 96.1 %; moisture deviation 12 - 13.5 = -1.5.
	text, err := insp.RecordTest(fmt.Sprintf(`{"project": %q, "spec_id": %q, "reference_id": %q,
		"readings": {"wet_density": {"wet_density": 2000, "moisture": 12}}, "location": {"station": 381, "offset": -3.5}, "feature": "pad", "lift_number": 2}`,
		project, spec, ref))
	if err != nil {
		t.Fatal(err)
	}
	var rec struct {
		TestID string `json:"test_id"`
		Result struct {
			DryDensity         float64 `json:"dry_density"`
			RelativeCompaction float64 `json:"relative_compaction"`
			MoistureDeviation  float64 `json:"moisture_deviation"`
			Verdict            string  `json:"verdict"`
		} `json:"result"`
	}
	payload(t, text, "result", &rec)
	if d := rec.Result.DryDensity - 2000/1.12; d > 0.01 || d < -0.01 {
		t.Errorf("dry density %.2f, want %.2f", rec.Result.DryDensity, 2000/1.12)
	}
	if rc := 2000 / 1.12 / 1858.1 * 100; rec.Result.RelativeCompaction < rc-0.01 || rec.Result.RelativeCompaction > rc+0.01 || rec.Result.Verdict != "pass" {
		t.Errorf("relative compaction %.2f (%s), want %.2f and pass", rec.Result.RelativeCompaction, rec.Result.Verdict, rc)
	}

	// The tablet offers the spec and the reference by name.
	text, err = insp.Records(project, mobile.RecordsSpecs)
	if err != nil {
		t.Fatal(err)
	}
	var specs []struct {
		ID   string `json:"id"`
		Name string `json:"name"`
	}
	payload(t, text, mobile.RecordsSpecs, &specs)
	if len(specs) != 1 || specs[0].ID != spec || specs[0].Name != "pad fill" {
		t.Errorf("specs %s, want the pad fill spec", text)
	}
	if _, err := insp.Records(project, "gauges"); mobile.ErrorReason(errText(err)) != mobile.ReasonUnknownRecords {
		t.Errorf("an unknown kind of records: %v, want UNKNOWN_RECORDS", err)
	}

	p := &progress{phases: map[string]int64{}}
	text, err = insp.Sync(addr, "", true, project, p, mobile.NewCancel())
	if err != nil {
		t.Fatal(err)
	}
	var rep struct {
		Accepted int `json:"accepted"`
	}
	payload(t, text, "sync", &rep)
	if rep.Accepted != 1 || p.phases["push"] != 1 {
		t.Errorf("sync accepted %d, progress %v; want the one test pushed and reported", rep.Accepted, p.phases)
	}

	if _, err := qa.Sync(addr, "", true, project, nil, nil); err != nil {
		t.Fatal(err)
	}
	text, err = qa.Report(project, mobile.ReportReviewQueue, "")
	if err != nil {
		t.Fatal(err)
	}
	var queue []struct {
		ID string `json:"id"`
	}
	payload(t, text, mobile.ReportReviewQueue, &queue)
	if len(queue) != 1 || queue[0].ID != rec.TestID {
		t.Errorf("review queue %s, want the inspector's test", text)
	}
	text, err = qa.Report(project, mobile.ReportAuditFindings, "")
	if err != nil {
		t.Fatal(err)
	}
	var findings []struct {
		Code string `json:"code"`
	}
	payload(t, text, mobile.ReportAuditFindings, &findings)
	if findings == nil {
		t.Errorf("audit findings %s, want a list (empty when nothing is found)", text)
	}
	if err := qa.ReviewTest(project, rec.TestID, false, ""); mobile.ErrorReason(errText(err)) != mobile.ReasonInvalidEntry {
		t.Errorf("return without a comment: %v, want INVALID_ENTRY", err)
	}
	if err := qa.ReviewTest(project, rec.TestID, true, ""); err != nil {
		t.Fatal(err)
	}

	// Errors carry reason codes: a local one, a JSON one, a server's.
	if _, err := insp.RecordTest(`{"projekt": "x"}`); mobile.ErrorReason(errText(err)) != mobile.ReasonInvalidJSON {
		t.Errorf("a misspelt field: %v, want INVALID_JSON", err)
	}
	if err := insp.VoidTest(project, rec.TestID, ""); mobile.ErrorReason(errText(err)) != mobile.ReasonRequired {
		t.Errorf("a void without a reason: %v, want REASON_REQUIRED", err)
	}
	if _, err := insp.Sync(addr, "", true, "01900000-0000-7000-8000-00000000dead", nil, nil); mobile.ErrorReason(errText(err)) != "NOT_A_MEMBER" {
		t.Errorf("sync of a project the user is not in: %v, want the server's NOT_A_MEMBER", err)
	}

	// A cancelled sync stops with CANCELLED.
	c := mobile.NewCancel()
	c.Cancel()
	if _, err := insp.Sync(addr, "", true, project, nil, c); mobile.ErrorReason(errText(err)) != mobile.ReasonCancelled {
		t.Errorf("a cancelled sync: %v, want CANCELLED", err)
	}

	text, err = insp.Status(project)
	if err != nil {
		t.Fatal(err)
	}
	var st struct {
		Outbox struct {
			Pending int `json:"pending"`
		} `json:"outbox"`
		Verified struct {
			Seq uint64 `json:"seq"`
		} `json:"verified"`
	}
	payload(t, text, "status", &st)
	if st.Outbox.Pending != 0 || st.Verified.Seq == 0 {
		t.Errorf("status %s: entries still pending, or no point verified", text)
	}
}

func errText(err error) string {
	if err == nil {
		return ""
	}
	return err.Error()
}
