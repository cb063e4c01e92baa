package daemon

import (
	"context"
	"errors"
	"fmt"
	"io"
	"iter"
	"net/url"
	"os"
	"path/filepath"
	"time"

	"github.com/spf13/cobra"

	"tamp/server"
	"tamp/server/pgstore"
	"tamp/server/sqlitestore"
)

func newMigrate(stdout io.Writer) *cobra.Command {
	var data, to string
	c := &cobra.Command{
		Use:   "migrate",
		Short: "Copy a data directory's SQLite ledger into an empty PostgreSQL database and verify it",
		Long: `Copy everything a data directory's SQLite ledger keeps into an empty
PostgreSQL database (which must exist; migrate creates the tables): the
projects with their chain heads, every ledger entry, the users, members,
devices (with their keys, tokens and revocations), enrolment codes,
invitations, and the server's signing identity. Devices go on syncing
against a tampd serving the database with the tokens they have.

Stop the tampd serving the data directory first: migrate refuses a ledger
another process has open, and holds it locked while it reads. It changes
nothing in the data directory (of a tampd that was killed, SQLite folds
the log of its last commits into ledger.db, as tampd's next start would).

The copy is one transaction. Before it commits, each project's copied chain
is recomputed from its genesis and must end at the SQLite ledger's head,
with as many entries, and every table must hold as many rows as the
source: otherwise nothing is kept. A database that holds any user or
project already is refused.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error { return migrate(cmd.Context(), data, to, stdout) },
	}
	c.Flags().StringVar(&data, "data", "", "the data directory whose ledger.db is copied (tampd stopped)")
	c.Flags().StringVar(&to, "to", "", "the empty PostgreSQL database, postgres://USER@HOST:5432/DB")
	return c
}

func migrate(ctx context.Context, data, to string, stdout io.Writer) error {
	if data == "" {
		return fmt.Errorf("--data: required, the data directory of the SQLite ledger to copy")
	}
	u, err := url.Parse(to)
	if to == "" || err != nil || (u.Scheme != "postgres" && u.Scheme != "postgresql") || u.Host == "" {
		return fmt.Errorf("--to: must be a PostgreSQL URL, postgres://USER@HOST:5432/DATABASE, of an empty database")
	}
	file := filepath.Join(data, "ledger.db")
	if _, err := os.Stat(file); err != nil {
		return fmt.Errorf("--data %s: no ledger there (%w)", data, err)
	}
	src, err := sqlitestore.OpenReader(ctx, file)
	if errors.Is(err, sqlitestore.ErrInUse) {
		return fmt.Errorf("--data %s: another process has the ledger open; stop the tampd serving it, then migrate: %w", data, err)
	}
	if err != nil {
		return fmt.Errorf("--data %s: %w", data, err)
	}
	defer src.Close()
	d, err := src.Dump(ctx)
	if err != nil {
		return fmt.Errorf("--data %s: %w", data, err)
	}
	dst, err := pgstore.Open(ctx, to, pgstore.Options{MaxConns: 2})
	if err != nil {
		return fmt.Errorf("--to %s: %w", where(u), err)
	}
	defer dst.Close()
	loaded, err := dst.Load(ctx, d, func(project string) iter.Seq2[server.Row, error] { return src.Ledger(ctx, project) })
	if errors.Is(err, pgstore.ErrNotEmpty) {
		return fmt.Errorf("--to %s: %w", where(u), err)
	}
	if err != nil {
		return fmt.Errorf("--to %s: nothing copied: %w", where(u), err)
	}
	printLoaded(stdout, file, where(u), d, loaded, time.Now())
	return nil
}

// printLoaded reports what migrate copied.
func printLoaded(w io.Writer, from, to string, d server.Dump, l pgstore.Loaded, now time.Time) {
	fmt.Fprintf(w, "copied %s into %s\n", from, to)
	for _, p := range l.Projects {
		fmt.Fprintf(w, "project %s %q: %d entries, epoch %d, head %s (recomputed from the genesis, as in SQLite)\n",
			p.Head.Project, p.Name, p.Rows, p.Head.Epoch, p.Head.Hash)
	}
	admins, revoked, live, pending := 0, 0, 0, 0
	for _, u := range d.Users {
		if u.ServerAdmin {
			admins++
		}
	}
	for _, v := range d.Devices {
		if v.Revoked {
			revoked++
		}
	}
	for _, c := range d.Codes {
		if c.Used.IsZero() && c.Expires.After(now) {
			live++
		}
	}
	for _, i := range d.Invitations {
		if i.State == "pending" {
			pending++
		}
	}
	fmt.Fprintf(w, "users: %d, the server's own included (server administrators: %d)\n", l.Users, admins)
	fmt.Fprintf(w, "memberships: %d\n", l.Members)
	fmt.Fprintf(w, "devices: %d (%d revoked)\n", l.Devices, revoked)
	fmt.Fprintf(w, "enrolment codes: %d (%d unused and unexpired)\n", l.Codes, live)
	fmt.Fprintf(w, "invitations: %d (%d pending)\n", l.Invitations, pending)
	if d.Identity != nil {
		fmt.Fprintf(w, "server identity: device %s\n", d.Identity.DeviceID)
	} else {
		fmt.Fprintln(w, "server identity: none yet (tampd makes one at its first start)")
	}
}
