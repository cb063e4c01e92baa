package server

import (
	"context"
	"crypto/ed25519"
	"fmt"
	"sync"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
)

// The server's own entries. The server signs, with a key of its own, the
// entries only it may make: a device's key introduced to a project
// (device_enrolled) and a device's revocation (device_revoked). They go
// into the project ledgers like any other entry, so devices learn them on
// pull and hand them back to a server restored from an older copy.

// certificateProject is the project id of a device's enrolment certificate,
// which belongs to no project.
const certificateProject = "00000000-0000-0000-0000-000000000000"

// ownState caches the server's identity once loaded.
type ownState struct {
	mu  sync.Mutex
	id  Identity
	seq uint64 // the last device sequence number of the server's own device
}

// identity returns the server's own signing identity, creating it on first
// use.
func (s *Server) identity(ctx context.Context) (Identity, error) {
	o := &s.self
	o.mu.Lock()
	defer o.mu.Unlock()
	if o.id.Key != nil {
		return o.id, nil
	}
	id, err := s.opts.Store.ServerIdentity(ctx, func() Identity {
		seed := make([]byte, ed25519.SeedSize)
		if _, err := s.opts.Rand.Read(seed); err != nil {
			panic(fmt.Sprintf("server: random: %v", err))
		}
		return Identity{DeviceID: s.newID(), UserID: s.newID(), Key: ed25519.NewKeyFromSeed(seed)}
	})
	if err != nil {
		return Identity{}, err
	}
	o.id = id
	s.keys.Store(id.DeviceID, id.Key.Public().(ed25519.PublicKey))
	return id, nil
}

// isOwnDevice reports whether device is the server's own.
func (s *Server) isOwnDevice(device string) bool {
	o := &s.self
	o.mu.Lock()
	defer o.mu.Unlock()
	return o.id.Key != nil && o.id.DeviceID == device
}

func isDeviceEntry(k ledger.Kind) bool {
	switch k.(type) {
	case *ledger.DeviceEnrolled, *ledger.DeviceRevoked:
		return true
	}
	return false
}

// checkOwnEntry refuses a device entry not signed by the server's own
// device, and any other entry that is.
func (s *Server) checkOwnEntry(ctx context.Context, e ledger.Event) (*ledger.Rejection, error) {
	id, err := s.identity(ctx)
	if err != nil {
		return nil, err
	}
	switch {
	case isDeviceEntry(e.Kind) && e.Device != id.DeviceID:
		return denied("server_entries_only", fmt.Sprintf("only the server makes a %s entry", e.Kind.KindName())), nil
	case !isDeviceEntry(e.Kind) && e.Device == id.DeviceID:
		return denied("server_entries_only", "the server's own key signs only device entries"), nil
	}
	return nil, nil
}

// sealOwn signs an entry of the server's own.
func (s *Server) sealOwn(ctx context.Context, project string, k ledger.Kind) (ledger.Signed, error) {
	id, err := s.identity(ctx)
	if err != nil {
		return ledger.Signed{}, err
	}
	o := &s.self
	now := s.opts.Now().UTC().Truncate(time.Microsecond)
	o.mu.Lock()
	o.seq = max(o.seq+1, uint64(now.UnixMicro())) // increasing across restarts without a stored counter
	seq := o.seq
	o.mu.Unlock()
	e := ledger.Event{ID: s.newID(), Project: project, Author: id.UserID, Device: id.DeviceID, DeviceSeq: seq,
		HLC: ledger.HLC{Wall: now.UnixMicro()}, DeviceTime: now, Kind: k}
	return ledger.Seal(e, id.Key)
}

// appendOwn makes an entry of the server's own in a project's ledger,
// through the same decision and write as a device's push.
func (s *Server) appendOwn(ctx context.Context, project string, k ledger.Kind) error {
	sg, err := s.sealOwn(ctx, project, k)
	if err != nil {
		return err
	}
	id, _ := s.identity(ctx)
	octx := context.WithValue(ctx, deviceKey{}, Device{ID: id.DeviceID, UserID: id.UserID})
	resp, err := s.Push(octx, &pb.PushRequest{ProjectId: project, Events: []*pb.Event{sg.Proto()}})
	if err != nil {
		return err
	}
	if o := resp.GetOutcomes()[0]; o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED && o.GetStatus() != pb.PushStatus_PUSH_STATUS_ALREADY_PRESENT {
		return fmt.Errorf("server: own %s entry in %s: %s", k.KindName(), project, o.GetMessage())
	}
	return nil
}

