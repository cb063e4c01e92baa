package server

import (
	"context"
	"crypto/ed25519"
	"errors"
	"fmt"
	"sync"
	"time"

	"google.golang.org/grpc/codes"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
)

// The server's own entries. The server signs, with a key of its own, the
// entries only it may make: a device's key introduced to a project
// (device_enrolled, with the user's role there) and a device's revocation
// (device_revoked). They go into the project ledgers like any other entry,
// so devices learn them on pull and hand them back to a server restored
// from an older copy, which then knows the devices, memberships and
// revocations it had lost (see syncDevices).

// certificateProject is the project id of a device's enrolment certificate,
// which belongs to no project.
const certificateProject = "00000000-0000-0000-0000-000000000000"

// ownState is the server's own identity once loaded, and what it
// remembers of its own entries.
type ownState struct {
	mu         sync.Mutex
	id         Identity
	seq        uint64           // the last device sequence number of the server's own device
	introduced map[string]bool  // project + "/" + device: the ledger introduces the device
	resumed    map[string]int64 // device -> the time of the last resume proof it used
}

// identity returns the server's own signing identity, creating it on first
// use (tampd init creates it, see Bootstrap).
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

// checkOwnEntry refuses a device entry not signed by the server's own
// device (own), and any other entry that is.
func checkOwnEntry(own Identity, e ledger.Event) *ledger.Rejection {
	switch {
	case ledger.ServerMade(e.Kind) && e.Device != own.DeviceID:
		return denied("server_entries_only", fmt.Sprintf("only the server makes a %s entry", e.Kind.KindName()))
	case !ledger.ServerMade(e.Kind) && e.Device == own.DeviceID:
		return denied("server_entries_only", "the server's own key signs only device entries")
	}
	return nil
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
// through the same decision and write as a device's push. It returns the
// push's errors (status errors), or an error naming the refusal.
func (s *Server) appendOwn(ctx context.Context, project string, k ledger.Kind) error {
	sg, err := s.sealOwn(ctx, project, k)
	if err != nil {
		return err
	}
	id, _ := s.identity(ctx)
	octx := context.WithValue(ctx, deviceKey{}, Device{ID: id.DeviceID, UserID: id.UserID})
	resp, err := s.push(octx, &pb.PushRequest{ProjectId: project, Events: []*pb.Event{sg.Proto()}})
	if err != nil {
		return err
	}
	if o := resp.GetOutcomes()[0]; o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED && o.GetStatus() != pb.PushStatus_PUSH_STATUS_ALREADY_PRESENT {
		return fmt.Errorf("server: own %s entry in %s: %s", k.KindName(), project, o.GetMessage())
	}
	return nil
}

// introduction is the device_enrolled entry of d for project, with its
// user's role there.
func (s *Server) introduction(ctx context.Context, d Device, project string, at time.Time) (*ledger.DeviceEnrolled, error) {
	u, err := s.opts.Store.User(ctx, d.UserID)
	if err != nil {
		return nil, err
	}
	k := &ledger.DeviceEnrolled{DeviceID: d.ID, UserID: d.UserID, PublicKey: d.PublicKey, Name: d.Name, UserName: u.Name,
		Enrolled: at.UTC().Truncate(time.Microsecond)}
	if project != certificateProject {
		role, err := s.opts.Store.Role(ctx, project, d.UserID)
		if err != nil {
			return nil, err
		}
		k.Role = string(role)
	}
	return k, nil
}

// certificate returns a device's enrolment certificate: its
// device_enrolled entry for no project, which the device keeps to prove
// its enrolment to a server restored from a copy older than it.
func (s *Server) certificate(ctx context.Context, d Device, at time.Time) (ledger.Signed, error) {
	k, err := s.introduction(ctx, d, certificateProject, at)
	if err != nil {
		return ledger.Signed{}, err
	}
	return s.sealOwn(ctx, certificateProject, k)
}

// introduceDevices records user's devices in a project's ledger when the
// user joins it or changes role there: a device_enrolled entry, with the
// role, for each device, and a device_revoked entry for each revoked one,
// so a key revoked before the user joined cannot write there.
func (s *Server) introduceDevices(ctx context.Context, project, user string) error {
	ds, err := s.opts.Store.Devices(ctx, user)
	if err != nil {
		return err
	}
	for _, d := range ds {
		if d.Revoked {
			if err := s.revokeIn(ctx, project, d, "", "revoked before the user joined the project", s.opts.Now()); err != nil {
				return err
			}
			continue
		}
		k, err := s.introduction(ctx, d, project, s.opts.Now())
		if err != nil {
			return err
		}
		if err := s.appendOwn(ctx, project, k); err != nil {
			return err
		}
		s.markIntroduced(project, d.ID)
	}
	return nil
}

func (s *Server) markIntroduced(project, device string) {
	o := &s.self
	o.mu.Lock()
	defer o.mu.Unlock()
	if o.introduced == nil {
		o.introduced = map[string]bool{}
	}
	o.introduced[project+"/"+device] = true
}

// ensureIntroduced makes sure the project's ledger introduces the device
// that pushes to it, for devices enrolled while their introduction failed,
// or before this version of tampd.
func (s *Server) ensureIntroduced(ctx context.Context, project string, d Device) error {
	o := &s.self
	o.mu.Lock()
	done := o.introduced[project+"/"+d.ID]
	o.mu.Unlock()
	if done {
		return nil
	}
	p, err := s.lockProject(ctx, project)
	if err != nil {
		return err
	}
	_, held := p.view.Device(d.ID)
	p.mu.Unlock()
	if !held {
		k, err := s.introduction(ctx, d, project, s.opts.Now())
		if err != nil {
			return err
		}
		if err := s.appendOwn(ctx, project, k); err != nil {
			return err
		}
	}
	s.markIntroduced(project, d.ID)
	return nil
}

// revokeEverywhere makes a device_revoked entry in every project of the
// device's user.
func (s *Server) revokeEverywhere(ctx context.Context, d Device, by, reason string, at time.Time) error {
	projects, err := s.opts.Store.ProjectsOf(ctx, d.UserID)
	if err != nil {
		return err
	}
	for _, p := range projects {
		if err := s.revokeIn(ctx, p, d, by, reason, at); err != nil {
			return err
		}
	}
	return nil
}

// revokeIn makes a device_revoked entry in one project, cutting the device
// off after the last of its entries the project's ledger holds now.
func (s *Server) revokeIn(ctx context.Context, project string, d Device, by, reason string, at time.Time) error {
	p, err := s.lockProject(ctx, project)
	if err != nil {
		return err
	}
	var last uint64
	if seqs := p.devs.held[d.ID]; len(seqs) > 0 {
		last = seqs[len(seqs)-1]
	}
	p.mu.Unlock()
	return s.appendOwn(ctx, project, &ledger.DeviceRevoked{DeviceID: d.ID, Effective: at.UTC().Truncate(time.Microsecond), RevokedBy: by,
		Reason: reason, LastDeviceSeq: last})
}

// introducedKeys returns the keys that device_enrolled entries of a pushed
// batch (decoded, not yet verified), signed by the server's own key,
// introduce: a device relaying a restored server's lost entries may send a
// device's introduction and its entries in one batch.
func (s *Server) introducedKeys(ctx context.Context, items []decoded) map[string]ed25519.PublicKey {
	var out map[string]ed25519.PublicKey
	var id Identity
	for _, it := range items {
		k, ok := it.signed.Event.Kind.(*ledger.DeviceEnrolled)
		if it.err != nil || !ok {
			continue
		}
		if id.Key == nil {
			var err error
			if id, err = s.identity(ctx); err != nil {
				return nil
			}
		}
		if it.signed.Event.Device != id.DeviceID || it.signed.Verify(id.Key.Public().(ed25519.PublicKey)) != nil || len(k.PublicKey) != ed25519.PublicKeySize {
			continue
		}
		if out == nil {
			out = map[string]ed25519.PublicKey{}
		}
		out[k.DeviceID] = ed25519.PublicKey(k.PublicKey)
	}
	return out
}

// deviceEffects brings the device table and the memberships in line with
// the device entries of a batch just stored. A failure here is logged and
// not returned: the batch is stored and acknowledged, and syncDevices
// repeats the same work from the ledger at the project's next load.
func (s *Server) deviceEffects(ctx context.Context, project string, rows []Row) {
	enrolled, revoked := (*ledger.DeviceEnrolled)(nil).KindName(), (*ledger.DeviceRevoked)(nil).KindName()
	devices := false
	for _, r := range rows {
		devices = devices || r.Kind == enrolled || r.Kind == revoked
	}
	if !devices {
		return
	}
	if err := s.inspect(ctx, project, func(v *ledger.Projection) { s.syncDevices(ctx, project, v) }); err != nil {
		s.log.ErrorContext(ctx, "bring devices in line with the ledger", "project", project, "err", err)
	}
}

// syncDevices brings the device table and the project's memberships in
// line with what the project's ledger says, after a restore from an older
// copy: a device the ledger introduces and the table lacks is known again
// (without a token until it proves its key with ResumeDevice), a device the
// ledger revokes is revoked, and a user the ledger gives a role who has
// none gets the role of the user's latest introduction. Failures are logged
// and the work is repeated at the next load: a project must load, to serve
// reads, even while the disk cannot be written.
func (s *Server) syncDevices(ctx context.Context, project string, v *ledger.Projection) {
	own, _ := s.identity(ctx)
	users := map[string]string{}
	for _, d := range v.Devices() {
		if d.DeviceID == "" || d.DeviceID == own.DeviceID {
			continue
		}
		held, err := s.opts.Store.Device(ctx, d.DeviceID)
		switch {
		case errors.Is(err, ErrNoDevice):
			dev := Device{ID: d.DeviceID, UserID: d.UserID, Name: d.Name, PublicKey: d.PublicKey, Revoked: d.Revoked != nil}
			if _, err := s.opts.Store.RegisterDevice(ctx, dev, d.UserName, s.opts.Now()); err != nil {
				s.log.ErrorContext(ctx, "register a device the ledger introduces", "device", d.DeviceID, "err", err)
				continue
			}
			s.log.WarnContext(ctx, "a device this server had lost is known again from its ledger entry", "device", d.DeviceID, "user", d.UserID)
		case err != nil:
			s.log.ErrorContext(ctx, "read a device the ledger introduces", "device", d.DeviceID, "err", err)
			continue
		case d.Revoked != nil && !held.Revoked:
			if err := s.opts.Store.Revoke(ctx, d.DeviceID, d.Revoked.Effective); err != nil {
				s.log.ErrorContext(ctx, "revoke a device the ledger revokes", "device", d.DeviceID, "err", err)
			}
		}
		users[d.UserID] = d.UserName
	}
	for user := range users {
		role := Role(v.LatestRole(user))
		if !validRole(role) {
			continue
		}
		if r, err := s.opts.Store.Role(ctx, project, user); err != nil || r != "" {
			continue
		}
		if err := s.opts.Store.SetMember(ctx, project, user, role); err != nil {
			s.log.ErrorContext(ctx, "restore a membership from the ledger", "project", project, "user", user, "err", err)
			continue
		}
		s.log.WarnContext(ctx, "a membership this server had lost is restored from its ledger", "project", project, "user", user, "role", role)
	}
}

// resumeWindow bounds the clock difference a resume proof may carry.
const resumeWindow = 10 * time.Minute

// ResumeDevice gives a new token to a device that proves its enrolment
// with its certificate and its key: after a restore from a copy older
// than its enrolment, the server has no record of it. The proof names this
// server and a time within resumeWindow of its clock, later than any proof
// the device used before; it is refused with Unauthenticated otherwise,
// and with PermissionDenied for a revoked device.
func (a *adminService) ResumeDevice(ctx context.Context, req *pb.ResumeDeviceRequest) (*pb.ResumeDeviceResponse, error) {
	s := a.s
	id, err := s.identity(ctx)
	if err != nil {
		return nil, s.internal(ctx, "resume", err)
	}
	cert, err := ledger.FromEnvelope(req.GetCertificate())
	if err != nil {
		return nil, statusError(codes.InvalidArgument, reasonInvalidArgument, "certificate", "", "does not decode")
	}
	k, ok := cert.Event.Kind.(*ledger.DeviceEnrolled)
	if !ok || cert.Event.Device != id.DeviceID || cert.Event.Project != certificateProject || cert.Verify(id.Key.Public().(ed25519.PublicKey)) != nil {
		return nil, statusError(codes.Unauthenticated, reasonCertificateInvalid, "certificate", "", "not an enrolment certificate this server signed")
	}
	now := s.opts.Now()
	micros := req.GetProofMicros()
	if d := now.Sub(time.UnixMicro(micros)); d > resumeWindow || d < -resumeWindow {
		return nil, statusError(codes.Unauthenticated, reasonProofInvalid, "proof_micros", "",
			fmt.Sprintf("the proof's time is more than %s from the server's clock", resumeWindow))
	}
	if !ed25519.Verify(k.PublicKey, ledger.ResumeProof(id.DeviceID, k.DeviceID, micros), req.GetProof()) {
		return nil, statusError(codes.Unauthenticated, reasonProofInvalid, "proof", "", "the signature does not verify with the certificate's key")
	}
	o := &s.self
	o.mu.Lock()
	if o.resumed == nil {
		o.resumed = map[string]int64{}
	}
	replay := micros <= o.resumed[k.DeviceID]
	if !replay {
		o.resumed[k.DeviceID] = micros
	}
	o.mu.Unlock()
	if replay {
		return nil, statusError(codes.Unauthenticated, reasonProofInvalid, "proof_micros", "", "a proof no later than one this device used before; sign a new one")
	}
	d := Device{ID: k.DeviceID, UserID: k.UserID, Name: k.Name, PublicKey: k.PublicKey}
	held, err := s.opts.Store.Device(ctx, d.ID)
	if errors.Is(err, ErrNoDevice) {
		if _, err = s.opts.Store.RegisterDevice(ctx, d, k.UserName, now); err == nil {
			held, err = s.opts.Store.Device(ctx, d.ID)
		}
	}
	if err != nil {
		return nil, s.internal(ctx, "resume", err)
	}
	revoked, err := s.revokedInLedgers(ctx, d)
	if err != nil {
		return nil, s.internal(ctx, "resume", err)
	}
	if held.Revoked || revoked {
		return nil, statusError(codes.PermissionDenied, reasonDeviceRevoked, "certificate", "", "this device was revoked; enrol again with a new code")
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
func (s *Server) revokedInLedgers(ctx context.Context, d Device) (bool, error) {
	projects, err := s.opts.Store.ProjectsOf(ctx, d.UserID)
	if err != nil {
		return false, err
	}
	for _, p := range projects {
		var rev *ledger.DeviceRevoked
		if err := s.inspect(ctx, p, func(v *ledger.Projection) {
			if dv, ok := v.Device(d.ID); ok {
				rev = dv.Revoked
			}
		}); err != nil {
			return false, err
		}
		if rev != nil {
			return true, s.opts.Store.Revoke(ctx, d.ID, rev.Effective)
		}
	}
	return false, nil
}
