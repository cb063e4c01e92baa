// Package layering holds the tests of the module's shape: the pure
// arithmetic packages import no storage, transport or generated code, so
// the numbers a device shows are computed the same way everywhere; no
// exported identifier of a public package names a type of an internal one;
// and a module outside this one can do a crew's day through the public
// packages alone.
package layering

import (
	"os/exec"
	"strings"
	"testing"
)

// pure are the packages that must stay free of storage and transport.
var pure = []string{"tamp/internal/soil", "tamp/internal/qc", "tamp/internal/earthwork", "tamp/internal/valid"}

// allowed is everything outside the standard library a pure package may use.
var allowed = []string{"gonum.org/v1/gonum/"}

// forbidden standard-library packages: storage and transport.
var forbidden = []string{"database/sql", "net", "net/http", "os/exec", "google.golang.org/", "modernc.org/"}

func TestPurePackagesImportNoStorageOrTransport(t *testing.T) {
	if _, err := exec.LookPath("go"); err != nil {
		t.Skip("go command not found")
	}
	for _, pkg := range pure {
		out, err := exec.Command("go", "list", "-deps", "-f", "{{if not .Standard}}+{{end}}{{.ImportPath}}", pkg).CombinedOutput()
		if err != nil {
			t.Fatalf("go list %s: %v\n%s", pkg, err, out)
		}
		for _, line := range strings.Fields(string(out)) {
			dep, nonStd := strings.CutPrefix(line, "+")
			for _, f := range forbidden {
				if dep == f || strings.HasPrefix(dep, f) && strings.HasSuffix(f, "/") {
					t.Errorf("%s imports %s (storage or transport)", pkg, dep)
				}
			}
			if !nonStd || dep == pkg {
				continue
			}
			if strings.HasPrefix(dep, "tamp/") {
				if !isPure(dep) {
					t.Errorf("%s imports %s, which is not a pure package", pkg, dep)
				}
				continue
			}
			ok := false
			for _, a := range allowed {
				ok = ok || strings.HasPrefix(dep, a)
			}
			if !ok {
				t.Errorf("%s imports %s, outside the standard library and the allowed numeric library", pkg, dep)
			}
		}
	}
}

func isPure(p string) bool {
	for _, q := range pure {
		if p == q {
			return true
		}
	}
	return false
}
