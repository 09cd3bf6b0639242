package check

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/internal/gittest"
)

// TestStarterBudgetGlobMatchesItsFolder: a folder whose name holds glob
// characters gets a rule that matches the models in it, not a pattern
// that matches some other folder.
func TestStarterBudgetGlobMatchesItsFolder(t *testing.T) {
	dir := t.TempDir()
	for _, p := range []string{"models/cam[v2]/a.onnx", "models/kws{a,b}/b.onnx"} {
		full := filepath.Join(dir, filepath.FromSlash(p))
		if err := os.MkdirAll(filepath.Dir(full), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(full, smallModel(t, 8), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	text, _, err := StarterBudget(InitOptions{Dir: dir, Headroom: 0.1})
	if err != nil {
		t.Fatal(err)
	}
	f, err := budget.Parse("loadline.yaml", []byte(text))
	if err != nil {
		t.Fatalf("%v\n%s", err, text)
	}
	for _, p := range []string{"models/cam[v2]/a.onnx", "models/kws{a,b}/b.onnx"} {
		if len(f.Match(p)) != 1 {
			t.Errorf("%s: matched by %d rules, want its folder's one:\n%s", p, len(f.Match(p)), text)
		}
	}
	// Read as patterns, "cam[v2]" matched camv and cam2, "kws{a,b}" kwsa.
	for _, p := range []string{"models/camv/a.onnx", "models/kwsa/b.onnx"} {
		if n := len(f.Match(p)); n != 0 {
			t.Errorf("%s: matched by %d rules of other folders", p, n)
		}
	}
}

// TestStarterBudgetCoversEveryModelOnce: a folder whose models need
// different dims gets a rule per model, a file that cannot be read a
// commented-out rule with the reason, and every measurable model is
// matched by exactly one rule.
func TestStarterBudgetCoversEveryModelOnce(t *testing.T) {
	dir := t.TempDir()
	files := map[string][]byte{"mixed/a.onnx": smallModel(t, 8), "mixed/broken.onnx": []byte("not a model")}
	for p, d := range gittest.TeamModels(t) {
		if strings.HasPrefix(p, "models/kws/") {
			files["mixed/spot.onnx"] = d
		}
	}
	for p, d := range files {
		full := filepath.Join(dir, filepath.FromSlash(p))
		if err := os.MkdirAll(filepath.Dir(full), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(full, d, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	text, _, err := StarterBudget(InitOptions{Dir: dir, Headroom: 0.1})
	if err != nil {
		t.Fatal(err)
	}
	f, err := budget.Parse("loadline.yaml", []byte(text))
	if err != nil {
		t.Fatalf("%v\n%s", err, text)
	}
	for _, p := range []string{"mixed/a.onnx", "mixed/spot.onnx"} {
		if n := len(f.Match(p)); n != 1 {
			t.Errorf("%s: matched by %d rules, want 1:\n%s", p, n, text)
		}
	}
	if n := len(f.Match("mixed/broken.onnx")); n != 0 {
		t.Errorf("the unreadable model has a live rule:\n%s", text)
	}
	if !strings.Contains(text, "# broken.onnx could not be measured:") || !strings.Contains(text, `# - path: "mixed/broken.onnx"`) {
		t.Errorf("no commented-out rule for the unreadable model:\n%s", text)
	}
	if d, _ := f.Dims("mixed/spot.onnx"); d["N"] != 1 || d["frames"] != 1 || len(d) != 2 {
		t.Errorf("spot dims %v, want its own N and frames", d)
	}
	if d, _ := f.Dims("mixed/a.onnx"); len(d) != 0 {
		t.Errorf("a.onnx dims %v, want none", d)
	}
}

// TestStarterBudgetFileNameCannotWriteKeys: model names are listed in a
// comment of the starter budget; a line break in one used to end the
// comment and write what followed as keys of the file.
func TestStarterBudgetFileNameCannotWriteKeys(t *testing.T) {
	dir := t.TempDir()
	for _, p := range []string{"models/ok.onnx", "models/x\nwaivers: [{path: \"**\", metric: ram, until: 2099-01-01, reason: x}]\n#.onnx"} {
		full := filepath.Join(dir, filepath.FromSlash(p))
		if err := os.MkdirAll(filepath.Dir(full), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(full, smallModel(t, 8), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	text, _, err := StarterBudget(InitOptions{Dir: dir, Headroom: 0.1})
	if err != nil {
		t.Fatal(err)
	}
	f, err := budget.Parse("loadline.yaml", []byte(text))
	if err != nil {
		t.Fatalf("%v\n%s", err, text)
	}
	if len(f.Waivers) != 0 || strings.Contains(text, "\nwaivers: [{") {
		t.Fatalf("a file name wrote a waiver into the starter budget:\n%s", text)
	}
}

// TestStarterBudgetTFLite: init finds TFLite models beside ONNX ones, and
// the starter budget it writes passes them.
func TestStarterBudgetTFLite(t *testing.T) {
	dir := t.TempDir()
	files := map[string][]byte{"models/kws/kws.tflite": kwsModel(t, 16), "models/cam/a.onnx": smallModel(t, 8)}
	for p, data := range files {
		full := filepath.Join(dir, filepath.FromSlash(p))
		if err := os.MkdirAll(filepath.Dir(full), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(full, data, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	text, _, err := StarterBudget(InitOptions{Dir: dir, Headroom: 0.1})
	if err != nil {
		t.Fatal(err)
	}
	f, err := budget.Parse("loadline.yaml", []byte(text))
	if err != nil {
		t.Fatalf("%v\n%s", err, text)
	}
	if len(f.Match("models/kws/kws.tflite")) != 1 || !strings.Contains(text, "models/kws/*.tflite") {
		t.Errorf("the TFLite model has no rule of its own folder:\n%s", text)
	}
}
