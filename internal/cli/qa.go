package cli

import (
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"

	"github.com/spf13/cobra"

	"tamp/client"
	"tamp/internal/qc"
	"tamp/internal/soil"
	"tamp/internal/words"
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
					rs = append(rs, words.ShortID(r.ID)+" "+retestWord(r))
				}
				if ch.Closure == client.ClosureOpen {
					open++
				}
				shift := "-" // no retest, no shift
				if len(ch.Retests) > 0 {
					shift = ss.u.show(soil.Length, ch.StationShift)
				}
				t.row(words.ShortID(ft.ID), localTime(ft.Taken, ss.loc), ss.u.station(ft.Content.Location.Station),
					ft.Content.Feature+" lift "+strconv.Itoa(int(ft.Content.LiftNumber)), ss.u.show(soil.Percent, ft.Result.RelativeCompaction),
					orDefault(words.CompactionLimit(ft.Result.Limits), "-"), verdictWhy(ft.Result), orDefault(strings.Join(rs, ", "), "none"), shift,
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
					test = " (test " + words.ShortID(fd.TestID) + ")"
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
		Use: "frequency", Short: "Final tests taken against the tests each spec's frequency rules require, per placement", Args: cobra.NoArgs,
		Long: `For each placement and each spec that applies to it (the placement's own spec,
tamp placement add --spec, and every spec its tests name), the tests the
spec's frequency rules require against the final tests taken. A spec sets
its rules with tamp spec add: one test per so many yd3 or m3 of compacted
fill (--volume-per-test), ft2 or m2 of lift (--area-per-test: the
placement's area, or its stations times its offsets), ft or m of alignment
(--length-per-test: its stations), and at least so many on every lift
(--min-per-lift). A lift needs the most any applying rule asks; a rule
whose quantity the placement does not record is listed under the table,
with what is missing.

Final tests count: a failure replaced by its passing retest counts once,
through the retest; a voided test, a test the office returned and a test
not graded do not count. The project's specifications govern.`,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			specName := ss.specNames()
			fs := ss.s.Frequency(ss.project)
			if freqJSON {
				type ruleJSON struct {
					Kind     client.FrequencyRuleKind `json:"kind"`
					Rule     string                   `json:"rule"`
					Per      num                      `json:"per"`
					Quantity num                      `json:"quantity"`
					Unit     string                   `json:"unit"`
					Required int                      `json:"required"`
					Applies  bool                     `json:"applies"`
					Why      string                   `json:"why"`
				}
				type row struct {
					Placement       string     `json:"placement"`
					PlacementID     string     `json:"placement_id"`
					Spec            string     `json:"spec"`
					SpecID          string     `json:"spec_id"`
					CompactedVolume num        `json:"compacted_volume"`
					Rules           []ruleJSON `json:"rules"`
					Required        int        `json:"required"`
					Taken           int        `json:"taken"`
					Shortfall       int        `json:"shortfall"`
					Met             bool       `json:"met"`
					Units           string     `json:"units"`
				}
				rows := []row{}
				for _, fr := range fs {
					r := row{Placement: placementName(fr.Placement), PlacementID: fr.Placement.ID, Spec: specName[fr.SpecID], SpecID: fr.SpecID,
						CompactedVolume: ss.u.num(soil.Volume, fr.Placement.CompactedVolume), Rules: []ruleJSON{}, Required: fr.Required, Taken: fr.Taken,
						Shortfall: fr.Shortfall, Met: fr.Shortfall == 0, Units: ss.u.name()}
					for _, ru := range fr.Rules {
						per, q, unit := ss.u.ruleAmounts(ru)
						if !ru.Applies {
							q = some(math.NaN(), 0)
						}
						r.Rules = append(r.Rules, ruleJSON{Kind: ru.Kind, Rule: ss.u.ruleWords(ru), Per: per, Quantity: q, Unit: unit,
							Required: ru.Required, Applies: ru.Applies, Why: ru.Why})
					}
					rows = append(rows, r)
				}
				return writeJSON(cmd.OutOrStdout(), rows)
			}
			w := cmd.OutOrStdout()
			if len(fs) == 0 {
				_, err := fmt.Fprintln(w, "No placement has a spec with a test frequency: set the rules with tamp spec add (--volume-per-test, "+
					"--area-per-test, --length-per-test, --min-per-lift) and name the spec on the lift (tamp placement add --spec) or its tests.")
				return err
			}
			t := newTable(w, "PLACEMENT", "SPEC", "RULES (TESTS EACH REQUIRES)", "REQUIRED", "TAKEN (FINAL)", "SHORTFALL", "FREQUENCY")
			var notes []string
			for _, fr := range fs {
				var rules []string
				for _, ru := range fr.Rules {
					if !ru.Applies {
						notes = append(notes, fmt.Sprintf("%s, spec %s: %s does not apply: %s", placementName(fr.Placement), quoted(specName[fr.SpecID]),
							ss.u.ruleWords(ru), ru.Why))
						continue
					}
					rules = append(rules, fmt.Sprintf("%s (%d)", ss.u.ruleWords(ru), ru.Required))
				}
				word := "met"
				if fr.Shortfall > 0 {
					word = "SHORT"
				}
				t.row(placementName(fr.Placement), specName[fr.SpecID], orDefault(strings.Join(rules, "; "), "-"), strconv.Itoa(fr.Required),
					strconv.Itoa(fr.Taken), strconv.Itoa(fr.Shortfall), word)
			}
			if err := t.flush(); err != nil {
				return err
			}
			p := &printer{w: w}
			for _, n := range notes {
				p.f("Not applied: %s\n", escape(n))
			}
			p.f("Final tests count: a failure replaced by its retest counts once; voided, returned and ungraded tests do not.\n")
			return p.err
		},
	}
	jsonFlag(frequency, &freqJSON)

	var lotsJSON bool
	var lotFeature, lotLifts, lotFrom, lotTo string
	lots := &cobra.Command{
		Use:   "lots [--feature NAME [--lifts FIRST-LAST] [--from YYYY-MM-DD] [--to YYYY-MM-DD]]",
		Short: "Percent within limits and acceptance of each lot: per lift, or per feature over lifts and days",
		Long: `The percent within limits (PWL; AASHTO R 9, beta-distribution estimator) of each
lot's final tests: relative compaction against the spec's minimum and, when
the spec sets a moisture window, moisture against it, with the mean, the
sample standard deviation s and the quality index Q = (mean - limit) / s.
By default a lot is one lift against one spec. With --feature, a lot is the
feature's tests against one spec, within --lifts (2-5, 3, or 4- for 4 and
above) and the days --from and --to (YYYY-MM-DD in the project's time zone,
inclusive) when given.

A lot is accepted when the PWL of every characteristic reaches the spec's
--lot-pwl (tamp spec add), and rejected when one falls below it; under a
spec without one, the estimate is for information. An estimate needs at
least three final results.

A lot holds final tests only. Left out, and listed under the table with the
reason: a failure that a retest replaced (the retest counts), a test the
office returned, a voided test and a test not graded.`,
		Example: `  tamp qa lots
  tamp qa lots --feature embankment --lifts 2-5 --from 2031-06-01 --to 2031-06-07`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			scope, err := lotScopeOf(cmd, lotFeature, lotLifts, lotFrom, lotTo)
			if err != nil {
				return err
			}
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
			ls, err := ss.s.Lots(ss.project, scope)
			if err != nil {
				return entryError(cmd, err)
			}
			if len(ls) == 0 && scope.Feature != "" {
				if known := ss.features(); !slices.Contains(known, scope.Feature) {
					return failf("--feature %s: no placement or test of that feature on this device (features: %s); tamp sync brings others' entries",
						quoted(scope.Feature), orDefault(escape(strings.Join(known, ", ")), "none yet"))
				}
			}
			if lotsJSON {
				rows := []lotJSON{}
				for _, l := range ls {
					rows = append(rows, ss.lotOut(l, specName[l.SpecID]))
				}
				return writeJSON(cmd.OutOrStdout(), rows)
			}
			w := cmd.OutOrStdout()
			if len(ls) == 0 {
				what := "no test names a spec and a placement yet"
				if scope.Feature != "" {
					what = "no test of " + quoted(scope.Feature) + " names a spec within those lifts and days"
				}
				_, err := fmt.Fprintf(w, "No lot: %s.\n", what)
				return err
			}
			t := newTable(w, "LOT", "SPEC", "N", "MEAN RC", "S", "RC LIMIT", "PWL RC", "PWL MOISTURE", "ACCEPTANCE")
			pct := func(v float64, places int, ok bool) string {
				if !ok {
					return "-"
				}
				return some(v, places).String() + " %"
			}
			for _, l := range ls {
				moisture := "-"
				if m := l.Moisture; m != nil && m.N > 0 {
					moisture = pct(m.PWL, 1, true)
				}
				limit := "-"
				if minRC[l.SpecID] != "" {
					limit = "min " + minRC[l.SpecID] + " %"
				}
				t.row(l.Name, specName[l.SpecID], strconv.Itoa(len(l.TestIDs)), pct(l.Mean, 1, l.N > 0), pct(l.StdDev, 2, l.N > 0), limit,
					pct(l.PWL, 1, l.N > 0), moisture, acceptanceWords(l))
			}
			if err := t.flush(); err != nil {
				return err
			}
			p := &printer{w: w}
			for _, l := range ls {
				if l.Acceptance == client.LotRejected {
					p.f("Rejected: %s: %s.\n", escape(l.Name), escape(l.Why))
				}
			}
			for _, l := range ls {
				for _, o := range l.LeftOut {
					p.f("Left out of %s: %s\n", escape(l.Name), leftOutLine(o))
				}
			}
			p.f("A lot holds final tests only. %s\n", qc.Caution)
			return p.err
		},
	}
	jsonFlag(lots, &lotsJSON)
	lfl := lots.Flags()
	lfl.StringVar(&lotFeature, "feature", "", "a lot of this feature's tests per spec, instead of one per lift")
	lfl.StringVar(&lotLifts, "lifts", "", "with --feature: the lifts, FIRST-LAST (2-5), one (3), or from one up (4-)")
	lfl.StringVar(&lotFrom, "from", "", "with --feature: the first day, YYYY-MM-DD")
	lfl.StringVar(&lotTo, "to", "", "with --feature: the last day, YYYY-MM-DD")

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
				t := newTable(w, head, "COMPACTED", "FILL DRY DENSITY ± 95 % (TESTS)", "BANK DRY DENSITY ± 95 % (TESTS)", "BANK VOLUME", "LOOSE HAULED", "LOOSE EXPECTED",
					"SHRINKAGE", "DESIGN SHRINKAGE", "SWELL", "HAULED SWELL")
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
				p.f("No feature is designed yet (tamp project design --feature NAME --volume V): no bank volume still needed.\n")
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
				return failf("test %s did not fail (%s): only a failure is accepted as an exception", words.ShortID(t.ID), verdictWord(t.Result.Verdict))
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

