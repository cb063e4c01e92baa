package cli

import (
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	"github.com/schollz/progressbar/v3"
	"github.com/spf13/cobra"
	"golang.org/x/term"

	"tamp/client"
	"tamp/internal/words"
)

// isTerminal reports whether w is a terminal.
func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	return ok && term.IsTerminal(int(f.Fd()))
}

// syncBar draws a progress bar on a terminal for a long sync: a bar of the
// entries to push, a counter of the entries pulled. It stays quiet for a
// sync that finishes within a second, and when standard output or standard
// error is not a terminal (a script, a log file, a test).
type syncBar struct {
	w       io.Writer
	on      bool
	project string
	start   time.Time
	phase   string
	bar     *progressbar.ProgressBar
}

func newSyncBar(cmd *cobra.Command, project string) *syncBar {
	return &syncBar{w: cmd.ErrOrStderr(), on: isTerminal(cmd.OutOrStdout()) && isTerminal(cmd.ErrOrStderr()), project: project, start: time.Now()}
}

// update shows p; it is SyncOptions.Progress.
func (b *syncBar) update(p client.Progress) {
	if !b.on {
		return
	}
	if b.bar != nil && b.phase != p.Phase {
		b.done()
	}
	if b.bar == nil {
		if time.Since(b.start) < time.Second && p.Total < 1000 {
			return // short: no bar
		}
		max, what := int64(-1), "receiving"
		if p.Phase == "push" && p.Total > 0 {
			max, what = int64(p.Total), "sending"
		}
		b.phase = p.Phase
		b.bar = progressbar.NewOptions64(max, progressbar.OptionSetWriter(b.w), progressbar.OptionSetDescription(escape(b.project)+": "+what),
			progressbar.OptionShowCount(), progressbar.OptionSetItsString("entries"), progressbar.OptionShowIts(),
			progressbar.OptionThrottle(100*time.Millisecond), progressbar.OptionSetSpinnerChangeInterval(0), progressbar.OptionClearOnFinish())
	}
	_ = b.bar.Set(p.Events)
}

// done clears the bar.
func (b *syncBar) done() {
	if b.bar != nil {
		_ = b.bar.Finish()
		b.bar = nil
	}
}

// syncJSON is one project's sync as --json prints it.
type syncJSON struct {
	Project     string            `json:"project"`
	Name        string            `json:"name"`
	Report      client.SyncReport `json:"report"`
	Waiting     int               `json:"waiting"`
	Rejected    []client.Rejected `json:"rejected"`
	Conflicts   []string          `json:"conflicts"`
	ClockOffBy  string            `json:"clock_off_by,omitempty"`
	Error       string            `json:"error,omitempty"`
	ToPush      int               `json:"still_to_send"`
	Verified    uint64            `json:"verified_to"`
	LedgerHead  string            `json:"ledger_head"`
	ForkRepair  bool              `json:"fork_repaired,omitempty"`
	ServerLacks int               `json:"server_lacks"`
}

