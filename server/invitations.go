package server

import (
	"context"
	"errors"
	"fmt"

	"google.golang.org/grpc/codes"

	pb "tamp/internal/gen/tamp/v1"
)

// Invitations: a project administrator who adds an existing user it may not
// act for (see actsFor) only invites them. The user sees the invitation on
// their own device and accepts or declines it; only an acceptance makes
// them a member.

func (a *adminService) ListInvitations(ctx context.Context, _ *pb.ListInvitationsRequest) (*pb.ListInvitationsResponse, error) {
	d, _ := deviceFrom(ctx)
	u, err := a.allow(ctx, pb.AdminService_ListInvitations_FullMethodName, target{user: d.UserID})
	if err != nil {
		return nil, err
	}
	invs, err := a.s.opts.Store.Invitations(ctx, u.ID)
	if err != nil {
		return nil, a.s.internal(ctx, "list invitations", err)
	}
	resp := &pb.ListInvitationsResponse{}
	for _, inv := range invs {
		resp.Invitations = append(resp.Invitations, &pb.Invitation{InvitationId: inv.ID, ProjectId: inv.Project, ProjectName: inv.ProjectName,
			Role: roleToProto(inv.Role), InvitedBy: inv.InvitedBy, InvitedByName: inv.InviterName, CreatedMicros: inv.Created.UnixMicro()})
	}
	return resp, nil
}

// pendingInvitation returns the pending invitation id names, if the caller
// may resolve it by method.
func (a *adminService) pendingInvitation(ctx context.Context, method, id string) (Invitation, error) {
	inv, err := a.s.opts.Store.Invitation(ctx, id)
	if errors.Is(err, ErrNoInvitation) {
		return inv, statusError(codes.NotFound, reasonNoInvitation, "invitation_id", "", "no pending invitation "+id)
	}
	if err != nil {
		return inv, a.s.internal(ctx, "invitation", err)
	}
	if _, err := a.allow(ctx, method, target{user: inv.User}); err != nil {
		return inv, err
	}
	return inv, nil
}

func (a *adminService) AcceptInvitation(ctx context.Context, req *pb.AcceptInvitationRequest) (*pb.AcceptInvitationResponse, error) {
	inv, err := a.pendingInvitation(ctx, pb.AdminService_AcceptInvitation_FullMethodName, req.GetInvitationId())
	if err != nil {
		return nil, err
	}
	// The offer stands only while its maker may still make it.
	inviter, err := a.s.opts.Store.User(ctx, inv.InvitedBy)
	if err != nil {
		return nil, a.s.internal(ctx, "inviter", err)
	}
	r, err := a.s.opts.Store.Role(ctx, inv.Project, inv.InvitedBy)
	if err != nil {
		return nil, a.s.internal(ctx, "role", err)
	}
	if !inviter.ServerAdmin && r != Admin {
		return nil, statusError(codes.FailedPrecondition, reasonInvitationLapsed, "invitation_id", "", fmt.Sprintf("%s no longer administers project %s; ask one of its administrators to invite you again",
			inv.InvitedBy, inv.Project))
	}
	prev, err := a.s.opts.Store.Role(ctx, inv.Project, inv.User)
	if err != nil {
		return nil, a.s.internal(ctx, "role", err)
	}
	inv, err = a.s.opts.Store.ResolveInvitation(ctx, inv.ID, true, a.s.opts.Now())
	if errors.Is(err, ErrNoInvitation) {
		return nil, statusError(codes.NotFound, reasonNoInvitation, "invitation_id", "", "no pending invitation "+req.GetInvitationId())
	}
	if err != nil {
		return nil, a.s.internal(ctx, "accept invitation", err)
	}
	if prev == "" {
		if err := a.s.joined(ctx, inv.User); err != nil {
			return nil, err
		}
	}
	if err := a.s.introduceDevices(ctx, inv.Project, inv.User); err != nil {
		return nil, a.s.internal(ctx, "accept invitation", err)
	}
	a.s.log.InfoContext(ctx, "invitation accepted", "project", inv.Project, "user", inv.User, "role", inv.Role, "invited_by", inv.InvitedBy)
	return &pb.AcceptInvitationResponse{ProjectId: inv.Project, Role: roleToProto(inv.Role)}, nil
}

func (a *adminService) DeclineInvitation(ctx context.Context, req *pb.DeclineInvitationRequest) (*pb.DeclineInvitationResponse, error) {
	inv, err := a.pendingInvitation(ctx, pb.AdminService_DeclineInvitation_FullMethodName, req.GetInvitationId())
	if err != nil {
		return nil, err
	}
	if _, err := a.s.opts.Store.ResolveInvitation(ctx, inv.ID, false, a.s.opts.Now()); errors.Is(err, ErrNoInvitation) {
		return nil, statusError(codes.NotFound, reasonNoInvitation, "invitation_id", "", "no pending invitation "+req.GetInvitationId())
	} else if err != nil {
		return nil, a.s.internal(ctx, "decline invitation", err)
	}
	a.s.log.InfoContext(ctx, "invitation declined", "project", inv.Project, "user", inv.User, "invited_by", inv.InvitedBy)
	return &pb.DeclineInvitationResponse{}, nil
}
