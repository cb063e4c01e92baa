package server

import (
	"context"

	"google.golang.org/grpc"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/qc"
	"tamp/internal/report"
)

// readService implements the ledger's read side over the projections.
type readService struct {
	pb.UnimplementedLedgerReadServiceServer
	s *Server
}

func summary(t *ledger.Test) *pb.TestSummary {
	return &pb.TestSummary{TestId: t.ID, Revision: t.Current, AuthorId: t.Author, Location: ledger.LocationToProto(t.Content.Location),
		Results: ledger.ResultsToProto(ledger.ResultsOf(t.Result)), RetestOf: t.RetestOf, Voided: t.Voided(),
		ReviewFlags: findings(t.Flags)}
}

func findings(fs []qc.Finding) []*pb.Finding {
	var out []*pb.Finding
	for _, f := range fs {
		out = append(out, &pb.Finding{Code: f.Code, Message: f.Message})
	}
	return out
}

// view runs fn over a project's projection for a member of it, beside
// other reports (Server.read): fn only reads.
func (r *readService) view(ctx context.Context, project string, fn func(*ledger.Projection) error) error {
	if _, err := r.s.requireMember(ctx, project); err != nil {
		return err
	}
	var ferr error
	if err := r.s.read(ctx, project, func(p *ledger.Projection) { ferr = fn(p) }); err != nil {
		return projectErr(r.s, ctx, project, err)
	}
	if ferr != nil {
		return r.s.internal(ctx, "report", ferr)
	}
	return nil
}

func (r *readService) ListReviewQueue(ctx context.Context, req *pb.ListReviewQueueRequest) (*pb.ListReviewQueueResponse, error) {
	resp := &pb.ListReviewQueueResponse{}
	err := r.view(ctx, req.GetProjectId(), func(p *ledger.Projection) error {
		pr := presenterOf(p)
		resp.Units = pr.sys.String()
		for _, t := range report.ReviewQueue(p, req.GetDay()) {
			resp.Tests = append(resp.Tests, summary(t))
			resp.Lines = append(resp.Lines, pr.line(t))
		}
		return nil
	})
	return resp, err
}

func (r *readService) AuditRetests(ctx context.Context, req *pb.AuditRetestsRequest) (*pb.AuditRetestsResponse, error) {
	resp := &pb.AuditRetestsResponse{}
	err := r.view(ctx, req.GetProjectId(), func(p *ledger.Projection) error {
		for _, c := range report.RetestAudit(p) {
			ch := &pb.RetestChain{Failed: summary(c.Failed), Closed: c.Closure != report.Open}
			for _, t := range c.Retests {
				ch.Retests = append(ch.Retests, summary(t))
			}
			resp.Chains = append(resp.Chains, ch)
		}
		return nil
	})
	return resp, err
}

func (r *readService) ReconcileVolumes(ctx context.Context, req *pb.ReconcileVolumesRequest) (*pb.ReconcileVolumesResponse, error) {
	resp := &pb.ReconcileVolumesResponse{}
	err := r.view(ctx, req.GetProjectId(), func(p *ledger.Projection) error {
		bs, err := report.Reconcile(p)
		if err != nil {
			return err
		}
		for _, b := range bs {
			if b.Scope != report.SourceScope {
				continue
			}
			resp.Balances = append(resp.Balances, &pb.VolumeBalance{BorrowSourceId: b.Source.ID, CompactedVolume: b.CompactedVolume,
				BankVolume: b.BankVolume, LooseVolumeHauled: b.LooseHauled, ShrinkagePercent: b.Balance.ShrinkagePercent,
				SwellPercent: b.Balance.SwellPercent})
		}
		return nil
	})
	return resp, err
}

// ExportLedger streams a project's whole ledger with the keys of the
// devices that signed it, for offline verification.
func (r *readService) ExportLedger(req *pb.ExportLedgerRequest, stream grpc.ServerStreamingServer[pb.ExportLedgerResponse]) error {
	ctx := stream.Context()
	if _, err := r.s.requireMember(ctx, req.GetProjectId()); err != nil {
		return err
	}
	head, err := r.s.storeHead(ctx, req.GetProjectId())
	if err != nil {
		return projectErr(r.s, ctx, req.GetProjectId(), err)
	}
	for cursor := uint64(0); cursor < head.Seq; {
		entries, err := r.s.storeEntries(ctx, req.GetProjectId(), cursor, min(r.s.opts.ChunkSize, int(head.Seq-cursor)))
		if err != nil {
			return r.s.internal(ctx, "export", err)
		}
		entries = bounded(entries)
		if len(entries) == 0 {
			break
		}
		cursor = entries[len(entries)-1].Seq
		w, keys, err := r.s.wire(ctx, entries, "") // an export carries every event
		if err != nil {
			return r.s.internal(ctx, "export", err)
		}
		if err := stream.Send(&pb.ExportLedgerResponse{Entries: w, DeviceKeys: keys}); err != nil {
			return err
		}
	}
	return nil
}
