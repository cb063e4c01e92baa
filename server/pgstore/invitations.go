package pgstore

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5"

	"tamp/server"
)

// Invite is one statement: the unique index of pending invitations holds
// at most one per user and project, and ON CONFLICT updates the one
// pending, also when concurrent calls race to insert it.
func (s *Store) Invite(ctx context.Context, inv server.Invitation) (string, error) {
	var id string
	err := s.pool.QueryRow(ctx, `INSERT INTO invitations (invitation_id, project_id, user_id, role, invited_by, created_at)
		VALUES ($1, $2, $3, $4, $5, $6)
		ON CONFLICT (project_id, user_id) WHERE state = 'pending'
		DO UPDATE SET role = excluded.role, invited_by = excluded.invited_by, created_at = excluded.created_at
		RETURNING invitation_id`, inv.ID, inv.Project, inv.User, string(inv.Role), inv.InvitedBy, inv.Created).Scan(&id)
	if err != nil {
		return "", fmt.Errorf("pgstore: invite %s to %s: %w", inv.User, inv.Project, fault(err))
	}
	return id, nil
}

// invitationColumns are the columns scanInvitation reads, of invitations i
// joined with projects p and the inviting users u.
const invitationColumns = `i.invitation_id, i.project_id, p.name, i.user_id, i.role, i.invited_by, u.name, i.created_at
	FROM invitations i JOIN projects p USING (project_id) JOIN users u ON u.user_id = i.invited_by`

func scanInvitation(r pgx.Row) (server.Invitation, error) {
	var inv server.Invitation
	err := r.Scan(&inv.ID, &inv.Project, &inv.ProjectName, &inv.User, &inv.Role, &inv.InvitedBy, &inv.InviterName, &inv.Created)
	return inv, err
}

func (s *Store) Invitation(ctx context.Context, id string) (server.Invitation, error) {
	inv, err := scanInvitation(s.pool.QueryRow(ctx, `SELECT `+invitationColumns+`
		WHERE i.invitation_id = $1 AND i.state = 'pending'`, id))
	if errors.Is(err, pgx.ErrNoRows) {
		return inv, fmt.Errorf("pgstore: invitation %s: %w", id, server.ErrNoInvitation)
	}
	if err != nil {
		return inv, fmt.Errorf("pgstore: invitation %s: %w", id, fault(err))
	}
	return inv, nil
}

func (s *Store) Invitations(ctx context.Context, user string) ([]server.Invitation, error) {
	rows, err := s.pool.Query(ctx, `SELECT `+invitationColumns+`
		WHERE i.user_id = $1 AND i.state = 'pending' ORDER BY i.created_at, i.invitation_id COLLATE "C"`, user)
	if err != nil {
		return nil, fmt.Errorf("pgstore: invitations of %s: %w", user, fault(err))
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (server.Invitation, error) { return scanInvitation(r) })
	if err != nil {
		return nil, fmt.Errorf("pgstore: invitations of %s: %w", user, fault(err))
	}
	return out, nil
}

// ResolveInvitation closes the invitation with a conditional UPDATE (of
// concurrent calls, the others find it closed once the first commits) and
// makes the membership in the same transaction.
func (s *Store) ResolveInvitation(ctx context.Context, id string, accept bool, now time.Time) (server.Invitation, error) {
	state, verb := "declined", "decline"
	if accept {
		state, verb = "accepted", "accept"
	}
	var inv server.Invitation
	err := pgx.BeginFunc(ctx, s.pool, func(tx pgx.Tx) error {
		err := tx.QueryRow(ctx, `UPDATE invitations SET state = $2, resolved_at = $3 WHERE invitation_id = $1 AND state = 'pending'
			RETURNING invitation_id, project_id, user_id, role, invited_by, created_at`, id, state, now).
			Scan(&inv.ID, &inv.Project, &inv.User, &inv.Role, &inv.InvitedBy, &inv.Created)
		if errors.Is(err, pgx.ErrNoRows) {
			return server.ErrNoInvitation
		}
		if err != nil || !accept {
			return err
		}
		_, err = tx.Exec(ctx, `INSERT INTO members (project_id, user_id, role) VALUES ($1, $2, $3)
			ON CONFLICT (project_id, user_id) DO UPDATE SET role = excluded.role`, inv.Project, inv.User, string(inv.Role))
		return err
	})
	if err != nil {
		return server.Invitation{}, fmt.Errorf("pgstore: %s invitation %s: %w", verb, id, fault(err))
	}
	return inv, nil
}

func (s *Store) DropEnrollmentCodes(ctx context.Context, user string) error {
	if _, err := s.pool.Exec(ctx, `DELETE FROM enrollment_codes WHERE user_id = $1 AND used_at IS NULL`, user); err != nil {
		return fmt.Errorf("pgstore: void enrolment codes of %s: %w", user, fault(err))
	}
	return nil
}
