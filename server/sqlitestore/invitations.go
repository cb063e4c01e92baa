package sqlitestore

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"time"

	"tamp/server"
)

func (s *Store) Invite(ctx context.Context, inv server.Invitation) (string, error) {
	id := inv.ID
	err := s.db.Tx(ctx, func(tx *sql.Tx) error {
		err := tx.QueryRowContext(ctx, `UPDATE invitations SET role = ?, invited_by = ?, created_micros = ?
			WHERE project_id = ? AND user_id = ? AND state = 'pending' RETURNING invitation_id`,
			string(inv.Role), inv.InvitedBy, inv.Created.UnixMicro(), inv.Project, inv.User).Scan(&id)
		if !errors.Is(err, sql.ErrNoRows) {
			return err
		}
		id = inv.ID
		_, err = tx.ExecContext(ctx, `INSERT INTO invitations (invitation_id, project_id, user_id, role, invited_by, created_micros)
			VALUES (?, ?, ?, ?, ?, ?)`, inv.ID, inv.Project, inv.User, string(inv.Role), inv.InvitedBy, inv.Created.UnixMicro())
		return err
	})
	if err != nil {
		return "", fmt.Errorf("sqlitestore: invite %s to %s: %w", inv.User, inv.Project, fault(err))
	}
	return id, nil
}

// invitationColumns are the columns scanInvitation reads, of invitations i
// joined with projects p and the inviting users u.
const invitationColumns = `i.invitation_id, i.project_id, p.name, i.user_id, i.role, i.invited_by, u.name, i.created_micros
	FROM invitations i JOIN projects p USING (project_id) JOIN users u ON u.user_id = i.invited_by`

type scanner interface{ Scan(dest ...any) error }

func scanInvitation(r scanner) (server.Invitation, error) {
	var inv server.Invitation
	var role string
	var created int64
	if err := r.Scan(&inv.ID, &inv.Project, &inv.ProjectName, &inv.User, &role, &inv.InvitedBy, &inv.InviterName, &created); err != nil {
		return inv, err
	}
	inv.Role, inv.Created = server.Role(role), time.UnixMicro(created)
	return inv, nil
}

func (s *Store) Invitation(ctx context.Context, id string) (server.Invitation, error) {
	inv, err := scanInvitation(s.db.Reader().QueryRowContext(ctx, `SELECT `+invitationColumns+`
		WHERE i.invitation_id = ? AND i.state = 'pending'`, id))
	if errors.Is(err, sql.ErrNoRows) {
		return inv, fmt.Errorf("sqlitestore: invitation %s: %w", id, server.ErrNoInvitation)
	}
	if err != nil {
		return inv, fmt.Errorf("sqlitestore: invitation %s: %w", id, err)
	}
	return inv, nil
}

func (s *Store) Invitations(ctx context.Context, user string) ([]server.Invitation, error) {
	rows, err := s.db.Reader().QueryContext(ctx, `SELECT `+invitationColumns+`
		WHERE i.user_id = ? AND i.state = 'pending' ORDER BY i.created_micros, i.invitation_id`, user)
	if err != nil {
		return nil, fmt.Errorf("sqlitestore: invitations of %s: %w", user, err)
	}
	defer rows.Close()
	var out []server.Invitation
	for rows.Next() {
		inv, err := scanInvitation(rows)
		if err != nil {
			return nil, fmt.Errorf("sqlitestore: invitations of %s: %w", user, err)
		}
		out = append(out, inv)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("sqlitestore: invitations of %s: %w", user, err)
	}
	return out, nil
}

func (s *Store) ResolveInvitation(ctx context.Context, id string, accept bool, now time.Time) (server.Invitation, error) {
	state, verb := "declined", "decline"
	if accept {
		state, verb = "accepted", "accept"
	}
	var inv server.Invitation
	err := s.db.Tx(ctx, func(tx *sql.Tx) error {
		var role string
		err := tx.QueryRowContext(ctx, `UPDATE invitations SET state = ?, resolved_micros = ? WHERE invitation_id = ? AND state = 'pending'
			RETURNING invitation_id, project_id, user_id, role, invited_by`, state, now.UnixMicro(), id).
			Scan(&inv.ID, &inv.Project, &inv.User, &role, &inv.InvitedBy)
		if errors.Is(err, sql.ErrNoRows) {
			return server.ErrNoInvitation
		}
		if err != nil {
			return err
		}
		inv.Role = server.Role(role)
		if !accept {
			return nil
		}
		_, err = tx.ExecContext(ctx, `INSERT INTO members (project_id, user_id, role) VALUES (?, ?, ?)
			ON CONFLICT (project_id, user_id) DO UPDATE SET role = excluded.role`, inv.Project, inv.User, role)
		return err
	})
	if err != nil {
		return server.Invitation{}, fmt.Errorf("sqlitestore: %s invitation %s: %w", verb, id, fault(err))
	}
	return inv, nil
}

func (s *Store) DropEnrollmentCodes(ctx context.Context, user string) error {
	if _, err := s.db.Writer().ExecContext(ctx, `DELETE FROM enrollment_codes WHERE user_id = ? AND used_micros IS NULL`, user); err != nil {
		return fmt.Errorf("sqlitestore: void enrolment codes of %s: %w", user, fault(err))
	}
	return nil
}
