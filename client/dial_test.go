package client

import (
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"errors"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/status"
)

// testCA is a certificate authority made in the test.
type testCA struct {
	cert *x509.Certificate
	key  *ecdsa.PrivateKey
	file string // the CA's certificate as a PEM file
}

func newTestCA(t *testing.T, name string) *testCA {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: name}, NotBefore: time.Now().Add(-time.Hour),
		NotAfter: time.Now().Add(time.Hour), IsCA: true, KeyUsage: x509.KeyUsageCertSign, BasicConstraintsValid: true}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatal(err)
	}
	cert, err := x509.ParseCertificate(der)
	if err != nil {
		t.Fatal(err)
	}
	file := filepath.Join(t.TempDir(), "ca.pem")
	if err := os.WriteFile(file, pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: der}), 0o600); err != nil {
		t.Fatal(err)
	}
	return &testCA{cert: cert, key: key, file: file}
}

// leaf issues a server certificate for ips and names, valid from notBefore
// to notAfter.
func (ca *testCA) leaf(t *testing.T, ips []net.IP, names []string, notBefore, notAfter time.Time) tls.Certificate {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{SerialNumber: big.NewInt(2), Subject: pkix.Name{CommonName: "tampd"}, NotBefore: notBefore, NotAfter: notAfter,
		IPAddresses: ips, DNSNames: names, ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth}, KeyUsage: x509.KeyUsageDigitalSignature}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, ca.cert, &key.PublicKey, ca.key)
	if err != nil {
		t.Fatal(err)
	}
	return tls.Certificate{Certificate: [][]byte{der}, PrivateKey: key}
}

// serveTLS runs a gRPC server with no services on 127.0.0.1:0 that presents
// cert, and returns its address.
func serveTLS(t *testing.T, cert tls.Certificate) string {
	t.Helper()
	g := grpc.NewServer(grpc.Creds(credentials.NewTLS(&tls.Config{Certificates: []tls.Certificate{cert}, MinVersion: tls.VersionTLS12})))
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	done := make(chan struct{})
	go func() { defer close(done); _ = g.Serve(lis) }()
	t.Cleanup(func() { g.Stop(); <-done })
	return lis.Addr().String()
}

// TestCertificateFailureIsNotRetried dials TLS servers whose certificates
// the device must refuse: the sync fails at once with ErrCertificate naming
// the problem, and its retry loop never waits to try again. With the right
// authority the same server is reached.
func TestCertificateFailureIsNotRetried(t *testing.T) {
	ca, stranger := newTestCA(t, "tamp test CA"), newTestCA(t, "another CA")
	local := []net.IP{net.ParseIP("127.0.0.1")}
	now := time.Now()
	good := ca.leaf(t, local, nil, now.Add(-time.Hour), now.Add(time.Hour))
	for _, tc := range []struct {
		name   string
		cert   tls.Certificate
		caFile string
		want   CertificateProblem // zero: the handshake succeeds
	}{
		{"trusted", good, ca.file, 0},
		{"unknown authority", good, stranger.file, CertificateUnknownAuthority},
		{"name mismatch", ca.leaf(t, nil, []string{"tampd.invalid"}, now.Add(-time.Hour), now.Add(time.Hour)), ca.file, CertificateNameMismatch},
		{"expired", ca.leaf(t, local, nil, now.Add(-2*time.Hour), now.Add(-time.Hour)), ca.file, CertificateExpired},
	} {
		t.Run(tc.name, func(t *testing.T) {
			addr := serveTLS(t, tc.cert)
			s, err := Open(context.Background(), filepath.Join(t.TempDir(), "device.db"), Options{User: "ines"})
			if err != nil {
				t.Fatal(err)
			}
			defer s.Close()
			// The device holds a token, as an enrolled one does; the
			// handshake fails before it is ever sent.
			if _, err := s.db.Writer().Exec(`UPDATE device SET token = 'not sent' WHERE id = 1`); err != nil {
				t.Fatal(err)
			}
			cc, err := Dial(addr, DialOptions{CAFile: tc.caFile})
			if err != nil {
				t.Fatal(err)
			}
			defer cc.Close()
			waits := 0
			_, err = s.Sync(context.Background(), cc, "p1", SyncOptions{Sleep: func(time.Duration) { waits++ }})
			if tc.want == 0 {
				if errors.Is(err, ErrCertificate) || status.Code(err) != codes.Unimplemented {
					t.Fatalf("Sync with the right authority: %v, want Unimplemented from a server with no services", err)
				}
				return
			}
			var ce *CertificateError
			if !errors.Is(err, ErrCertificate) || !errors.As(err, &ce) || ce.Problem != tc.want {
				t.Errorf("Sync: %v, want ErrCertificate (%v)", err, tc.want)
			}
			if waits != 0 {
				t.Errorf("Sync waited %d times to retry a certificate failure, want 0", waits)
			}
			if err := s.Enroll(context.Background(), cc, "code", "tablet"); !errors.Is(err, ErrCertificate) {
				t.Errorf("Enroll: %v, want ErrCertificate", err)
			}
		})
	}
}
