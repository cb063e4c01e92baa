package mobile_test

import (
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"
)

var bound struct {
	once sync.Once
	dir  string
	err  error
	out  []byte
}

// gobind runs the pinned gobind over this package for Go, Java and
// Objective-C, once for the package's tests, and returns the output
// directory.
func gobind(t *testing.T) string {
	t.Helper()
	if testing.Short() {
		t.Skip("gobind takes a while; run without -short")
	}
	bound.once.Do(func() {
		if bound.dir, bound.err = os.MkdirTemp("", "tamp-gobind-"); bound.err != nil {
			return
		}
		cmd := exec.Command("go", "tool", "gobind", "-lang=go,java,objc", "-outdir", bound.dir, "tamp/client/mobile")
		bound.out, bound.err = cmd.CombinedOutput()
	})
	if bound.err != nil {
		t.Fatalf("gobind: %v\n%s", bound.err, bound.out)
	}
	return bound.dir
}

func TestMain(m *testing.M) {
	code := m.Run()
	if bound.dir != "" {
		os.RemoveAll(bound.dir)
	}
	os.Exit(code)
}

// Every exported member of the facade binds: gobind's output holds no
// "skipped" comment, in any language.
func TestGobindSkipsNothing(t *testing.T) {
	out := gobind(t)
	var files int
	err := filepath.WalkDir(out, func(path string, d os.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		files++
		b, err := os.ReadFile(path)
		if err != nil {
			return err
		}
		for i, line := range strings.Split(string(b), "\n") {
			if strings.Contains(strings.ToLower(line), "skipped") {
				t.Errorf("%s:%d: %s", strings.TrimPrefix(path, out), i+1, strings.TrimSpace(line))
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"java/mobile/Mobile.java", "java/mobile/Store.java", "src/gobind/Mobile.objc.h"} {
		if _, err := os.Stat(filepath.Join(out, want)); err != nil {
			t.Errorf("gobind wrote no %s: %v", want, err)
		}
	}
	if files == 0 {
		t.Fatal("gobind wrote nothing")
	}
}

// The generated Java compiles with javac: the bindings, gobind's copy of
// golang.org/x/mobile's support classes (go.Seq), and a stub of
// android.content.Context.
func TestGeneratedJavaCompiles(t *testing.T) {
	javac, err := exec.LookPath("javac")
	if err != nil {
		if os.Getenv("TAMP_CI") != "" {
			t.Fatal("javac is missing under CI: .ci/run installs Debian's default-jdk-headless")
		}
		t.Skip("javac is not installed: install a JDK (Debian: apt-get install default-jdk-headless) and run go test ./client/mobile")
	}
	out := gobind(t)
	var sources []string
	for _, dir := range []string{filepath.Join(out, "java", "go"), filepath.Join(out, "java", "mobile")} {
		m, _ := filepath.Glob(filepath.Join(dir, "*.java"))
		sources = append(sources, m...)
	}
	if len(sources) == 0 {
		t.Fatal("gobind wrote no Java")
	}
	classes := t.TempDir()
	args := append([]string{"-d", classes, "-Xlint:none", filepath.Join("testdata", "android", "content", "Context.java")}, sources...)
	if b, err := exec.Command(javac, args...).CombinedOutput(); err != nil {
		t.Fatalf("javac: %v\n%s", err, b)
	}
	for _, want := range []string{"mobile/Store.class", "mobile/Mobile.class"} {
		if _, err := os.Stat(filepath.Join(classes, want)); err != nil {
			t.Errorf("javac wrote no %s: %v", want, err)
		}
	}
}
