package main

import (
	"bytes"
	"errors"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// TestBinary builds the real binary and checks its exit status and streams:
// results on stdout, errors on stderr with a non-zero status.
func TestBinary(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary")
	}
	bin := filepath.Join(t.TempDir(), "tamp")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	var stdout, stderr bytes.Buffer
	cmd := exec.Command(bin, "calc", "test", "--wet-density", "125.0", "--moisture", "12.0", "--json")
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("good input: %v\n%s", err, stderr.String())
	}
	if !strings.Contains(stdout.String(), `"dry_density": 111.6`) {
		t.Errorf("stdout = %s, want dry_density 111.6 (A1)", stdout.String())
	}
	stdout.Reset()
	stderr.Reset()
	cmd = exec.Command(bin, "calc", "test", "--wet-density", "-125.0", "--moisture", "12.0", "--json")
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	err := cmd.Run()
	var exit *exec.ExitError
	if !errors.As(err, &exit) || exit.ExitCode() == 0 {
		t.Fatalf("bad input: err = %v, want a non-zero exit", err)
	}
	if stdout.Len() != 0 {
		t.Errorf("stdout on error = %q, want empty", stdout.String())
	}
	if !strings.Contains(stderr.String(), "--wet-density -125: must be greater than zero") {
		t.Errorf("stderr = %q", stderr.String())
	}
}
