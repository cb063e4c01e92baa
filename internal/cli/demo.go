package cli

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"os"
	"path/filepath"
	"sync"
	"time"

	"github.com/spf13/cobra"
	"google.golang.org/grpc"

	"tamp/client"
	"tamp/server"
	"tamp/server/sqlitestore"
)

// demoZone is the invented project's time zone; the day is played in it.
const demoZone = "America/Denver"

func newDemo() *cobra.Command {
	var (
		out, date string
		asJSON    bool
	)
	c := &cobra.Command{
		Use:   "demo",
		Short: "Play a day of an invented earthwork project against a tamp server in this process",
		Long: `Play one working day of an invented project, the main embankment of the Quarrow
Creek Dam in the upper Quarrow Valley, with an invented crew. A tamp server runs
in this process on 127.0.0.1 over a SQLite ledger in a temporary directory, and
each member's device keeps its own store, as on a real job:

  - the administrator sets the project up and enrols the crew's devices; the QA
    manager defines the specifications and the laboratory references (one fitted
    from curve points, one from a laboratory's maximum dry density and optimum
    moisture), the moisture correction of the gauge, and the borrow sources
    with their bank tests; the office registers the equipment and the day's
    lifts;
  - three inspectors record tests with no signal, by nuclear gauge (after its
    daily standard count), sand cone, drive cylinder and rubber balloon; some
    fail, the contractor reworks the lift and retests follow; one inspector
    corrects a typing error; one tablet's clock runs an hour fast; an inspector
    corrects the same test on her tablet and on her laptop before either syncs,
    and the conflict is surfaced;
  - the devices sync; the office records the hauls and reviews the tests,
    approving some and returning others; the QA manager's retest audit, test
    frequency, lots and volume reconciliation print, and every device checks
    that it verified the server's chain to the same head.

The readings are invented and fixed (the same every run); every figure the
summary prints is read from the ledger the run produced. The day is today in
the project's time zone (America/Denver) unless --date names another.

With --out DIR the office's store is kept as DIR/office.db (the store is
closed, then copied, and the copy opened and checked), so that every read
command can be tried on it with --store DIR/office.db, and the project's signed
ledger as DIR/ledger.tamp (tamp verify DIR/ledger.tamp checks it). The kept
store remembers the demo's project, so read commands need no --project.

Nuclear gauges are licensed radioactive sources: their use, transport and
storage follow the licensee's radiation-safety programme. Results support, and
never replace, review by qualified personnel; the project's specifications and
local codes govern every acceptance limit.`,
		Example: `  tamp demo
  tamp demo --out demo-day && tamp status --store demo-day/office.db
  tamp demo --json --date 2025-10-21`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			loc, err := time.LoadLocation(demoZone)
			if err != nil {
				return fmt.Errorf("demo: time zone %s: %w", demoZone, err)
			}
			today := time.Now().In(loc).Format(time.DateOnly)
			day := today
			if date != "" {
				d, err := time.ParseInLocation(time.DateOnly, date, loc)
				if err != nil || d.Year() < 2001 || d.Format(time.DateOnly) > today {
					return fmt.Errorf("--date %s: must be a date YYYY-MM-DD from 2001-01-01 to today (%s)", escape(date), today)
				}
				day = d.Format(time.DateOnly)
			}
			if out != "" {
				if err := demoCheckOut(out); err != nil {
					return err
				}
				if err := os.MkdirAll(out, 0o755); err != nil {
					return fmt.Errorf("--out %s: %w", escape(out), err)
				}
			}
			narrative := cmd.OutOrStdout()
			if asJSON {
				narrative = io.Discard
			}
			sum, err := playDemo(cmd.Context(), demoConfig{day: day, loc: loc, out: out, w: narrative})
			if err != nil {
				return err
			}
			if asJSON {
				return writeJSON(cmd.OutOrStdout(), sum)
			}
			return nil
		},
	}
	fl := c.Flags()
	fl.StringVar(&out, "out", "", "keep the office's store as DIR/office.db and the ledger as DIR/ledger.tamp")
	fl.StringVar(&date, "date", "", "the day to play, YYYY-MM-DD (default today in the project's time zone)")
	fl.BoolVar(&asJSON, "json", false, "print only a summary as one JSON object")
	return c
}

// demoCheckOut refuses an --out directory that already holds what the demo
// would write, before the day is played.
func demoCheckOut(dir string) error {
	for _, name := range []string{"office.db", "ledger.tamp"} {
		p := filepath.Join(dir, name)
		if _, err := os.Lstat(p); err == nil {
			return fmt.Errorf("--out %s: %s exists already; give an empty or new directory, or remove it", escape(dir), escape(p))
		} else if !errors.Is(err, os.ErrNotExist) {
			return fmt.Errorf("--out %s: %w", escape(dir), err)
		}
	}
	return nil
}

