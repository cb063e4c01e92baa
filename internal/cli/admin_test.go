package cli

import (
	"bufio"
	"context"
	"encoding/json"
	"errors"
	"io"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"tamp/client"
	"tamp/internal/daemon"
)

// startServer runs tampd init and serve in-process on 127.0.0.1:0 and
// returns the address and the administrator's enrolment code.
func startServer(t *testing.T) (addr, code string) {
	t.Helper()
	return startServerWith(t, nil)
}

// startServerWith is startServer with seed, when not nil, run on the data
// directory after init and before serve.
func startServerWith(t *testing.T, seed func(data string)) (addr, code string) {
	t.Helper()
	data := t.TempDir()
	var out strings.Builder
	if err := daemon.Run(context.Background(), []string{"init", "--data", data, "--admin", "Rosa"}, &out, io.Discard); err != nil {
		t.Fatal(err)
	}
	if seed != nil {
		seed(data)
	}
	for _, l := range strings.Split(out.String(), "\n") {
		if c, ok := strings.CutPrefix(l, "enrolment code: "); ok {
			code = c
		}
	}
	if err := daemon.Run(context.Background(), []string{"init", "--data", data}, io.Discard, io.Discard); err == nil {
		t.Error("a second init succeeded")
	}
	ctx, cancel := context.WithCancel(context.Background())
	r, w := io.Pipe()
	done := make(chan error, 1)
	go func() {
		done <- daemon.Run(ctx, []string{"serve", "--data", data, "--listen", "127.0.0.1:0", "--log-format", "text"}, w, io.Discard)
		w.Close()
	}()
	line, err := bufio.NewReader(r).ReadString('\n')
	if err != nil {
		t.Fatal(err)
	}
	go io.Copy(io.Discard, r)
	t.Cleanup(func() {
		cancel()
		select {
		case <-done:
		case <-time.After(30 * time.Second):
			t.Error("tampd did not stop")
		}
	})
	return strings.TrimSpace(strings.TrimPrefix(line, "tampd: listening on ")), code
}

func must(t *testing.T, args ...string) string {
	t.Helper()
	out, errOut, err := run(t, args...)
	if err != nil {
		t.Fatalf("tamp %s: %v\n%s", strings.Join(args, " "), err, errOut)
	}
	return strings.TrimSpace(out)
}

