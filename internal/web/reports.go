package web

import (
	"cmp"
	"fmt"
	"math"
	"net/http"
	"time"

	"tamp/client"
	"tamp/internal/soil"
	"tamp/internal/words"
)

// reports.go is the one file that reads the QA reports of package client
// (ReviewQueue, RetestAudit, Frequency, Lots, Reconcile) and lays them out
// for the page: the review queue, the retest audit's findings, test
// frequency, lots and the volume reconciliation.

func (s *Server) reportRoutes(m *http.ServeMux) {
	m.HandleFunc("GET /queue", s.page(s.queue))
	m.HandleFunc("GET /audit", s.page(s.audit))
	m.HandleFunc("GET /frequency", s.page(s.frequency))
	m.HandleFunc("GET /lots", s.page(s.lots))
	m.HandleFunc("GET /reconciliation", s.page(s.reconciliation))
}

// queuePage is the tests awaiting the office.
type queuePage struct {
	Rows    []row
	Nuclear bool
}

// queue is GET /queue: the tests whose current revision awaits review,
// oldest first.
func (s *Server) queue(w http.ResponseWriter, r *http.Request, v *view) error {
	var p queuePage
	for _, t := range v.st.ReviewQueue(v.project, "") {
		p.Rows = append(p.Rows, v.rowOf(t))
		p.Nuclear = p.Nuclear || nuclear(t.Result.Method)
	}
	return s.render(w, http.StatusOK, "queue.html", s.frame(r, v, "Awaiting review", "queue", "", p))
}

// auditChain is one failing test and what followed it.
type auditChain struct {
	Failed  row
	Retests []row
	Closure string
	Class   string // pass for a closed failure, fail for an open one
	Shift   string
	Far     bool
}

// auditPage is the retest audit.
type auditPage struct {
	Chains              []auditChain
	Open, Closed, Total int
	Findings            []auditFinding
	Within, Distance    string // the project's retest rules
}

// auditFinding is one thing the audit asks QA to look at.
type auditFinding struct {
	Title, Message, TestID, Short string
	Entries                       []string
}

// closureWords says how a failure was closed.
var closureWords = map[client.Closure]string{
	client.ClosureOpen:      "OPEN: no passing retest, no exception",
	client.ClosureRetested:  "closed: a retest passed",
	client.ClosureException: "closed: QA accepted it as it stands",
	client.ClosureVoided:    "closed: the failing test was voided",
}

// audit is GET /audit: one chain per failing test that is not itself a
// retest.
func (s *Server) audit(w http.ResponseWriter, r *http.Request, v *view) error {
	var p auditPage
	// The project's retest rules: a failure retested within so long, a
	// retest within so far of it (the set-up's, or the defaults).
	within, far := 48*time.Hour, 10.0
	if su, ok := v.st.SetUp(v.project); ok {
		within, far = cmp.Or(su.RetestWithin, within), cmp.Or(su.RetestDistance, far)
	}
	p.Within, p.Distance = within.Round(time.Minute).String(), v.u.show(soil.Length, far)
	if within%time.Hour == 0 {
		p.Within = fmt.Sprintf("%d h", within/time.Hour)
	}
	fs, err := v.st.AuditFindings(r.Context(), v.project)
	if err != nil {
		return err
	}
	for _, f := range fs {
		af := auditFinding{Title: f.Title, Message: visible(f.Message), TestID: f.TestID, Short: words.ShortID(f.TestID)}
		for _, e := range f.Entries {
			af.Entries = append(af.Entries, words.ShortID(e))
		}
		p.Findings = append(p.Findings, af)
	}
	for _, c := range v.st.RetestAudit(v.project) {
		ac := auditChain{Failed: v.rowOf(c.Failed), Closure: cmp.Or(closureWords[c.Closure], string(c.Closure)), Class: "pass",
			Shift: v.u.show(soil.Length, c.StationShift), Far: c.StationShift > far}
		for _, t := range c.Retests {
			ac.Retests = append(ac.Retests, v.rowOf(t))
		}
		if c.Closure == client.ClosureOpen {
			ac.Class = "fail"
			p.Open++
		} else {
			p.Closed++
		}
		p.Chains = append(p.Chains, ac)
	}
	p.Total = len(p.Chains)
	return s.render(w, http.StatusOK, "audit.html", s.frame(r, v, "Retest audit", "audit", "", p))
}

// specNames maps spec ids to names.
func (v *view) specNames() map[string]string {
	out := map[string]string{}
	for _, sp := range v.st.Specs(v.project) {
		out[sp.ID] = visible(sp.Name)
	}
	return out
}