// ruleAmounts returns a frequency rule's quantity per test and the lift's
// quantity in the project's units, rounded as they are shown, with their
// unit ("" for a per-lift rule, whose Per is a count of tests).
func (u units) ruleAmounts(r client.FrequencyRule) (per, quantity num, unit string) {
	switch r.Kind {
	case client.PerVolume:
		return u.num(soil.Volume, r.Per), u.num(soil.Volume, r.Quantity), u.unit(soil.Volume)
	case client.PerArea:
		f := u.sys.FromSI(soil.Length, 1) // as units.area: ft2 or m2, to 1 place
		return some(r.Per*f*f, 1), some(r.Quantity*f*f, 1), u.unit(soil.Length) + "2"
	case client.PerLength:
		return u.num(soil.Length, r.Per), u.num(soil.Length, r.Quantity), u.unit(soil.Length)
	}
	return some(r.Per, 0), some(r.Quantity, 0), ""
}

// ruleWords says a frequency rule in words, in the project's units: "1 per
// 500 yd3", "1 per 2,000 ft2", "1 per 200 ft", "3 per lift".
func (u units) ruleWords(r client.FrequencyRule) string {
	per, _, unit := u.ruleAmounts(r)
	if r.Kind == client.PerLift {
		return grouped(per) + " per lift"
	}
	return "1 per " + grouped(per) + " " + unit
}