// The administrator enrols, creates a project, adds an inspector and issues
// the inspector's code; the inspector enrols and syncs; the administrator
// lists and revokes the inspector's device, whose next sync is refused.
func TestAdminFlow(t *testing.T) {
	addr, code := startServer(t)
	adminStore := filepath.Join(t.TempDir(), "admin.db")
	inspStore := filepath.Join(t.TempDir(), "insp.db")
	out := must(t, "enroll", "--store", adminStore, "--server", addr, "--plaintext", "--code", code, "--name", "office laptop")
	if !strings.Contains(out, "enrolled device") {
		t.Fatalf("enroll: %s", out)
	}
	if _, _, err := run(t, "enroll", "--store", filepath.Join(t.TempDir(), "x.db"), "--server", addr, "--plaintext", "--code", code); !errors.Is(err, client.ErrCodeInvalid) {
		t.Errorf("second use of the code: %v", err)
	}
	project := must(t, "admin", "--store", adminStore, "create-project", "--name", "Larkspur Creek levee")
	user := must(t, "admin", "--store", adminStore, "add-member", "--project", project, "--new-user", "Tomas", "--role", "inspector")
	members := must(t, "admin", "--store", adminStore, "members", "--project", project)
	if !strings.Contains(members, user+"\tinspector\tTomas") || !strings.Contains(members, "\tadmin\tRosa") {
		t.Errorf("members:\n%s", members)
	}
	issued := must(t, "admin", "--store", adminStore, "issue-code", "--user", user)
	inspCode, _, _ := strings.Cut(issued, "\t")
	out = must(t, "enroll", "--store", inspStore, "--server", addr, "--plaintext", "--code", inspCode)
	if !strings.Contains(out, "project "+project) {
		t.Errorf("the inspector's enrolment did not pull the project: %s", out)
	}
	if _, _, err := run(t, "admin", "--store", inspStore, "create-project", "--name", "mine"); refusal(err).Rule != "server_admin" {
		t.Errorf("an inspector created a project: %v", err)
	}
	devices := must(t, "admin", "--store", adminStore, "devices")
	var inspDevice string
	for _, l := range strings.Split(devices, "\n") {
		if f := strings.Split(l, "\t"); len(f) >= 3 && f[1] == user {
			inspDevice = f[0]
		}
	}
	if inspDevice == "" {
		t.Fatalf("devices:\n%s", devices)
	}
	must(t, "sync", "--store", inspStore, "--project", project)
	// The administrator sets the project up (through the library: recording
	// commands come later) and syncs, so the ledger has an entry to export.
	s, err := client.Open(context.Background(), adminStore, client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if err := s.SetUpProject(context.Background(), project, client.ProjectSetUp{Name: "Larkspur Creek levee", Units: client.USCustomary}); err != nil {
		t.Fatal(err)
	}
	s.Close()
	must(t, "sync", "--store", adminStore, "--project", project)
	export := filepath.Join(t.TempDir(), "ledger.tamp")
	if out := must(t, "export", "--store", adminStore, "--project", project, "--out", export); !strings.Contains(out, "events of project") {
		t.Errorf("export: %s", out)
	}
	if out := must(t, "verify", export); !strings.HasPrefix(out, "ok: project "+project) {
		t.Errorf("verify: %s", out)
	}
	if st := must(t, "status", "--store", inspStore); !strings.Contains(st, "project "+project+": 0 pending") {
		t.Errorf("status: %s", st)
	}
	// The inspector sets the project up, which the server refuses by a
	// rule; status lists the refusal with the rule apart.
	s, err = client.Open(context.Background(), inspStore, client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if err := s.SetUpProject(context.Background(), project, client.ProjectSetUp{Name: "mine now", Units: client.SI}); err != nil {
		t.Fatal(err)
	}
	s.Close()
	must(t, "sync", "--store", inspStore, "--project", project)
	if st := must(t, "status", "--store", inspStore); !strings.Contains(st, "project_set_up") || !strings.Contains(st, "(permission_denied, rule role_may_make_entry)") {
		t.Errorf("status after a refused entry: %s", st)
	}
	must(t, "admin", "--store", adminStore, "revoke-device", "--device", inspDevice, "--reason", "tablet lost")
	if _, _, err := run(t, "sync", "--store", inspStore, "--project", project); !errors.Is(err, client.ErrRevoked) {
		t.Errorf("sync after revocation: %v", err)
	}
	if st := must(t, "status", "--store", inspStore); !strings.Contains(st, "last error:") || !strings.Contains(st, "revoked") {
		t.Errorf("status after revocation: %s", st)
	}
	if d := must(t, "admin", "--store", adminStore, "devices", "--user", user); !strings.Contains(d, "revoked") {
		t.Errorf("devices after revocation: %s", d)
	}
}

// The administrator's read commands print JSON with --json, and --user
// takes a member's name on the project as well as an id (issue 11: names,
// not only UUIDs; --json on every read command).
func TestAdminReadsJSONAndNames(t *testing.T) {
	addr, code := startServer(t)
	adminStore := filepath.Join(t.TempDir(), "admin.db")
	must(t, "enroll", "--store", adminStore, "--server", addr, "--plaintext", "--code", code, "--name", "office laptop")
	project := must(t, "admin", "--store", adminStore, "create-project", "--name", "Sumac Flat detention pond")
	user := must(t, "admin", "--store", adminStore, "add-member", "--project", project, "--new-user", "Wren Halloway", "--role", "inspector")

	var members []struct {
		UserID string `json:"user_id"`
		Name   string `json:"name"`
		Role   string `json:"role"`
	}
	if err := json.Unmarshal([]byte(must(t, "admin", "--store", adminStore, "members", "--project", project, "--json")), &members); err != nil {
		t.Fatal(err)
	}
	found := false
	for _, m := range members {
		found = found || (m.UserID == user && m.Name == "Wren Halloway" && m.Role == "inspector")
	}
	if !found {
		t.Errorf("members --json: %+v", members)
	}

	inspCode := must(t, "admin", "--store", adminStore, "issue-code", "--project", project, "--user", "wren halloway", "--code-only")
	must(t, "enroll", "--store", filepath.Join(t.TempDir(), "insp.db"), "--server", addr, "--plaintext", "--code", inspCode, "--name", "tablet 7")
	var devices []struct {
		UserID  string `json:"user_id"`
		Name    string `json:"name"`
		Revoked bool   `json:"revoked"`
	}
	if err := json.Unmarshal([]byte(must(t, "admin", "--store", adminStore, "devices", "--project", project, "--user", "Wren Halloway", "--json")), &devices); err != nil {
		t.Fatal(err)
	}
	if len(devices) != 1 || devices[0].UserID != user || devices[0].Name != "tablet 7" || devices[0].Revoked {
		t.Errorf("devices --json --user NAME: %+v", devices)
	}
	if _, _, err := run(t, "admin", "--store", adminStore, "issue-code", "--project", project, "--user", "Nobody Here"); err == nil {
		t.Error("a code for a name no member has")
	}
	var invitations []json.RawMessage
	if err := json.Unmarshal([]byte(must(t, "admin", "--store", adminStore, "invitations", "--json")), &invitations); err != nil || len(invitations) != 0 {
		t.Errorf("invitations --json: %v %v", invitations, err)
	}
}
