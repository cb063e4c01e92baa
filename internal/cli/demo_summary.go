package cli

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"slices"
	"time"

	"tamp/client"
	"tamp/internal/chart"
	"tamp/internal/exports"
	"tamp/internal/soil"
)

// demoSummary is what `tamp demo --json` prints. Every figure is read from
// the ledger the day produced: the devices' stores, the office's copy and
// the server's ledger store. Volumes and densities are in the project's
// units (volume_unit, density_unit).
type demoSummary struct {
	Project            string           `json:"project"`
	ProjectName        string           `json:"project_name"`
	Day                string           `json:"day"`
	TimeZone           string           `json:"time_zone"`
	Units              string           `json:"units"`
	VolumeUnit         string           `json:"volume_unit"`
	DensityUnit        string           `json:"density_unit"`
	Devices            []demoDeviceOut  `json:"devices"`
	TestsRecorded      int              `json:"tests_recorded"`  // by the devices, as each device's own store holds them
	TestsInLedger      int              `json:"tests_in_ledger"` // in the office's copy of the project's ledger
	Retests            int              `json:"retests"`
	Failures           int              `json:"failures"` // original tests (not retests) whose current revision fails
	OpenFailures       int              `json:"open_failures"`
	Corrections        int              `json:"corrections"` // revisions after the first
	Conflicts          int              `json:"conflicts"`
	Reviews            demoReviewsOut   `json:"reviews"`
	ClockSkewEntries   int              `json:"clock_skew_entries"` // entries the server flagged for their device's clock
	LedgerEntries      uint64           `json:"ledger_entries"`
	LedgerHead         string           `json:"ledger_head"` // the hash chain's head, SHA-256 hex
	DevicesInAgreement bool             `json:"devices_in_agreement"`
	Reconciliation     []demoBalanceOut `json:"reconciliation"`
	Kept               *demoKeptOut     `json:"kept,omitempty"`
}

// demoDeviceOut is one device at the end of the day.
type demoDeviceOut struct {
	Name          string `json:"name"`
	Person        string `json:"person"`
	Role          string `json:"role"`
	DeviceID      string `json:"device_id"`
	TestsRecorded int    `json:"tests_recorded"`
	VerifiedSeq   uint64 `json:"verified_seq"`
	VerifiedHead  string `json:"verified_head"`
	Pending       int    `json:"pending"`
	InAgreement   bool   `json:"in_agreement"` // its verified head is the server's
}

type demoReviewsOut struct {
	Approved   int `json:"approved"`
	Returned   int `json:"returned"`
	Unreviewed int `json:"unreviewed"`
	Queue      int `json:"queue"` // awaiting the office: unreviewed, or returned and since corrected
}

// demoBalanceOut is one borrow source's reconciliation.
type demoBalanceOut struct {
	Source              string `json:"source"`
	CompactedVolume     num    `json:"compacted_volume"`
	CompactedDryDensity num    `json:"compacted_dry_density"` // mean of the graded original tests on its lifts
	Tests               int    `json:"tests"`
	BankDryDensity      num    `json:"bank_dry_density"`
	BankVolume          num    `json:"bank_volume"`
	ShrinkagePercent    num    `json:"shrinkage_percent"`
	LooseHauled         num    `json:"loose_hauled"`
	LooseExpected       num    `json:"loose_expected"`
}

type demoKeptOut struct {
	OfficeStore string `json:"office_store"`
	Ledger      string `json:"ledger"`
	// Files are the exports, report JSON and charts written beside them,
	// from the office's store; GeoJSONSkipped the tests without a position,
	// left out of tests.geojson rather than placed anywhere.
	Files          []string `json:"files"`
	GeoJSONSkipped int      `json:"geojson_skipped"`
}

