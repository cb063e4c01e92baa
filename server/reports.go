package server

import (
	"context"
	"errors"
	"math"
	"strconv"
	"time"

	"google.golang.org/grpc/codes"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/qc"
	"tamp/internal/report"
	"tamp/internal/soil"
	"tamp/internal/valid"
)

// presenter writes a project's figures as its people read them: in the
// project's units, at the resolution tamp reports each quantity at, with
// verdicts and codes in words.
type presenter struct {
	sys soil.System
	loc *time.Location
}

func presenterOf(p *ledger.Projection) presenter {
	pr := presenter{sys: soil.SI, loc: time.UTC}
	if su := p.SetUp(); su != nil {
		if su.Units == soil.US {
			pr.sys = soil.US
		}
		if l, err := time.LoadLocation(su.TimeZone); err == nil && su.TimeZone != "" {
			pr.loc = l
		}
	}
	return pr
}

// measure is v (SI) in q's unit at q's resolution; nil for NaN, an
// infinity or a value not known.
func (pr presenter) measure(q soil.Quantity, v float64) *pb.Measure {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &pb.Measure{Value: pr.sys.Round(q, v), Unit: pr.sys.Unit(q), Text: pr.sys.Show(q, v)}
}

// percent is a percentage at 0.1.
func (pr presenter) percent(v float64) *pb.Measure { return pr.measure(soil.Percent, v) }

// factor is a ratio to three places.
func (pr presenter) factor(v float64) *pb.Measure {
	if math.IsNaN(v) || math.IsInf(v, 0) || v == 0 {
		return nil
	}
	r := math.Round(v*1000) / 1000
	return &pb.Measure{Value: r, Text: formatFixed(r, 3)}
}

// verdictWords are the verdicts as the trade says them.
var verdictWords = map[qc.Verdict]string{qc.Pass: "pass", qc.Fail: "fail", qc.Pending: "pending"}

func (pr presenter) line(t *ledger.Test) *pb.TestLine {
	c, r := t.Content, t.Result
	l := &pb.TestLine{TestId: t.ID, AuthorId: t.Author, Taken: t.DeviceTime.In(pr.loc).Format(time.RFC3339), Day: t.Day,
		Station: pr.sys.Station(c.Location.Station), Offset: pr.measure(soil.Length, c.Location.Offset), Feature: c.Feature,
		LiftNumber: c.LiftNumber, DryDensity: pr.measure(soil.Density, r.DryDensity), Moisture: pr.percent(r.Moisture),
		Verdict: verdictWords[r.Verdict], Reasons: findings(r.Reasons), Voided: t.Voided(), Review: string(t.ReviewStatus)}
	if r.Verdict != qc.Pending {
		l.RelativeCompaction = pr.percent(r.RelativeCompaction)
		l.MoistureDeviation = tenth(r.MoistureDeviation, "points")
	}
	return l
}

func formatFixed(v float64, places int) string { return strconv.FormatFloat(v, 'f', places, 64) }

func (r *readService) GetReconciliation(ctx context.Context, req *pb.GetReconciliationRequest) (*pb.GetReconciliationResponse, error) {
	resp := &pb.GetReconciliationResponse{}
	err := r.view(ctx, req.GetProjectId(), func(p *ledger.Projection) error {
		pr := presenterOf(p)
		resp.Units = pr.sys.String()
		bs, err := report.Reconcile(p)
		if err != nil {
			return err
		}
		for _, b := range bs {
			resp.Rows = append(resp.Rows, pr.balance(b))
		}
		return nil
	})
	return resp, err
}

func (pr presenter) balance(b report.Balance) *pb.ReconciliationRow {
	row := &pb.ReconciliationRow{Scope: string(b.Scope), Id: b.ID, Name: b.Name, CompactedVolume: pr.measure(soil.Volume, b.CompactedVolume),
		FillTests: uint32(b.FillDensity.N), BankTests: uint32(b.BankDensity.N), LooseVolumeHauled: pr.measure(soil.Volume, b.LooseHauled),
		Notes: b.Notes}
	if b.FillDensity.N > 0 {
		row.FillDryDensity = pr.measure(soil.Density, b.FillDensity.Value)
	}
	if b.BankDensity.N > 0 {
		row.BankDryDensity = pr.measure(soil.Density, b.BankDensity.Value)
	}
	if b.BankVolume > 0 {
		row.BankVolume = pr.measure(soil.Volume, b.BankVolume)
		// Balance.ShrinkFactor is compacted over bank volume (bank over
		// compacted dry density) under either convention.
		sh := &pb.Factor{Name: "shrinkage", Percent: pr.percent(b.Balance.ShrinkagePercent), Factor: pr.factor(b.Balance.ShrinkFactor),
			Definition: b.Convention.Definition()}
		if b.DesignShrinkagePercent > 0 {
			sh.DesignPercent = pr.percent(b.DesignShrinkagePercent)
		}
		row.Factors = append(row.Factors, sh)
		if b.Balance.SwellFactor > 0 {
			row.Factors = append(row.Factors, &pb.Factor{Name: "swell", Percent: pr.percent(b.Balance.SwellPercent),
				Factor: pr.factor(b.Balance.SwellFactor), Definition: b.Balance.SwellDefinition + " (from the loose dry density)"})
		}
		if b.HauledSwellPercent != 0 {
			row.Factors = append(row.Factors, &pb.Factor{Name: "swell", Percent: pr.percent(b.HauledSwellPercent),
				Factor: pr.factor(1 + b.HauledSwellPercent/100), Definition: "swell = (loose volume hauled - bank volume consumed) / bank volume consumed (from the haul records)"})
		}
	}
	if b.DesignVolume > 0 {
		row.DesignVolume = pr.measure(soil.Volume, b.DesignVolume)
		row.RemainingVolume = pr.measure(soil.Volume, b.Remaining)
		if b.StillNeeded.Estimate > 0 {
			row.BankStillNeeded = &pb.VolumeRange{Estimate: pr.measure(soil.Volume, b.StillNeeded.Estimate),
				Low: pr.measure(soil.Volume, b.StillNeeded.Low), High: pr.measure(soil.Volume, b.StillNeeded.High), Method: report.RangeMethod}
		}
	}
	return row
}