// introduceDevice makes a device_enrolled entry in every project of its
// user, and returns the device's certificate: the same entry, for no
// project, which the device keeps to prove its enrolment to a server
// restored from a copy older than it.
func (s *Server) introduceDevice(ctx context.Context, d Device, at time.Time) (ledger.Signed, error) {
	u, err := s.opts.Store.User(ctx, d.UserID)
	if err != nil {
		return ledger.Signed{}, err
	}
	k := &ledger.DeviceEnrolled{DeviceID: d.ID, UserID: d.UserID, PublicKey: d.PublicKey, Name: d.Name, UserName: u.Name,
		Enrolled: at.UTC().Truncate(time.Microsecond)}
	projects, err := s.opts.Store.ProjectsOf(ctx, d.UserID)
	if err != nil {
		return ledger.Signed{}, err
	}
	for _, p := range projects {
		role, err := s.opts.Store.Role(ctx, p, d.UserID)
		if err != nil {
			return ledger.Signed{}, err
		}
		in := *k
		in.Role = string(role)
		if err := s.appendOwn(ctx, p, &in); err != nil {
			return ledger.Signed{}, err
		}
	}
	return s.sealOwn(ctx, certificateProject, k)
}

// IntroduceDevices makes a device_enrolled entry in project for each of
// user's devices that are not revoked, when the user joins it.
func (s *Server) IntroduceDevices(ctx context.Context, project, user string) error {
	ds, err := s.opts.Store.Devices(ctx, user)
	if err != nil {
		return err
	}
	u, err := s.opts.Store.User(ctx, user)
	if err != nil {
		return err
	}
	role, err := s.opts.Store.Role(ctx, project, user)
	if err != nil {
		return err
	}
	for _, d := range ds {
		if d.Revoked {
			continue
		}
		k := &ledger.DeviceEnrolled{DeviceID: d.ID, UserID: d.UserID, PublicKey: d.PublicKey, Name: d.Name, UserName: u.Name,
			Enrolled: s.opts.Now().UTC().Truncate(time.Microsecond), Role: string(role)}
		if err := s.appendOwn(ctx, project, k); err != nil {
			return err
		}
	}
	return nil
}

// revokeEverywhere makes a device_revoked entry in every project of the
// device's user.
func (s *Server) revokeEverywhere(ctx context.Context, d Device, by, reason string, at time.Time) error {
	projects, err := s.opts.Store.ProjectsOf(ctx, d.UserID)
	if err != nil {
		return err
	}
	k := &ledger.DeviceRevoked{DeviceID: d.ID, Effective: at.UTC().Truncate(time.Microsecond), RevokedBy: by, Reason: reason}
	for _, p := range projects {
		if err := s.appendOwn(ctx, p, k); err != nil {
			return err
		}
	}
	return nil
}

// introducedKeys returns the keys that device_enrolled entries of a pushed
// batch, signed by the server's own key, introduce: a device relaying a
// restored server's lost entries may send a device's introduction and its
// entries in one batch.
func (s *Server) introducedKeys(ctx context.Context, events []*pb.Event) map[string]ed25519.PublicKey {
	var out map[string]ed25519.PublicKey
	var id Identity
	for _, m := range events {
		sg, err := ledger.FromEnvelope(m)
		if err != nil {
			continue
		}
		k, ok := sg.Event.Kind.(*ledger.DeviceEnrolled)
		if !ok {
			continue
		}
		if id.Key == nil {
			if id, err = s.identity(ctx); err != nil {
				return nil
			}
		}
		if sg.Event.Device != id.DeviceID || sg.Verify(id.Key.Public().(ed25519.PublicKey)) != nil || len(k.PublicKey) != ed25519.PublicKeySize {
			continue
		}
		if out == nil {
			out = map[string]ed25519.PublicKey{}
		}
		out[k.DeviceID] = ed25519.PublicKey(k.PublicKey)
	}
	return out
}

// deviceEffects brings the device table in line with the device entries
// just stored: a device introduced by a ledger the server had lost is known
// again (without a token until it proves its key), a revocation revokes.
func (s *Server) deviceEffects(ctx context.Context, project string, rows []Row) {
	for _, r := range rows {
		if r.Kind != "device_enrolled" && r.Kind != "device_revoked" {
			continue
		}
		sg, err := ledger.Decode(r.Envelope)
		if err != nil {
			continue
		}
		switch k := sg.Event.Kind.(type) {
		case *ledger.DeviceEnrolled:
			created, err := s.opts.Store.RegisterDevice(ctx, Device{ID: k.DeviceID, UserID: k.UserID, Name: k.Name, PublicKey: k.PublicKey}, k.UserName, s.opts.Now())
			if err != nil {
				s.log.ErrorContext(ctx, "register a device the ledger introduces", "device", k.DeviceID, "err", err)
			} else if created {
				s.log.WarnContext(ctx, "a device this server had lost is known again from its ledger entry", "device", k.DeviceID, "user", k.UserID)
			}
			s.restoreMember(ctx, project, k)
		case *ledger.DeviceRevoked:
			if err := s.opts.Store.Revoke(ctx, k.DeviceID, k.Effective); err != nil {
				s.log.ErrorContext(ctx, "revoke a device the ledger revokes", "device", k.DeviceID, "err", err)
			}
		}
	}
}

