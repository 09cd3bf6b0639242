package check

import (
	"os"
	"path/filepath"
	"testing"

	"github.com/loadline/loadline/budget"
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
