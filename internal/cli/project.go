package cli

import (
	"context"
	"fmt"
	"slices"
	"strings"
	"time"

	"github.com/google/uuid"
	"github.com/spf13/cobra"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/soil"
	"tamp/internal/words"
)

// projectSetting is the store setting that remembers the project chosen
// with --project or tamp project use.
const projectSetting = "project"

// projectFlags are the flags of every command that works on one project:
// the device's flags, --project and --units. Read commands add --json.
type projectFlags struct {
	deviceFlags
	project string
	units   string
}

// register adds the flags to c and its subcommands.
func (f *projectFlags) register(c *cobra.Command) {
	f.deviceFlags.register(c)
	fl := c.PersistentFlags()
	fl.StringVar(&f.project, "project", "", "the project, by name or id (remembered for later commands; default: the one remembered)")
	fl.StringVar(&f.units, "units", "", "units to show and type values in: us (pcf, lb, ft, yd3) or si (kg/m3, g, m, m3); default: the project's")
	_ = c.RegisterFlagCompletionFunc("units", cobra.FixedCompletions([]string{"us", "si"}, cobra.ShellCompDirectiveNoFileComp))
}

// jsonFlag adds --json to a read command.
func jsonFlag(c *cobra.Command, dst *bool) {
	c.Flags().BoolVar(dst, "json", false, "print JSON for scripts (values rounded, in the units shown)")
}

// session is one command's work on one project: the open store, the
// project, its set-up and the units values are shown and typed in.
type session struct {
	s       *client.Store
	project string // id
	setup   client.ProjectSetUp
	u       units
	loc     *time.Location
	members map[string]string // user id -> name
	f       *projectFlags
}

// projectName is the project's name, or its id while its set-up has not
// reached the device.
func (ss *session) projectName() string {
	if ss.setup.Name != "" {
		return ss.setup.Name
	}
	return ss.project
}

// who names a user: their name as the ledger introduces them, or "user"
// and the id's last characters when the device has no name for them.
func (ss *session) who(id string) string {
	if n, ok := ss.members[id]; ok && n != "" {
		return n
	}
	if id == "" {
		return "-"
	}
	return "user " + words.ShortID(id)
}

// close closes the store.
func (ss *session) close() { ss.s.Close() }

// open opens the store and the project --project names (or the one
// remembered), and remembers it.
func (f *projectFlags) open(ctx context.Context) (*session, error) {
	s, err := f.deviceFlags.open(ctx)
	if err != nil {
		return nil, err
	}
	ss, err := f.session(ctx, s)
	if err != nil {
		s.Close()
		return nil, err
	}
	return ss, nil
}

// session resolves the project on the open store s.
func (f *projectFlags) session(ctx context.Context, s *client.Store) (*session, error) {
	project, err := resolveProject(ctx, s, f.project)
	if err != nil {
		return nil, err
	}
	if f.project != "" {
		if err := s.SetSetting(ctx, projectSetting, project); err != nil {
			return nil, err
		}
	}
	su, _ := s.SetUp(project)
	u, err := unitsOf(f.units, su)
	if err != nil {
		return nil, err
	}
	loc := time.UTC
	if su.TimeZone != "" {
		if l, err := time.LoadLocation(su.TimeZone); err == nil {
			loc = l
		}
	}
	members := map[string]string{}
	for _, m := range s.Members(project) {
		members[m.UserID] = m.Name
	}
	return &session{s: s, project: project, setup: su, u: u, loc: loc, members: members, f: f}, nil
}

// projectsOn returns the ids of the projects the device knows of.
func projectsOn(ctx context.Context, s *client.Store) ([]string, error) {
	known, err := s.KnownProjects(ctx)
	if err != nil {
		return nil, err
	}
	for _, p := range s.EnrolledProjects() {
		if !slices.Contains(known, p) {
			known = append(known, p)
		}
	}
	return known, nil
}