// grouped writes n with its thousands grouped by commas and without
// trailing zeros after the point: 2000.0 is "2,000", 76.50 is "76.5".
func grouped(n num) string {
	s := n.String()
	if strings.Contains(s, ".") {
		s = strings.TrimRight(strings.TrimRight(s, "0"), ".")
	}
	whole, frac, _ := strings.Cut(s, ".")
	sign := ""
	if strings.HasPrefix(whole, "-") {
		sign, whole = "-", whole[1:]
	}
	var b strings.Builder
	for i, d := range whole {
		if i > 0 && (len(whole)-i)%3 == 0 {
			b.WriteByte(',')
		}
		b.WriteRune(d)
	}
	if frac != "" {
		return sign + b.String() + "." + frac
	}
	return sign + b.String()
}

// lotScopeOf reads tamp qa lots' flags into a scope, refusing a flag that
// breaks a rule with the flag and the rule named.
func lotScopeOf(cmd *cobra.Command, feature, lifts, from, to string) (client.LotScope, error) {
	set := cmd.Flags().Changed
	sc := client.LotScope{Feature: strings.TrimSpace(feature), DayFrom: from, DayTo: to}
	if set("feature") && sc.Feature == "" {
		return sc, failf("--feature: name the feature whose tests make the lot")
	}
	for _, fl := range []string{"lifts", "from", "to"} {
		if set(fl) && sc.Feature == "" {
			return sc, failf("--%s: give --feature too: a lot of several lifts or days is of one feature", fl)
		}
	}
	if set("lifts") {
		bad := failf("--lifts %s: write the lifts as FIRST-LAST (2-5), one lift (3) or from one up (4-); lifts are numbered from 1", quoted(lifts))
		a, b, ranged := strings.Cut(strings.TrimSpace(lifts), "-")
		first, err := strconv.ParseUint(strings.TrimSpace(a), 10, 32)
		if err != nil || first == 0 {
			return sc, bad
		}
		last := first
		switch b = strings.TrimSpace(b); {
		case ranged && b == "":
			last = 0 // no upper bound
		case ranged:
			if last, err = strconv.ParseUint(b, 10, 32); err != nil || last == 0 {
				return sc, bad
			}
		}
		if last != 0 && first > last {
			return sc, failf("--lifts %s: the first lift must not be above the last (write %d-%d)", escape(lifts), last, first)
		}
		sc.LiftFrom, sc.LiftTo = uint32(first), uint32(last)
	}
	for _, d := range []struct{ flag, v string }{{"from", from}, {"to", to}} {
		if set(d.flag) {
			if err := checkDate(d.flag, d.v); err != nil {
				return sc, err
			}
		}
	}
	if from != "" && to != "" && from > to {
		return sc, failf("--from %s: the first day must not be after the last (--to %s)", from, to)
	}
	return sc, nil
}

