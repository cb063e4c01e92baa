package server

import (
	"context"
	"crypto/subtle"
	"errors"
	"strings"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/metadata"
)

type deviceKey struct{}

// deviceFrom returns the authenticated device of a call.
func deviceFrom(ctx context.Context) (Device, bool) {
	d, ok := ctx.Value(deviceKey{}).(Device)
	return d, ok
}

func (s *Server) authenticate(ctx context.Context, method string) (context.Context, error) {
	if unauthenticated[method] || strings.HasPrefix(method, "/grpc.reflection.") {
		return ctx, nil
	}
	md, _ := metadata.FromIncomingContext(ctx)
	vals := md.Get("authorization")
	if len(vals) != 1 || !strings.HasPrefix(vals[0], "Bearer ") {
		return nil, statusError(codes.Unauthenticated, reasonTokenRequired, "authorization", "", "a bearer token is required")
	}
	token := strings.TrimPrefix(vals[0], "Bearer ")
	th := hash(token)
	d, err := s.opts.Store.DeviceByToken(ctx, th)
	if errors.Is(err, ErrNoDevice) {
		return nil, statusError(codes.Unauthenticated, reasonTokenInvalid, "authorization", "", "the token is not valid")
	}
	if err != nil {
		return nil, s.internal(ctx, "authenticate", err)
	}
	// The index lookup compares hashes, not tokens; confirm the stored hash
	// in constant time all the same.
	if subtle.ConstantTimeCompare(d.TokenHash, th) != 1 {
		return nil, statusError(codes.Unauthenticated, reasonTokenInvalid, "authorization", "", "the token is not valid")
	}
	if d.Revoked {
		return nil, statusError(codes.Unauthenticated, reasonDeviceRevoked, "authorization", "", "this device was revoked")
	}
	if s.isOwnDevice(d.ID) { // the server's own device has no token; refuse one all the same
		return nil, statusError(codes.Unauthenticated, reasonTokenInvalid, "authorization", "", "the token is not valid")
	}
	return context.WithValue(ctx, deviceKey{}, d), nil
}

// UnaryInterceptor refuses a request RequestCodec could not decode,
// authenticates unary calls, and limits failed enrolment attempts (see
// codes.go). Every status a call ends with carries its reason (see
// status.go).
func (s *Server) UnaryInterceptor(ctx context.Context, req any, info *grpc.UnaryServerInfo, h grpc.UnaryHandler) (any, error) {
	if err := s.requests.refuse(req); err != nil {
		return nil, err
	}
	ctx, err := s.authenticate(ctx, info.FullMethod)
	if err != nil {
		return nil, err
	}
	resp, err := s.limitAttempts(ctx, req, info, h)
	return resp, s.detailed(ctx, err)
}

type authedStream struct {
	grpc.ServerStream
	ctx context.Context
}

func (a authedStream) Context() context.Context { return a.ctx }

// StreamInterceptor authenticates streaming calls, and refuses a request
// RequestCodec could not decode. Every status a call ends with carries its
// reason (see status.go).
func (s *Server) StreamInterceptor(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, h grpc.StreamHandler) error {
	ctx, err := s.authenticate(ss.Context(), info.FullMethod)
	if err != nil {
		return err
	}
	return s.detailed(ctx, h(srv, authedStream{s.requests.stream(ss), ctx}))
}