func newSync() *cobra.Command {
	var f projectFlags
	var asJSON bool
	c := &cobra.Command{
		Use:   "sync",
		Short: "Send this device's entries and receive the project's ledger",
		Long: `Send this device's entries to the server and receive the others', for the
project given with --project, or for every project on this device. The
ledger received is verified link by link. The summary names what the server
refused (kept on this device: tamp status lists them), entries still
waiting for records the server has not received, tests corrected on two
devices before they synced (both corrections are kept; the later stands),
and a device clock far off the server's. A long transfer shows a progress
bar on a terminal.`,
		Example: `  tamp sync
  tamp sync --project "Cinder Butte interchange" --json`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ctx := cmd.Context()
			s, cc, done, err := f.connect(ctx)
			if err != nil {
				return err
			}
			defer done()
			projects, err := projectsOn(ctx, s)
			if err != nil {
				return err
			}
			if f.project != "" {
				id, err := resolveProject(ctx, s, f.project)
				if err != nil {
					return err
				}
				if err := s.SetSetting(ctx, projectSetting, id); err != nil {
					return err
				}
				projects = []string{id}
			}
			out := cmd.OutOrStdout()
			if len(projects) == 0 {
				if asJSON {
					return writeJSON(out, []syncJSON{})
				}
				_, err := fmt.Fprintln(out, "This device holds no project yet, so there was nothing to sync. An administrator creates one with\n"+
					"tamp project create --name NAME --units us|si; a member added to a project syncs it with\n"+
					"tamp sync --project ID (the id tamp admin create-project printed).")
				return err
			}
			var results []syncJSON
			var failed []error
			for _, p := range projects {
				name := p
				if su, ok := s.SetUp(p); ok {
					name = su.Name
				}
				bar := newSyncBar(cmd, name)
				rep, err := s.Sync(ctx, cc, p, client.SyncOptions{Progress: bar.update})
				bar.done()
				if su, ok := s.SetUp(p); ok { // the first sync brings the name
					name = su.Name
				}
				r := syncJSON{Project: p, Name: name, Report: rep, Rejected: []client.Rejected{}, Conflicts: []string{}}
				if err != nil {
					r.Error = err.Error()
					r.ForkRepair = errors.Is(err, client.ErrFork)
					failed = append(failed, fmt.Errorf("project %s: %w", quoted(name), err))
				}
				st, serr := s.Status(ctx, p)
				if serr != nil {
					return serr
				}
				r.Waiting, r.ToPush, r.Verified, r.LedgerHead, r.ServerLacks = st.Waiting, st.Outbox.Pending, st.Verified.Seq, st.Verified.Hash, st.ServerLacks
				rejected, rerr := s.Rejected(ctx)
				if rerr != nil {
					return rerr
				}
				for _, rj := range rejected {
					if rj.Project == p {
						r.Rejected = append(r.Rejected, rj)
					}
				}
				for _, t := range s.Conflicts(p) {
					r.Conflicts = append(r.Conflicts, t.ID)
				}
				limit := 5 * time.Minute
				if su, ok := s.SetUp(p); ok && su.ClockSkewLimit > 0 {
					limit = su.ClockSkewLimit
				}
				if skew := rep.ClockSkew; err == nil && (skew > limit || skew < -limit) {
					r.ClockOffBy = skew.Round(time.Second).String()
				}
				results = append(results, r)
			}
			if asJSON {
				if err := writeJSON(out, results); err != nil {
					return err
				}
				return errors.Join(failed...)
			}
			for _, r := range results {
				if err := printSync(out, s, r); err != nil {
					return err
				}
			}
			return errors.Join(failed...)
		},
	}
	f.register(c)
	jsonFlag(c, &asJSON)
	return c
}

// printSync writes the summary of one project's sync.
func printSync(w io.Writer, s *client.Store, r syncJSON) error {
	p := &printer{w: w}
	rep := r.Report
	name := quoted(r.Name)
	if r.Name == r.Project {
		name = r.Project
	}
	if r.Error != "" {
		p.f("%s: the sync did not finish: %s\n", name, escape(r.Error))
		if r.ForkRepair {
			p.f("  The server's ledger no longer holds the point this device verified (restored from an older copy, or rewritten).\n" +
				"  This device sent back everything it holds; tell the server's operator.\n")
		}
	} else {
		sent := rep.Accepted + rep.AlreadyPresent
		p.f("%s: sent %s (%d accepted, %d the server held already), received %s from other devices; verified to ledger entry %d\n",
			name, entries(sent), rep.Accepted, rep.AlreadyPresent, entries(rep.Pulled), r.Verified)
	}
	if rep.Repushed > 0 || rep.NewEpoch > 0 {
		p.f("  the server had lost %s, which this device sent back (server epoch %d)\n", entries(rep.Repushed), rep.NewEpoch)
	}
	if r.Waiting > 0 {
		p.f("  %s still waiting: the server holds %s back until it receives the records they refer to, from the devices that made\n"+
			"  them; they are sent again at every sync (tamp status names those waiting over a day)\n", entries(r.Waiting), pronoun(r.Waiting))
	} else if r.ToPush > 0 {
		p.f("  %s still to send\n", entries(r.ToPush))
	}
	if n := len(r.Rejected); n > 0 {
		p.f("  %s refused by the server and kept on this device:\n", entries(n))
		for _, rj := range r.Rejected {
			why := rj.Reason
			if rj.Rule != "" {
				why += ", rule " + rj.Rule
			}
			if rj.Field != "" {
				why += ", field " + rj.Field
			}
			p.f("    %s %s: %s (%s)\n", escape(rj.Kind), words.ShortID(rj.RecordID), escape(rj.Message), escape(why))
		}
	}
	for _, id := range r.Conflicts {
		t, err := s.Test(r.Project, id)
		if err != nil {
			continue
		}
		p.f("  conflict: test %s (%s) was changed on two devices before they synced; both changes are kept and the later\n"+
			"  stands: check it with tamp test show %s\n", words.ShortID(id), escape(t.Content.Feature), words.ShortID(id))
	}
	if r.ClockOffBy != "" {
		p.f("  this device's clock is %s off the server's: its entries are flagged for review; set the device's date and time\n", r.ClockOffBy)
	}
	return p.err
}

