package client

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"io"
	"net"
	"os"
	"strings"
	"sync"
	"sync/atomic"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/encoding"
	"google.golang.org/grpc/encoding/gzip"
	"google.golang.org/grpc/status"
)

// DialOptions configure Dial.
type DialOptions struct {
	// CAFile is a PEM file of the certificate authorities the server's
	// certificate must chain to; empty means the system's roots.
	CAFile string
	// Plaintext dials without TLS. Dial allows it only for a loopback
	// address unless AllowPlaintextRemote is also set.
	Plaintext            bool
	AllowPlaintextRemote bool
	// Extra options, for tests.
	Extra []grpc.DialOption
}

// Dial returns a connection to a tamp server, verifying the server's
// certificate against opts.CAFile or the system roots. A call refused
// because the certificate failed verification returns a *CertificateError
// (errors.Is ErrCertificate) instead of Unavailable, so that it is not
// retried. A server's refusal of any call over the connection is a
// *ServerError, as it is from the Store's methods.
//
// Calls over the connection are compressed with gzip, and the server
// answers compressed. A server that cannot decompress gzip (a tampd of an
// earlier release) refuses the first call; the connection repeats that
// call uncompressed and sends the rest uncompressed.
func Dial(addr string, opts DialOptions) (*grpc.ClientConn, error) {
	var creds credentials.TransportCredentials
	z := new(compression)
	dopts := []grpc.DialOption{grpc.WithChainUnaryInterceptor(wireUnary, z.unary), grpc.WithChainStreamInterceptor(wireStream, z.stream),
		grpc.WithDefaultCallOptions(grpc.UseCompressor(gzip.Name))}
	if opts.Plaintext {
		if !opts.AllowPlaintextRemote && !loopback(addr) {
			return nil, fmt.Errorf("client: dial %s: plaintext is allowed only to a loopback address", addr)
		}
		creds = insecure.NewCredentials()
	} else {
		cfg := &tls.Config{MinVersion: tls.VersionTLS12}
		if opts.CAFile != "" {
			pem, err := os.ReadFile(opts.CAFile)
			if err != nil {
				return nil, fmt.Errorf("client: CA file: %w", err)
			}
			pool := x509.NewCertPool()
			if !pool.AppendCertsFromPEM(pem) {
				return nil, fmt.Errorf("client: CA file %s holds no PEM certificate", opts.CAFile)
			}
			cfg.RootCAs = pool
		}
		w := &certWatch{last: new(lastHandshake), TransportCredentials: credentials.NewTLS(cfg)}
		creds = w
		dopts = append(dopts, grpc.WithChainUnaryInterceptor(w.unary), grpc.WithChainStreamInterceptor(w.stream))
	}
	dopts = append(append(dopts, grpc.WithTransportCredentials(creds)), opts.Extra...)
	cc, err := grpc.NewClient(addr, dopts...)
	if err != nil {
		return nil, fmt.Errorf("client: dial %s: %w", addr, err)
	}
	return cc, nil
}

