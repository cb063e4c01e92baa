package web

import (
	"context"
	"crypto/subtle"
	"crypto/tls"
	"errors"
	"fmt"
	"net"
	"net/http"
	"strings"
	"time"
)

// ErrTLSRequired is returned by Listen for an address that is not a
// loopback address when no TLS configuration is given: the page is served
// beyond this machine only over TLS.
var ErrTLSRequired = errors.New("web: an address other than loopback is served only over TLS")

// ErrClientCertRequired is returned by Listen for an address that is not a
// loopback address when the TLS configuration does not require and verify
// client certificates: the page signs reviews with this device's key, so
// beyond this machine only people holding a certificate the office issued
// may reach it at all.
var ErrClientCertRequired = errors.New("web: an address other than loopback is served only to clients with a verified certificate")

// Listen opens the page's listener on addr (host:port; port 0 picks a free
// one). A loopback address (127.0.0.0/8, ::1 or localhost) may be served
// over plain HTTP; any other address, an empty host included, needs tlsConf
// and returns ErrTLSRequired without it, and ErrClientCertRequired unless it
// requires and verifies client certificates (tls.RequireAndVerifyClientCert
// with ClientCAs). With tlsConf the listener speaks TLS.
func Listen(addr string, tlsConf *tls.Config) (net.Listener, error) {
	host, port, err := net.SplitHostPort(addr)
	if err != nil {
		return nil, fmt.Errorf("web: listen %s: want host:port, e.g. 127.0.0.1:8080: %w", addr, err)
	}
	if !loopbackName(host) {
		if tlsConf == nil {
			return nil, fmt.Errorf("%w: %s", ErrTLSRequired, addr)
		}
		if tlsConf.ClientAuth != tls.RequireAndVerifyClientCert || tlsConf.ClientCAs == nil {
			return nil, fmt.Errorf("%w: %s", ErrClientCertRequired, addr)
		}
	}
	if strings.EqualFold(host, "localhost") { // what the name resolves to is not ours to trust
		addr = net.JoinHostPort("127.0.0.1", port)
	}
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, fmt.Errorf("web: listen %s: %w", addr, err)
	}
	if tlsConf != nil {
		return tls.NewListener(ln, tlsConf), nil
	}
	return ln, nil
}

// loopbackName reports whether host (no port) is a loopback address or
// the name localhost.
func loopbackName(host string) bool {
	if strings.EqualFold(host, "localhost") {
		return true
	}
	ip := net.ParseIP(strings.Trim(host, "[]"))
	return ip != nil && ip.IsLoopback()
}

// loopbackHost reports whether a request's Host (with or without a port)
// names a loopback address or localhost.
func loopbackHost(hostport string) bool {
	host := hostport
	if h, _, err := net.SplitHostPort(hostport); err == nil {
		host = h
	}
	return loopbackName(host)
}

// Serve answers requests on ln until ctx is done, then shuts down,
// letting requests in flight finish for a few seconds.
func (s *Server) Serve(ctx context.Context, ln net.Listener) error {
	hs := &http.Server{Handler: s, ReadHeaderTimeout: 10 * time.Second, ReadTimeout: 30 * time.Second, WriteTimeout: time.Minute,
		IdleTimeout: 2 * time.Minute, MaxHeaderBytes: 64 << 10}
	done := make(chan error, 1)
	go func() { done <- hs.Serve(ln) }()
	select {
	case err := <-done:
		return err
	case <-ctx.Done():
	}
	sctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	err := hs.Shutdown(sctx)
	if e := <-done; !errors.Is(e, http.ErrServerClosed) && err == nil {
		err = e
	}
	return err
}

// maxForm is the largest form body a write accepts.
const maxForm = 64 << 10

// checkWrite refuses a write that does not come from the page itself: a
// request another site's page made the browser send (its Origin or
// Sec-Fetch-Site says so), or one without the process's token.
func (s *Server) checkWrite(w http.ResponseWriter, r *http.Request) error {
	if err := s.origin.Check(r); err != nil {
		return forbidden("This form was sent from another site's page, so nothing was recorded. Review tests from the page tamp web serves.")
	}
	r.Body = http.MaxBytesReader(w, r.Body, maxForm)
	if err := r.ParseForm(); err != nil {
		return badRequest("The form could not be read (at most 64 KiB).")
	}
	got := r.PostForm.Get("token")
	if got == "" || subtle.ConstantTimeCompare([]byte(got), []byte(s.token)) != 1 {
		return forbidden("This form does not carry the token of the running tamp web (it may come from an earlier run, or from another site), " +
			"so nothing was recorded. Reload the test's page and send it again.")
	}
	return nil
}
