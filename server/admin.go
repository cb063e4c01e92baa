package server

import (
	"context"
	"crypto/ed25519"
	"errors"
	"fmt"
	"time"

	"github.com/google/uuid"
	"google.golang.org/grpc/codes"

	pb "tamp/internal/gen/tamp/v1"
)

// CreateProject creates a project ledger and returns its id.
func (s *Server) CreateProject(ctx context.Context, name string) (string, error) {
	id := s.newID()
	if err := s.storeCreateProject(ctx, id, name); err != nil {
		return "", err
	}
	return id, nil
}

// AddUser creates a user and returns its id.
func (s *Server) AddUser(ctx context.Context, name string, serverAdmin bool) (string, error) {
	id := s.newID()
	if err := s.opts.Store.AddUser(ctx, id, name, serverAdmin, s.opts.Now()); err != nil {
		return "", err
	}
	return id, nil
}

// AddMember gives a user a role on a project.
func (s *Server) AddMember(ctx context.Context, project, user string, role Role) error {
	if !validRole(role) {
		return fmt.Errorf("server: role %q: must be inspector, office, qa or admin", role)
	}
	if _, err := s.opts.Store.Head(ctx, project); err != nil {
		return err
	}
	if err := s.opts.Store.SetMember(ctx, project, user, role); err != nil {
		return err
	}
	return s.introduceDevices(ctx, project, user)
}

// Bootstrap creates the first administrator of an empty server and returns
// its id and a one-time enrolment code for its device. It refuses a server
// that already has users.
func (s *Server) Bootstrap(ctx context.Context, name string) (user, code string, expires time.Time, err error) {
	n, err := s.opts.Store.CountUsers(ctx)
	if err != nil {
		return "", "", time.Time{}, err
	}
	if n > 0 {
		return "", "", time.Time{}, fmt.Errorf("server: already initialised: %d users exist", n)
	}
	if user, err = s.AddUser(ctx, name, true); err != nil {
		return "", "", time.Time{}, err
	}
	if _, err = s.identity(ctx); err != nil { // the server's signing key, kept in the store from the start
		return "", "", time.Time{}, err
	}
	code, expires, err = s.IssueEnrollmentCode(ctx, user)
	return user, code, expires, err
}

// IssueEnrollmentCode returns a one-time code that enrols one device for
// user, valid for the server's code lifetime.
func (s *Server) IssueEnrollmentCode(ctx context.Context, user string) (string, time.Time, error) {
	return s.issueCode(ctx, user, s.opts.CodeLifetime)
}

// issueCode returns a one-time code that enrols one device for user, valid
// for life (see codes.go).
func (s *Server) issueCode(ctx context.Context, user string, life time.Duration) (string, time.Time, error) {
	code := s.newCode()
	exp := s.opts.Now().Add(life)
	if err := s.opts.Store.AddEnrollmentCode(ctx, hash(code), user, exp); err != nil {
		return "", time.Time{}, err
	}
	return code, exp, nil
}

// EnrollDevice registers a device's key with a one-time code and returns
// its bearer token, of which the server keeps only the hash.
func (a *adminService) EnrollDevice(ctx context.Context, req *pb.EnrollDeviceRequest) (*pb.EnrollDeviceResponse, error) {
	if err := checkName("device_name", req.GetDeviceName()); err != nil {
		return nil, err
	}
	s := a.s
	if len(req.GetPublicKey()) != ed25519.PublicKeySize {
		return nil, statusError(codes.InvalidArgument, reasonInvalidArgument, "public_key", "", "must be a 32-byte Ed25519 key")
	}
	if _, err := uuid.Parse(req.GetDeviceId()); err != nil {
		return nil, statusError(codes.InvalidArgument, reasonInvalidArgument, "device_id", "", "must be a UUID")
	}
	token := s.secret()
	d, err := s.opts.Store.Enroll(ctx, hash(canonicalCode(req.GetCode())), Device{ID: req.GetDeviceId(), Name: req.GetDeviceName(), PublicKey: req.GetPublicKey()},
		hash(token), s.opts.Now())
	if err != nil {
		if errors.Is(err, ErrCodeInvalid) {
			return nil, statusError(codes.Unauthenticated, reasonCodeInvalid, "code", "", "the enrolment code is unknown, already used or expired")
		}
		if errors.Is(err, ErrDeviceExists) {
			return nil, statusError(codes.AlreadyExists, reasonDeviceExists, "device_id", "",
				fmt.Sprintf("device %s is enrolled already; a device enrols again under a new id and key", req.GetDeviceId()))
		}
		return nil, s.internal(ctx, "enrol", err)
	}
	cert, err := s.certificate(ctx, d, s.opts.Now())
	if err != nil {
		return nil, s.internal(ctx, "enrol", err)
	}
	s.log.InfoContext(ctx, "device enrolled", "device", d.ID, "user", d.UserID)
	projects, err := s.opts.Store.ProjectsOf(ctx, d.UserID)
	if err != nil {
		return nil, s.internal(ctx, "enrol", err)
	}
	// The device is enrolled and its code used up: an introduction that
	// fails here is made at the device's first push (ensureIntroduced), so
	// the enrolment is not refused for it.
	for _, p := range projects {
		if err := s.ensureIntroduced(ctx, p, d); err != nil {
			s.log.WarnContext(ctx, "introduce an enrolled device to a project; its first push will", "device", d.ID, "project", p, "err", err)
		}
	}
	return &pb.EnrollDeviceResponse{Token: token, UserId: d.UserID, ProjectIds: projects, Certificate: cert.Proto()}, nil
}
