package cli

import (
	"context"
	"crypto/ed25519"
	"crypto/sha256"
	"errors"
	"fmt"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/google/uuid"
	grpccodes "google.golang.org/grpc/codes"

	"tamp/client"
	"tamp/server"
	"tamp/server/sqlitestore"
)

// Names that try to forge output: a newline and tabs that would make a
// second record, ANSI escapes that clear the screen and colour text, and a
// right-to-left override that reverses what follows it.
var hostileNames = []string{
	"Mallory\nffffffff-0000-0000-0000-000000000000\tadmin\tRosa",
	"\x1b[2J\x1b[31mEve\x1b[0m",
	"Ana\u202egnp.exe",
}

// seedHostile stores a project whose members and one device carry hostile
// names straight into the data directory, as a server that accepted them
// before names were checked would hold them. It returns the project's id.
func seedHostile(t *testing.T, data string) string {
	t.Helper()
	ctx := context.Background()
	st, err := sqlitestore.Open(ctx, filepath.Join(data, "ledger.db"), sqlitestore.Options{SynchronousNormal: true})
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	srv := server.New(server.Options{Store: st})
	project, err := srv.CreateProject(ctx, "Hostile\x1b[8m fill")
	if err != nil {
		t.Fatal(err)
	}
	var first string
	for _, n := range hostileNames {
		u, err := srv.AddUser(ctx, n, false)
		if err != nil {
			t.Fatal(err)
		}
		if err := srv.AddMember(ctx, project, u, server.Inspector); err != nil {
			t.Fatal(err)
		}
		if first == "" {
			first = u
		}
	}
	code, _, err := srv.IssueEnrollmentCode(ctx, first)
	if err != nil {
		t.Fatal(err)
	}
	pub, _, err := ed25519.GenerateKey(nil)
	if err != nil {
		t.Fatal(err)
	}
	codeHash, tokenHash := sha256.Sum256([]byte(code)), sha256.Sum256([]byte("unused token"))
	d := server.Device{ID: uuid.NewString(), Name: "tablet\nffffffff-0000-0000-0000-000000000000\tadmin-user\tactive\tforged\x1b]0;owned\x07", PublicKey: pub}
	if _, err := st.Enroll(ctx, codeHash[:], d, tokenHash[:], time.Now()); err != nil {
		t.Fatal(err)
	}
	return project
}

// oneLinePerRecord fails unless every line of out has tabs tab characters
// and none is a record forged by a name: a line starting with the forged
// id the hostile names carry.
func oneLinePerRecord(t *testing.T, out string, tabs int) {
	t.Helper()
	for _, l := range strings.Split(out, "\n") {
		if n := strings.Count(l, "\t"); n != tabs {
			t.Errorf("line %q has %d tabs, want %d", l, n, tabs)
		}
		if strings.HasPrefix(l, "ffffffff-0000-") {
			t.Errorf("a name forged the line %q", l)
		}
	}
}

// TestAdminListsEscapeHostileNames lists members and devices whose names
// hold newlines, tabs, ANSI escapes and a bidi override: every record stays
// on one line with its columns, and the control characters show as escapes
// instead of reaching the terminal.
func TestAdminListsEscapeHostileNames(t *testing.T) {
	var project string
	addr, code := startServerWith(t, func(data string) { project = seedHostile(t, data) })
	store := filepath.Join(t.TempDir(), "admin.db")
	must(t, "enroll", "--store", store, "--server", addr, "--plaintext", "--code", code, "--name", "office laptop")

	members := must(t, "admin", "--store", store, "members", "--project", project)
	oneLinePerRecord(t, members, 2)
	for _, want := range []string{`Mallory\nffffffff-0000-0000-0000-000000000000\tadmin\tRosa`, `\x1b[2J\x1b[31mEve\x1b[0m`, `Ana\u202egnp.exe`} {
		if !strings.Contains(members, want) {
			t.Errorf("members lack the escaped name %s:\n%s", want, members)
		}
	}

	devices := must(t, "admin", "--store", store, "devices")
	oneLinePerRecord(t, devices, 3)
	if want := `tablet\nffffffff-0000-0000-0000-000000000000\tadmin-user\tactive\tforged\x1b]0;owned\x07`; !strings.Contains(devices, want) {
		t.Errorf("devices lack the escaped name %s:\n%s", want, devices)
	}
	for _, out := range []string{members, devices} {
		if i := strings.IndexFunc(out, func(r rune) bool { return r == 0x1b || r == 0x07 || r == '\u202e' }); i >= 0 {
			t.Errorf("output holds a raw control character at byte %d: %q", i, out)
		}
	}
}

func TestEscape(t *testing.T) {
	for _, tc := range []struct{ in, want string }{
		{"Tomas", "Tomas"},
		{"José Ñúñez 李", "José Ñúñez 李"},
		{"a\nb\tc\rd", `a\nb\tc\rd`},
		{"\x1b[31mred\x1b[0m", `\x1b[31mred\x1b[0m`},
		{"bell\x07 nul\x00 del\x7f", `bell\x07 nul\x00 del\x7f`},
		{"c1\u0085\u009b", `c1\u0085\u009b`},
		{"Ana\u202egnp.exe", `Ana\u202egnp.exe`},
		{"\u2066iso\u2069 \u200emark\u200f \u061c", `\u2066iso\u2069 \u200emark\u200f \u061c`},
		{"line\u2028para\u2029", `line\u2028para\u2029`},
		{"bad \xff\xfe utf-8", `bad \xff\xfe utf-8`},
		{`a\nb`, `a\\nb`}, // a typed backslash stays apart from an escaped newline
		{"zero\u200dwidth joiner", "zero\u200dwidth joiner"},
	} {
		if got := escape(tc.in); got != tc.want {
			t.Errorf("escape(%q) = %q, want %q", tc.in, got, tc.want)
		}
	}
}

// TestPlainErrorsEscapeAndAdvise checks what tamp prints for an error: control characters
// escaped, gRPC's prefix rewritten, and advice for a refused certificate,
// with the original error still reachable.
func TestPlainErrorsEscapeAndAdvise(t *testing.T) {
	err := plain(fmt.Errorf("project p: %w", &client.ServerError{Code: grpccodes.PermissionDenied, Reason: "PERMISSION_DENIED",
		Rule: "project_admin", Message: "project_admin: Eve\n\x1b[2Jforged"}))
	if want := `project p: project_admin: Eve\n\x1b[2Jforged [PERMISSION_DENIED]`; err.Error() != want {
		t.Errorf("plain = %q, want %q", err.Error(), want)
	}
	for _, tc := range []struct {
		problem client.CertificateProblem
		want    string
	}{
		{client.CertificateUnknownAuthority, "--ca FILE"},
		{client.CertificateNameMismatch, "--server"},
		{client.CertificateExpired, "date and time"},
		{client.CertificateInvalid, "operator"},
	} {
		cause := &client.CertificateError{Problem: tc.problem, Err: errors.New("tls: failed to verify certificate")}
		err := plain(fmt.Errorf("project p: %w", cause))
		msg := err.Error()
		if !strings.Contains(msg, "certificate failed verification ("+tc.problem.String()+")") || !strings.Contains(msg, tc.want) {
			t.Errorf("%v: plain = %q, want the problem and %q", tc.problem, msg, tc.want)
		}
		if !errors.Is(err, client.ErrCertificate) {
			t.Errorf("%v: errors.Is(plain(err), ErrCertificate) = false", tc.problem)
		}
	}
}
