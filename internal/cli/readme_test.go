package cli

import (
	"bufio"
	"bytes"
	"context"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"tamp/internal/daemon"
)

// The README's walk-throughs are code blocks of ```sh that follow a line
// "<!-- walk-through -->". The test below runs every line of them, in
// order, in an empty directory: tampd in-process (init, and serve in the
// background), tamp in-process through Run. Nothing else is set up, so
// every line needs only what earlier lines made.
const (
	walkMarker = "<!-- walk-through -->"
	// readmeAddr is the server address the README's commands use; the test
	// serves on a free loopback port and dials that instead.
	readmeAddr = "127.0.0.1:7420"
)

// readmeLine is one command of the README, with the number of its first
// line in README.md.
type readmeLine struct {
	n    int
	text string
}

// walkThroughs returns the commands of the README's walk-through blocks,
// continuation lines joined and blank lines dropped.
func walkThroughs(t *testing.T, readme string) []readmeLine {
	t.Helper()
	var lines []readmeLine
	marked, in := false, false
	var cont *readmeLine
	for i, l := range strings.Split(readme, "\n") {
		n := i + 1
		switch {
		case !in && strings.TrimSpace(l) == walkMarker:
			marked = true
		case !in && marked && strings.HasPrefix(l, "```"):
			if l != "```sh" {
				t.Fatalf("README.md:%d: a walk-through block must be ```sh, not %s", n, l)
			}
			in, marked = true, false
		case !in && marked && strings.TrimSpace(l) != "":
			t.Fatalf("README.md:%d: %s must stand right before a ```sh block", n-1, walkMarker)
		case in && strings.HasPrefix(l, "```"):
			if cont != nil {
				t.Fatalf("README.md:%d: the block ends on a continued line", cont.n)
			}
			in = false
		case in:
			if cont != nil {
				cont.text += " " + strings.TrimSpace(l)
			} else if strings.TrimSpace(l) != "" {
				cont = &readmeLine{n: n, text: strings.TrimSpace(l)}
			}
			if cont != nil && strings.HasSuffix(cont.text, "\\") {
				cont.text = strings.TrimSpace(strings.TrimSuffix(cont.text, "\\"))
				continue
			}
			if cont != nil {
				lines = append(lines, *cont)
				cont = nil
			}
		}
	}
	if in {
		t.Fatal("README.md: a walk-through block is not closed")
	}
	return lines
}

// shell runs the README's lines: a very small subset of sh, enough for
// the walk-throughs and strict about everything else.
type shell struct {
	t    *testing.T
	vars map[string]string
	addr string // the test server's address, once tampd serve ran
	stop func() // stops the background tampd
}

var (
	assignRe  = regexp.MustCompile(`^([A-Z_][A-Z0-9_]*)=\$\((.*)\)$`)
	plainSetR = regexp.MustCompile(`^(export\s+)?([A-Z_][A-Z0-9_]*)=(.*)$`)
	varRe     = regexp.MustCompile(`\$\{?([A-Za-z_][A-Za-z0-9_]*)\}?`)
)

// words splits a command line into words as sh would for the forms the
// README uses: single and double quotes, $VAR and ${VAR} expanded outside
// single quotes, a # outside quotes starting a comment.
func (sh *shell) words(line string) ([]string, error) {
	var words []string
	var cur strings.Builder
	have := false
	expand := func(s string) (string, error) {
		var bad error
		out := varRe.ReplaceAllStringFunc(s, func(m string) string {
			name := varRe.FindStringSubmatch(m)[1]
			v, ok := sh.vars[name]
			if !ok {
				bad = fmt.Errorf("$%s is not set by an earlier line", name)
			}
			return v
		})
		return out, bad
	}
	for i := 0; i < len(line); i++ {
		c := line[i]
		switch {
		case c == '#' && !have:
			return words, nil
		case c == ' ' || c == '\t':
			if have {
				words = append(words, cur.String())
				cur.Reset()
				have = false
			}
		case c == '\'':
			j := strings.IndexByte(line[i+1:], '\'')
			if j < 0 {
				return nil, fmt.Errorf("unclosed '")
			}
			cur.WriteString(line[i+1 : i+1+j])
			i += j + 1
			have = true
		case c == '"':
			j := strings.IndexByte(line[i+1:], '"')
			if j < 0 {
				return nil, fmt.Errorf("unclosed \"")
			}
			v, err := expand(line[i+1 : i+1+j])
			if err != nil {
				return nil, err
			}
			cur.WriteString(v)
			i += j + 1
			have = true
		case c == '$':
			m := varRe.FindString(line[i:])
			if m == "" || strings.HasPrefix(line[i:], "$(") {
				return nil, fmt.Errorf("$( ) is only for VAR=$(command) lines")
			}
			v, err := expand(m)
			if err != nil {
				return nil, err
			}
			cur.WriteString(v)
			i += len(m) - 1
			have = true
		case strings.ContainsRune("|;<>`()&*?[", rune(c)):
			return nil, fmt.Errorf("%q is more shell than the README test runs", c)
		default:
			cur.WriteByte(c)
			have = true
		}
	}
	if have {
		words = append(words, cur.String())
	}
	return words, nil
}

