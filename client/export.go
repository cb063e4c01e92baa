package client

import (
	"bufio"
	"context"
	"crypto/ed25519"
	"errors"
	"fmt"
	"io"

	"google.golang.org/grpc"
	"google.golang.org/protobuf/encoding/protodelim"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
)

// Export writes a project's whole ledger, as the server holds it, to w: a
// sequence of length-delimited tamp.v1.ExportLedgerResponse messages, each
// with its events, their chain hashes and the keys of the devices that
// signed them. VerifyExport checks such a file offline. It returns the
// number of events written.
func (s *Store) Export(ctx context.Context, conn grpc.ClientConnInterface, project string, w io.Writer) (int, error) {
	ctx, err := s.CallContext(ctx)
	if err != nil {
		return 0, err
	}
	stream, err := pb.NewLedgerReadServiceClient(conn).ExportLedger(ctx, &pb.ExportLedgerRequest{ProjectId: project})
	if err != nil {
		return 0, fmt.Errorf("client: export: %w", fromWire(err))
	}
	n := 0
	bw := bufio.NewWriter(w)
	for {
		resp, err := stream.Recv()
		if err == io.EOF {
			break
		}
		if err != nil {
			return n, fmt.Errorf("client: export: %w", fromWire(err))
		}
		if _, err := protodelim.MarshalTo(bw, resp); err != nil {
			return n, fmt.Errorf("client: export: %w", err)
		}
		n += len(resp.GetEntries())
	}
	if err := bw.Flush(); err != nil {
		return n, fmt.Errorf("client: export: %w", err)
	}
	return n, nil
}

// ExportReport is what verifying an exported ledger found.
type ExportReport struct {
	Project string
	Events  int
	Head    Checkpoint // epoch unknown in a file: zero
	Digest  string     // of the state the events imply (hex), as Store.Digest gives it
	Tests   int
}

// VerifyExport checks an exported ledger offline: every event decodes, is
// signed by its device's key and obeys the rules, and the hash chain runs
// unbroken from the project's genesis. It returns the first failure, which
// says which event broke which rule.
func VerifyExport(r io.Reader) (ExportReport, error) {
	var rep ExportReport
	br := bufio.NewReader(r)
	var v *ledger.Verifier
	var p *ledger.Projection
	keys := map[string]ed25519.PublicKey{}
	for {
		var chunk pb.ExportLedgerResponse
		err := protodelim.UnmarshalFrom(br, &chunk)
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return rep, fmt.Errorf("client: verify export: the file does not decode after %d events: %w", rep.Events, err)
		}
		for dev, k := range chunk.GetDeviceKeys() {
			keys[dev] = k
		}
		lookup := func(dev string) (ed25519.PublicKey, bool) {
			k, ok := keys[dev]
			return k, ok && len(k) == ed25519.PublicKeySize
		}
		for _, e := range chunk.GetEntries() {
			sg, err := ledger.Open(e.GetEvent(), lookup)
			if err != nil {
				return rep, fmt.Errorf("client: verify export: event %d: %w", e.GetSequence(), err)
			}
			if v == nil {
				rep.Project = sg.Event.Project
				v = ledger.NewVerifier(ledger.Start(rep.Project, 0))
				p = ledger.NewProjection(rep.Project)
			}
			var h ledger.Hash
			copy(h[:], e.GetHash())
			if err := v.Verify([]ledger.Entry{{Seq: e.GetSequence(), Event: sg.Bytes(), Hash: h}}); err != nil {
				return rep, fmt.Errorf("client: verify export: %w", err)
			}
			if _, err := p.Apply(sg); err != nil {
				return rep, fmt.Errorf("client: verify export: event %d: %w", e.GetSequence(), err)
			}
			rep.Events++
		}
	}
	if v == nil {
		return rep, fmt.Errorf("client: verify export: the file holds no events")
	}
	rep.Head, rep.Digest, rep.Tests = checkpointOf(v.At()), p.Digest().String(), len(p.Tests())
	return rep, nil
}
