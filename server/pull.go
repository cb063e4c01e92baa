package server

import (
	"context"
	"fmt"

	"google.golang.org/grpc"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
)

// checkVerified opens a new epoch when a device has verified a point that
// this ledger does not contain: the ledger was restored from an older copy
// or rewritten, and devices must re-push what it lost.
//
// The point a device verified was pulled, so it is stored; the new epoch
// is set once the batches being written are in.
func (s *Server) checkVerified(ctx context.Context, p *project, v *pb.Checkpoint) (ledger.Checkpoint, error) {
	head := p.head
	if v == nil || v.GetSequence() == 0 {
		return head, nil
	}
	cp := ledger.CheckpointFromProto(v)
	lost := false
	switch {
	case cp.Epoch > head.Epoch:
		lost = true
	case cp.Epoch == head.Epoch:
		h, ok, err := s.storeHashAt(ctx, head.Project, cp.Seq)
		if err != nil {
			return head, err
		}
		lost = !ok || h != cp.Hash
	}
	if !lost {
		return head, nil
	}
	epoch := max(head.Epoch, cp.Epoch) + 1
	p.write.Lock()
	err := s.opts.Store.SetEpoch(ctx, head.Project, epoch)
	p.write.Unlock()
	if err != nil {
		return head, err
	}
	s.log.WarnContext(ctx, "a device verified a point this ledger lacks: opening a new epoch", "project", head.Project,
		"device_seq", cp.Seq, "ledger_seq", head.Seq, "epoch", epoch)
	head.Epoch = epoch
	p.head.Epoch = epoch
	return head, nil
}

// pull streams a project's ledger after the request's cursor.
func (s *Server) pull(req *pb.PullRequest, stream grpc.ServerStreamingServer[pb.PullResponse]) error {
	ctx := stream.Context()
	d, err := s.requireMember(ctx, req.GetProjectId())
	if err != nil {
		return err
	}
	own := "" // the device whose events go as their device sequence numbers
	if req.GetOmitOwnEvents() {
		own = d.ID
	}
	head, err := s.storeHead(ctx, req.GetProjectId())
	if err != nil {
		return projectErr(s, ctx, req.GetProjectId(), err)
	}
	cursor := req.GetAfter().GetSequence()
	if req.GetAfter().GetEpoch() != head.Epoch {
		cursor = min(cursor, head.Seq) // the device decides what a new epoch means; anchor where it can compare
	}
	at := min(cursor, head.Seq)
	h, _, err := s.storeHashAt(ctx, req.GetProjectId(), at)
	if err != nil {
		return s.internal(ctx, "anchor", err)
	}
	anchor := ledger.CheckpointToProto(ledger.Checkpoint{Project: head.Project, Epoch: head.Epoch, Seq: at, Hash: h})
	chunk := s.opts.ChunkSize
	if m := int(req.GetMaxEvents()); m > 0 && m < chunk {
		chunk = m
	}
	if req.GetReferenceDataFirst() && cursor == 0 {
		ref, err := s.storeReferenceData(ctx, req.GetProjectId())
		if err != nil {
			return s.internal(ctx, "reference data", err)
		}
		for start := 0; start < len(ref); {
			part := bounded(ref[start:min(len(ref), start+chunk)])
			start += len(part)
			w, keys, err := s.wire(ctx, part, own)
			if err != nil {
				return s.internal(ctx, "reference data", err)
			}
			if err := stream.Send(&pb.PullResponse{Entries: w, DeviceKeys: keys, ReferenceData: true, Anchor: anchor}); err != nil {
				return err
			}
		}
	}
	first := true
	for cursor < head.Seq || first {
		entries, err := s.storeEntries(ctx, req.GetProjectId(), cursor, min(chunk, int(head.Seq-cursor)))
		if err != nil {
			return s.internal(ctx, "read ledger", err)
		}
		entries = bounded(entries)
		w, keys, err := s.wire(ctx, entries, own)
		if err != nil {
			return s.internal(ctx, "read ledger", err)
		}
		resp := &pb.PullResponse{Entries: w, DeviceKeys: keys,
			Head: ledger.CheckpointToProto(ledger.Checkpoint{Project: head.Project, Epoch: head.Epoch, Seq: at, Hash: h})}
		if len(entries) > 0 {
			last := entries[len(entries)-1]
			cursor = last.Seq
			resp.Head = ledger.CheckpointToProto(ledger.Checkpoint{Project: head.Project, Epoch: head.Epoch, Seq: last.Seq, Hash: ledgerHash(last.Hash)})
		}
		if first {
			resp.Anchor = anchor
			first = false
		}
		if err := stream.Send(resp); err != nil {
			return err
		}
		if len(entries) == 0 {
			break
		}
	}
	return nil
}

// bounded returns the longest prefix of es (at least one entry) whose
// events fit in maxChunkBytes.
func bounded(es []Entry) []Entry {
	total := 0
	for i, e := range es {
		total += len(e.Event)
		if total > maxChunkBytes && i > 0 {
			return es[:i]
		}
	}
	return es
}

// wire puts stored entries into their wire form, with the keys of the
// devices that signed them. The envelopes go as they are stored, split into
// body and signature but not decoded: the device decodes and verifies each,
// and the store's row names the signing device. A stored envelope that does
// not split is an error: leaving it out would break the chain the device
// verifies. An event device own signed goes as its device sequence number
// alone, without its hash (the device holds the event and computes the
// hash; the next hash sent, a later entry's or the chunk's head, confirms
// it); own empty sends every event.
func (s *Server) wire(ctx context.Context, es []Entry, own string) ([]*pb.LedgerEntry, map[string][]byte, error) {
	out := make([]*pb.LedgerEntry, 0, len(es))
	keys := map[string][]byte{}
	for _, e := range es {
		if own != "" && e.DeviceID == own {
			out = append(out, &pb.LedgerEntry{Sequence: e.Seq, OwnDeviceSeq: e.DeviceSeq, ClockSkewMicros: e.SkewMicros})
			continue
		}
		m, err := ledger.SplitEnvelope(e.Event)
		if err != nil {
			return nil, nil, fmt.Errorf("server: stored event %d: %w", e.Seq, err)
		}
		out = append(out, &pb.LedgerEntry{Sequence: e.Seq, Event: m, Hash: e.Hash[:], ClockSkewMicros: e.SkewMicros})
		if _, ok := keys[e.DeviceID]; !ok {
			if k, ok := s.key(ctx, e.DeviceID); ok {
				keys[e.DeviceID] = k
			}
		}
	}
	return out, keys, nil
}
