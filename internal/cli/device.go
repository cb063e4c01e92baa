package cli

import (
	"context"
	"fmt"
	"net/url"
	"os"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"
	"google.golang.org/grpc"

	"tamp/client"
)

// deviceFlags are the flags of every command that uses the device's store
// and the server.
type deviceFlags struct {
	store     string
	server    string
	ca        string
	plaintext bool
	// fresh dials with the flags alone, not the settings stored at
	// enrolment (tamp enroll, which may be moving to another server).
	fresh bool
	flags *pflag.FlagSet
	// dialed is the address dial last connected to.
	dialed string
}

func (f *deviceFlags) register(c *cobra.Command) {
	fl := c.PersistentFlags()
	f.flags = fl
	fl.StringVar(&f.store, "store", defaultStore(), "the device's store file (default: $TAMP_STORE, else tamp/device.db in the user's config directory)")
	fl.StringVar(&f.server, "server", "", "server address host:port (default: the one given at enrolment)")
	fl.StringVar(&f.ca, "ca", "", "PEM file of the CA the server's certificate chains to (default: the one given at enrolment, else the system roots)")
	fl.BoolVar(&f.plaintext, "plaintext", false, "connect without TLS, loopback addresses only (default: as at enrolment)")
}

func defaultStore() string {
	if d := os.Getenv("TAMP_STORE"); d != "" {
		return d
	}
	dir, err := os.UserConfigDir()
	if err != nil {
		return "tamp-device.db"
	}
	return filepath.Join(dir, "tamp", "device.db")
}

// open opens the device's store.
func (f *deviceFlags) open(ctx context.Context) (*client.Store, error) {
	if err := os.MkdirAll(filepath.Dir(f.store), 0o700); err != nil {
		return nil, fmt.Errorf("--store: %w", err)
	}
	return client.Open(ctx, f.store, client.Options{})
}

// dial connects to the server named by the flags or the store's settings.
func (f *deviceFlags) dial(ctx context.Context, s *client.Store) (*grpc.ClientConn, error) {
	addr, ca, plain := f.server, f.ca, f.plaintext
	if addr == "" {
		var err error
		if addr, err = s.Setting(ctx, "server"); err != nil {
			return nil, err
		}
	}
	// The CA and the plaintext setting given at enrolment hold for later
	// commands, --server or not, unless a flag says otherwise.
	if !f.fresh {
		if ca == "" {
			ca, _ = s.Setting(ctx, "ca_file")
		}
		if f.flags == nil || !f.flags.Changed("plaintext") {
			p, _ := s.Setting(ctx, "plaintext")
			plain = plain || p == "true"
		}
	}
	if addr == "" {
		return nil, fmt.Errorf("--server: no server given and none stored; enrol first (tamp enroll --server ADDR --code CODE)")
	}
	f.dialed = addr
	return client.Dial(addr, client.DialOptions{CAFile: ca, Plaintext: plain})
}

// connect opens the store and dials the server; done closes both.
func (f *deviceFlags) connect(ctx context.Context) (s *client.Store, cc *grpc.ClientConn, done func(), err error) {
	s, err = f.open(ctx)
	if err != nil {
		return nil, nil, nil, err
	}
	cc, err = f.dial(ctx, s)
	if err != nil {
		s.Close()
		return nil, nil, nil, err
	}
	return s, cc, func() { cc.Close(); s.Close() }, nil
}

func newEnroll() *cobra.Command {
	f := deviceFlags{fresh: true}
	var code, name, link string
	c := &cobra.Command{
		Use:   "enroll",
		Short: "Enrol this device with a server using a one-time code",
		Long: `Enrol this device with a tamp server: register its key with the one-time code an
administrator issued, keep the token the server returns, and pull the reference
data (specs, references, equipment) of the user's projects so tests can be
graded offline.`,
		Example: `  tamp enroll --server tamp.example.net:7420 --code 7K3QM-0VX1Z-B4CDE-FGHJN-PRSTW --ca site-ca.pem
  tamp enroll --url "tamp://enrol?server=tamp.example.net:7420&code=7K3QM-0VX1Z-B4CDE-FGHJN-PRSTW" --ca site-ca.pem`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ctx := cmd.Context()
			if link != "" {
				if code != "" {
					return fmt.Errorf("--code: give the code either in --url or in --code, not both")
				}
				server, linked, err := parseEnrolURL(link)
				if err != nil {
					return err
				}
				code = linked
				if f.server == "" { // --server, when given, names the address this device reaches
					f.server = server
				}
			}
			if f.server == "" || code == "" {
				return fmt.Errorf("--server and --code are required (or --url with both)")
			}
			s, cc, done, err := f.connect(ctx)
			if err != nil {
				return err
			}
			defer done()
			if err := s.Enroll(ctx, cc, code, name); err != nil {
				return err
			}
			for k, v := range map[string]string{"server": f.server, "ca_file": f.ca, "plaintext": fmt.Sprint(f.plaintext)} {
				if err := s.SetSetting(ctx, k, v); err != nil {
					return err
				}
			}
			out := cmd.OutOrStdout()
			fmt.Fprintf(out, "enrolled device %s for user %s\n", escape(s.DeviceID()), escape(s.User()))
			for _, p := range s.EnrolledProjects() {
				rep, err := s.Sync(ctx, cc, p, client.SyncOptions{})
				if err != nil {
					return fmt.Errorf("pull project %s: %w", escape(p), err)
				}
				name, you := "", ""
				if su, ok := s.SetUp(p); ok {
					name = " " + quoted(su.Name)
				}
				for _, m := range s.Members(p) {
					if m.UserID == s.User() {
						you = fmt.Sprintf("; you are %s, %s", quoted(m.Name), orDefault(m.Role, "member"))
					}
				}
				fmt.Fprintf(out, "project %s%s: %s received%s\n", escape(p), name, entries(rep.Pulled), you)
			}
			return nil
		},
	}
	f.register(c)
	c.Flags().StringVar(&code, "code", "", "the one-time enrolment code (any case; dashes and spaces may be left out)")
	c.Flags().StringVar(&link, "url", "", "the code and server as one tamp://enrol?server=HOST:PORT&code=CODE (tamp admin issue-code --url)")
	c.Flags().StringVar(&name, "name", "", "a name for this device, e.g. \"tablet 3\"")
	return c
}

// enrolURL returns the link that carries an enrolment code and its server
// together: tamp://enrol?server=HOST:PORT&code=CODE.
func enrolURL(server, code string) string {
	q := func(v string) string { return strings.ReplaceAll(url.QueryEscape(v), "%3A", ":") }
	return "tamp://enrol?server=" + q(server) + "&code=" + q(code)
}

// parseEnrolURL returns the server and the code of a link enrolURL made.
func parseEnrolURL(link string) (server, code string, err error) {
	u, err := url.Parse(strings.TrimSpace(link))
	if err != nil || u.Scheme != "tamp" || u.Host != "enrol" {
		return "", "", fmt.Errorf("--url: want tamp://enrol?server=HOST:PORT&code=CODE, got %q", escape(link))
	}
	q := u.Query()
	server, code = q.Get("server"), q.Get("code")
	switch {
	case server == "":
		return "", "", fmt.Errorf("--url: no server in %q; want tamp://enrol?server=HOST:PORT&code=CODE", escape(link))
	case code == "":
		return "", "", fmt.Errorf("--url: no code in %q; want tamp://enrol?server=HOST:PORT&code=CODE", escape(link))
	}
	return server, code, nil
}