func pronoun(n int) string {
	if n == 1 {
		return "it"
	}
	return "them"
}

func newStatus() *cobra.Command {
	var f deviceFlags
	var asJSON bool
	c := &cobra.Command{
		Use:   "status",
		Short: "Show this device's sync status: entries to send, last sync, last error, refusals, conflicts",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ctx := cmd.Context()
			s, err := f.open(ctx)
			if err != nil {
				return err
			}
			defer s.Close()
			now := time.Now()
			projects, err := projectsOn(ctx, s)
			if err != nil {
				return err
			}
			rs, err := s.Rejected(ctx)
			if err != nil {
				return err
			}
			userName := ""
			for _, p := range projects {
				for _, m := range s.Members(p) {
					if m.UserID == s.User() {
						userName = m.Name
					}
				}
			}
			type projectStatus struct {
				Project   string            `json:"project"`
				Name      string            `json:"name"`
				Status    client.SyncStatus `json:"status"`
				Conflicts []string          `json:"conflicts"`
			}
			type statusJSON struct {
				Device   string            `json:"device"`
				User     string            `json:"user"`
				UserName string            `json:"user_name"`
				Projects []projectStatus   `json:"projects"`
				Rejected []client.Rejected `json:"rejected"`
			}
			all := statusJSON{Device: s.DeviceID(), User: s.User(), UserName: userName, Projects: []projectStatus{}, Rejected: nonNil(rs)}
			for _, p := range projects {
				st, err := s.Status(ctx, p)
				if err != nil {
					return err
				}
				ps := projectStatus{Project: p, Status: st, Conflicts: []string{}}
				if su, ok := s.SetUp(p); ok {
					ps.Name = su.Name
				}
				for _, t := range s.Conflicts(p) {
					ps.Conflicts = append(ps.Conflicts, t.ID)
				}
				all.Projects = append(all.Projects, ps)
			}
			out := cmd.OutOrStdout()
			if asJSON {
				return writeJSON(out, all)
			}
			who := escape(s.User())
			if userName != "" {
				who = quoted(userName) + " (" + who + ")"
			}
			fmt.Fprintf(out, "device %s, user %s\n", escape(s.DeviceID()), who)
			if len(projects) == 0 {
				fmt.Fprintln(out, "no project on this device yet (tamp project list says how to get one)")
			}
			for _, ps := range all.Projects {
				st := ps.Status
				last := "never"
				if !st.LastSuccess.IsZero() { // in the project's time zone, named
					loc := time.UTC
					if su, ok := s.SetUp(ps.Project); ok && su.TimeZone != "" {
						if l, err := time.LoadLocation(su.TimeZone); err == nil {
							loc = l
						}
					}
					last = st.LastSuccess.In(loc).Format("2006-01-02 15:04:05 MST")
				}
				label := escape(ps.Project)
				if ps.Name != "" {
					label = quoted(ps.Name) + " (" + label + ")"
				}
				oldest := ""
				if st.Outbox.Pending > 0 {
					oldest = fmt.Sprintf(" (oldest %s ago)", st.Outbox.Age(now).Round(time.Second))
				}
				fmt.Fprintf(out, "project %s: %d pending%s, last sync %s, verified to %d\n",
					label, st.Outbox.Pending, oldest, last, st.Verified.Seq)
				if st.LastError != "" {
					fmt.Fprintf(out, "  last error: %s\n", escape(st.LastError))
				}
				if st.Waiting > 0 {
					fmt.Fprintf(out, "  %s waiting for records the server has not received; sent again at every sync\n", entries(st.Waiting))
				}
				for _, id := range ps.Conflicts {
					fmt.Fprintf(out, "  conflict: test %s was changed on two devices before they synced; both are kept, the later stands (tamp test show %s)\n",
						words.ShortID(id), words.ShortID(id))
				}
				printServerCopy(out, st, now)
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
			if len(rs) > 0 {
				fmt.Fprintln(out, strings.TrimSpace(`Refused entries stay on this device and have no effect; make the entry again as the rule allows.`))
			}
			return nil
		},
	}
	c.PersistentFlags().StringVar(&f.store, "store", defaultStore(), "the device's store file (default: $TAMP_STORE, else tamp/device.db in the user's config directory)")
	jsonFlag(c, &asJSON)
	return c
}