// frequencyRow is one placement's test count against its spec.
type frequencyRow struct {
	Placement string
	Spec      string
	Volume    string
	Rules     []string // each rule of the spec with what it requires of the lift
	Tests     int
	Required  int
	Shortfall int
	Class     string
}

// frequency is GET /frequency.
func (s *Server) frequency(w http.ResponseWriter, r *http.Request, v *view) error {
	names := v.specNames()
	var rows []frequencyRow
	for _, f := range v.st.Frequency(v.project) {
		fr := frequencyRow{Placement: placementName(f.Placement), Spec: cmp.Or(names[f.SpecID], words.ShortID(f.SpecID)),
			Volume: v.u.show(soil.Volume, f.Placement.CompactedVolume), Tests: f.Taken, Required: f.Required, Shortfall: f.Shortfall, Class: "pass"}
		for _, ru := range f.Rules {
			fr.Rules = append(fr.Rules, v.ruleWords(ru))
		}
		if f.Shortfall > 0 {
			fr.Class = "fail"
		}
		rows = append(rows, fr)
	}
	return s.render(w, http.StatusOK, "frequency.html", s.frame(r, v, "Test frequency", "frequency", "", rows))
}

// lotRow is one lot's estimate.
type lotRow struct {
	Name, Spec                        string
	N                                 int
	Mean, StdDev, Limit, Quality, PWL string
	Moisture                          string // the moisture estimate in words, or ""
	Acceptance                        verdict
	Why                               string
	LeftOut                           []string
}

// leftOutWords say why a test is left out of its lot.
var leftOutWords = map[string]string{
	client.LeftOutReworked: "reworked and retested",
	client.LeftOutReturned: "returned by the office",
	client.LeftOutVoided:   "voided",
}

// acceptanceOf shows a lot's outcome like a verdict.
func acceptanceOf(l client.Lot) verdict {
	switch l.Acceptance {
	case client.LotAccepted:
		return verdict{Class: "pass", Word: "ACCEPTED", Why: "PWL at least " + fixed(l.AcceptancePWL, 0) + " %"}
	case client.LotRejected:
		return verdict{Class: "fail", Word: "REJECTED", Why: "PWL under " + fixed(l.AcceptancePWL, 0) + " %"}
	case client.LotNoAcceptanceLimit:
		return verdict{Class: "pending", Word: "FOR INFORMATION", Why: "the spec sets no acceptance limit"}
	}
	return verdict{Class: "pending", Word: "NOT ESTIMATED"}
}

// lots is GET /lots: one lot per placement and spec.
func (s *Server) lots(w http.ResponseWriter, r *http.Request, v *view) error {
	lots, err := v.st.Lots(v.project, client.LotScope{})
	if err != nil {
		return err
	}
	names := v.specNames()
	var rows []lotRow
	for _, l := range lots {
		lr := lotRow{Name: visible(cmp.Or(l.Name, placementName(l.Placement))), Spec: cmp.Or(names[l.SpecID], words.ShortID(l.SpecID)), N: l.N,
			Mean: "-", StdDev: "-", Limit: "-", Quality: "-", PWL: "-", Acceptance: acceptanceOf(l), Why: visible(l.Why)}
		if l.N > 0 {
			lr.Mean, lr.StdDev, lr.Limit = fixed(l.Mean, 1)+" %", fixed(l.StdDev, 2)+" %", fixed(l.LowerLimit, 1)+" %"
			lr.Quality, lr.PWL = fixed(l.QualityIndex, 2), fixed(l.PWL, 1)+" %"
		}
		if m := l.Moisture; m != nil && m.N > 0 {
			mean := fixed(m.Mean, 1) + " % of optimum"
			if m.Basis != client.PercentOfOptimum {
				mean = fmt.Sprintf("%+.1f points", m.Mean)
			}
			lr.Moisture = "mean " + mean + ", s " + fixed(m.StdDev, 2) + ", " + fixed(m.PWL, 1) + " % within the window"
		}
		for _, x := range l.LeftOut {
			s := "test " + words.ShortID(x.TestID) + ": " + cmp.Or(leftOutWords[x.Reason], x.Reason)
			if x.ReplacedBy != "" {
				s += ", by test " + words.ShortID(x.ReplacedBy)
			}
			lr.LeftOut = append(lr.LeftOut, s)
		}
		rows = append(rows, lr)
	}
	return s.render(w, http.StatusOK, "lots.html", s.frame(r, v, "Lots", "lots", "", rows))
}

// balanceRow is one line of the reconciliation.
type balanceRow struct {
	Scope, Name, Source string
	Lines               []line
	Notes               []string
}

