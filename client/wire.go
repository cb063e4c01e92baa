package client

import (
	"context"
	"errors"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/metadata"
	"google.golang.org/grpc/status"
)

// serverDomain is the ErrorInfo domain of a tamp server's reasons.
const serverDomain = "tamp"

// fromWire returns the error of a call to a server as this package's: a
// gRPC status becomes a *ServerError carrying the reason, field and rule of
// its ErrorInfo detail. It returns nil, io.EOF, an error already converted
// and any error that is no status (a *CertificateError, a context's error)
// as they are. Every call this package makes to a server passes its error
// through it.
func fromWire(err error) error {
	if err == nil {
		return nil
	}
	var se *ServerError
	if errors.As(err, &se) {
		return err
	}
	st, ok := status.FromError(err)
	if !ok || st.Code() == codes.OK {
		return err
	}
	se = &ServerError{Code: st.Code(), Message: st.Message(), st: st}
	for _, d := range st.Details() {
		if info, ok := d.(*errdetails.ErrorInfo); ok && info.GetDomain() == serverDomain {
			se.Reason, se.Field, se.Rule = info.GetReason(), info.GetMetadata()["field"], info.GetMetadata()["rule"]
			break
		}
	}
	return se
}

// wireUnary and wireStream are the client interceptors of a connection from
// Dial: the calls made over it, by this package or by the app, return
// *ServerError for a server's refusal.
func wireUnary(ctx context.Context, method string, req, reply any, cc *grpc.ClientConn, invoke grpc.UnaryInvoker, opts ...grpc.CallOption) error {
	return fromWire(invoke(ctx, method, req, reply, cc, opts...))
}

func wireStream(ctx context.Context, desc *grpc.StreamDesc, cc *grpc.ClientConn, method string, streamer grpc.Streamer, opts ...grpc.CallOption) (grpc.ClientStream, error) {
	cs, err := streamer(ctx, desc, cc, method, opts...)
	if err != nil {
		return nil, fromWire(err)
	}
	return wiredStream{cs}, nil
}

// wiredStream is a client stream whose errors pass through fromWire.
type wiredStream struct{ grpc.ClientStream }

func (s wiredStream) Header() (metadata.MD, error) {
	md, err := s.ClientStream.Header()
	return md, fromWire(err)
}

func (s wiredStream) CloseSend() error    { return fromWire(s.ClientStream.CloseSend()) }
func (s wiredStream) SendMsg(m any) error { return fromWire(s.ClientStream.SendMsg(m)) }
func (s wiredStream) RecvMsg(m any) error { return fromWire(s.ClientStream.RecvMsg(m)) }