// resolveProject finds the project given by name or id, or the one
// remembered when given is empty, or the only one the device knows.
func resolveProject(ctx context.Context, s *client.Store, given string) (string, error) {
	ids, err := projectsOn(ctx, s)
	if err != nil {
		return "", err
	}
	if given == "" {
		remembered, err := s.Setting(ctx, projectSetting)
		if err != nil {
			return "", err
		}
		switch {
		case remembered != "":
			return remembered, nil
		case len(ids) == 1:
			return ids[0], nil
		case len(ids) == 0:
			return "", failf("--project: this device holds no project yet. An administrator creates one with\n" +
				"tamp project create --name NAME --units us|si; a member syncs it with tamp sync --project ID")
		}
		return "", failf("--project: this device holds %d projects; choose one with --project NAME or tamp project use NAME\n%s",
			len(ids), projectChoices(s, ids))
	}
	var byName []string
	for _, id := range ids {
		if id == given {
			return id, nil
		}
		if su, ok := s.SetUp(id); ok && strings.EqualFold(strings.TrimSpace(su.Name), strings.TrimSpace(given)) {
			byName = append(byName, id)
		}
	}
	switch len(byName) {
	case 1:
		return byName[0], nil
	case 0:
		if _, err := uuid.Parse(given); err == nil {
			return given, nil // a project this device has not synced yet
		}
		return "", failf("--project %s: no project of that name on this device; sync it by id first (tamp sync --project ID)\n%s",
			quoted(given), projectChoices(s, ids))
	}
	return "", failf("--project %s: %d projects have that name; give the id\n%s", quoted(given), len(byName), projectChoices(s, byName))
}

// projectChoices lists projects, one a line, for an error message.
func projectChoices(s *client.Store, ids []string) string {
	if len(ids) == 0 {
		return "(this device holds no project)"
	}
	var b strings.Builder
	b.WriteString("Projects on this device:")
	for _, id := range ids {
		name := "(not set up yet)"
		if su, ok := s.SetUp(id); ok {
			name = quoted(su.Name)
		}
		fmt.Fprintf(&b, "\n  %s  %s", name, id)
	}
	return b.String()
}