func loopback(addr string) bool {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return false
	}
	if strings.EqualFold(host, "localhost") {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

// certWatch is TLS transport credentials that remember whether the last
// handshake failed the server's certificate, and interceptors that turn the
// Unavailable such a failure gives every call into that certificate error.
// The record is the outcome of the last handshake: a connection attempt
// that fails before its handshake leaves it as it was.
type certWatch struct {
	credentials.TransportCredentials
	last *lastHandshake // shared with clones
}

type lastHandshake struct {
	mu  sync.Mutex
	err *CertificateError // nil when the last handshake did not fail its certificate
}

func (w *certWatch) ClientHandshake(ctx context.Context, authority string, raw net.Conn) (net.Conn, credentials.AuthInfo, error) {
	conn, info, err := w.TransportCredentials.ClientHandshake(ctx, authority, raw)
	var ce *CertificateError
	if p, ok := certificateProblem(err); ok {
		ce = &CertificateError{Problem: p, Err: err}
	}
	w.last.mu.Lock()
	w.last.err = ce
	w.last.mu.Unlock()
	return conn, info, err
}

func (w *certWatch) Clone() credentials.TransportCredentials {
	return &certWatch{TransportCredentials: w.TransportCredentials.Clone(), last: w.last}
}

// explain returns the certificate error behind err, an Unavailable that
// follows a handshake whose certificate failed, or else err.
func (w *certWatch) explain(err error) error {
	if status.Code(err) != codes.Unavailable {
		return err
	}
	w.last.mu.Lock()
	ce := w.last.err
	w.last.mu.Unlock()
	if ce == nil {
		return err
	}
	e := *ce
	return &e
}

func (w *certWatch) unary(ctx context.Context, method string, req, reply any, cc *grpc.ClientConn, invoke grpc.UnaryInvoker, opts ...grpc.CallOption) error {
	return w.explain(invoke(ctx, method, req, reply, cc, opts...))
}

func (w *certWatch) stream(ctx context.Context, desc *grpc.StreamDesc, cc *grpc.ClientConn, method string, streamer grpc.Streamer, opts ...grpc.CallOption) (grpc.ClientStream, error) {
	cs, err := streamer(ctx, desc, cc, method, opts...)
	if err != nil {
		return nil, w.explain(err)
	}
	return cs, nil
}

// certificateProblem classifies a handshake error that is a failed
// verification of the server's certificate.
func certificateProblem(err error) (CertificateProblem, bool) {
	var (
		authority x509.UnknownAuthorityError
		roots     x509.SystemRootsError
		name      x509.HostnameError
		invalid   x509.CertificateInvalidError
		verify    *tls.CertificateVerificationError
	)
	switch {
	case err == nil:
		return 0, false
	case errors.As(err, &authority), errors.As(err, &roots):
		return CertificateUnknownAuthority, true
	case errors.As(err, &name):
		return CertificateNameMismatch, true
	case errors.As(err, &invalid) && invalid.Reason == x509.Expired:
		return CertificateExpired, true
	case errors.As(err, &invalid), errors.As(err, &verify):
		return CertificateInvalid, true
	}
	return 0, false
}

// compression is a connection's compression of requests: gzip, until a
// server refuses it, and then none for the connection's life. The
// interceptors repeat a call the server refused for its compression
// uncompressed: the server refused it before any handler saw it.
type compression struct{ off atomic.Bool }

// refusesGzip reports whether err is a server's refusal of a compressed
// request: grpc-go answers Unimplemented when it holds no decompressor for
// the request's encoding.
func refusesGzip(err error) bool {
	st, ok := status.FromError(err)
	return ok && st.Code() == codes.Unimplemented && strings.Contains(st.Message(), "Decompressor is not installed")
}

var uncompressed = grpc.UseCompressor(encoding.Identity)

func (z *compression) callOpts(opts []grpc.CallOption) []grpc.CallOption {
	if z.off.Load() {
		return append(opts[:len(opts):len(opts)], uncompressed) // the last compressor named is the one used
	}
	return opts
}

func (z *compression) unary(ctx context.Context, method string, req, reply any, cc *grpc.ClientConn, invoke grpc.UnaryInvoker, opts ...grpc.CallOption) error {
	err := invoke(ctx, method, req, reply, cc, z.callOpts(opts)...)
	if refusesGzip(err) {
		z.off.Store(true)
		err = invoke(ctx, method, req, reply, cc, z.callOpts(opts)...)
	}
	return err
}

// stream opens a stream with the connection's compression. A stream with
// one request (the server streams its answer, as Pull does) is opened again
// uncompressed, its request sent again, when its first answer is the
// server's refusal of gzip.
func (z *compression) stream(ctx context.Context, desc *grpc.StreamDesc, cc *grpc.ClientConn, method string, streamer grpc.Streamer, opts ...grpc.CallOption) (grpc.ClientStream, error) {
	cs, err := streamer(ctx, desc, cc, method, z.callOpts(opts)...)
	if err != nil || z.off.Load() || desc.ClientStreams {
		return cs, err
	}
	return &onceCompressed{ClientStream: cs, z: z, reopen: func() (grpc.ClientStream, error) {
		return streamer(ctx, desc, cc, method, z.callOpts(opts)...)
	}}, nil
}

// onceCompressed is a stream of one compressed request that, until it has
// received an answer, can be opened again uncompressed.
type onceCompressed struct {
	grpc.ClientStream
	z        *compression
	reopen   func() (grpc.ClientStream, error)
	req      any  // the request sent
	closed   bool // whether the request side was closed
	answered bool // whether an answer or a refusal other than gzip's arrived
}

func (s *onceCompressed) SendMsg(m any) error {
	s.req = m
	err := s.ClientStream.SendMsg(m)
	if errors.Is(err, io.EOF) && !s.answered {
		return nil // the server ended the stream: RecvMsg tells why
	}
	return err
}

func (s *onceCompressed) CloseSend() error {
	s.closed = true
	return s.ClientStream.CloseSend()
}

func (s *onceCompressed) RecvMsg(m any) error {
	err := s.ClientStream.RecvMsg(m)
	if s.answered || !refusesGzip(err) || s.req == nil {
		s.answered = true
		return err
	}
	s.answered = true
	s.z.off.Store(true)
	cs, rerr := s.reopen()
	if rerr != nil {
		return rerr
	}
	s.ClientStream = cs
	if err := cs.SendMsg(s.req); err != nil && !errors.Is(err, io.EOF) {
		return err
	}
	if s.closed {
		if err := cs.CloseSend(); err != nil {
			return err
		}
	}
	return cs.RecvMsg(m)
}