// features lists, sorted, the features of the project's placements and
// tests on this device.
func (ss *session) features() []string {
	var out []string
	for _, p := range ss.s.Placements(ss.project) {
		out = append(out, p.Feature)
	}
	for _, t := range ss.s.Tests(ss.project) {
		if t.Content.Feature != "" {
			out = append(out, t.Content.Feature)
		}
	}
	slices.Sort(out)
	return slices.Compact(out)
}

// acceptanceWords says a lot's outcome in words: "accepted (PWL ≥ 90)",
// "REJECTED", "no acceptance limit", "not estimated: why".
func acceptanceWords(l client.Lot) string {
	switch l.Acceptance {
	case client.LotAccepted:
		return "accepted (PWL ≥ " + strconv.FormatFloat(l.AcceptancePWL, 'f', -1, 64) + ")"
	case client.LotRejected:
		return "REJECTED"
	case client.LotNoAcceptanceLimit:
		if l.Why != "" {
			return "no acceptance limit; not estimated: " + l.Why
		}
		return "no acceptance limit"
	}
	return "not estimated: " + l.Why
}

// lotJSON is a lot as tamp qa lots --json writes it: percentages rounded
// as shown, ids short.
type lotJSON struct {
	Name           string        `json:"name"`
	Feature        string        `json:"feature"`
	Placement      string        `json:"placement"`    // "" for a lot of a feature scope
	PlacementID    string        `json:"placement_id"` // "" for a lot of a feature scope
	Spec           string        `json:"spec"`
	SpecID         string        `json:"spec_id"`
	Tests          []string      `json:"tests"` // the final tests' short ids, oldest first
	N              int           `json:"n"`     // final tests
	Values         []num         `json:"values"`
	Mean           num           `json:"mean"`
	StdDev         num           `json:"std_dev"`
	LowerLimit     num           `json:"lower_limit"`
	QualityIndex   num           `json:"quality_index"`
	PWL            num           `json:"pwl"`
	Moisture       *moistureJSON `json:"moisture"`
	Acceptance     string        `json:"acceptance"`
	AcceptancePWL  num           `json:"acceptance_pwl"`
	AcceptanceText string        `json:"acceptance_text"`
	Why            string        `json:"why"`
	LeftOutCount   int           `json:"left_out_count"`
	LeftOut        []left        `json:"left_out"`
	Units          string        `json:"units"`
}

