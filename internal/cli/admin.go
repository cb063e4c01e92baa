package cli

import (
	"context"
	"fmt"
	"io"
	"strings"
	"time"

	"github.com/google/uuid"
	"github.com/spf13/cobra"

	pb "tamp/internal/gen/tamp/v1"
)

var roleNames = map[string]pb.Role{"inspector": pb.Role_ROLE_INSPECTOR, "office": pb.Role_ROLE_OFFICE, "qa": pb.Role_ROLE_QA, "admin": pb.Role_ROLE_ADMIN}

func roleName(r pb.Role) string {
	for n, x := range roleNames {
		if x == r {
			return n
		}
	}
	return "?"
}

// adminCall opens the store, dials, and runs fn with the admin client and
// an authorised context.
func adminCall(cmd *cobra.Command, f *deviceFlags, fn func(ctx context.Context, ac pb.AdminServiceClient, out io.Writer) error) error {
	ctx := cmd.Context()
	s, cc, done, err := f.connect(ctx)
	if err != nil {
		return err
	}
	defer done()
	actx, err := s.CallContext(ctx)
	if err != nil {
		return err
	}
	return fn(actx, pb.NewAdminServiceClient(cc), cmd.OutOrStdout())
}

func newAdmin() *cobra.Command {
	var f deviceFlags
	c := &cobra.Command{
		Use:   "admin",
		Short: "Manage projects, members and devices (administrators)",
		Long: `Manage projects, their members and devices on the server this device is enrolled
with. Each command prints one line per result, tab-separated, for scripts;
control characters in names are escaped (\n, \t, \x1b), so a name never
breaks a line or a column.`,
	}
	f.register(c)

	var name string
	var asJSON bool
	create := &cobra.Command{
		Use: "create-project", Short: "Create a project (server administrators)", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return adminCall(cmd, &f, func(ctx context.Context, ac pb.AdminServiceClient, out io.Writer) error {
				r, err := ac.CreateProject(ctx, &pb.CreateProjectRequest{Name: name})
				if err != nil {
					return err
				}
				_, err = fmt.Fprintln(out, escape(r.GetProjectId()))
				return err
			})
		},
	}
	create.Flags().StringVar(&name, "name", "", "the project's name")

	var project, user, newUser, role string
	add := &cobra.Command{
		Use: "add-member", Short: "Give a user a role on a project", Args: cobra.NoArgs,
		Example: `  tamp admin add-member --project "Cinder Butte interchange" --new-user "R. Okafor" --role inspector`,
		RunE: func(cmd *cobra.Command, _ []string) error {
			r, ok := roleNames[role]
			if !ok {
				return fmt.Errorf("--role: must be inspector, office, qa or admin, not %q", role)
			}
			return adminCall(cmd, &f, func(ctx context.Context, ac pb.AdminServiceClient, out io.Writer) error {
				id, err := projectOf(ctx, &f, project)
				if err != nil {
					return err
				}
				resp, err := ac.AddMember(ctx, &pb.AddMemberRequest{ProjectId: id, UserId: user, UserName: newUser, Role: r})
				if err != nil {
					return err
				}
				return printAdded(out, resp)
			})
		},
	}
	add.Flags().StringVar(&project, "project", "", "the project, by name or id (default: the one remembered)")
	add.Flags().StringVar(&user, "user", "", "an existing user's id")
	add.Flags().StringVar(&newUser, "new-user", "", "the name of a new user to create")
	add.Flags().StringVar(&role, "role", "", "inspector, office, qa or admin")
	_ = add.RegisterFlagCompletionFunc("role", cobra.FixedCompletions([]string{"inspector", "office", "qa", "admin"}, cobra.ShellCompDirectiveNoFileComp))

	members := &cobra.Command{
		Use: "members", Short: "List a project's members", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return adminCall(cmd, &f, func(ctx context.Context, ac pb.AdminServiceClient, out io.Writer) error {
				id, err := projectOf(ctx, &f, project)
				if err != nil {
					return err
				}
				r, err := ac.ListMembers(ctx, &pb.ListMembersRequest{ProjectId: id})
				if err != nil {
					return err
				}
				if asJSON {
					type member struct {
						UserID string `json:"user_id"`
						Name   string `json:"name"`
						Role   string `json:"role"`
					}
					ms := []member{}
					for _, m := range r.GetMembers() {
						ms = append(ms, member{m.GetUserId(), m.GetUserName(), roleName(m.GetRole())})
					}
					return writeJSON(out, ms)
				}
				for _, m := range r.GetMembers() {
					fmt.Fprintf(out, "%s\t%s\t%s\n", escape(m.GetUserId()), roleName(m.GetRole()), escape(m.GetUserName()))
				}
				return nil
			})
		},
	}
	members.Flags().StringVar(&project, "project", "", "the project, by name or id (default: the one remembered)")
	members.Flags().BoolVar(&asJSON, "json", false, "print JSON instead of tab-separated lines")

	var validFor time.Duration
	var codeOnly, asURL bool
	code := &cobra.Command{
		Use: "issue-code", Short: "Issue a one-time code to enrol a user's device", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return adminCall(cmd, &f, func(ctx context.Context, ac pb.AdminServiceClient, out io.Writer) error {
				id, err := userOf(ctx, ac, &f, project, user)
				if err != nil {
					return err
				}
				r, err := ac.IssueEnrollmentCode(ctx, &pb.IssueEnrollmentCodeRequest{UserId: id, ValidSeconds: int64(validFor / time.Second)})
				if err != nil {
					return err
				}
				shown := r.GetCode()
				if asURL {
					shown = enrolURL(f.dialed, shown)
				}
				if codeOnly { // for scripts: CODE=$(tamp admin issue-code ... --code-only)
					_, err = fmt.Fprintln(out, escape(shown))
					return err
				}
				_, err = fmt.Fprintf(out, "%s\texpires %s\n", escape(shown), time.UnixMicro(r.GetExpiresMicros()).UTC().Format(time.RFC3339))
				return err
			})
		},
	}
	code.Flags().StringVar(&user, "user", "", "the user whose device will be enrolled: an id, or a member's name on --project")
	code.Flags().StringVar(&project, "project", "", "the project whose members --user names (default: the one remembered)")
	code.Flags().DurationVar(&validFor, "valid-for", 0, "how long the code stays valid, up to 168h (0: the server's default, 24h)")
	code.Flags().BoolVar(&codeOnly, "code-only", false, "print only the code, for scripts")
	code.Flags().BoolVar(&asURL, "url", false, "print the code as tamp://enrol?server=HOST:PORT&code=CODE, for tamp enroll --url; the server as this device reaches it")

	var device, reason string
	revoke := &cobra.Command{
		Use: "revoke-device", Short: "Revoke a device: its token stops working at once", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return adminCall(cmd, &f, func(ctx context.Context, ac pb.AdminServiceClient, out io.Writer) error {
				r, err := ac.RevokeDevice(ctx, &pb.RevokeDeviceRequest{DeviceId: device, Reason: reason})
				if err != nil {
					return err
				}
				_, err = fmt.Fprintf(out, "revoked %s at %s\n", escape(device), time.UnixMicro(r.GetRevokedMicros()).UTC().Format(time.RFC3339))
				return err
			})
		},
	}
	revoke.Flags().StringVar(&device, "device", "", "the device")
	revoke.Flags().StringVar(&reason, "reason", "", "why, for the log")

	devices := &cobra.Command{
		Use: "devices", Short: "List enrolled devices", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return adminCall(cmd, &f, func(ctx context.Context, ac pb.AdminServiceClient, out io.Writer) (err error) {
				id := user
				if user != "" {
					if id, err = userOf(ctx, ac, &f, project, user); err != nil {
						return err
					}
				}
				r, err := ac.ListDevices(ctx, &pb.ListDevicesRequest{UserId: id})
				if err != nil {
					return err
				}
				if asJSON {
					type device struct {
						DeviceID string `json:"device_id"`
						UserID   string `json:"user_id"`
						Name     string `json:"name"`
						Revoked  bool   `json:"revoked"`
					}
					ds := []device{}
					for _, d := range r.GetDevices() {
						ds = append(ds, device{d.GetDeviceId(), d.GetUserId(), strings.TrimSpace(d.GetDeviceName()), d.GetRevoked()})
					}
					return writeJSON(out, ds)
				}
				for _, d := range r.GetDevices() {
					state := "active"
					if d.GetRevoked() {
						state = "revoked"
					}
					fmt.Fprintf(out, "%s\t%s\t%s\t%s\n", escape(d.GetDeviceId()), escape(d.GetUserId()), state, escape(strings.TrimSpace(d.GetDeviceName())))
				}
				return nil
			})
		},
	}
	devices.Flags().StringVar(&user, "user", "", "only this user's devices: an id, or a member's name on --project")
	devices.Flags().StringVar(&project, "project", "", "the project whose members --user names (default: the one remembered)")
	devices.Flags().BoolVar(&asJSON, "json", false, "print JSON instead of tab-separated lines")

	c.AddCommand(create, add, members, code, revoke, devices)
	c.AddCommand(newInvitationCommands(&f)...)
	return c
}

