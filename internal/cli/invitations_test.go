package cli

import (
	"path/filepath"
	"strings"
	"testing"
)

// A project administrator adding a user of another project only invites
// them; the user lists the invitation and accepts it from their own device.
// issue-code honours --valid-for within its bounds.
func TestInvitationCommands(t *testing.T) {
	addr, code := startServer(t)
	root := filepath.Join(t.TempDir(), "root.db")
	must(t, "enroll", "--store", root, "--server", addr, "--plaintext", "--code", code)
	a := must(t, "admin", "--store", root, "create-project", "--name", "Quarry Road embankment")
	b := must(t, "admin", "--store", root, "create-project", "--name", "Heron Slough levee")
	enrol := func(project, name, role string) (user, store string) {
		user = must(t, "admin", "--store", root, "add-member", "--project", project, "--new-user", name, "--role", role)
		issued := must(t, "admin", "--store", root, "issue-code", "--user", user, "--valid-for", "10m")
		c, _, _ := strings.Cut(issued, "\t")
		store = filepath.Join(t.TempDir(), name+".db")
		must(t, "enroll", "--store", store, "--server", addr, "--plaintext", "--code", c)
		return user, store
	}
	_, adam := enrol(a, "Adam", "admin")
	bea, beaStore := enrol(b, "Bea", "inspector")

	added := must(t, "admin", "--store", adam, "add-member", "--project", a, "--user", bea, "--role", "qa")
	f := strings.Split(added, "\t")
	if len(f) != 3 || f[0] != bea || f[1] != "invited" {
		t.Fatalf("add-member of a user of another project: %q, want user, invited, invitation", added)
	}
	inv := f[2]
	if m := must(t, "admin", "--store", adam, "members", "--project", a); strings.Contains(m, bea) {
		t.Errorf("bea is a member before accepting:\n%s", m)
	}
	if l := must(t, "admin", "--store", beaStore, "invitations"); l != inv+"\t"+a+"\tqa\tQuarry Road embankment\tAdam" {
		t.Errorf("bea's invitations: %q", l)
	}
	if out := must(t, "admin", "--store", beaStore, "accept-invitation", "--invitation", inv); out != a+"\tqa" {
		t.Errorf("accept-invitation: %q", out)
	}
	if m := must(t, "admin", "--store", adam, "members", "--project", a); !strings.Contains(m, bea+"\tqa\tBea") {
		t.Errorf("members after bea accepted:\n%s", m)
	}
	if _, _, err := run(t, "admin", "--store", adam, "issue-code", "--user", bea); refusal(err).Rule != "user_admin" {
		t.Errorf("adam issues a code for bea, who holds a role on B: %v", err)
	}
	if _, _, err := run(t, "admin", "--store", root, "issue-code", "--user", bea, "--valid-for", "200h"); refusal(err).Field != "valid_seconds" {
		t.Errorf("a code valid for 200 hours: %v, want a refusal naming valid_seconds", err)
	}
}
