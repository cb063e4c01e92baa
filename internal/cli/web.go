package cli

import (
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"log/slog"
	"os"

	"github.com/spf13/cobra"

	"tamp/internal/web"
)

// newWeb is tamp web: the office's review page over this device's store.
func newWeb() *cobra.Command {
	var f projectFlags
	var listen, certFile, keyFile, clientCA string
	c := &cobra.Command{
		Use:   "web [--store FILE] [--listen 127.0.0.1:PORT]",
		Short: "Serve the office's review page over this device's store, for a browser on this machine",
		Long: `Serve the office's review page over this device's store: the day's tests (by
date, feature, lift, verdict and inspector, sorted by station), each test's raw
readings, arithmetic, limits, history and retest chain, approve and return
with a comment, the retest audit, frequency, lots and reconciliation, the
moisture-density and run charts, where the tests were taken, and the day laid
out for print (A4 or Letter). Open the address it prints in a browser. It
needs no network and no login: a review is signed on this device for its
user and sent with the next tamp sync, as tamp review makes it. tamp sync may
run on the same store at the same time.

It listens on a loopback address (127.0.0.1, ::1 or localhost) only, unless
--listen names another address, --tls-cert and --tls-key give it TLS, and
--client-ca names the authority whose client certificates may reach it: the
page signs reviews with this device's key, so nobody without a certificate
may open it from another machine.
Stop it with Ctrl+C.

Nuclear gauges are licensed radioactive sources. Results support, and never
replace, review by qualified personnel; the project's specifications and local
codes govern every acceptance limit.`,
		Example: `  tamp demo --out demo-day && tamp web --store demo-day/office.db
  tamp web --listen 127.0.0.1:8415`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ctx := cmd.Context()
			if _, err := os.Stat(f.store); err != nil {
				return failf("--store %s: no store there (%v). tamp enroll makes this device's store; tamp demo --out DIR writes DIR/office.db",
					quoted(f.store), errors.Unwrap(err))
			}
			if (certFile == "") != (keyFile == "") {
				return failf("--tls-cert, --tls-key: give both the certificate and its key (PEM files), or neither")
			}
			var tlsConf *tls.Config
			if certFile != "" {
				pair, err := tls.LoadX509KeyPair(certFile, keyFile)
				if err != nil {
					return failf("--tls-cert %s, --tls-key %s: %s", quoted(certFile), quoted(keyFile), escape(err.Error()))
				}
				tlsConf = &tls.Config{Certificates: []tls.Certificate{pair}, MinVersion: tls.VersionTLS12}
			}
			if clientCA != "" {
				if tlsConf == nil {
					return failf("--client-ca: client certificates need TLS: give --tls-cert and --tls-key too")
				}
				pem, err := os.ReadFile(clientCA)
				if err != nil {
					return failf("--client-ca %s: %s", quoted(clientCA), escape(err.Error()))
				}
				pool := x509.NewCertPool()
				if !pool.AppendCertsFromPEM(pem) {
					return failf("--client-ca %s: no PEM certificate in it", quoted(clientCA))
				}
				tlsConf.ClientCAs, tlsConf.ClientAuth = pool, tls.RequireAndVerifyClientCert
			}
			ss, err := f.open(ctx)
			if err != nil {
				return err
			}
			project, name := ss.project, ss.projectName()
			ss.close()
			srv, err := web.New(web.Options{Store: f.store, Project: project, Units: f.units,
				Log: slog.New(slog.NewTextHandler(cmd.ErrOrStderr(), nil))})
			if err != nil {
				return err
			}
			ln, err := web.Listen(listen, tlsConf)
			if errors.Is(err, web.ErrTLSRequired) {
				return failf("--listen %s: not a loopback address; the page is served beyond this machine only over TLS:\n"+
					"give --tls-cert FILE and --tls-key FILE, or listen on 127.0.0.1", quoted(listen))
			}
			if errors.Is(err, web.ErrClientCertRequired) {
				return failf("--listen %s: not a loopback address; the page signs reviews with this device's key, so beyond this machine it\n"+
					"is served only to people holding a client certificate: give --client-ca FILE (the CA that issued them)", quoted(listen))
			}
			if err != nil {
				return failf("--listen %s: %s", quoted(listen), escape(err.Error()))
			}
			scheme := "http"
			if tlsConf != nil {
				scheme = "https"
			}
			fmt.Fprintf(cmd.OutOrStdout(), "tamp web: project %s from %s\nserving on %s://%s/ (stop with Ctrl+C)\n",
				quoted(name), quoted(f.store), scheme, ln.Addr())
			return srv.Serve(ctx, ln)
		},
	}
	f.register(c)
	fl := c.Flags()
	fl.StringVar(&listen, "listen", "127.0.0.1:8415", "the address to serve on, host:port (port 0 picks a free one); other than loopback needs TLS")
	fl.StringVar(&certFile, "tls-cert", "", "TLS certificate (PEM), to serve on an address other than loopback")
	fl.StringVar(&keyFile, "tls-key", "", "the certificate's private key (PEM)")
	fl.StringVar(&clientCA, "client-ca", "", "CA certificate (PEM) whose client certificates may reach the page; required beyond loopback")
	return c
}