// projectOf resolves a project given by name or id (or the one remembered)
// on the device's store, for the administration calls, which take ids.
func projectOf(ctx context.Context, f *deviceFlags, given string) (string, error) {
	s, err := f.open(ctx)
	if err != nil {
		return "", err
	}
	defer s.Close()
	return resolveProject(ctx, s, given)
}

// userOf resolves --user: a user id as it is, or the name of a member of
// the project (given by name or id, or the one remembered), matched
// exactly, then ignoring case.
func userOf(ctx context.Context, ac pb.AdminServiceClient, f *deviceFlags, project, user string) (string, error) {
	if user == "" {
		return "", fmt.Errorf("--user is required: a user id, or a member's name")
	}
	if uuid.Validate(user) == nil {
		return user, nil
	}
	id, err := projectOf(ctx, f, project)
	if err != nil {
		return "", fmt.Errorf("--user %q is a name; name the project whose member it is with --project: %w", escape(user), err)
	}
	r, err := ac.ListMembers(ctx, &pb.ListMembersRequest{ProjectId: id})
	if err != nil {
		return "", err
	}
	var found []string
	for _, pass := range []func(a, b string) bool{func(a, b string) bool { return a == b }, strings.EqualFold} {
		for _, m := range r.GetMembers() {
			if pass(m.GetUserName(), user) {
				found = append(found, m.GetUserId())
			}
		}
		if len(found) > 0 {
			break
		}
	}
	switch len(found) {
	case 0:
		return "", fmt.Errorf("--user %q: no member of the project has that name; tamp admin members lists them", escape(user))
	case 1:
		return found[0], nil
	}
	return "", fmt.Errorf("--user %q: %d members have that name; give the user's id (tamp admin members lists them)", escape(user), len(found))
}
