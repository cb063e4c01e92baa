package cli

import (
	"bytes"
	"encoding/json"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"testing"
)

var updateGolden = flag.Bool("update", false, "rewrite the golden files in testdata/")

// uuidPattern matches the ids a run makes afresh, whole or short (the last
// eight characters, as tamp shows a test's id).
var uuidPattern = regexp.MustCompile(`[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}|\b[0-9a-f]{8}\b`)

// stableIDs replaces each id by its order of first appearance, so that two
// runs of the same seeded day compare.
func stableIDs(b []byte) []byte {
	seen := map[string]string{}
	return uuidPattern.ReplaceAllFunc(b, func(id []byte) []byte {
		key := string(id[len(id)-8:]) // a whole id and its short form are one
		n, ok := seen[key]
		if !ok {
			n = fmt.Sprintf("<id %d>", len(seen)+1)
			seen[key] = n
		}
		return []byte(n)
	})
}

// The reports tamp demo --out writes are the commands' JSON in the report
// envelope: rounded at the methods' resolution, in the project's units,
// with the unit system named. Golden files hold the demo day's frequency,
// lots and reconciliation (ids replaced by their order of appearance);
// go test ./internal/cli -run TestReportJSONGolden -update rewrites them
// after a deliberate change, to be read in review.
func TestReportJSONGolden(t *testing.T) {
	dir := t.TempDir()
	if _, _, err := run(t, "demo", "--date", demoDate, "--out", dir); err != nil {
		t.Fatalf("tamp demo --out: %v", err)
	}
	for _, name := range []string{"frequency", "lots", "reconciliation"} {
		got, err := os.ReadFile(filepath.Join(dir, name+".json"))
		if err != nil {
			t.Fatal(err)
		}
		var env struct {
			Schema  string            `json:"schema"`
			Version int               `json:"version"`
			Report  string            `json:"report"`
			Data    []json.RawMessage `json:"data"`
		}
		if err := json.Unmarshal(got, &env); err != nil || env.Schema != "tamp.report" || env.Version != 2 || env.Report != name || len(env.Data) == 0 {
			t.Fatalf("%s.json: %v; envelope %q v%d %q with %d rows", name, err, env.Schema, env.Version, env.Report, len(env.Data))
		}
		for i, row := range env.Data {
			var r struct {
				Units string `json:"units"`
			}
			if err := json.Unmarshal(row, &r); err != nil || r.Units != "us" {
				t.Errorf("%s.json row %d: units %q (%v), want the project's, us", name, i, r.Units, err)
			}
		}
		got = stableIDs(got)
		golden := filepath.Join("testdata", "report_"+name+".golden.json")
		if *updateGolden {
			if err := os.MkdirAll("testdata", 0o755); err != nil {
				t.Fatal(err)
			}
			if err := os.WriteFile(golden, got, 0o644); err != nil {
				t.Fatal(err)
			}
			continue
		}
		want, err := os.ReadFile(golden)
		if err != nil {
			t.Fatalf("%v (run with -update to write it)", err)
		}
		if !bytes.Equal(got, want) {
			t.Errorf("%s.json differs from %s; if the change is meant, rerun with -update and review the diff:\n%s", name, golden, got)
		}
	}
}
