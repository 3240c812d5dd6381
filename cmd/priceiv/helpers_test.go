package main

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

const refDir = "../../../shared/reference-data/"

// run executes the command tree with args and returns standard output,
// standard error and the error, in the manner of cobra's own
// executeCommandC helper.
func run(t *testing.T, args ...string) (string, string, error) {
	t.Helper()
	root := newRootCmd()
	var out, errb bytes.Buffer
	root.SetOut(&out)
	root.SetErr(&errb)
	root.SetArgs(args)
	_, err := root.ExecuteC()
	return out.String(), errb.String(), err
}

// runJSON runs a command with --format json and decodes its output.
func runJSON(t *testing.T, args ...string) map[string]any {
	t.Helper()
	out, _, err := run(t, append(args, "--format", "json")...)
	if err != nil {
		t.Fatalf("priceiv %s: %v", strings.Join(args, " "), err)
	}
	var m map[string]any
	if err := json.Unmarshal([]byte(out), &m); err != nil {
		t.Fatalf("output is not JSON: %v\n%s", err, out)
	}
	return m
}

// writeFile writes a test input into a temporary folder.
func writeFile(t *testing.T, name, content string) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// coef finds a coefficient by name in decoded JSON output.
func coef(t *testing.T, m map[string]any, name string) (est, se float64) {
	t.Helper()
	for _, c := range m["coefficients"].([]any) {
		c := c.(map[string]any)
		if c["name"] == name {
			return c["estimate"].(float64), c["std_error"].(float64)
		}
	}
	t.Fatalf("no coefficient %q in output", name)
	return 0, 0
}
