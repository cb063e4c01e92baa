package cli

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"github.com/spf13/cobra"

	"tamp/client"
	"tamp/internal/qc"
	"tamp/internal/soil"
)

// closureWords say how a failure was dealt with.
var closureWords = map[client.Closure]string{
	client.ClosureOpen: "OPEN: no passing retest", client.ClosureRetested: "closed by a passing retest",
	client.ClosureException: "closed: QA accepted it as it stands", client.ClosureVoided: "voided",
}

func newQA() *cobra.Command {
	var f projectFlags
	c := &cobra.Command{
		Use:   "qa",
		Short: "The QA manager's reports: retest audit, test frequency, lots, volume reconciliation; accept exceptions",
		Long: `The QA manager's reports, computed on this device from its copy of the project's
ledger with the code the server runs: as recent as the last tamp sync, and
available offline. Values are shown in the project's units (or --units) at
the resolution the methods report. Results support, and never replace,
review by qualified personnel; the project's specifications govern.`,
	}
	f.register(c)

	var auditJSON bool
	audit := &cobra.Command{
		Use: "audit", Short: "Every failing test with its retests and how it was closed", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			chains := ss.s.RetestAudit(ss.project)
			if auditJSON {
				type chainJSON struct {
					Failed       testJSON   `json:"failed"`
					Retests      []testJSON `json:"retests"`
					Closure      string     `json:"closure"`
					Closed       bool       `json:"closed"`
					StationShift num        `json:"station_shift"`
					Units        string     `json:"units"`
				}
				out := []chainJSON{}
				for _, ch := range chains {
					cj := chainJSON{Failed: ss.testOut(ch.Failed), Retests: []testJSON{}, Closure: string(ch.Closure), Closed: ch.Closure != client.ClosureOpen,
						StationShift: ss.u.num(soil.Length, ch.StationShift), Units: ss.u.name()}
					for _, r := range ch.Retests {
						cj.Retests = append(cj.Retests, ss.testOut(r))
					}
					out = append(out, cj)
				}
				return writeJSON(cmd.OutOrStdout(), out)
			}
			w := cmd.OutOrStdout()
			if len(chains) == 0 {
				_, err := fmt.Fprintf(w, "No failing tests in project %s on this device.\n", quoted(ss.projectName()))
				return err
			}
			open := 0
			t := newTable(w, "FAILED TEST", "TAKEN", "STATION", "FEATURE", "RC", "LIMIT", "VERDICT", "RETESTS", "STATION SHIFT", "CLOSURE")
			for _, ch := range chains {
				ft := ch.Failed
				var rs []string
				for _, r := range ch.Retests {
					rs = append(rs, shortID(r.ID)+" "+retestWord(r))
				}
				if ch.Closure == client.ClosureOpen {
					open++
				}
				shift := "-" // no retest, no shift
				if len(ch.Retests) > 0 {
					shift = ss.u.show(soil.Length, ch.StationShift)
				}
				t.row(shortID(ft.ID), localTime(ft.Taken, ss.loc), ss.u.station(ft.Content.Location.Station),
					ft.Content.Feature+" lift "+strconv.Itoa(int(ft.Content.LiftNumber)), ss.u.show(soil.Percent, ft.Result.RelativeCompaction),
					orDefault(compactionLimit(ft.Result.Limits), "-"), verdictWhy(ft.Result), orDefault(strings.Join(rs, ", "), "none"), shift,
					closureWords[ch.Closure])
			}
			if err := t.flush(); err != nil {
				return err
			}
			_, err = fmt.Fprintf(w, "%d failing test(s), %d still open. A retest far along the alignment from its failure may not have tested the reworked area.\n",
				len(chains), open)
			return err
		},
	}
	jsonFlag(audit, &auditJSON)

	var findingsJSON bool
	findings := &cobra.Command{
		Use: "findings", Short: "What the retest audit asks QA to look at, each with the entries it rests on", Args: cobra.NoArgs,
		Long: `The retest audit's findings, as of now: a failure not retested, voided or
accepted within the project's retest window (48 hours unless the set-up says
otherwise); a retest farther from its failure than the project's retest
distance (10 m unless set; by satellite position when both tests have one,
else by station and offset), on another lift, logged before its failure, or
of a test that passed; a failure voided without QA's acceptance; a correction
that turned a failure into a pass; device results that disagree with the
readings; entries from a device whose clock was off when it synced; a review
by someone who was not office or QA at the time. Each names the ledger
entries it rests on. The findings support, and never replace, review by
qualified personnel.`,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			fs, err := ss.s.AuditFindings(cmd.Context(), ss.project)
			if err != nil {
				return err
			}
			if findingsJSON {
				return writeJSON(cmd.OutOrStdout(), nonNil(fs))
			}
			w := cmd.OutOrStdout()
			if len(fs) == 0 {
				_, err := fmt.Fprintf(w, "No findings in project %s on this device.\n", quoted(ss.projectName()))
				return err
			}
			p := &printer{w: w}
			for _, fd := range fs {
				test := ""
				if fd.TestID != "" {
					test = " (test " + shortID(fd.TestID) + ")"
				}
				p.f("%s%s\n  %s\n  entries: %s\n", strings.ToUpper(fd.Title), test, escape(fd.Message), strings.Join(fd.Entries, ", "))
			}
			p.f("%d finding(s). %s\n", len(fs), qc.Caution)
			return p.err
		},
	}
	jsonFlag(findings, &findingsJSON)

	var freqJSON bool
	frequency := &cobra.Command{
		Use: "frequency", Short: "Tests taken against tests required, per placement", Args: cobra.NoArgs,
		Long: `For each placement whose tests name a spec with a volume per test (tamp spec add
--volume-per-test), the tests required (the compacted volume over the volume
per test, rounded up) against the tests taken (retests do not count).`,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			specName := ss.specNames()
			fs := ss.s.Frequency(ss.project)
			if freqJSON {
				type row struct {
					Placement       string `json:"placement"`
					PlacementID     string `json:"placement_id"`
					Spec            string `json:"spec"`
					CompactedVolume num    `json:"compacted_volume"`
					Required        int    `json:"required"`
					Taken           int    `json:"taken"`
					Shortfall       int    `json:"shortfall"`
					Met             bool   `json:"met"`
					Units           string `json:"units"`
				}
				rows := []row{}
				for _, fr := range fs {
					rows = append(rows, row{Placement: placementName(fr.Placement), PlacementID: fr.Placement.ID, Spec: specName[fr.SpecID],
						CompactedVolume: ss.u.num(soil.Volume, fr.Placement.CompactedVolume), Required: fr.Required, Taken: fr.Tests,
						Shortfall: fr.Shortfall, Met: fr.Shortfall == 0, Units: ss.u.name()})
				}
				return writeJSON(cmd.OutOrStdout(), rows)
			}
			w := cmd.OutOrStdout()
			if len(fs) == 0 {
				_, err := fmt.Fprintln(w, "No placement has tests against a spec with a volume per test (tamp spec add --volume-per-test).")
				return err
			}
			t := newTable(w, "PLACEMENT", "SPEC", "COMPACTED VOLUME", "REQUIRED", "TAKEN", "SHORTFALL", "FREQUENCY")
			for _, fr := range fs {
				word := "met"
				if fr.Shortfall > 0 {
					word = "SHORT"
				}
				t.row(placementName(fr.Placement), specName[fr.SpecID], ss.u.show(soil.Volume, fr.Placement.CompactedVolume), strconv.Itoa(fr.Required),
					strconv.Itoa(fr.Tests), strconv.Itoa(fr.Shortfall), word)
			}
			return t.flush()
		},
	}
	jsonFlag(frequency, &freqJSON)

	var lotsJSON bool
	lots := &cobra.Command{
		Use: "lots", Short: "Percent within limits of each lot's relative compaction", Args: cobra.NoArgs,
		Long: `For each placement with at least three final graded tests against one spec's
minimum relative compaction: the mean, the sample standard deviation, the
quality index Q = (mean - limit) / s and the estimated percent of the lot
within the limit (PWL; AASHTO R 9, beta-distribution estimator).

A lot holds final tests only. Left out, and listed under the table with
the reason: a failure that a retest replaced (the retest counts), a test the
office returned, and a voided test.`,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			specName := ss.specNames()
			minRC := map[string]string{}
			for _, sp := range ss.s.Specs(ss.project) {
				minRC[sp.ID] = sp.MinCompaction
			}
			ls, err := ss.s.Lots(ss.project)
			if err != nil {
				return err
			}
			if lotsJSON {
				type row struct {
					Placement    string `json:"placement"`
					PlacementID  string `json:"placement_id"`
					Spec         string `json:"spec"`
					N            int    `json:"n"`
					Mean         num    `json:"mean"`
					StdDev       num    `json:"std_dev"`
					LowerLimit   num    `json:"lower_limit"`
					QualityIndex num    `json:"quality_index"`
					PWL          num    `json:"pwl"`
					LeftOutCount int    `json:"left_out_count"`
					LeftOut      []left `json:"left_out"`
				}
				rows := []row{}
				for _, l := range ls {
					r := row{Placement: placementName(l.Placement), PlacementID: l.Placement.ID, Spec: specName[l.SpecID], N: l.N,
						Mean: some(l.Mean, 1), StdDev: some(l.StdDev, 2), LowerLimit: some(l.LowerLimit, 1), QualityIndex: some(l.QualityIndex, 2), PWL: some(l.PWL, 1),
						LeftOutCount: len(l.LeftOut), LeftOut: []left{}}
					for _, o := range l.LeftOut {
						r.LeftOut = append(r.LeftOut, leftOf(o))
					}
					rows = append(rows, r)
				}
				return writeJSON(cmd.OutOrStdout(), rows)
			}
			w := cmd.OutOrStdout()
			if len(ls) == 0 {
				_, err := fmt.Fprintln(w, "No lot yet: a lot needs a placement with at least three final graded tests against a spec with a minimum relative compaction.")
				return err
			}
			t := newTable(w, "LOT (PLACEMENT)", "SPEC", "TESTS", "MEAN RC", "STD DEV", "LIMIT", "Q", "PWL")
			for _, l := range ls {
				t.row(placementName(l.Placement), specName[l.SpecID], strconv.Itoa(l.N), some(l.Mean, 1).String()+" %", some(l.StdDev, 2).String()+" %",
					"min "+orDefault(minRC[l.SpecID], some(l.LowerLimit, 1).String())+" %", some(l.QualityIndex, 2).String(), some(l.PWL, 1).String()+" %")
			}
			if err := t.flush(); err != nil {
				return err
			}
			for _, l := range ls {
				for _, o := range l.LeftOut {
					if _, err := fmt.Fprintf(w, "Left out of %s: %s\n", placementName(l.Placement), leftOutLine(o)); err != nil {
						return err
					}
				}
			}
			_, err = fmt.Fprintln(w, "The project's specification says which PWL a lot must reach.")
			return err
		},
	}
	jsonFlag(lots, &lotsJSON)

	var recJSON bool
	reconcile := &cobra.Command{
		Use: "reconcile", Short: "Volumes per borrow source and per feature: placed, bank taken, loose hauled, bank still needed", Args: cobra.NoArgs,
		Long: `Balance earthwork through dry mass, per borrow source and per feature. The
compacted volume placed times the volume-weighted mean dry density of the final
tests on it (each lift's mean weighted by its volume; a reworked failure, a
returned and a voided test do not count) is the dry mass placed; divided by the
borrow's mean bank dry density (tamp borrow add) it is the bank volume taken;
with a loose dry density, the loose volume it implies, beside the loads hauled
(tamp haul add). For each feature the project designs (tamp project set-up
--design), the bank volume still needed for the remaining design volume, with
a range from 95 % confidence intervals on both mean densities. Shrinkage and
swell follow the project's convention, written out below the tables.`,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			bs, err := ss.s.Reconcile(ss.project)
			if err != nil {
				return err
			}
			vol := func(v float64) num {
				if v == 0 {
					return some(math.NaN(), 0)
				}
				return ss.u.num(soil.Volume, v)
			}
			dens := func(v float64, n int) num {
				if n == 0 {
					return some(math.NaN(), 0)
				}
				return ss.u.num(soil.Density, v)
			}
			if recJSON {
				type row struct {
					Scope              string   `json:"scope"`
					Name               string   `json:"name"`
					Source             string   `json:"borrow_source"`
					SourceID           string   `json:"borrow_source_id"`
					CompactedVolume    num      `json:"compacted_volume"`
					FillDryDensity     num      `json:"fill_dry_density"`
					FillHalfWidth      num      `json:"fill_dry_density_half_width"`
					Tests              int      `json:"fill_tests"`
					BankDryDensity     num      `json:"bank_dry_density"`
					BankHalfWidth      num      `json:"bank_dry_density_half_width"`
					BankTests          int      `json:"bank_tests"`
					BankVolume         num      `json:"bank_volume"`
					LooseHauled        num      `json:"loose_hauled"`
					LooseExpected      num      `json:"loose_expected"`
					ShrinkagePercent   num      `json:"shrinkage_percent"`
					ShrinkFactor       num      `json:"shrink_factor"`
					DesignShrinkage    num      `json:"design_shrinkage_percent"`
					SwellPercent       num      `json:"swell_percent"`
					HauledSwellPercent num      `json:"hauled_swell_percent"`
					DesignVolume       num      `json:"design_volume"`
					RemainingVolume    num      `json:"remaining_volume"`
					StillNeeded        num      `json:"bank_still_needed"`
					StillNeededLow     num      `json:"bank_still_needed_low"`
					StillNeededHigh    num      `json:"bank_still_needed_high"`
					ShrinkDefinition   string   `json:"shrink_definition"`
					SwellDefinition    string   `json:"swell_definition"`
					RangeMethod        string   `json:"range_method"`
					Notes              []string `json:"notes"`
					Units              string   `json:"units"`
				}
				rows := []row{}
				for _, b := range bs {
					r := row{Scope: b.Scope, Name: b.Name, Source: b.BorrowSource, SourceID: b.BorrowSourceID, CompactedVolume: ss.u.num(soil.Volume, b.CompactedVolume),
						FillDryDensity: dens(b.FillDryDensity, b.Tests), FillHalfWidth: dens(b.FillHalfWidth, b.Tests), Tests: b.Tests,
						BankDryDensity: dens(b.BankDryDensity, b.BankTests), BankHalfWidth: dens(b.BankHalfWidth, b.BankTests), BankTests: b.BankTests,
						BankVolume: vol(b.BankVolume), LooseHauled: vol(b.LooseHauled), LooseExpected: vol(b.LooseExpected),
						ShrinkagePercent: some(math.NaN(), 1), ShrinkFactor: some(math.NaN(), 3), SwellPercent: some(math.NaN(), 1),
						HauledSwellPercent: some(math.NaN(), 1), DesignShrinkage: some(math.NaN(), 1),
						DesignVolume: vol(b.DesignVolume), RemainingVolume: some(math.NaN(), 0), StillNeeded: vol(b.StillNeeded),
						StillNeededLow: vol(b.StillNeededLow), StillNeededHigh: vol(b.StillNeededHigh),
						ShrinkDefinition: b.ShrinkDefinition, SwellDefinition: b.SwellDefinition, RangeMethod: b.RangeMethod, Notes: nonNil(b.Notes), Units: ss.u.name()}
					if b.BankVolume > 0 {
						r.ShrinkagePercent, r.ShrinkFactor = some(b.ShrinkagePercent, 1), some(b.ShrinkFactor, 3)
					}
					if b.LooseExpected > 0 {
						r.SwellPercent = some(b.SwellPercent, 1)
					}
					if b.LooseHauled > 0 && b.BankVolume > 0 {
						r.HauledSwellPercent = some(b.HauledSwellPercent, 1)
					}
					if b.DesignShrinkagePercent > 0 {
						r.DesignShrinkage = some(b.DesignShrinkagePercent, 1)
					}
					if b.DesignVolume > 0 {
						r.RemainingVolume = ss.u.num(soil.Volume, b.RemainingVolume)
					}
					rows = append(rows, r)
				}
				return writeJSON(cmd.OutOrStdout(), rows)
			}
			w := cmd.OutOrStdout()
			if len(bs) == 0 {
				_, err := fmt.Fprintln(w, "No borrow source (tamp borrow add) and no placement (tamp placement add) yet.")
				return err
			}
			showVol := func(v float64) string {
				if v == 0 {
					return "-"
				}
				return ss.u.show(soil.Volume, v)
			}
			pm := func(v, h float64, n int) string {
				if n == 0 {
					return "-"
				}
				s := ss.u.show(soil.Density, v)
				if h > 0 {
					s += " ± " + ss.u.num(soil.Density, h).String()
				}
				return fmt.Sprintf("%s (%d)", s, n)
			}
			pct := func(v float64, ok bool) string {
				if !ok {
					return "-"
				}
				return some(v, 1).String() + " %"
			}
			defs := map[string]bool{}
			var defList, notes []string
			for _, scope := range []string{client.BorrowSourceScope, client.FeatureScope} {
				head := "BORROW SOURCE"
				if scope == client.FeatureScope {
					head = "FEATURE"
				}
				t := newTable(w, head, "COMPACTED", "FILL DRY DENSITY (TESTS)", "BANK DRY DENSITY (TESTS)", "BANK VOLUME", "LOOSE HAULED", "LOOSE EXPECTED",
					"SHRINKAGE", "DESIGN", "SWELL", "HAULED SWELL")
				rows := 0
				for _, b := range bs {
					if b.Scope != scope {
						continue
					}
					rows++
					t.row(b.Name, ss.u.show(soil.Volume, b.CompactedVolume), pm(b.FillDryDensity, b.FillHalfWidth, b.Tests),
						pm(b.BankDryDensity, b.BankHalfWidth, b.BankTests), showVol(b.BankVolume), showVol(b.LooseHauled), showVol(b.LooseExpected),
						pct(b.ShrinkagePercent, b.BankVolume > 0), pct(b.DesignShrinkagePercent, b.DesignShrinkagePercent > 0),
						pct(b.SwellPercent, b.LooseExpected > 0), pct(b.HauledSwellPercent, b.LooseHauled > 0 && b.BankVolume > 0))
					for _, d := range []string{b.ShrinkDefinition, b.SwellDefinition} {
						if d != "" && !defs[d] {
							defs[d] = true
							defList = append(defList, d)
						}
					}
					for _, n := range b.Notes {
						notes = append(notes, b.Name+": "+n)
					}
				}
				if rows > 0 {
					if err := t.flush(); err != nil {
						return err
					}
					if _, err := fmt.Fprintln(w); err != nil {
						return err
					}
				}
			}
			t := newTable(w, "DESIGNED FEATURE", "DESIGN VOLUME", "PLACED", "REMAINING", "BANK STILL NEEDED", "RANGE", "FROM")
			designed, method := false, ""
			for _, b := range bs {
				if b.Scope != client.FeatureScope || b.DesignVolume == 0 {
					continue
				}
				designed, method = true, b.RangeMethod
				need, rng := "-", "-"
				if b.StillNeeded > 0 {
					need = ss.u.show(soil.Volume, b.StillNeeded)
					rng = ss.u.num(soil.Volume, b.StillNeededLow).String() + " to " + ss.u.num(soil.Volume, b.StillNeededHigh).String()
				}
				t.row(b.Name, ss.u.show(soil.Volume, b.DesignVolume), ss.u.show(soil.Volume, b.CompactedVolume), ss.u.show(soil.Volume, b.RemainingVolume),
					need, rng, orDefault(b.BorrowSource, "-"))
			}
			p := &printer{w: w}
			if designed {
				if err := t.flush(); err != nil {
					return err
				}
				p.f("  Range: %s.\n", method)
			} else {
				p.f("No feature is designed yet (tamp project set-up --design FEATURE=VOLUME): no bank volume still needed.\n")
			}
			for _, d := range defList {
				p.f("  %s\n", d)
			}
			p.f("  swell from the haul records = (loose volume hauled - bank volume) / bank volume\n")
			for _, n := range notes {
				p.f("Note: %s\n", n)
			}
			p.f("%s\n", qc.Caution)
			return p.err
		},
	}
	jsonFlag(reconcile, &recJSON)

	var reason string
	accept := &cobra.Command{
		Use:     "accept TEST --reason WHY",
		Short:   "Accept a failing test as it stands, with the reason: it closes the failure without a retest",
		Example: `  tamp qa accept 9f3c2a1b --reason "toe of slope outside the structural zone; engineer of record accepts 93 %"`,
		Args:    cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			t, err := ss.test(args[0])
			if err != nil {
				return err
			}
			if strings.TrimSpace(reason) == "" {
				return failf("--reason: say why the failing test is accepted as it stands; the reason stays in its history")
			}
			if t.Result.Verdict != client.Fail {
				return failf("test %s did not fail (%s): only a failure is accepted as an exception", shortID(t.ID), verdictWord(t.Result.Verdict))
			}
			if err := ss.s.AcceptException(cmd.Context(), ss.project, t.ID, reason); err != nil {
				return ss.testError(cmd, t, err)
			}
			_, err = fmt.Fprintf(cmd.OutOrStdout(), "test %s accepted as it stands: %s\n", ss.testLabel(t.ID, t.Content), escape(reason))
			return err
		},
	}
	accept.Flags().StringVar(&reason, "reason", "", "why the failure is accepted (required)")

	c.AddCommand(audit, findings, frequency, lots, reconcile, accept, newQAExport(&f), newQAChart(&f))
	return c
}