// closureWords say how a failure was closed.
var closureWords = map[report.Closure]string{report.Open: "open: no passing retest", report.Retested: "closed by a passing retest",
	report.Excepted: "closed: QA accepted it as it stands", report.Withdrawn: "voided"}

func (r *readService) GetRetestAudit(ctx context.Context, req *pb.GetRetestAuditRequest) (*pb.GetRetestAuditResponse, error) {
	if _, err := r.s.requireMember(ctx, req.GetProjectId()); err != nil {
		return nil, err
	}
	skews, err := r.s.opts.Store.ClockSkews(ctx, req.GetProjectId())
	if err != nil {
		return nil, r.s.internal(ctx, "clock skews", err)
	}
	now := r.s.opts.Now()
	resp := &pb.GetRetestAuditResponse{AsOf: now.UTC().Format(time.RFC3339)}
	err = r.view(ctx, req.GetProjectId(), func(p *ledger.Projection) error {
		pr := presenterOf(p)
		resp.Units = pr.sys.String()
		for _, c := range report.RetestAudit(p) {
			ch := &pb.AuditChain{Failed: pr.line(c.Failed), Closure: string(c.Closure), ClosureText: closureWords[c.Closure]}
			for _, t := range c.Retests {
				ch.Retests = append(ch.Retests, pr.line(t))
			}
			if len(c.Retests) > 0 {
				ch.RetestDistance = pr.measure(soil.Length, c.StationShift)
			}
			resp.Chains = append(resp.Chains, ch)
		}
		for _, f := range report.Findings(p, report.AuditOptions{AsOf: now, Skews: skews}) {
			resp.Findings = append(resp.Findings, &pb.AuditFinding{Code: string(f.Code), Title: report.FindingTitle[f.Code], Message: f.Message,
				TestId: f.TestID, Entries: f.Entries})
		}
		return nil
	})
	return resp, err
}

// ruleWords writes a frequency rule as a QA manager reads it.
func (pr presenter) ruleWords(r report.Rule) (string, *pb.Measure) {
	switch r.Kind {
	case report.VolumeRule:
		return "one test per " + pr.sys.Show(soil.Volume, r.Per), pr.measure(soil.Volume, r.Quantity)
	case report.AreaRule:
		f := pr.sys.FromSI(soil.Length, 1)
		unit := pr.sys.Unit(soil.Length) + "2"
		a, q := math.Round(r.Per*f*f), math.Round(r.Quantity*f*f)
		return "one test per " + formatFixed(a, 0) + " " + unit, &pb.Measure{Value: q, Unit: unit, Text: formatFixed(q, 0) + " " + unit}
	case report.LengthRule:
		return "one test per " + pr.sys.Show(soil.Length, r.Per), pr.measure(soil.Length, r.Quantity)
	}
	return formatFixed(r.Per, 0) + " tests per lift", nil
}

// placementWords names a placement: feature and lift.
func placementWords(pl *ledger.Placement) string {
	if pl == nil {
		return ""
	}
	return pl.Feature + " lift " + strconv.FormatUint(uint64(pl.LiftNumber), 10)
}

func specName(p *ledger.Projection, id string) string {
	if s, ok := p.Spec(id); ok {
		return s.Name
	}
	return id
}