type demoConfig struct {
	day string
	loc *time.Location
	out string    // directory to keep the office's store and the ledger in; "" for none
	w   io.Writer // the narrative
}

// demoClock is the day's clock, shared by the server and the devices: it
// stands still between the story's steps and moves when the story says.
// It is safe for concurrent use (the server reads it from its handlers).
type demoClock struct {
	mu  sync.Mutex
	day time.Time // midnight of the day, in the project's zone
	t   time.Time
}

func newDemoClock(day string, loc *time.Location) (*demoClock, error) {
	d, err := time.ParseInLocation(time.DateOnly, day, loc)
	if err != nil {
		return nil, err
	}
	return &demoClock{day: d, t: d}, nil
}

func (c *demoClock) now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

// at moves the clock to hh:mm of the day; the story only moves it forward.
func (c *demoClock) at(hh, mm int) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if t := c.day.Add(time.Duration(hh)*time.Hour + time.Duration(mm)*time.Minute); t.After(c.t) {
		c.t = t
	}
}

// tick moves the clock on by a minute, between two entries of one step.
func (c *demoClock) tick() {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = c.t.Add(time.Minute)
}

// demoServer is tampd in this process: the SQLite ledger store in a
// temporary directory, the sync and administration services on
// 127.0.0.1, and one connection the devices share.
type demoServer struct {
	ledger *sqlitestore.Store
	srv    *server.Server
	g      *grpc.Server
	served chan error
	conn   *grpc.ClientConn
}

func startDemoServer(ctx context.Context, dir string, now func() time.Time) (_ *demoServer, err error) {
	d := &demoServer{}
	defer func() {
		if err != nil {
			err = errors.Join(err, d.close())
		}
	}()
	if d.ledger, err = sqlitestore.Open(ctx, filepath.Join(dir, "ledger.db"), sqlitestore.Options{SynchronousNormal: true}); err != nil {
		return d, err
	}
	d.srv = server.New(server.Options{Store: d.ledger, Now: now, Logger: slog.New(slog.DiscardHandler)})
	if err = d.srv.CheckStorage(ctx); err != nil {
		return d, err
	}
	d.g = grpc.NewServer(d.srv.RequestCodec(), grpc.UnaryInterceptor(d.srv.UnaryInterceptor), grpc.StreamInterceptor(d.srv.StreamInterceptor))
	d.srv.Register(d.g)
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return d, err
	}
	d.served = make(chan error, 1)
	go func() { d.served <- d.g.Serve(lis) }()
	d.conn, err = client.Dial(lis.Addr().String(), client.DialOptions{Plaintext: true})
	return d, err
}

// close stops the server and waits for it: nothing it started runs after.
func (d *demoServer) close() error {
	var errs []error
	if d.conn != nil {
		errs = append(errs, d.conn.Close())
	}
	if d.g != nil {
		d.g.GracefulStop()
		if d.served != nil {
			errs = append(errs, <-d.served)
		}
	}
	if d.srv != nil {
		errs = append(errs, d.srv.Close())
	}
	if d.ledger != nil {
		errs = append(errs, d.ledger.Close())
	}
	return errors.Join(errs...)
}

// demoDevice is one member's device: a client store of its own.
type demoDevice struct {
	person string // the member's name
	what   string // "tablet", "laptop"...
	role   server.Role
	user   string // the member's user id
	store  *client.Store
	path   string
	skew   time.Duration // how far its clock runs ahead of the day's clock
}

func (d *demoDevice) name() string { return d.person + "'s " + d.what }

// playDemo plays the day and returns its summary, read from the ledger the
// day produced. Everything it starts is stopped before it returns.
func playDemo(ctx context.Context, cfg demoConfig) (_ *demoSummary, err error) {
	tmp, err := os.MkdirTemp("", "tamp-demo-")
	if err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	defer os.RemoveAll(tmp)
	clock, err := newDemoClock(cfg.day, cfg.loc)
	if err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	clock.at(6, 15)
	srv, err := startDemoServer(ctx, tmp, clock.now)
	if err != nil {
		return nil, fmt.Errorf("demo: start the server: %w", err)
	}
	day := &demoDay{cfg: cfg, clock: clock, srv: srv, dir: tmp, p: &printer{w: cfg.w}}
	stop := func() error {
		var errs []error
		for _, d := range day.devices {
			if d.store != nil {
				errs = append(errs, d.store.Close())
				d.store = nil
			}
		}
		if srv != nil {
			errs = append(errs, srv.close())
			srv = nil
		}
		return errors.Join(errs...)
	}
	defer func() { err = errors.Join(err, stop()) }()
	sum, err := day.play(ctx)
	if err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	if err := stop(); err != nil {
		return nil, fmt.Errorf("demo: stop: %w", err)
	}
	day.p.f("\nThe devices' stores are closed and the server has stopped; its temporary directory is removed on exit.\n")
	if day.p.err != nil {
		return nil, day.p.err
	}
	return sum, nil
}