// retestWord is a retest's outcome in a word.
func retestWord(t client.Test) string {
	if t.Voided {
		return "voided"
	}
	return verdictWord(t.Result.Verdict)
}

// specNames maps the project's spec ids to their names.
func (ss *session) specNames() map[string]string {
	out := map[string]string{}
	for _, s := range ss.s.Specs(ss.project) {
		out[s.ID] = s.Name
	}
	return out
}

// left is a test left out of its lot, as `tamp qa lots --json` writes it.
type left struct {
	Test       string `json:"test"`                  // short id
	Reason     string `json:"reason"`                // reworked_and_retested, returned_by_office or voided
	ReplacedBy string `json:"replaced_by,omitempty"` // short id of the retest that counts in its place
}

func leftOf(o client.LeftOutTest) left {
	l := left{Test: shortID(o.TestID), Reason: o.Reason}
	if o.ReplacedBy != "" {
		l.ReplacedBy = shortID(o.ReplacedBy)
	}
	return l
}

// leftOutLine says in words why a test is not in its lot.
func leftOutLine(o client.LeftOutTest) string {
	switch o.Reason {
	case client.LeftOutReworked:
		return fmt.Sprintf("test %s: reworked and retested; retest %s counts in its place", shortID(o.TestID), shortID(o.ReplacedBy))
	case client.LeftOutReturned:
		return fmt.Sprintf("test %s: returned by the office", shortID(o.TestID))
	case client.LeftOutVoided:
		return fmt.Sprintf("test %s: voided", shortID(o.TestID))
	}
	return fmt.Sprintf("test %s: %s", shortID(o.TestID), o.Reason)
}