func (d *demoDay) summarize(ctx context.Context) (*demoSummary, error) {
	head, err := d.srv.ledger.Head(ctx, d.project)
	if err != nil {
		return nil, err
	}
	skews, err := d.srv.ledger.ClockSkews(ctx, d.project)
	if err != nil {
		return nil, err
	}
	s := &demoSummary{Project: d.project, ProjectName: demoProjectName, Day: d.cfg.day, TimeZone: demoZone,
		Units: demoUnits.String(), VolumeUnit: demoUnits.Unit(soil.Volume), DensityUnit: demoUnits.Unit(soil.Density),
		ClockSkewEntries: len(skews), LedgerEntries: head.Seq, LedgerHead: head.Hash.String(), DevicesInAgreement: true}

	for _, dev := range d.devices {
		st, err := dev.store.Status(ctx, d.project)
		if err != nil {
			return nil, err
		}
		out := demoDeviceOut{Name: dev.name(), Person: dev.person, Role: string(dev.role), DeviceID: dev.store.DeviceID(),
			VerifiedSeq: st.Verified.Seq, VerifiedHead: st.Verified.Hash, Pending: st.Outbox.Pending}
		for _, t := range dev.store.TestsOn(d.project, d.cfg.day) {
			if t.Device == out.DeviceID {
				out.TestsRecorded++
			}
		}
		out.InAgreement = st.Verified.Seq == head.Seq && st.Verified.Epoch == head.Epoch && st.Verified.Hash == head.Hash.String()
		s.DevicesInAgreement = s.DevicesInAgreement && out.InAgreement
		s.TestsRecorded += out.TestsRecorded
		s.Devices = append(s.Devices, out)
	}

	of := d.office.store
	for _, t := range of.TestsOn(d.project, d.cfg.day) {
		s.TestsInLedger++
		if t.RetestOf != "" {
			s.Retests++
		} else if t.Result.Verdict == client.Fail && !t.Voided {
			s.Failures++
		}
		s.Corrections += max(len(t.Revisions)-1, 0)
		switch t.ReviewStatus {
		case client.Approved:
			s.Reviews.Approved++
		case client.Returned:
			s.Reviews.Returned++
		default:
			s.Reviews.Unreviewed++
		}
	}
	s.OpenFailures = len(of.OpenFailures(d.project))
	s.Conflicts = len(of.Conflicts(d.project))
	s.Reviews.Queue = len(of.ReviewQueue(d.project, ""))

	bal, err := of.Reconcile(d.project)
	if err != nil {
		return nil, err
	}
	vol := func(v float64) num { return some(demoUnits.FromSI(soil.Volume, v), demoUnits.Places(soil.Volume)) }
	den := func(v float64) num { return some(demoUnits.FromSI(soil.Density, v), demoUnits.Places(soil.Density)) }
	for _, b := range bal {
		if b.Scope != client.BorrowSourceScope {
			continue
		}
		s.Reconciliation = append(s.Reconciliation, demoBalanceOut{Source: b.BorrowSource, CompactedVolume: vol(b.CompactedVolume),
			CompactedDryDensity: den(b.FillDryDensity), Tests: b.Tests, BankDryDensity: den(b.BankDryDensity), BankVolume: vol(b.BankVolume),
			ShrinkagePercent: some(b.ShrinkagePercent, 1), LooseHauled: vol(b.LooseHauled), LooseExpected: vol(b.LooseExpected)})
	}
	return s, nil
}

