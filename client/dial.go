package client

import (
	"crypto/tls"
	"crypto/x509"
	"fmt"
	"net"
	"os"
	"strings"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/credentials/insecure"
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
// certificate against opts.CAFile or the system roots.
func Dial(addr string, opts DialOptions) (*grpc.ClientConn, error) {
	var creds credentials.TransportCredentials
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
		creds = credentials.NewTLS(cfg)
	}
	cc, err := grpc.NewClient(addr, append([]grpc.DialOption{grpc.WithTransportCredentials(creds)}, opts.Extra...)...)
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
