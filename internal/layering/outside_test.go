package layering

import (
	"bufio"
	"os"
	"os/exec"
	"path/filepath"
	"runtime/debug"
	"strings"
	"testing"
	"time"
)

// TestOutsideModule tries tamp as an app builder does: from a module of its
// own outside this one, which requires tamp and replaces it by this
// checkout. Its test (testdata/fieldapp/fieldapp_test.go) imports only the
// public packages, grpc and the standard library, runs a crew's day against
// a tampd in its process, and must compile and pass under go test ./...;
// and a package of the same module that imports one of tamp's internal
// packages must be refused by the go command.
func TestOutsideModule(t *testing.T) {
	if testing.Short() {
		t.Skip("builds and tests a module outside the repository; run without -short")
	}
	goCmd, err := exec.LookPath("go")
	if err != nil {
		t.Skip("go command not found")
	}
	root := checkoutRoot(t)
	dir := t.TempDir()
	goMod := "module example.com/fieldapp\n\ngo " + goVersion(t, root) + "\n\nrequire tamp v0.0.0\n\nreplace tamp => " + root + "\n"
	write(t, filepath.Join(dir, "go.mod"), goMod)
	sum, err := os.ReadFile(filepath.Join(root, "go.sum"))
	if err != nil {
		t.Fatal(err)
	}
	write(t, filepath.Join(dir, "go.sum"), string(sum))
	app, err := os.ReadFile(filepath.Join("testdata", "fieldapp", "fieldapp_test.go"))
	if err != nil {
		t.Fatal(err)
	}
	write(t, filepath.Join(dir, "fieldapp_test.go"), string(app))
	// The package that reaches inside builds only with its tag, so that
	// go test ./... sees the public packages alone.
	write(t, filepath.Join(dir, "reach", "reach.go"), `//go:build reach

// Package reach does what no app outside tamp may do: import one of its
// internal packages.
package reach

import "tamp/internal/ledger"

var Genesis = ledger.Genesis("p")
`)

	// -mod=mod lets the go command complete go.mod (grpc, a direct import)
	// from the module graph; the module cache, proxy and build cache are
	// the caller's, so a warm cache builds it without the network.
	env := append(os.Environ(), "GOFLAGS=-mod=mod -buildvcs=false", "GOWORK=off")
	run := func(args ...string) (string, error) {
		cmd := exec.Command(goCmd, args...)
		cmd.Dir, cmd.Env = dir, env
		out, err := cmd.CombinedOutput()
		return string(out), err
	}

	t.Run("public packages", func(t *testing.T) {
		args := []string{"test", "-count=1", "-v"}
		if raceEnabled() { // share the build cache of the race-built run around it
			args = append(args, "-race")
		}
		start := time.Now()
		out, err := run(append(args, "./...")...)
		if err != nil {
			t.Fatalf("go test ./... in the outside module (%s): %v\n%s", dir, err, out)
		}
		if !strings.Contains(out, "--- PASS: TestFieldDay") || !strings.Contains(out, "ok  \texample.com/fieldapp") {
			t.Fatalf("go test ./... in the outside module did not run TestFieldDay:\n%s", out)
		}
		t.Logf("go test ./... in the outside module took %v", time.Since(start).Round(time.Millisecond))
	})

	t.Run("internal package refused", func(t *testing.T) {
		out, err := run("build", "-tags", "reach", "./reach")
		if err == nil {
			t.Fatalf("the go command built a package outside tamp that imports tamp/internal/ledger:\n%s", out)
		}
		if !strings.Contains(out, "use of internal package tamp/internal/ledger not allowed") {
			t.Fatalf("building a package outside tamp that imports tamp/internal/ledger failed otherwise than by the internal rule: %v\n%s", err, out)
		}
	})
}

// checkoutRoot returns the directory of the tamp module holding the test's
// working directory.
func checkoutRoot(t *testing.T) string {
	t.Helper()
	dir, err := os.Getwd()
	if err != nil {
		t.Fatal(err)
	}
	for {
		if b, err := os.ReadFile(filepath.Join(dir, "go.mod")); err == nil && modulePath(string(b)) == "tamp" {
			return dir
		}
		up := filepath.Dir(dir)
		if up == dir {
			t.Fatal("no go.mod of module tamp above the test's working directory")
		}
		dir = up
	}
}

func modulePath(goMod string) string {
	sc := bufio.NewScanner(strings.NewReader(goMod))
	for sc.Scan() {
		if p, ok := strings.CutPrefix(strings.TrimSpace(sc.Text()), "module "); ok {
			return strings.Trim(strings.TrimSpace(p), `"`)
		}
	}
	return ""
}

// goVersion returns the go line of the checkout's go.mod, which the
// outside module must not undercut.
func goVersion(t *testing.T, root string) string {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(root, "go.mod"))
	if err != nil {
		t.Fatal(err)
	}
	sc := bufio.NewScanner(strings.NewReader(string(b)))
	for sc.Scan() {
		if v, ok := strings.CutPrefix(sc.Text(), "go "); ok {
			return strings.TrimSpace(v)
		}
	}
	t.Fatal("the checkout's go.mod has no go line")
	return ""
}

// raceEnabled reports whether this test binary was built with -race.
func raceEnabled() bool {
	bi, ok := debug.ReadBuildInfo()
	if !ok {
		return false
	}
	for _, s := range bi.Settings {
		if s.Key == "-race" {
			return s.Value == "true"
		}
	}
	return false
}

func write(t *testing.T, path, content string) {
	t.Helper()
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, []byte(content), 0o644); err != nil {
		t.Fatal(err)
	}
}