// keep writes the office's store and the project's ledger to the --out
// directory. The ledger is exported by the office's device and verified
// offline before it is kept. The store is closed, so that SQLite folds its
// write-ahead log into the file, then copied, and the copy is opened and
// must show the office's view of the project. Each file is written under a
// temporary name and renamed into place once whole.
func (d *demoDay) keep(ctx context.Context, sum *demoSummary) (*demoKeptOut, error) {
	dir := d.cfg.out
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, err
	}
	if err := demoCheckOut(dir); err != nil {
		return nil, err
	}
	kept := &demoKeptOut{OfficeStore: filepath.Join(dir, "office.db"), Ledger: filepath.Join(dir, "ledger.tamp")}

	partial := kept.Ledger + ".partial"
	defer os.Remove(partial)
	f, err := os.Create(partial)
	if err != nil {
		return nil, err
	}
	_, err = d.office.store.Export(ctx, d.srv.conn, d.project, f)
	if err = errors.Join(err, f.Sync(), f.Close()); err != nil {
		return nil, fmt.Errorf("export the ledger: %w", err)
	}
	if f, err = os.Open(partial); err != nil {
		return nil, err
	}
	rep, err := client.VerifyExport(f)
	f.Close()
	if err != nil {
		return nil, fmt.Errorf("the exported ledger: %w", err)
	}
	if rep.Head.Hash != sum.LedgerHead || rep.Head.Seq != sum.LedgerEntries {
		return nil, fmt.Errorf("the exported ledger ends at %d %s, not at the server's head %d %s", rep.Head.Seq, rep.Head.Hash, sum.LedgerEntries, sum.LedgerHead)
	}
	if err := os.Rename(partial, kept.Ledger); err != nil {
		return nil, err
	}

	if err := d.writeOutputs(ctx, dir, kept); err != nil {
		return nil, err
	}

	// The kept store remembers the project, so read commands need no
	// --project.
	if err := d.office.store.SetSetting(ctx, projectSetting, d.project); err != nil {
		return nil, err
	}
	digest := d.office.store.Digest(d.project)
	err = d.office.store.Close()
	d.office.store = nil
	if err != nil {
		return nil, fmt.Errorf("close the office's store: %w", err)
	}
	if _, err := os.Stat(d.office.path + "-wal"); err == nil {
		return nil, fmt.Errorf("the office's store kept a write-ahead log after closing; it was not copied")
	}
	partial = kept.OfficeStore + ".partial"
	defer os.Remove(partial)
	if err := demoCopyFile(d.office.path, partial); err != nil {
		return nil, err
	}
	if err := os.Rename(partial, kept.OfficeStore); err != nil {
		return nil, err
	}
	copied, err := client.Open(ctx, kept.OfficeStore, client.Options{})
	if err != nil {
		return nil, fmt.Errorf("open the copy of the office's store: %w", err)
	}
	got := copied.Digest(d.project)
	if err := copied.Close(); err != nil {
		return nil, err
	}
	if got != digest {
		return nil, fmt.Errorf("the copy of the office's store shows the project as %s, the office as %s", got, digest)
	}
	return kept, nil
}

// demoCopyFile copies a closed file, syncing the copy to disk.
func demoCopyFile(from, to string) error {
	src, err := os.Open(from)
	if err != nil {
		return err
	}
	defer src.Close()
	dst, err := os.OpenFile(to, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o600)
	if err != nil {
		return err
	}
	_, err = io.Copy(dst, src)
	return errors.Join(err, dst.Sync(), dst.Close())
}