// reconciliation is GET /reconciliation: compacted volume placed, bank
// volume taken from borrow, loose volume hauled, shrink and swell, and the
// bank volume still needed.
func (s *Server) reconciliation(w http.ResponseWriter, r *http.Request, v *view) error {
	bs, err := v.st.Reconcile(v.project)
	if err != nil {
		return err
	}
	u := v.u
	vol := func(m3 float64) string { return u.show(soil.Volume, m3) }
	den := func(x float64) string { return u.show(soil.Density, x) }
	var rows []balanceRow
	for _, b := range bs {
		br := balanceRow{Scope: "borrow source", Name: visible(cmp.Or(b.Name, b.BorrowSource)), Source: visible(b.BorrowSource)}
		for _, n := range b.Notes {
			br.Notes = append(br.Notes, visible(n))
		}
		if b.Scope == client.FeatureScope {
			br.Scope = "feature"
		}
		add := func(label, value string) { br.Lines = append(br.Lines, line{Label: label, Value: value}) }
		add("compacted volume placed", vol(b.CompactedVolume))
		spread := func(n int, what string, half float64) string {
			if n < 2 {
				return fmt.Sprintf("%d %s; its spread is not known from one", n, what)
			}
			return fmt.Sprintf("%d %ss; 95 %% interval on the mean ± %s", n, what, den(half))
		}
		if b.Tests > 0 {
			add("fill dry density", fmt.Sprintf("%s, volume-weighted (%s)", den(b.FillDryDensity), spread(b.Tests, "final test", b.FillHalfWidth)))
		}
		add("dry mass placed", tonnes(u, b.DryMass))
		if b.BankDryDensity > 0 {
			add("bank dry density", fmt.Sprintf("%s (%s)", den(b.BankDryDensity), spread(b.BankTests, "bank test", b.BankHalfWidth)))
			add("bank volume taken from borrow", vol(b.BankVolume))
		}
		if b.LooseHauled > 0 {
			add("loose volume hauled", vol(b.LooseHauled))
		}
		if b.LooseExpected > 0 {
			add("loose volume the dry mass implies", vol(b.LooseExpected))
		}
		if b.ShrinkFactor > 0 {
			add("shrinkage", fixed(b.ShrinkagePercent, 1)+" % (shrink factor "+fixed(b.ShrinkFactor, 3)+"; "+b.ShrinkDefinition+")")
		}
		if b.DesignShrinkagePercent > 0 {
			add("shrinkage the design assumed", fixed(b.DesignShrinkagePercent, 1)+" %")
		}
		if b.SwellFactor > 0 {
			add("swell", fixed(b.SwellPercent, 1)+" % (swell factor "+fixed(b.SwellFactor, 3)+"; "+b.SwellDefinition+")")
		}
		if b.HauledSwellPercent != 0 {
			add("swell from the haul records", fixed(b.HauledSwellPercent, 1)+" % ((loose volume hauled - bank volume) / bank volume)")
		}
		if b.DesignVolume > 0 {
			add("design compacted volume", vol(b.DesignVolume))
			add("still to place", vol(b.RemainingVolume))
			need := "not known yet (see the notes)"
			if b.StillNeeded > 0 {
				need = vol(b.StillNeeded)
			}
			if b.StillNeeded > 0 && b.StillNeededHigh > 0 {
				high := vol(b.StillNeededHigh)
				if math.IsInf(b.StillNeededHigh, 1) {
					high = "no upper bound"
				}
				need += " (range " + vol(b.StillNeededLow) + " to " + high + ", as said above)"
			}
			add("bank volume still needed", need)
		}
		rows = append(rows, br)
	}
	return s.render(w, http.StatusOK, "reconciliation.html", s.frame(r, v, "Volume reconciliation", "reconciliation", "", rows))
}

// tonnes shows a mass of earthwork (kg): short tons of 2000 lb in US
// units, tonnes of 1000 kg in SI.
func tonnes(u units, kg float64) string {
	if u.sys == soil.US {
		return fixed(kg/(2000*soil.Pound), 0) + " tons (2000 lb)"
	}
	return fixed(kg/1000, 0) + " t"
}

// ruleWords writes a frequency rule and what it asks of the lift.
func (v *view) ruleWords(r client.FrequencyRule) string {
	var rule string
	switch r.Kind {
	case client.PerVolume:
		rule = "1 per " + v.u.show(soil.Volume, r.Per)
	case client.PerArea:
		f := v.u.sys.FromSI(soil.Length, 1)
		rule = fmt.Sprintf("1 per %.0f %s2", r.Per*f*f, v.u.sys.Unit(soil.Length))
	case client.PerLength:
		rule = "1 per " + v.u.show(soil.Length, r.Per)
	default:
		rule = fmt.Sprintf("%.0f per lift", r.Per)
	}
	if !r.Applies {
		return rule + ": does not apply (" + r.Why + ")"
	}
	return fmt.Sprintf("%s: %d", rule, r.Required)
}