// resumeWindow bounds the clock difference a resume proof may carry.
const resumeWindow = 10 * time.Minute

// ResumeDevice gives a new token to a device that proves its enrolment
// with its certificate and its key: after a restore from a copy older
// than its enrolment, the server has no record of it.
func (a *adminService) ResumeDevice(ctx context.Context, req *pb.ResumeDeviceRequest) (*pb.ResumeDeviceResponse, error) {
	s := a.s
	id, err := s.identity(ctx)
	if err != nil {
		return nil, s.internal(ctx, "resume", err)
	}
	cert, err := ledger.FromEnvelope(req.GetCertificate())
	if err != nil {
		return nil, status.Error(codes.InvalidArgument, "certificate: does not decode")
	}
	k, ok := cert.Event.Kind.(*ledger.DeviceEnrolled)
	if !ok || cert.Event.Device != id.DeviceID || cert.Event.Project != certificateProject || cert.Verify(id.Key.Public().(ed25519.PublicKey)) != nil {
		return nil, status.Error(codes.Unauthenticated, "certificate: not an enrolment certificate this server signed")
	}
	now := s.opts.Now()
	at := time.UnixMicro(req.GetProofMicros())
	if d := now.Sub(at); d > resumeWindow || d < -resumeWindow {
		return nil, status.Errorf(codes.Unauthenticated, "proof_micros: the proof's time is more than %s from the server's clock", resumeWindow)
	}
	if !ed25519.Verify(k.PublicKey, ledger.ResumeProof(k.DeviceID, req.GetProofMicros()), req.GetProof()) {
		return nil, status.Error(codes.Unauthenticated, "proof: the signature does not verify with the certificate's key")
	}
	d := Device{ID: k.DeviceID, UserID: k.UserID, Name: k.Name, PublicKey: k.PublicKey}
	if _, err := s.opts.Store.RegisterDevice(ctx, d, k.UserName, now); err != nil {
		return nil, s.internal(ctx, "resume", err)
	}
	held, err := s.opts.Store.Device(ctx, d.ID)
	if err != nil {
		return nil, s.internal(ctx, "resume", err)
	}
	if held.Revoked || s.revokedInLedgers(ctx, d) {
		return nil, status.Error(codes.PermissionDenied, "device_revoked: this device was revoked; enrol again with a new code")
	}
	token := s.secret()
	if err := s.opts.Store.SetToken(ctx, d.ID, hash(token)); err != nil {
		return nil, s.internal(ctx, "resume", err)
	}
	projects, err := s.opts.Store.ProjectsOf(ctx, d.UserID)
	if err != nil {
		return nil, s.internal(ctx, "resume", err)
	}
	s.log.WarnContext(ctx, "device resumed with its enrolment certificate", "device", d.ID, "user", d.UserID)
	return &pb.ResumeDeviceResponse{Token: token, UserId: d.UserID, ProjectIds: projects}, nil
}

// revokedInLedgers reports whether a project ledger of the device's user
// revokes it (and then revokes it in the device table).
func (s *Server) revokedInLedgers(ctx context.Context, d Device) bool {
	projects, err := s.opts.Store.ProjectsOf(ctx, d.UserID)
	if err != nil {
		return false
	}
	for _, p := range projects {
		var rev *ledger.DeviceRevoked
		if err := s.Inspect(ctx, p, func(v *ledger.Projection) {
			if dv, ok := v.Device(d.ID); ok {
				rev = dv.Revoked
			}
		}); err != nil || rev == nil {
			continue
		}
		_ = s.opts.Store.Revoke(ctx, d.ID, rev.Effective)
		return true
	}
	return false
}

// restoreMember gives a user the role a device_enrolled entry records when
// the user has no role on the project: the server lost the membership in a
// restore from an older copy, and the entry, signed by its own key, says
// what it was.
func (s *Server) restoreMember(ctx context.Context, project string, k *ledger.DeviceEnrolled) {
	role := Role(k.Role)
	if !validRole(role) {
		return
	}
	if r, err := s.opts.Store.Role(ctx, project, k.UserID); err != nil || r != "" {
		return
	}
	if err := s.opts.Store.SetMember(ctx, project, k.UserID, role); err != nil {
		s.log.ErrorContext(ctx, "restore a membership from the ledger", "project", project, "user", k.UserID, "err", err)
		return
	}
	s.log.WarnContext(ctx, "a membership this server had lost is restored from its ledger entry", "project", project, "user", k.UserID, "role", role)
}