// writeOutputs writes, from the office's store, the tests and their
// history as CSV, their positions as GeoJSON, each QA report as JSON, and
// a moisture-density chart per laboratory reference and a run chart per
// specification, as SVG and PNG. Each file is written whole under a
// temporary name and renamed into place.
func (d *demoDay) writeOutputs(ctx context.Context, dir string, kept *demoKeptOut) error {
	st := d.office.store
	tests := st.Tests(d.project)
	sys := demoUnits
	write := func(name string, fn func(io.Writer) error) error {
		path := filepath.Join(dir, name)
		partial := path + ".partial"
		defer os.Remove(partial)
		f, err := os.Create(partial)
		if err != nil {
			return err
		}
		if err := errors.Join(fn(f), f.Sync(), f.Close()); err != nil {
			return fmt.Errorf("write %s: %w", name, err)
		}
		if err := os.Rename(partial, path); err != nil {
			return err
		}
		kept.Files = append(kept.Files, path)
		return nil
	}
	if err := write("tests.csv", func(w io.Writer) error { return exports.TestsCSV(w, tests, sys) }); err != nil {
		return err
	}
	if err := write("history.csv", func(w io.Writer) error { return exports.HistoryCSV(w, tests, sys) }); err != nil {
		return err
	}
	if err := write("tests.geojson", func(w io.Writer) error {
		skipped, err := exports.TestsGeoJSON(w, tests, sys)
		kept.GeoJSONSkipped = len(skipped)
		return err
	}); err != nil {
		return err
	}
	// Each report as its command's --json gives it (rounded, in the
	// project's units, with the unit system named), in the report envelope.
	for _, r := range []struct {
		name string
		args []string
	}{
		{"review_queue", []string{"review", "queue"}}, {"retest_audit", []string{"qa", "audit"}},
		{"audit_findings", []string{"qa", "findings"}}, {"frequency", []string{"qa", "frequency"}}, {"lots", []string{"qa", "lots"}},
		{"reconciliation", []string{"qa", "reconcile"}},
	} {
		var out, errOut bytes.Buffer
		args := append(r.args, "--store", d.office.path, "--project", d.project, "--json")
		if err := Run(ctx, args, &out, &errOut); err != nil {
			return fmt.Errorf("report %s: %w %s", r.name, err, errOut.String())
		}
		if err := write(r.name+".json", func(w io.Writer) error { return exports.ReportJSON(w, r.name, json.RawMessage(out.Bytes())) }); err != nil {
			return err
		}
	}

	su, _ := st.SetUp(d.project)
	loc, err := time.LoadLocation(su.TimeZone)
	if err != nil {
		loc = time.UTC
	}
	opts := chart.Options{Units: sys, Water: su.WaterDensity, Location: loc}
	specs := map[string]client.Spec{}
	for _, sp := range st.Specs(d.project) {
		specs[sp.ID] = sp
	}
	// A reference's chart uses the spec its tests name most.
	specOf := func(refID string) (client.Spec, bool) {
		count := map[string]int{}
		for _, t := range tests {
			if t.Content.ReferenceID == refID {
				count[t.Content.SpecID]++
			}
		}
		best, n := "", 0
		for id, c := range count {
			if c > n || (c == n && id < best) {
				best, n = id, c
			}
		}
		sp, ok := specs[best]
		return sp, ok
	}
	for i, ref := range st.References(d.project) {
		sp, ok := specOf(ref.ID)
		if !ok {
			continue
		}
		c, err := chart.MoistureDensity(ref, sp, tests, opts)
		if errors.Is(err, chart.ErrNoData) {
			continue
		}
		if err != nil {
			return fmt.Errorf("moisture-density chart of %s: %w", ref.LabSampleID, err)
		}
		for _, ext := range []string{".svg", ".png"} {
			name := fmt.Sprintf("moisture_density_%d%s", i+1, ext)
			if err := write(name, func(w io.Writer) error {
				if ext == ".svg" {
					return c.WriteSVG(w)
				}
				return c.WritePNG(w)
			}); err != nil {
				return err
			}
		}
	}
	ids := make([]string, 0, len(specs))
	for id := range specs {
		ids = append(ids, id)
	}
	slices.Sort(ids)
	for i, id := range ids {
		c, err := chart.RunChart(tests, specs[id], opts)
		if errors.Is(err, chart.ErrNoData) {
			continue
		}
		if err != nil {
			return fmt.Errorf("run chart of %s: %w", specs[id].Name, err)
		}
		for _, ext := range []string{".svg", ".png"} {
			name := fmt.Sprintf("run_chart_%d%s", i+1, ext)
			if err := write(name, func(w io.Writer) error {
				if ext == ".svg" {
					return c.WriteSVG(w)
				}
				return c.WritePNG(w)
			}); err != nil {
				return err
			}
		}
	}
	return nil
}
