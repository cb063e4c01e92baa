// Package daemon is the tampd command: the sync server's daemon. cmd/tampd
// only calls Run.
package daemon

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/url"
	"os"
	"path/filepath"
	"runtime/debug"
	"strings"
	"time"

	"github.com/spf13/cobra"
	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/keepalive"
	"google.golang.org/grpc/reflection"

	"tamp/server"
	"tamp/server/pgstore"
	"tamp/server/sqlitestore"
)

// Run executes tampd with args (without the program name). It returns when
// the command ends; serve ends when ctx is cancelled, after finishing the
// calls in flight.
func Run(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	root := &cobra.Command{
		Use:           "tampd",
		Short:         "The tamp sync server",
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.AddCommand(newServe(stdout, stderr), newInit(stdout), newMigrate(stdout))
	root.SetArgs(args)
	root.SetOut(stdout)
	root.SetErr(stderr)
	return root.ExecuteContext(ctx)
}

// GCPercent is tampd's garbage-collection target (as GOGC) unless the
// environment sets GOGC: a collection starts when the heap has grown by
// twice the live heap, where Go's default waits for once. tampd's live heap
// is mostly the projections, which live as long as the server, while a
// push's garbage is short-lived; collecting half as often took 13 % less
// CPU per pushed event (server BenchmarkPush, six runs of each on two
// cores) for a heap up to a half larger. GOMEMLIMIT bounds it where memory
// is short.
const GCPercent = 200

// TuneGC applies GCPercent unless the environment sets GOGC. It returns the
// setting before.
func TuneGC() int {
	if os.Getenv("GOGC") != "" {
		before := debug.SetGCPercent(-1)
		debug.SetGCPercent(before)
		return before
	}
	return debug.SetGCPercent(GCPercent)
}

// Limits of the server's transport.
const (
	maxMessage    = 32 << 20 // bytes in one message
	callDeadline  = 2 * time.Minute
	shutdownGrace = 30 * time.Second
)

type serveFlags struct {
	data, store       string
	listen            string
	tlsCert, tlsKey   string
	insecure          bool
	logFormat         string
	synchronousNormal bool
}

func newServe(stdout, stderr io.Writer) *cobra.Command {
	var f serveFlags
	c := &cobra.Command{
		Use:   "serve",
		Short: "Serve the sync and administration services over a data directory or a PostgreSQL database",
		Long: `Serve the sync and administration services of the project ledgers kept in the
data directory (created if missing), or with --store in a PostgreSQL database,
which several tampd may share. Plain gRPC is allowed on a loopback
address; any other address needs --tls-cert and --tls-key, or --insecure.
SIGINT or SIGTERM stops the server after the calls in flight have finished.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error { return serve(cmd.Context(), f, stdout, stderr) },
	}
	fl := c.Flags()
	fl.StringVar(&f.data, "data", "", "data directory: the ledger in its SQLite file ledger.db (this or --store)")
	fl.StringVar(&f.store, "store", "", "PostgreSQL database URL, postgres://USER@HOST:5432/DB (this or --data)")
	fl.StringVar(&f.listen, "listen", "127.0.0.1:7420", "address to listen on")
	fl.StringVar(&f.tlsCert, "tls-cert", "", "TLS certificate file (PEM)")
	fl.StringVar(&f.tlsKey, "tls-key", "", "TLS private key file (PEM)")
	fl.BoolVar(&f.insecure, "insecure", false, "allow plain gRPC on a non-loopback address (warned on every start)")
	fl.StringVar(&f.logFormat, "log-format", "json", "log format: json or text")
	fl.BoolVar(&f.synchronousNormal, "synchronous-normal", false, "with --data: use synchronous=NORMAL (faster; may lose the last writes on power loss)")
	return c
}

func newInit(stdout io.Writer) *cobra.Command {
	var data, store, admin string
	var codeOnly bool
	c := &cobra.Command{
		Use:   "init",
		Short: "Create a server's data directory (or PostgreSQL schema) and its first administrator",
		Long: `Create the ledger in the data directory, or with --store in a PostgreSQL
database (which must exist; init creates the tables), and a first
administrator, and print a one-time code that enrols the administrator's
device (tamp enroll). Everything after that is done from tamp admin. init
refuses a ledger that already has users.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			st, _, err := openStore(cmd.Context(), data, store, false)
			if err != nil {
				return err
			}
			defer st.Close()
			srv := server.New(server.Options{Store: st, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
			defer srv.Close()
			user, code, exp, err := srv.Bootstrap(cmd.Context(), admin)
			if err != nil {
				return err
			}
			if codeOnly { // for scripts: CODE=$(tampd init ... --code-only)
				_, err = fmt.Fprintln(stdout, code)
				return err
			}
			fmt.Fprintf(stdout, "administrator %s (%s)\nenrolment code: %s\nexpires: %s\n", user, admin, code, exp.UTC().Format(time.RFC3339))
			return nil
		},
	}
	c.Flags().StringVar(&data, "data", "", "data directory: the ledger in its SQLite file ledger.db (this or --store)")
	c.Flags().StringVar(&store, "store", "", "PostgreSQL database URL, postgres://USER@HOST:5432/DB (this or --data)")
	c.Flags().StringVar(&admin, "admin", "administrator", "the first administrator's name")
	c.Flags().BoolVar(&codeOnly, "code-only", false, "print only the enrolment code, for scripts")
	return c
}

// closingStore is a store tampd opens and closes.
type closingStore interface {
	server.Store
	Close() error
}

// openStore opens the ledger: the SQLite file ledger.db in the data
// directory data (created if missing), or the PostgreSQL database the URL
// store names; exactly one of them is given. It returns the store and what
// to log of where it is (no password).
func openStore(ctx context.Context, data, store string, synchronousNormal bool) (closingStore, string, error) {
	switch {
	case data != "" && store != "":
		return nil, "", fmt.Errorf("--data and --store: give one of them, not both (--data for SQLite, --store for PostgreSQL)")
	case store != "":
		u, err := url.Parse(store)
		if err != nil || (u.Scheme != "postgres" && u.Scheme != "postgresql") || u.Host == "" {
			return nil, "", fmt.Errorf("--store: must be a PostgreSQL URL, postgres://USER@HOST:5432/DATABASE (SQLite is --data DIR)")
		}
		if synchronousNormal {
			return nil, "", fmt.Errorf("--synchronous-normal: applies to SQLite (--data) only; PostgreSQL's durability is its synchronous_commit")
		}
		st, err := pgstore.Open(ctx, store, pgstore.Options{})
		if err != nil {
			return nil, "", fmt.Errorf("--store %s: %w", where(u), err)
		}
		return st, where(u), nil
	case data != "":
		if err := os.MkdirAll(data, 0o700); err != nil {
			return nil, "", fmt.Errorf("--data: %w", err)
		}
		st, err := sqlitestore.Open(ctx, filepath.Join(data, "ledger.db"), sqlitestore.Options{SynchronousNormal: synchronousNormal})
		if err != nil {
			return nil, "", err
		}
		return st, data, nil
	}
	return nil, "", fmt.Errorf("--data or --store: one is required (--data DIR for SQLite, --store postgres://... for PostgreSQL)")
}

// where names a PostgreSQL database by its URL's host and path, leaving out
// the user, password and parameters.
func where(u *url.URL) string {
	return "postgres://" + u.Host + "/" + strings.TrimPrefix(u.Path, "/")
}

func isLoopback(addr string) bool {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return false
	}
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

func serve(ctx context.Context, f serveFlags, stdout, stderr io.Writer) error {
	var handler slog.Handler
	switch f.logFormat {
	case "json":
		handler = slog.NewJSONHandler(stderr, nil)
	case "text":
		handler = slog.NewTextHandler(stderr, nil)
	default:
		return fmt.Errorf("--log-format: must be json or text, not %q", f.logFormat)
	}
	log := slog.New(handler)
	TuneGC()
	var opts []grpc.ServerOption
	switch {
	case f.tlsCert != "" || f.tlsKey != "":
		creds, err := credentials.NewServerTLSFromFile(f.tlsCert, f.tlsKey)
		if err != nil {
			return fmt.Errorf("--tls-cert/--tls-key: %w", err)
		}
		opts = append(opts, grpc.Creds(creds))
	case !isLoopback(f.listen) && !f.insecure:
		return fmt.Errorf("--listen %s: a non-loopback address needs --tls-cert and --tls-key (or --insecure)", f.listen)
	case !isLoopback(f.listen):
		log.Warn("serving plain gRPC on a non-loopback address: tokens and records cross the network unencrypted", "listen", f.listen)
	}
	st, at, err := openStore(ctx, f.data, f.store, f.synchronousNormal)
	if err != nil {
		return err
	}
	defer st.Close()
	// Several tampd may serve one PostgreSQL database: each catches up from
	// it before deciding. A SQLite file has one server.
	srv := server.New(server.Options{Store: st, Logger: log, Shared: f.store != ""})
	defer srv.Close()
	// A store that cannot be written (a full disk, read-only) does not
	// stop tampd: it serves reads, reports NOT_SERVING and resumes once
	// a write succeeds.
	if err := srv.CheckStorage(ctx); err != nil {
		return err
	}
	opts = append(opts,
		srv.RequestCodec(),
		grpc.ChainUnaryInterceptor(deadline, srv.UnaryInterceptor),
		grpc.ChainStreamInterceptor(srv.StreamInterceptor),
		grpc.MaxRecvMsgSize(maxMessage), grpc.MaxSendMsgSize(maxMessage),
		grpc.KeepaliveParams(keepalive.ServerParameters{Time: 2 * time.Minute, Timeout: 20 * time.Second, MaxConnectionIdle: 30 * time.Minute}),
		grpc.KeepaliveEnforcementPolicy(keepalive.EnforcementPolicy{MinTime: 20 * time.Second, PermitWithoutStream: true}),
	)
	g := grpc.NewServer(opts...)
	srv.Register(g)
	reflection.Register(g)

	lis, err := net.Listen("tcp", f.listen)
	if err != nil {
		return fmt.Errorf("--listen: %w", err)
	}
	fmt.Fprintf(stdout, "tampd: listening on %s\n", lis.Addr())
	log.Info("serving", "listen", lis.Addr().String(), "store", at, "tls", f.tlsCert != "")
	served := make(chan error, 1)
	go func() { served <- g.Serve(lis) }()
	select {
	case err := <-served:
		return err
	case <-ctx.Done():
	}
	log.Info("shutting down: finishing calls in flight")
	srv.Close() // health reports NOT_SERVING from now on
	stopped := make(chan struct{})
	go func() { g.GracefulStop(); close(stopped) }()
	select {
	case <-stopped:
	case <-time.After(shutdownGrace):
		log.Warn("calls still in flight after the grace period; stopping")
		g.Stop()
	}
	if err := <-served; err != nil && !errors.Is(err, grpc.ErrServerStopped) {
		return err
	}
	log.Info("stopped")
	return nil
}

// deadline gives every unary call without a deadline the server's own.
func deadline(ctx context.Context, req any, _ *grpc.UnaryServerInfo, h grpc.UnaryHandler) (any, error) {
	if _, ok := ctx.Deadline(); !ok {
		var cancel context.CancelFunc
		ctx, cancel = context.WithTimeout(ctx, callDeadline)
		defer cancel()
	}
	return h(ctx, req)
}