// uncomment drops a comment: a # that starts a word outside quotes, to the
// end of the line.
func uncomment(line string) string {
	var quote byte
	for i := 0; i < len(line); i++ {
		switch c := line[i]; {
		case quote != 0:
			if c == quote {
				quote = 0
			}
		case c == '\'' || c == '"':
			quote = c
		case c == '#' && (i == 0 || line[i-1] == ' ' || line[i-1] == '\t'):
			return strings.TrimSpace(line[:i])
		}
	}
	return line
}

// run runs one line and returns what it printed.
func (sh *shell) run(line string) (string, error) {
	line = uncomment(line)
	if m := assignRe.FindStringSubmatch(line); m != nil {
		out, err := sh.command(m[2])
		if err != nil {
			return out, err
		}
		sh.vars[m[1]] = strings.TrimSpace(out)
		return out, nil
	}
	if m := plainSetR.FindStringSubmatch(line); m != nil {
		ws, err := sh.words(m[3])
		if err != nil || len(ws) > 1 {
			return "", fmt.Errorf("%s: one word after =, please (%v)", m[2], err)
		}
		v := strings.Join(ws, "")
		sh.vars[m[2]] = v
		if m[1] != "" {
			sh.t.Setenv(m[2], v)
		}
		return "", nil
	}
	return sh.command(line)
}

// command runs a tamp or tampd command, the one tampd serve in the
// background, sleep (nothing to wait for here: serve has started before
// the next line runs) and kill %1 (stop it).
func (sh *shell) command(line string) (string, error) {
	background := false
	if rest, ok := strings.CutSuffix(line, "&"); ok && !strings.HasSuffix(rest, "&") {
		line, background = strings.TrimSpace(rest), true
	}
	logFile := ""
	if i := strings.Index(line, " 2>"); i >= 0 {
		logFile = strings.TrimSpace(line[i+3:])
		line = line[:i]
		if strings.ContainsAny(logFile, " &|") {
			return "", fmt.Errorf("2>%s: one file name after 2>", logFile)
		}
	}
	if line == "kill %1" {
		if sh.stop == nil {
			return "", fmt.Errorf("kill %%1: nothing runs in the background")
		}
		sh.stop()
		sh.stop = nil
		return "", nil
	}
	ws, err := sh.words(line)
	if err != nil {
		return "", err
	}
	if len(ws) == 0 {
		return "", nil
	}
	if sh.addr != "" {
		for i, w := range ws {
			ws[i] = strings.ReplaceAll(w, readmeAddr, sh.addr)
		}
	}
	var out, errOut bytes.Buffer
	switch {
	case ws[0] == "sleep" && len(ws) == 2:
		return "", nil
	case ws[0] == "tamp" && !background && logFile == "":
		err = Run(context.Background(), ws[1:], &out, &errOut)
	case ws[0] == "tampd" && len(ws) > 1 && ws[1] == "serve":
		if !background {
			return "", fmt.Errorf("tampd serve runs until stopped: end the line with & to run it in the background")
		}
		return sh.serve(ws[1:], logFile)
	case ws[0] == "tampd" && !background && logFile == "":
		err = daemon.Run(context.Background(), ws[1:], &out, &errOut)
	default:
		return "", fmt.Errorf("the README test runs tamp and tampd commands only, and only tampd serve in the background")
	}
	return out.String() + errOut.String(), err
}

// serve starts tampd serve in the background on a free loopback port in
// place of the README's, and waits until it listens.
func (sh *shell) serve(args []string, logFile string) (string, error) {
	if sh.stop != nil {
		return "", fmt.Errorf("tampd serve runs already")
	}
	for i, a := range args {
		if a == readmeAddr {
			args[i] = "127.0.0.1:0"
		}
	}
	logs := io.Discard
	if logFile != "" {
		f, err := os.Create(logFile)
		if err != nil {
			return "", err
		}
		sh.t.Cleanup(func() { f.Close() })
		logs = f
	}
	ctx, cancel := context.WithCancel(context.Background())
	r, w := io.Pipe()
	done := make(chan error, 1)
	go func() {
		done <- daemon.Run(ctx, args, w, logs)
		w.Close()
	}()
	line, err := bufio.NewReader(r).ReadString('\n')
	if err != nil {
		cancel()
		return line, fmt.Errorf("tampd serve did not start: %v", <-done)
	}
	go io.Copy(io.Discard, r)
	addr, ok := strings.CutPrefix(strings.TrimSpace(line), "tampd: listening on ")
	if !ok {
		cancel()
		return line, fmt.Errorf("tampd serve printed %q, not the address it listens on", line)
	}
	sh.addr = addr
	sh.stop = func() {
		cancel()
		select {
		case err := <-done:
			if err != nil {
				sh.t.Errorf("tampd serve: %v", err)
			}
		case <-time.After(30 * time.Second):
			sh.t.Error("tampd did not stop")
		}
	}
	return line, nil
}