// moistureJSON is a lot's moisture against its spec's window.
type moistureJSON struct {
	Basis  client.MoistureBasis `json:"basis"`
	Values []num                `json:"values"`
	Lower  num                  `json:"lower"` // null for an open side
	Upper  num                  `json:"upper"`
	N      int                  `json:"n"` // final tests, as the lot's n
	Mean   num                  `json:"mean"`
	StdDev num                  `json:"std_dev"`
	PWL    num                  `json:"pwl"`
}

// lotOut rounds a lot for --json; an estimate it lacks is null.
func (ss *session) lotOut(l client.Lot, spec string) lotJSON {
	nan := math.NaN()
	est := func(v float64, places int, ok bool) num {
		if !ok {
			return some(nan, places)
		}
		return some(v, places)
	}
	rounded := func(vs []float64) []num {
		out := make([]num, 0, len(vs))
		for _, v := range vs {
			out = append(out, some(v, 1))
		}
		return out
	}
	r := lotJSON{Name: l.Name, Feature: l.Feature, Spec: spec, SpecID: l.SpecID, Tests: []string{}, N: len(l.TestIDs), Values: rounded(l.Values),
		Mean: est(l.Mean, 1, l.N > 0), StdDev: est(l.StdDev, 2, l.N > 0), LowerLimit: est(l.LowerLimit, 1, len(l.Values) > 0),
		QualityIndex: est(l.QualityIndex, 2, l.N > 0), PWL: est(l.PWL, 1, l.N > 0), Acceptance: string(l.Acceptance),
		AcceptancePWL: est(l.AcceptancePWL, 1, l.AcceptancePWL > 0), AcceptanceText: acceptanceWords(l), Why: l.Why,
		LeftOutCount: len(l.LeftOut), LeftOut: []left{}, Units: ss.u.name()}
	if l.Placement.ID != "" {
		r.Placement, r.PlacementID = placementName(l.Placement), l.Placement.ID
	}
	for _, id := range l.TestIDs {
		r.Tests = append(r.Tests, words.ShortID(id))
	}
	if m := l.Moisture; m != nil {
		limit := func(p *float64) num {
			if p == nil {
				return some(nan, 1)
			}
			return some(*p, 1)
		}
		r.Moisture = &moistureJSON{Basis: m.Basis, Values: rounded(m.Values), Lower: limit(m.Lower), Upper: limit(m.Upper), N: len(m.Values),
			Mean: est(m.Mean, 1, m.N > 0), StdDev: est(m.StdDev, 2, m.N > 0), PWL: est(m.PWL, 1, m.N > 0)}
	}
	for _, o := range l.LeftOut {
		r.LeftOut = append(r.LeftOut, leftOf(o))
	}
	return r
}

// left is a test left out of its lot, as `tamp qa lots --json` writes it.
type left struct {
	Test       string `json:"test"`                  // short id
	Reason     string `json:"reason"`                // reworked_and_retested, returned_by_office, voided or not_graded
	ReasonText string `json:"reason_text"`           // the reason in words
	ReplacedBy string `json:"replaced_by,omitempty"` // short id of the retest that counts in its place
}

func leftOf(o client.LeftOutTest) left {
	l := left{Test: words.ShortID(o.TestID), Reason: o.Reason, ReasonText: o.ReasonText}
	if o.ReplacedBy != "" {
		l.ReplacedBy = words.ShortID(o.ReplacedBy)
	}
	return l
}

// leftOutLine says in words why a test is not in its lot, and for a
// reworked failure which retest counts in its place.
func leftOutLine(o client.LeftOutTest) string {
	s := fmt.Sprintf("test %s: %s", words.ShortID(o.TestID), orDefault(o.ReasonText, o.Reason))
	if o.ReplacedBy != "" {
		s += fmt.Sprintf(" (retest %s counts in its place)", words.ShortID(o.ReplacedBy))
	}
	return escape(s)
}
