package server

import (
	"cmp"
	"context"
	"crypto/ed25519"
	"errors"
	"fmt"
	"runtime"
	"strings"
	"sync"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
)

// decoded is one pushed event after decoding and verification.
type decoded struct {
	signed ledger.Signed
	err    error
	// refused is why the event may not join the ledger as a new entry
	// (ledger.Admit), nil when it may; an event the ledger holds already
	// is present whatever it says.
	refused error
}

// verifyAll decodes, verifies and validates events, checking signatures in
// batches on all cores. A batch is split only into parts of at least
// minVerifyPart events: the batch equation costs less per signature the
// more it holds, and concurrent pushes keep the cores busy anyway.
func (s *Server) verifyAll(ctx context.Context, events []*pb.Event) []decoded {
	out := make([]decoded, len(events))
	workers := min(runtime.GOMAXPROCS(0), max(1, len(events)/minVerifyPart))
	per := (len(events) + workers - 1) / workers
	inParts := func(fn func(lo, hi int)) {
		var wg sync.WaitGroup
		for lo := 0; lo < len(events); lo += per {
			wg.Add(1)
			go func() {
				defer wg.Done()
				fn(lo, min(len(events), lo+per))
			}()
		}
		wg.Wait()
	}
	inParts(func(lo, hi int) {
		for i := lo; i < hi; i++ {
			sg, err := ledger.FromEnvelope(events[i])
			out[i] = decoded{signed: sg, err: err}
		}
	})
	introduced := s.introducedKeys(ctx, out)
	keys := func(dev string) (ed25519.PublicKey, bool) {
		if k, ok := introduced[dev]; ok {
			return k, true
		}
		return s.key(ctx, dev)
	}
	inParts(func(lo, hi int) {
		good := make([]int, 0, hi-lo)
		signed := make([]ledger.Signed, 0, hi-lo)
		for i := lo; i < hi; i++ {
			if out[i].err == nil {
				good = append(good, i)
				signed = append(signed, out[i].signed)
			}
		}
		for j, err := range ledger.VerifyBatch(signed, keys) {
			i := good[j]
			if err == nil {
				err = ledger.Validate(out[i].signed.Event)
			}
			out[i].err = err
			if err == nil {
				out[i].refused = ledger.Admit(out[i].signed)
			}
		}
	})
	return out
}

// rejected is the outcome of an event refused by err: the reason, the field
// or the rule and the words of its *ledger.Rejection.
func rejected(id string, err error) *pb.PushOutcome {
	o := &pb.PushOutcome{EventId: id, Status: pb.PushStatus_PUSH_STATUS_REJECTED,
		Reason: pb.RejectReason_REJECT_REASON_MALFORMED, Message: "the event could not be read"}
	var r *ledger.Rejection
	if errors.As(err, &r) {
		o.Reason, o.Message = ledger.ReasonToProto(r.Reason), strings.TrimPrefix(r.Error(), "ledger: ")
		o.Field, o.Rule = r.FieldRule()
	}
	return o
}

