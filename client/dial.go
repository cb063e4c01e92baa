package client

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"net"
	"os"
	"strings"
	"sync"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/credentials/insecure"
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
func Dial(addr string, opts DialOptions) (*grpc.ClientConn, error) {
	var creds credentials.TransportCredentials
	dopts := []grpc.DialOption{grpc.WithChainUnaryInterceptor(wireUnary), grpc.WithChainStreamInterceptor(wireStream)}
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
