package cli

import (
	"context"
	"fmt"
	"io"

	"github.com/spf13/cobra"

	pb "tamp/internal/gen/tamp/v1"
)

// printAdded prints the user add-member added, and, when the user was only
// invited, "invited" and the invitation's id: they become a member when
// they accept it on their own device.
func printAdded(out io.Writer, resp *pb.AddMemberResponse) error {
	if inv := resp.GetInvitationId(); inv != "" {
		_, err := fmt.Fprintf(out, "%s\tinvited\t%s\n", escape(resp.GetUserId()), escape(inv))
		return err
	}
	_, err := fmt.Fprintln(out, escape(resp.GetUserId()))
	return err
}

// newInvitationCommands returns the admin subcommands with which a user
// sees, accepts and declines their invitations to projects.
func newInvitationCommands(f *deviceFlags) []*cobra.Command {
	var asJSON bool
	list := &cobra.Command{
		Use: "invitations", Short: "List your pending invitations to projects", Args: cobra.NoArgs,
		Long: `List the invitations to projects awaiting your answer, one a line: the invitation,
the project, the role offered, the project's name and who invited you.`,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return adminCall(cmd, f, func(ctx context.Context, ac pb.AdminServiceClient, out io.Writer) error {
				r, err := ac.ListInvitations(ctx, &pb.ListInvitationsRequest{})
				if err != nil {
					return err
				}
				if asJSON {
					type invitation struct {
						ID          string `json:"invitation_id"`
						ProjectID   string `json:"project_id"`
						ProjectName string `json:"project_name"`
						Role        string `json:"role"`
						InvitedBy   string `json:"invited_by"`
					}
					is := []invitation{}
					for _, inv := range r.GetInvitations() {
						is = append(is, invitation{inv.GetInvitationId(), inv.GetProjectId(), inv.GetProjectName(), roleName(inv.GetRole()), inv.GetInvitedByName()})
					}
					return writeJSON(out, is)
				}
				for _, inv := range r.GetInvitations() {
					fmt.Fprintf(out, "%s\t%s\t%s\t%s\t%s\n", escape(inv.GetInvitationId()), escape(inv.GetProjectId()), roleName(inv.GetRole()),
						escape(inv.GetProjectName()), escape(inv.GetInvitedByName()))
				}
				return nil
			})
		},
	}

	list.Flags().BoolVar(&asJSON, "json", false, "print JSON instead of tab-separated lines")

	var accepted string
	accept := &cobra.Command{
		Use: "accept-invitation", Short: "Accept an invitation: you become a member of its project", Args: cobra.NoArgs,
		Example: `  tamp admin invitations
  tamp admin accept-invitation --invitation I`,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return adminCall(cmd, f, func(ctx context.Context, ac pb.AdminServiceClient, out io.Writer) error {
				r, err := ac.AcceptInvitation(ctx, &pb.AcceptInvitationRequest{InvitationId: accepted})
				if err != nil {
					return err
				}
				_, err = fmt.Fprintf(out, "%s\t%s\n", escape(r.GetProjectId()), roleName(r.GetRole()))
				return err
			})
		},
	}
	accept.Flags().StringVar(&accepted, "invitation", "", "the invitation")

	var declined string
	decline := &cobra.Command{
		Use: "decline-invitation", Short: "Decline an invitation", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return adminCall(cmd, f, func(ctx context.Context, ac pb.AdminServiceClient, out io.Writer) error {
				if _, err := ac.DeclineInvitation(ctx, &pb.DeclineInvitationRequest{InvitationId: declined}); err != nil {
					return err
				}
				_, err := fmt.Fprintf(out, "declined %s\n", escape(declined))
				return err
			})
		},
	}
	decline.Flags().StringVar(&declined, "invitation", "", "the invitation")
	return []*cobra.Command{list, accept, decline}
}