// push appends a batch of events to a project's ledger.
func (s *Server) push(ctx context.Context, req *pb.PushRequest) (*pb.PushResponse, error) {
	if n := len(req.GetEvents()); n > s.opts.MaxBatch {
		return nil, statusError(codes.ResourceExhausted, reasonBatchTooLarge, "events", "",
			fmt.Sprintf("a batch holds at most %d events, not %d", s.opts.MaxBatch, n))
	}
	dev, own := deviceFrom(ctx)
	own = own && s.isOwnDevice(dev.ID) // the server's own entries: no membership, no rate limit
	if !own {
		var err error
		if dev, err = s.requireMember(ctx, req.GetProjectId()); err != nil {
			return nil, err
		}
		if err := s.ensureIntroduced(ctx, req.GetProjectId(), dev); err != nil {
			// The introduction's own push answers in statuses: with
			// several servers on one store it may lose the race for the
			// chain head, and the device pushes again (LEDGER_MOVED).
			if _, ok := status.FromError(err); ok {
				return nil, err
			}
			return nil, projectErr(s, ctx, req.GetProjectId(), err)
		}
	}
	if !own && !s.limits.allow(dev.ID, s.opts.Now()) {
		return nil, statusError(codes.ResourceExhausted, reasonRateLimited, "", "push_rate",
			fmt.Sprintf("device %s pushes faster than %.0f batches a second; slow down", dev.ID, s.opts.PushRate))
	}
	if err := s.writable(ctx); err != nil {
		return nil, err
	}
	now := s.opts.Now()
	var skew int64
	if t := req.GetDeviceTimeMicros(); t != 0 {
		skew = t - now.UnixMicro()
	}
	items := s.verifyAll(ctx, req.GetEvents())

	p, err := s.lockProject(ctx, req.GetProjectId())
	if err != nil {
		return nil, projectErr(s, ctx, req.GetProjectId(), err)
	}
	gen := p.seen
	resp, head, rows, err := s.decide(ctx, p, req, items, now, skew)
	if err != nil {
		p.mu.Unlock()
		return nil, err
	}
	// Write while the next push decides: take write before letting go of
	// mu, so batches reach the store in the order they were decided. If a
	// write failed since this batch's state was loaded, its outcomes may
	// rest on that batch (already present, at sequence numbers that were
	// not stored): it is given up whole, so nothing unstored is
	// acknowledged, even with no rows to write.
	p.write.Lock()
	p.mu.Unlock()
	if p.failed.Load() != gen {
		err = ErrConflict
	} else if err = s.storeAppend(ctx, req.GetProjectId(), head, rows); err != nil {
		p.failed.Add(1) // the decided batch is applied to the view, not stored
	}
	p.write.Unlock()
	if err != nil {
		if errors.Is(err, ErrConflict) {
			return nil, statusError(codes.Aborted, reasonLedgerMoved, "", "", "the ledger moved during the push; push again")
		}
		return nil, s.internal(ctx, "append", err)
	}
	s.deviceEffects(ctx, req.GetProjectId(), rows)
	s.log.InfoContext(ctx, "push", "project", req.GetProjectId(), "events", len(items), "accepted", len(rows), "head", resp.GetHead().GetSequence())
	return resp, nil
}