func newProject() *cobra.Command {
	var f projectFlags
	c := &cobra.Command{
		Use:   "project",
		Short: "Create a project with its units, list the projects on this device, choose one to work on",
	}
	f.register(c)

	var name, tz, shrinkage string
	var water float64
	var skew time.Duration
	create := &cobra.Command{
		Use:   "create",
		Short: "Create a project on the server and record its set-up (server administrators)",
		Long: `Create a project on the server (you become its administrator), record its
set-up entry (name, unit system, density of water, time zone, shrinkage
convention), sync it, and remember the project for later commands.

--units chooses the project's unit system: us (pcf, lb, ft, yd3) or si
(kg/m3, g, m, m3). Every command shows and takes values in it unless told
--units otherwise; values are kept in SI. --water-density is in pcf or kg/m3
(default 62.4 pcf in us, 1000 kg/m3 in si). Tests are dated in --time-zone
(an IANA name such as America/Denver; default UTC).`,
		Example: `  tamp project create --name "Cinder Butte interchange" --units us --time-zone America/Boise`,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ctx := cmd.Context()
			if strings.TrimSpace(name) == "" {
				return failf("--name: the project's name is required")
			}
			if f.units == "" {
				return failf("--units: choose the project's unit system: us (pcf, lb, ft, yd3) or si (kg/m3, g, m, m3)")
			}
			u, err := unitsOf(f.units, client.ProjectSetUp{})
			if err != nil {
				return err
			}
			su := client.ProjectSetUp{Name: name, Units: client.SI, TimeZone: tz, ClockSkewLimit: skew}
			if u.sys == soil.US {
				su.Units, su.WaterDensity = client.USCustomary, soil.Water624
			}
			if cmd.Flags().Changed("water-density") {
				su.WaterDensity = u.toSI(soil.Density, water)
			}
			switch shrinkage {
			case "bank":
				su.Shrinkage = client.BankBasis
			case "compacted":
				su.Shrinkage = client.CompactedBasis
			default:
				return failf("--shrinkage %s: must be bank ((bank - compacted) / bank) or compacted ((bank - compacted) / compacted)", quoted(shrinkage))
			}
			if tz != "" {
				if _, err := time.LoadLocation(tz); err != nil {
					return failf("--time-zone %s: not a time zone this machine knows; give an IANA name such as America/Denver or Europe/Paris", quoted(tz))
				}
			}
			s, cc, done, err := f.connect(ctx)
			if err != nil {
				return err
			}
			defer done()
			actx, err := s.CallContext(ctx)
			if err != nil {
				return fmt.Errorf("%w; enrol this device first (tamp enroll)", err)
			}
			r, err := pb.NewAdminServiceClient(cc).CreateProject(actx, &pb.CreateProjectRequest{Name: name})
			if err != nil {
				return err
			}
			project := r.GetProjectId()
			if err := s.SetUpProject(ctx, project, su); err != nil {
				return entryError(cmd, err)
			}
			if err := s.SetSetting(ctx, projectSetting, project); err != nil {
				return err
			}
			rep, err := s.Sync(ctx, cc, project, client.SyncOptions{})
			out := cmd.OutOrStdout()
			fmt.Fprintf(out, "created project %s (%s), %s units, time zone %s; it is now the project tamp works on\n",
				quoted(name), project, u.name(), orDefault(tz, "UTC"))
			if err != nil {
				return fmt.Errorf("the set-up is kept on this device and goes with the next tamp sync: %w", err)
			}
			fmt.Fprintf(out, "set-up recorded in the project's ledger (verified to entry %d)\n", rep.Head.Seq)
			return nil
		},
	}
	create.Flags().StringVar(&name, "name", "", "the project's name")
	create.Flags().StringVar(&tz, "time-zone", "", "the project's IANA time zone, e.g. America/Denver (default UTC)")
	create.Flags().Float64Var(&water, "water-density", 0, "density of water, pcf or kg/m3 (default 62.4 pcf or 1000 kg/m3)")
	create.Flags().StringVar(&shrinkage, "shrinkage", "bank", "shrinkage convention: bank or compacted")
	create.Flags().DurationVar(&skew, "clock-skew-limit", 0, "flag entries from a device whose clock is further off (default 5m)")

	var asJSON bool
	list := &cobra.Command{
		Use: "list", Short: "List the projects on this device", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ctx := cmd.Context()
			s, err := f.deviceFlags.open(ctx)
			if err != nil {
				return err
			}
			defer s.Close()
			ids, err := projectsOn(ctx, s)
			if err != nil {
				return err
			}
			current, err := s.Setting(ctx, projectSetting)
			if err != nil {
				return err
			}
			type row struct {
				ID       string `json:"id"`
				Name     string `json:"name"`
				Units    string `json:"units"`
				TimeZone string `json:"time_zone"`
				Current  bool   `json:"current"`
				SetUp    bool   `json:"set_up"`
			}
			rows := []row{}
			for _, id := range ids {
				su, ok := s.SetUp(id)
				rows = append(rows, row{ID: id, Name: su.Name, Units: string(su.Units), TimeZone: orDefault(su.TimeZone, "UTC"), Current: id == current, SetUp: ok})
			}
			if asJSON {
				return writeJSON(cmd.OutOrStdout(), rows)
			}
			if len(rows) == 0 {
				_, err := fmt.Fprintln(cmd.OutOrStdout(), "No project on this device yet. An administrator creates one with tamp project create;\n"+
					"a member added to a project syncs it with tamp sync --project ID.")
				return err
			}
			t := newTable(cmd.OutOrStdout(), "", "PROJECT", "UNITS", "TIME ZONE", "ID")
			for _, r := range rows {
				mark, name := "", r.Name
				if r.Current {
					mark = "*"
				}
				if !r.SetUp {
					name, r.Units = "(not set up yet)", "-"
				}
				t.row(mark, name, r.Units, r.TimeZone, r.ID)
			}
			return t.flush()
		},
	}
	jsonFlag(list, &asJSON)

	use := &cobra.Command{
		Use: "use NAME", Short: "Remember the project later commands work on", Args: cobra.ExactArgs(1),
		Example: `  tamp project use "Cinder Butte interchange"`,
		RunE: func(cmd *cobra.Command, args []string) error {
			ctx := cmd.Context()
			s, err := f.deviceFlags.open(ctx)
			if err != nil {
				return err
			}
			defer s.Close()
			id, err := resolveProject(ctx, s, args[0])
			if err != nil {
				return err
			}
			if err := s.SetSetting(ctx, projectSetting, id); err != nil {
				return err
			}
			name := id
			if su, ok := s.SetUp(id); ok {
				name = quoted(su.Name)
			}
			_, err = fmt.Fprintf(cmd.OutOrStdout(), "working on project %s\n", name)
			return err
		},
	}
	c.AddCommand(create, list, use, newProjectDesign(&f), newProjectRetestRules(&f))
	return c
}

