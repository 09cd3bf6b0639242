package main

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestDemoSignoff writes the demo's sign-off report and reads it back: the
// invented scenario has three earlier releases, and at main the bird
// detector sits at 448 KiB of ram, past 90 % of its 460.8 KiB limit (a
// warning), with the spotter's waiver 27 days from expiry (the baseline is
// dated 2026-11-03, the waiver runs to 2026-11-30).
func TestDemoSignoff(t *testing.T) {
	dir := t.TempDir()
	page := filepath.Join(dir, "signoff.html")
	var out, errb bytes.Buffer
	if code := run([]string{"demo", "--signoff", page}, &out, &errb); code != exitOK {
		t.Fatalf("demo exit %d: %s", code, errb.String())
	}
	html, err := os.ReadFile(page)
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"Release sign-off: main @", "v1.0.0, v1.1.0, v1.2.0", "porch-cam", "kitchen-timer",
		"models/porch-cam/birdspot.onnx", "expires in 27 days", "WARN"} {
		if !bytes.Contains(html, []byte(want)) {
			t.Errorf("the demo's sign-off lacks %q", want)
		}
	}
	if !strings.Contains(out.String(), page) {
		t.Errorf("the demo does not say where the report is:\n%s", out.String())
	}
}

// TestSignoffCommand runs loadline signoff in the demo's repository: JSON
// on stdout, exit 0 for a warning verdict and 1 with --fail-on warn, and
// usage errors exit 2.
func TestSignoffCommand(t *testing.T) {
	var out, errb bytes.Buffer
	if code := run([]string{"demo", "--keep"}, &out, &errb); code != exitOK {
		t.Fatalf("demo exit %d: %s", code, errb.String())
	}
	repo := strings.TrimSpace(strings.TrimPrefix(strings.SplitN(errb.String(), "\n", 2)[0], "demo repository:"))
	defer os.RemoveAll(repo)
	t.Chdir(repo)
	out.Reset()
	errb.Reset()
	if code := run([]string{"signoff", "--rev", "main", "--format", "json"}, &out, &errb); code != exitOK {
		t.Fatalf("signoff exit %d: %s", code, errb.String())
	}
	var s struct {
		Schema   string
		Verdict  string
		Releases []struct{ Tag string }
	}
	if err := json.Unmarshal(out.Bytes(), &s); err != nil {
		t.Fatalf("%v\n%s", err, out.String())
	}
	if s.Schema != "loadline.signoff/v1" || s.Verdict != "warn" || len(s.Releases) != 3 {
		t.Errorf("schema %q verdict %q releases %v", s.Schema, s.Verdict, s.Releases)
	}
	if code := run([]string{"signoff", "--rev", "main", "--format", "json", "--fail-on", "warn"}, &out, &errb); code != exitBudget {
		t.Errorf("--fail-on warn: exit %d, want %d", code, exitBudget)
	}
	for _, args := range [][]string{
		{"signoff", "--format", "pdf"},
		{"signoff", "--since", "v1.0.0", "--releases", "v*"},
		{"signoff", "--last", "-1"},
		{"signoff", "--releases", "[v"},
	} {
		errb.Reset()
		if code := run(args, &out, &errb); code != exitUsage {
			t.Errorf("%v: exit %d, want %d (%s)", args, code, exitUsage, errb.String())
		}
	}
	if code := run([]string{"signoff", "--rev", "no-such-rev"}, &out, &errb); code != exitEnviron {
		t.Errorf("unknown revision: exit %d, want %d", code, exitEnviron)
	}
}