// TestReadmeWalkThroughs runs every command of the README's walk-throughs,
// extracted from README.md, against a real tampd started by the README's
// own lines, so the README cannot drift from what works.
func TestReadmeWalkThroughs(t *testing.T) {
	readme, err := os.ReadFile(filepath.Join("..", "..", "README.md"))
	if err != nil {
		t.Fatal(err)
	}
	lines := walkThroughs(t, string(readme))
	if len(lines) < 20 {
		t.Fatalf("README.md has %d walk-through commands; the walk-throughs are the blocks after %s", len(lines), walkMarker)
	}
	dir := t.TempDir()
	t.Chdir(dir)
	t.Setenv("HOME", dir) // a line that forgets --store or TAMP_STORE writes here, not to the user's config
	t.Setenv("XDG_CONFIG_HOME", filepath.Join(dir, ".config"))
	t.Setenv("TAMP_STORE", "")
	sh := &shell{t: t, vars: map[string]string{}}
	t.Cleanup(func() {
		if sh.stop != nil {
			sh.stop()
		}
	})
	for _, l := range lines {
		out, err := sh.run(l.text)
		if err != nil {
			t.Fatalf("README.md:%d: %s\n%v\n%s", l.n, l.text, err, out)
		}
		if testing.Verbose() {
			t.Logf("README.md:%d: %s\n%s", l.n, l.text, out)
		}
	}
	if sh.stop != nil {
		t.Error("the walk-throughs leave tampd running: end them with kill %1")
	}
}

// TestReadmeQuickStart checks that the Quick start is one block of exactly
// two commands: the demo and the tests.
func TestReadmeQuickStart(t *testing.T) {
	readme, err := os.ReadFile(filepath.Join("..", "..", "README.md"))
	if err != nil {
		t.Fatal(err)
	}
	_, after, ok := strings.Cut(string(readme), "\n## Quick start\n")
	if !ok {
		t.Fatal("README.md has no ## Quick start")
	}
	section, _, _ := strings.Cut(after, "\n## ")
	_, block, ok := strings.Cut(section, "```sh\n")
	block, _, closed := strings.Cut(block, "```")
	if !ok || !closed || strings.Count(section, "```") != 2 {
		t.Fatalf("## Quick start must hold one ```sh block:\n%s", section)
	}
	var cmds []string
	for _, l := range strings.Split(block, "\n") {
		if c, _, _ := strings.Cut(l, "#"); strings.TrimSpace(c) != "" {
			cmds = append(cmds, strings.Join(strings.Fields(c), " "))
		}
	}
	want := []string{"go run ./cmd/tamp demo", "go test ./..."}
	if fmt.Sprint(cmds) != fmt.Sprint(want) {
		t.Errorf("Quick start commands %q, want %q", cmds, want)
	}
}

// The README test's shell refuses what it cannot run faithfully, so a
// line it skips or half-runs cannot pass for a line that works.
func TestReadmeShellIsStrict(t *testing.T) {
	t.Chdir(t.TempDir())
	sh := &shell{t: t, vars: map[string]string{"CODE": "x"}}
	for _, line := range []string{
		"rm -rf tamp-data",
		"tamp spec list | head -1",
		"tamp enroll --code \"$UNSET\"",
		"tamp no-such-command",
		"tamp calc test --wet-density 125.0 --moisture 12.0; tamp status",
		"echo $(tamp calc curve)",
		"tampd serve --data d",
		"kill %1",
	} {
		if out, err := sh.run(line); err == nil {
			t.Errorf("%s: ran, want a refusal\n%s", line, out)
		}
	}
	out, err := sh.run(`WET="125.0"`)
	if err != nil {
		t.Fatal(err)
	}
	if out, err = sh.run("tamp calc test --wet-density $WET --moisture 12.0   # A1: dry 111.6 pcf"); err != nil || !strings.Contains(out, "111.6 pcf") {
		t.Errorf("tamp calc test: %v\n%s", err, out)
	}
	got := walkThroughs(t, "text\n"+walkMarker+"\n```sh\n# a comment\ntamp calc test \\\n    --wet-density 125.0 --moisture 12.0\n\nA=$(tamp x)\n```\n```sh\nnot run\n```\n")
	want := []readmeLine{{4, "# a comment"}, {5, "tamp calc test --wet-density 125.0 --moisture 12.0"}, {8, "A=$(tamp x)"}}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Errorf("walkThroughs = %v, want %v", got, want)
	}
}