func (r *readService) GetTestFrequency(ctx context.Context, req *pb.GetTestFrequencyRequest) (*pb.GetTestFrequencyResponse, error) {
	resp := &pb.GetTestFrequencyResponse{}
	err := r.view(ctx, req.GetProjectId(), func(p *ledger.Projection) error {
		pr := presenterOf(p)
		resp.Units = pr.sys.String()
		for _, f := range report.TestFrequency(p) {
			row := &pb.FrequencyRow{PlacementId: f.Placement.ID, Placement: placementWords(f.Placement), SpecId: f.SpecID, Spec: specName(p, f.SpecID),
				Required: uint32(f.Required), Taken: uint32(f.Taken), Shortfall: uint32(f.Shortfall), Status: "met"}
			if f.Shortfall > 0 {
				row.Status = "short"
			}
			for _, ru := range f.Rules {
				words, q := pr.ruleWords(ru)
				if !ru.Applies {
					words += ": does not apply, " + ru.Why
				}
				row.Rules = append(row.Rules, &pb.FrequencyRule{Rule: words, Quantity: q, Required: uint32(ru.Required)})
			}
			resp.Rows = append(resp.Rows, row)
		}
		return nil
	})
	return resp, err
}

// acceptanceWords are a lot's acceptance in words.
var acceptanceWords = map[report.Acceptance]string{report.Accepted: "accepted", report.Rejected: "rejected",
	report.NoAcceptanceLimit: "no acceptance limit", report.NotEstimated: "not estimated"}

func (r *readService) GetLots(ctx context.Context, req *pb.GetLotsRequest) (*pb.GetLotsResponse, error) {
	resp := &pb.GetLotsResponse{}
	scope := report.LotScope{Feature: req.GetFeature(), LiftFrom: req.GetLiftFrom(), LiftTo: req.GetLiftTo(), DayFrom: req.GetDayFrom(), DayTo: req.GetDayTo()}
	var scopeErr error
	err := r.view(ctx, req.GetProjectId(), func(p *ledger.Projection) error {
		pr := presenterOf(p)
		resp.Units = pr.sys.String()
		lots, err := report.Lots(p, scope)
		if err != nil {
			scopeErr = err
			return nil
		}
		for _, l := range lots {
			row := &pb.LotRow{Lot: l.Name, SpecId: l.SpecID, Spec: specName(p, l.SpecID), Acceptance: acceptanceWords[l.Acceptance]}
			if l.Why != "" && l.Acceptance == report.NotEstimated {
				row.Acceptance += ": " + l.Why
			}
			if l.AcceptancePWL > 0 {
				row.AcceptancePwl = pr.percent(l.AcceptancePWL)
			}
			// Moisture is judged in the spec's basis: points of optimum, or
			// percent of optimum.
			moistureUnit := "points"
			if sp, ok := p.Spec(l.SpecID); ok && sp.QC().MoistureBasis == qc.PercentOfOptimum {
				moistureUnit = "% of optimum"
			}
			for _, q := range []struct {
				name, unit string
				q          *report.Quality
			}{{"relative compaction", "%", l.Compaction}, {"moisture", moistureUnit, l.Moisture}} {
				if q.q == nil {
					continue
				}
				lq := &pb.LotQuality{Characteristic: q.name, Limits: limitWords(q.q) + " " + q.unit, N: uint32(len(q.q.Values))}
				if e := q.q.PWL; e != nil {
					lq.Mean, lq.StdDev, lq.Pwl = tenth(e.Mean, q.unit), tenth(e.StdDev, q.unit), pr.percent(e.PWL)
				}
				row.Qualities = append(row.Qualities, lq)
			}
			for _, o := range l.LeftOut {
				row.LeftOut = append(row.LeftOut, &pb.LeftOutTest{TestId: o.TestID, Reason: string(o.Reason), ReasonText: report.ReasonText[o.Reason],
					ReplacedBy: o.ReplacedBy})
			}
			resp.Lots = append(resp.Lots, row)
		}
		return nil
	})
	if err == nil && scopeErr != nil {
		var fe *valid.FieldError
		if errors.As(scopeErr, &fe) {
			return nil, statusError(codes.InvalidArgument, reasonInvalidArgument, fe.Field, "", fe.Rule)
		}
		return nil, statusError(codes.InvalidArgument, reasonInvalidArgument, "", "", scopeErr.Error())
	}
	return resp, err
}

// tenth is a value at 0.1 in unit.
func tenth(v float64, unit string) *pb.Measure {
	r := math.Round(v*10) / 10
	return &pb.Measure{Value: r, Unit: unit, Text: formatFixed(r, 1) + " " + unit}
}

// limitWords writes a quality's limits: "at least 95", "-2 to 2".
func limitWords(q *report.Quality) string {
	switch {
	case q.Lower != nil && q.Upper != nil:
		return strconv.FormatFloat(*q.Lower, 'f', -1, 64) + " to " + strconv.FormatFloat(*q.Upper, 'f', -1, 64)
	case q.Lower != nil:
		return "at least " + strconv.FormatFloat(*q.Lower, 'f', -1, 64)
	case q.Upper != nil:
		return "at most " + strconv.FormatFloat(*q.Upper, 'f', -1, 64)
	}
	return ""
}
