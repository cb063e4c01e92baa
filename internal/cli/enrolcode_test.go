package cli

import (
	"path/filepath"
	"regexp"
	"strings"
	"testing"
)

// The code issue-code prints is five dashed groups of Crockford's base32,
// and enrols as typed on a tablet: lower case, without the dashes.
// issue-code --url prints tamp://enrol?server=HOST:PORT&code=CODE, which
// enroll --url takes in place of --server and --code.
func TestEnrolmentURL(t *testing.T) {
	addr, code := startServer(t)
	admin := filepath.Join(t.TempDir(), "admin.db")
	must(t, "enroll", "--store", admin, "--server", addr, "--plaintext", "--code", code)
	project := must(t, "admin", "--store", admin, "create-project", "--name", "Quillback Ridge haul road")
	user := must(t, "admin", "--store", admin, "add-member", "--project", project, "--new-user", "Oren Saltmarsh", "--role", "inspector")

	issued := must(t, "admin", "--store", admin, "issue-code", "--user", user)
	typed, expires, _ := strings.Cut(issued, "\t")
	if !regexp.MustCompile(`^[0-9A-HJKMNP-TV-Z]{5}(-[0-9A-HJKMNP-TV-Z]{5}){4}$`).MatchString(typed) || !strings.HasPrefix(expires, "expires ") {
		t.Fatalf("issue-code printed %q; want XXXXX-XXXXX-XXXXX-XXXXX-XXXXX<tab>expires TIME", issued)
	}
	typed = strings.ToLower(strings.ReplaceAll(typed, "-", ""))
	if out := must(t, "enroll", "--store", filepath.Join(t.TempDir(), "a.db"), "--server", addr, "--plaintext", "--code", typed); !strings.Contains(out, "enrolled device") {
		t.Errorf("enroll with the code typed as %q: %s", typed, out)
	}

	issued = must(t, "admin", "--store", admin, "issue-code", "--user", user, "--url")
	link, _, _ := strings.Cut(issued, "\t")
	if !regexp.MustCompile(`^tamp://enrol\?server=` + regexp.QuoteMeta(addr) + `&code=[0-9A-Z]{5}(-[0-9A-Z]{5}){4}$`).MatchString(link) {
		t.Fatalf("issue-code --url printed %q; want tamp://enrol?server=%s&code=CODE", issued, addr)
	}
	if out := must(t, "enroll", "--store", filepath.Join(t.TempDir(), "b.db"), "--plaintext", "--url", link); !strings.Contains(out, "enrolled device") || !strings.Contains(out, "project "+project) {
		t.Errorf("enroll --url: %s", out)
	}

	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"--url", "https://" + addr + "/?code=X"}, "--url"},
		{[]string{"--url", "tamp://enrol?server=" + addr}, "code"},
		{[]string{"--url", "tamp://enrol?code=ABCDE"}, "server"},
		{[]string{"--url", link, "--code", "ABCDE"}, "--code"},
	} {
		_, _, err := run(t, append([]string{"enroll", "--store", filepath.Join(t.TempDir(), "c.db"), "--plaintext"}, tc.args...)...)
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("enroll %v: %v; want an error naming %s", tc.args, err, tc.want)
		}
	}
}