// decide settles each event of a push, under p.mu: it gives the accepted
// ones their sequence numbers and chain hashes and applies them to the
// view. It returns the response, the head the rows follow, and the rows to
// write; p.head becomes the head after them.
func (s *Server) decide(ctx context.Context, p *project, req *pb.PushRequest, items []decoded, now time.Time, skew int64) (*pb.PushResponse, ledger.Checkpoint, []Row, error) {
	head, err := s.checkVerified(ctx, p, req.GetVerified())
	if err != nil {
		return nil, head, nil, s.internal(ctx, "epoch", err)
	}
	limit := s.skewLimit(p).Microseconds()
	skewed := skew > limit || -skew > limit
	resp := &pb.PushResponse{ClockSkewMicros: skew, Outcomes: make([]*pb.PushOutcome, 0, len(items))}
	rows := make([]Row, 0, len(items))
	slab := make([]pb.PushOutcome, len(items)) // the accepted events' outcomes, in one allocation
	next := head
	gaps := 0 // gaps in device sequences the accepted entries opened
	own, err := s.identity(ctx)
	if err != nil {
		return nil, head, nil, s.internal(ctx, "identity", err)
	}
	auth := s.authorizer(ctx, req.GetProjectId(), p.view)
	for _, it := range items { // devices this batch introduces, signed by the server's own key
		if k, ok := it.signed.Event.Kind.(*ledger.DeviceEnrolled); ok && it.err == nil && s.isOwnDevice(it.signed.Event.Device) {
			auth.users[k.DeviceID] = k.UserID
		}
	}
	for i, it := range items {
		id := ""
		if it.err == nil {
			id = it.signed.Event.ID
		} else if sg, err := ledger.FromEnvelope(req.GetEvents()[i]); err == nil {
			id = sg.Event.ID
		}
		if it.err != nil {
			resp.Outcomes = append(resp.Outcomes, rejected(id, it.err))
			continue
		}
		e := it.signed.Event
		if e.Project != req.GetProjectId() {
			resp.Outcomes = append(resp.Outcomes, rejected(id, &ledger.Rejection{Reason: ledger.WrongProject, Field: "project_id",
				Detail: "the event belongs to project " + e.Project}))
			continue
		}
		if seq, held := p.seqs[id]; held {
			if held, same := p.view.HeldAs(id, it.signed.Body); !held || !same {
				resp.Outcomes = append(resp.Outcomes, rejected(id, &ledger.Rejection{Reason: ledger.ConflictingID, Field: "event_id",
					Detail: "the ledger holds event " + id + " with other content"}))
				continue
			}
			resp.Outcomes = append(resp.Outcomes, &pb.PushOutcome{EventId: id, Status: pb.PushStatus_PUSH_STATUS_ALREADY_PRESENT, Sequence: seq})
			continue
		}
		if refused := cmp.Or(it.refused, ledger.CheckAhead(e, now)); refused != nil { // bounds of a new entry, and its clock against ours
			resp.Outcomes = append(resp.Outcomes, rejected(id, refused))
			continue
		}
		deny := checkOwnEntry(own, e)
		var err error
		if deny == nil && !ledger.ServerMade(e.Kind) {
			deny, err = auth.check(e)
		}
		if err == nil && deny == nil {
			deny = cmp.Or(p.view.SignedAfterRevocation(&e), p.view.Claimed(&e))
		}
		if err != nil {
			p.unapply(rows)
			return nil, head, nil, s.internal(ctx, "authorize", err)
		}
		if deny != nil {
			p.devs.offer(&e)
			resp.Outcomes = append(resp.Outcomes, rejected(id, deny))
			continue
		}
		if waiting := p.view.Missing(&e); len(waiting) > 0 {
			p.devs.offer(&e)
			resp.Outcomes = append(resp.Outcomes, &pb.PushOutcome{EventId: id, Status: pb.PushStatus_PUSH_STATUS_WAITING, WaitingFor: waiting,
				Message: "refers to records the server has not received yet: " + strings.Join(waiting, ", ")})
			continue
		}
		if _, err := p.view.ApplyValidated(it.signed); err != nil {
			p.unapply(rows)
			return nil, head, nil, s.internal(ctx, "apply", err)
		}
		env := it.signed.Bytes()
		next.Seq++
		next.Hash = ledger.Link(next.Hash, next.Seq, env)
		row := Row{Seq: next.Seq, EventID: id, DeviceID: e.Device, DeviceSeq: e.DeviceSeq, Kind: e.Kind.KindName(),
			RecordID: ledger.RecordID(e.Kind), Envelope: env, Hash: storeHash(next.Hash), Received: now}
		if skewed {
			row.SkewMicros = skew
		}
		rows = append(rows, row)
		p.seqs[id] = next.Seq
		if p.devs.hold(&e) {
			gaps++
		}
		o := &slab[i]
		o.EventId, o.Status, o.Sequence = id, pb.PushStatus_PUSH_STATUS_ACCEPTED, next.Seq
		resp.Outcomes = append(resp.Outcomes, o)
	}
	if skewed && len(rows) > 0 {
		s.log.WarnContext(ctx, "device clock skew beyond the limit", "project", req.GetProjectId(), "skew", time.Duration(skew)*time.Microsecond,
			"events", len(rows))
	}
	resp.Missing = p.devs.missing()
	if gaps > 0 && len(resp.Missing) > 0 {
		s.log.WarnContext(ctx, "the ledger lacks entries that pushed entries follow; asking devices for them", "project", req.GetProjectId(),
			"missing", missingAttr(resp.Missing))
	}
	resp.Head = ledger.CheckpointToProto(next)
	p.head = next
	return resp, head, rows, nil
}

// unapply marks p's state for reloading when a push fails after applying
// rows to its view, before they were written.
func (p *project) unapply(rows []Row) {
	if len(rows) > 0 {
		p.failed.Add(1)
	}
}

func (s *Server) skewLimit(p *project) time.Duration {
	if su := p.view.SetUp(); su != nil && su.ClockSkewLimit > 0 {
		return su.ClockSkewLimit
	}
	return s.opts.ClockSkewLimit
}
