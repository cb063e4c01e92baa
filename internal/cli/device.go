package cli

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"time"

	"github.com/spf13/cobra"
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
}

func (f *deviceFlags) register(c *cobra.Command) {
	fl := c.PersistentFlags()
	fl.StringVar(&f.store, "store", defaultStore(), "the device's store file")
	fl.StringVar(&f.server, "server", "", "server address host:port (default: the one given at enrolment)")
	fl.StringVar(&f.ca, "ca", "", "PEM file of the CA the server's certificate chains to (default: the system roots)")
	fl.BoolVar(&f.plaintext, "plaintext", false, "connect without TLS (loopback addresses only)")
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
		if ca == "" {
			ca, _ = s.Setting(ctx, "ca_file")
		}
		if !plain {
			p, _ := s.Setting(ctx, "plaintext")
			plain = p == "true"
		}
	}
	if addr == "" {
		return nil, fmt.Errorf("--server: no server given and none stored; enrol first (tamp enroll --server ADDR --code CODE)")
	}
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
	var f deviceFlags
	var code, name string
	c := &cobra.Command{
		Use:   "enroll",
		Short: "Enrol this device with a server using a one-time code",
		Long: `Enrol this device with a tamp server: register its key with the one-time code an
administrator issued, keep the token the server returns, and pull the reference
data (specs, references, equipment) of the user's projects so tests can be
graded offline.`,
		Example: `  tamp enroll --server tamp.example.net:7420 --code K3Q... --ca site-ca.pem`,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ctx := cmd.Context()
			if f.server == "" || code == "" {
				return fmt.Errorf("--server and --code are required")
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
				fmt.Fprintf(out, "project %s: %d entries pulled\n", escape(p), rep.Pulled)
			}
			return nil
		},
	}
	f.register(c)
	c.Flags().StringVar(&code, "code", "", "the one-time enrolment code")
	c.Flags().StringVar(&name, "name", "", "a name for this device, e.g. \"tablet 3\"")
	return c
}

func newSync() *cobra.Command {
	var f deviceFlags
	var project string
	c := &cobra.Command{
		Use:   "sync",
		Short: "Push this device's entries and pull the project's ledger",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ctx := cmd.Context()
			s, cc, done, err := f.connect(ctx)
			if err != nil {
				return err
			}
			defer done()
			projects, err := s.KnownProjects(ctx)
			if err != nil {
				return err
			}
			if project != "" {
				projects = []string{project}
			}
			for _, p := range projects {
				rep, err := s.Sync(ctx, cc, p, client.SyncOptions{Progress: func(pr client.Progress) {
					fmt.Fprintf(cmd.ErrOrStderr(), "\r%s: %s %d events, %d bytes   ", escape(p), pr.Phase, pr.Events, pr.Bytes)
				}})
				fmt.Fprintln(cmd.ErrOrStderr())
				if err != nil {
					return fmt.Errorf("project %s: %w", escape(p), err)
				}
				fmt.Fprintf(cmd.OutOrStdout(), "project %s: %d accepted, %d already there, %d waiting, %d rejected, %d pulled; verified to %d\n",
					escape(p), rep.Accepted, rep.AlreadyPresent, rep.Waiting, rep.Rejected, rep.Pulled, rep.Head.Seq)
			}
			return nil
		},
	}
	f.register(c)
	c.Flags().StringVar(&project, "project", "", "the project (default: every project on this device)")
	return c
}

func newStatus() *cobra.Command {
	var f deviceFlags
	c := &cobra.Command{
		Use:   "status",
		Short: "Show this device's sync status: pending entries, last sync, last error, rejected entries",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ctx := cmd.Context()
			s, err := f.open(ctx)
			if err != nil {
				return err
			}
			defer s.Close()
			out := cmd.OutOrStdout()
			fmt.Fprintf(out, "device %s, user %s\n", escape(s.DeviceID()), escape(s.User()))
			now := time.Now()
			projects, err := s.KnownProjects(ctx)
			if err != nil {
				return err
			}
			for _, p := range projects {
				st, err := s.Status(ctx, p)
				if err != nil {
					return err
				}
				last := "never"
				if !st.LastSuccess.IsZero() {
					last = st.LastSuccess.Local().Format(time.DateTime)
				}
				fmt.Fprintf(out, "project %s: %d pending (oldest %s ago), last sync %s, verified to %d\n",
					escape(p), st.Outbox.Pending, st.Outbox.Age(now).Round(time.Second), last, st.Verified.Seq)
				if st.LastError != "" {
					fmt.Fprintf(out, "  last error: %s\n", escape(st.LastError))
				}
				printServerCopy(out, st, now)
			}
			rs, err := s.Rejected(ctx)
			if err != nil {
				return err
			}
			for _, r := range rs {
				why := r.Reason
				if r.Rule != "" {
					why += ", rule " + r.Rule
				}
				if r.Field != "" {
					why += ", field " + r.Field
				}
				fmt.Fprintf(out, "rejected %s %s %s: %s (%s)\n", escape(r.EventID), escape(r.Kind), escape(r.RecordID), escape(r.Message), escape(why))
			}
			return nil
		},
	}
	c.PersistentFlags().StringVar(&f.store, "store", defaultStore(), "the device's store file")
	return c
}
