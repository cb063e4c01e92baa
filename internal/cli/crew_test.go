package cli

import (
	"encoding/json"
	"path/filepath"
	"strings"
	"testing"
)

// crew is a real tampd on loopback with an administrator's device and a
// project created with tamp project create, and the stores of the members
// enrolled on it.
type crew struct {
	t       *testing.T
	addr    string
	dir     string
	admin   string // the administrator's store
	project string // its id
}

// newCrew starts tampd, enrols the administrator and creates a project in
// units.
func newCrew(t *testing.T, name, units string) *crew {
	t.Helper()
	addr, code := startServer(t)
	c := &crew{t: t, addr: addr, dir: t.TempDir()}
	c.admin = c.path("admin")
	must(t, "enroll", "--store", c.admin, "--server", addr, "--plaintext", "--code", code, "--name", "site office laptop")
	out := must(t, "project", "create", "--store", c.admin, "--name", name, "--units", units, "--time-zone", "America/Denver")
	if !strings.Contains(out, "created project") || !strings.Contains(out, "set-up recorded") {
		t.Fatalf("project create: %s", out)
	}
	var list []struct {
		ID, Name string
		Current  bool
	}
	decode(t, must(t, "project", "list", "--store", c.admin, "--json"), &list)
	if len(list) != 1 || list[0].Name != name || !list[0].Current {
		t.Fatalf("project list after create: %+v", list)
	}
	c.project = list[0].ID
	return c
}

func (c *crew) path(who string) string { return filepath.Join(c.dir, who+".db") }

// member adds a user with a role and enrols a device for them on store
// who; it returns the user's id.
func (c *crew) member(who, name, role string) string {
	c.t.Helper()
	user := must(c.t, "admin", "add-member", "--store", c.admin, "--new-user", name, "--role", role)
	c.enrol(who, user)
	return user
}

// enrol enrols another device (store who) for an existing user.
func (c *crew) enrol(who, user string) {
	c.t.Helper()
	issued := must(c.t, "admin", "issue-code", "--store", c.admin, "--user", user)
	code, _, _ := strings.Cut(issued, "\t")
	out := must(c.t, "enroll", "--store", c.path(who), "--server", c.addr, "--plaintext", "--code", code, "--name", who+" tablet")
	if !strings.Contains(out, "enrolled device") {
		c.t.Fatalf("enroll %s: %s", who, out)
	}
}

// as runs tamp with --store set to who's store.
func (c *crew) as(who string, args ...string) string {
	c.t.Helper()
	return must(c.t, append(args, "--store", c.path(who))...)
}

// fails runs tamp as who, wants an error, and returns its text.
func (c *crew) fails(who string, args ...string) string {
	c.t.Helper()
	out, _, err := run(c.t, append(args, "--store", c.path(who))...)
	if err == nil {
		c.t.Fatalf("tamp %s succeeded, want an error:\n%s", strings.Join(args, " "), out)
	}
	return err.Error()
}

// decode decodes JSON output into v.
func decode(t *testing.T, out string, v any) {
	t.Helper()
	if err := json.Unmarshal([]byte(out), v); err != nil {
		t.Fatalf("output is not JSON of %T: %v\n%s", v, err, out)
	}
}

// holds fails the test unless out holds every want.
func holds(t *testing.T, what, out string, wants ...string) {
	t.Helper()
	for _, w := range wants {
		if !strings.Contains(out, w) {
			t.Errorf("%s: no %q in\n%s", what, w, out)
		}
	}
}