// newProjectDesign records a feature's design in the project's set-up.
func newProjectDesign(f *projectFlags) *cobra.Command {
	var feature, borrow string
	var volume, shrinkage float64
	var remove bool
	c := &cobra.Command{
		Use:   "design",
		Short: "Record a feature's design volume and planned borrow source, for the bank volume still needed (administrators)",
		Long: `Record, in a new set-up entry, an earthwork feature as designed: its compacted
--volume (yd3 or m3), the --borrow source planned to supply the rest of it,
and the --shrinkage the design assumed (percent, under the project's
convention). tamp qa reconcile then gives the bank volume still needed for
the remaining design volume, with its range. Giving a feature again replaces
its design; --remove takes it out.`,
		Example: `  tamp project design --feature "main embankment" --volume 48000 --borrow "Quarry Hill pit" --shrinkage 12`,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			if strings.TrimSpace(feature) == "" {
				return failf("--feature: name the feature as placements and tests name it")
			}
			su, ok := ss.s.SetUp(ss.project)
			if !ok {
				return failf("the project's set-up has not reached this device; run tamp sync first")
			}
			var kept []client.FeatureDesign
			for _, d := range su.Features {
				if d.Feature != feature {
					kept = append(kept, d)
				}
			}
			su.Features = kept
			if !remove {
				if volume <= 0 {
					return failf("--volume: give the feature's design volume, compacted, in %s (more than zero)", ss.u.unit(soil.Volume))
				}
				d := client.FeatureDesign{Feature: feature, DesignVolume: ss.u.toSI(soil.Volume, volume), DesignShrinkagePercent: shrinkage}
				if borrow != "" {
					b, err := ss.borrow(borrow)
					if err != nil {
						return err
					}
					d.BorrowSourceID = b.ID
				}
				su.Features = append(su.Features, d)
			}
			if err := ss.s.SetUpProject(cmd.Context(), ss.project, su); err != nil {
				return entryError(cmd, err)
			}
			what := fmt.Sprintf("feature %s designed at %s compacted", quoted(feature), ss.u.show(soil.Volume, ss.u.toSI(soil.Volume, volume)))
			if remove {
				what = fmt.Sprintf("feature %s's design removed", quoted(feature))
			}
			_, err = fmt.Fprintf(cmd.OutOrStdout(), "%s; the set-up reaches the server with the next tamp sync\n", what)
			return err
		},
	}
	fl := c.Flags()
	fl.StringVar(&feature, "feature", "", "the feature, as placements and tests name it")
	fl.Float64Var(&volume, "volume", 0, "the design's compacted volume, yd3 or m3")
	fl.StringVar(&borrow, "borrow", "", "the borrow source planned to supply the rest, by name")
	fl.Float64Var(&shrinkage, "shrinkage", 0, "the shrinkage the design assumed, percent, under the project's convention")
	fl.BoolVar(&remove, "remove", false, "take the feature's design out")
	return c
}

// newProjectRetestRules records the retest audit's window and distance in
// the project's set-up.
func newProjectRetestRules(f *projectFlags) *cobra.Command {
	var within time.Duration
	var distance float64
	c := &cobra.Command{
		Use:   "retest-rules",
		Short: "Set the time within which a failure must be retested and how far a retest may be from it (administrators)",
		Long: `Record, in a new set-up entry, the retest audit's rules (tamp qa findings): a
failing test not retested, voided or accepted within --within is reported
(48h unless set), and so is a retest farther than --distance (ft or m; 10 m
unless set) from its failure. Follow the project's specification.`,
		Example: `  tamp project retest-rules --within 24h --distance 25`,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			set := cmd.Flags().Changed
			if !set("within") && !set("distance") {
				return failf("--within, --distance: give at least one")
			}
			if within < 0 || distance < 0 {
				return failf("--within, --distance: must not be negative")
			}
			su, ok := ss.s.SetUp(ss.project)
			if !ok {
				return failf("the project's set-up has not reached this device; run tamp sync first")
			}
			if set("within") {
				su.RetestWithin = within
			}
			if set("distance") {
				su.RetestDistance = ss.u.toSI(soil.Length, distance)
			}
			if err := ss.s.SetUpProject(cmd.Context(), ss.project, su); err != nil {
				return entryError(cmd, err)
			}
			_, err = fmt.Fprintf(cmd.OutOrStdout(), "retest rules set; the set-up reaches the server with the next tamp sync\n")
			return err
		},
	}
	c.Flags().DurationVar(&within, "within", 0, "time within which a failing test must be retested, e.g. 48h")
	c.Flags().Float64Var(&distance, "distance", 0, "largest distance between a failure and its retest, ft or m")
	return c
}

// orDefault returns s, or def when s is empty.
func orDefault(s, def string) string {
	if s == "" {
		return def
	}
	return s
}
