package sqlitestore

import (
	"context"
	"crypto/sha256"
	"errors"
	"testing"
	"time"

	"tamp/server"
)

// An invitation is pending until accepted or declined; one pending per
// user and project; accepting makes the user a member in the same
// transaction; closed invitations cannot be resolved again.
func TestInvitations(t *testing.T) {
	s := open(t)
	ctx := context.Background()
	now := time.Date(2026, 10, 5, 7, 0, 0, 0, time.UTC)
	const p, q = "0190d3a0-0000-7000-8000-0000000000c1", "0190d3a0-0000-7000-8000-0000000000c2"
	for _, id := range []string{p, q} {
		if err := s.CreateProject(ctx, id, "pad "+id[len(id)-2:], genesis(id), now); err != nil {
			t.Fatal(err)
		}
	}
	for _, u := range []struct{ id, name string }{{"adam", "Adam"}, {"bea", "Bea"}} {
		if err := s.AddUser(ctx, u.id, u.name, false, now); err != nil {
			t.Fatal(err)
		}
	}
	id, err := s.Invite(ctx, server.Invitation{ID: "inv-1", Project: p, User: "bea", Role: server.Inspector, InvitedBy: "adam", Created: now})
	if err != nil || id != "inv-1" {
		t.Fatalf("invite = %q, %v", id, err)
	}
	// Inviting again while one is pending updates it rather than adding one.
	id, err = s.Invite(ctx, server.Invitation{ID: "inv-2", Project: p, User: "bea", Role: server.QA, InvitedBy: "adam", Created: now.Add(time.Minute)})
	if err != nil || id != "inv-1" {
		t.Fatalf("second invite = %q, %v; want the pending inv-1", id, err)
	}
	if _, err := s.Invite(ctx, server.Invitation{ID: "inv-3", Project: q, User: "bea", Role: server.Office, InvitedBy: "adam", Created: now.Add(2 * time.Minute)}); err != nil {
		t.Fatal(err)
	}
	invs, err := s.Invitations(ctx, "bea")
	if err != nil || len(invs) != 2 {
		t.Fatalf("invitations = %+v, %v; want 2", invs, err)
	}
	if got := invs[0]; got.ID != "inv-1" || got.Role != server.QA || got.ProjectName != "pad c1" || got.InviterName != "Adam" || !got.Created.Equal(now.Add(time.Minute)) {
		t.Errorf("first invitation = %+v", got)
	}
	if r, _ := s.Role(ctx, p, "bea"); r != "" {
		t.Errorf("bea holds %q on p before accepting", r)
	}

	inv, err := s.ResolveInvitation(ctx, "inv-1", true, now.Add(time.Hour))
	if err != nil || inv.Project != p || inv.Role != server.QA || inv.User != "bea" || inv.InvitedBy != "adam" {
		t.Fatalf("accept = %+v, %v", inv, err)
	}
	if r, _ := s.Role(ctx, p, "bea"); r != server.QA {
		t.Errorf("bea holds %q on p after accepting, want qa", r)
	}
	if _, err := s.ResolveInvitation(ctx, "inv-1", true, now.Add(time.Hour)); !errors.Is(err, server.ErrNoInvitation) {
		t.Errorf("accepting twice: %v, want ErrNoInvitation", err)
	}
	if _, err := s.Invitation(ctx, "inv-1"); !errors.Is(err, server.ErrNoInvitation) {
		t.Errorf("an accepted invitation is still pending: %v", err)
	}
	if _, err := s.ResolveInvitation(ctx, "inv-3", false, now.Add(time.Hour)); err != nil {
		t.Fatal(err)
	}
	if r, _ := s.Role(ctx, q, "bea"); r != "" {
		t.Errorf("bea holds %q on q after declining", r)
	}
	if invs, _ := s.Invitations(ctx, "bea"); len(invs) != 0 {
		t.Errorf("pending after accepting and declining: %+v", invs)
	}
	// A new invitation to the same project may follow a closed one.
	if id, err := s.Invite(ctx, server.Invitation{ID: "inv-4", Project: q, User: "bea", Role: server.Office, InvitedBy: "adam", Created: now}); err != nil || id != "inv-4" {
		t.Errorf("invite after a decline = %q, %v", id, err)
	}
	if _, err := s.Invitation(ctx, "inv-4"); err != nil {
		t.Errorf("new invitation: %v", err)
	}
}

// Dropping a user's enrolment codes voids the unused ones only.
func TestDropEnrollmentCodes(t *testing.T) {
	s := open(t)
	ctx := context.Background()
	now := time.Now()
	if err := s.AddUser(ctx, "dee", "Dee", false, now); err != nil {
		t.Fatal(err)
	}
	used, unused := sha256.Sum256([]byte("used")), sha256.Sum256([]byte("unused"))
	for _, h := range [][32]byte{used, unused} {
		if err := s.AddEnrollmentCode(ctx, h[:], "dee", now.Add(time.Hour)); err != nil {
			t.Fatal(err)
		}
	}
	tok := sha256.Sum256([]byte("token"))
	if _, err := s.Enroll(ctx, used[:], server.Device{ID: "dev1", PublicKey: make([]byte, 32)}, tok[:], now); err != nil {
		t.Fatal(err)
	}
	if err := s.DropEnrollmentCodes(ctx, "dee"); err != nil {
		t.Fatal(err)
	}
	tok2 := sha256.Sum256([]byte("token 2"))
	if _, err := s.Enroll(ctx, unused[:], server.Device{ID: "dev2", PublicKey: make([]byte, 32)}, tok2[:], now); !errors.Is(err, server.ErrCodeInvalid) {
		t.Errorf("enrol with a dropped code: %v, want ErrCodeInvalid", err)
	}
	if d, err := s.DeviceByToken(ctx, tok[:]); err != nil || d.ID != "dev1" {
		t.Errorf("the device enrolled before the drop: %+v, %v", d, err)
	}
}
