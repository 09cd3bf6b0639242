// Package corpus locates ONNX's own backend test suite, the models and
// tensors of Debian's libonnx-testdata package, for tests that check
// loadline against the outside world, and the other outside programs tests
// run (git, git-lfs, python3-onnx): each is skipped with a message when
// absent, or failed when LOADLINE_REQUIRE_CORPUS=1.
package corpus

import (
	"io/fs"
	"os"
	"os/exec"
	"path/filepath"
	"sort"
	"testing"
)

// DefaultDir is where Debian's libonnx-testdata package installs the suite
// (`dpkg -L libonnx-testdata`).
const DefaultDir = "/usr/share/libonnx-testdata/data"

// Folders are the suite's model folders under Dir.
var Folders = []string{"node", "simple", "pytorch-converted", "pytorch-operator"}

// Dir returns the suite's data folder: $LOADLINE_CORPUS_DIR when set, else
// DefaultDir. It returns "" when the folder does not exist.
func Dir() string {
	dir := os.Getenv("LOADLINE_CORPUS_DIR")
	if dir == "" {
		dir = DefaultDir
	}
	if st, err := os.Stat(dir); err != nil || !st.IsDir() {
		return ""
	}
	return dir
}

// Required reports whether tests must fail rather than skip when the
// corpus (or another outside oracle) is missing: LOADLINE_REQUIRE_CORPUS=1.
func Required() bool { return os.Getenv("LOADLINE_REQUIRE_CORPUS") == "1" }

// Missing skips the test with msg, or fails it when Required.
func Missing(t testing.TB, msg string) {
	t.Helper()
	if Required() {
		t.Fatalf("%s (LOADLINE_REQUIRE_CORPUS=1)", msg)
	}
	t.Skip(msg)
}

// Tool returns the path of the command name (git, git-lfs, …) for tests
// that run it, skipping the test with a message naming the Debian package
// that installs it, or failing it when LOADLINE_REQUIRE_CORPUS=1.
func Tool(t testing.TB, name, pkg string) string {
	t.Helper()
	p, err := exec.LookPath(name)
	if err != nil {
		Missing(t, name+" is not installed (apt-get install "+pkg+")")
	}
	return p
}

// Require returns Dir, skipping the test with a visible message when the
// corpus is absent, or failing it when LOADLINE_REQUIRE_CORPUS=1.
func Require(t testing.TB) string {
	t.Helper()
	dir := Dir()
	if dir == "" {
		where := DefaultDir
		if env := os.Getenv("LOADLINE_CORPUS_DIR"); env != "" {
			where = env + " ($LOADLINE_CORPUS_DIR)"
		}
		Missing(t, "ONNX backend test corpus not found at "+where+" (apt-get install libonnx-testdata, or set LOADLINE_CORPUS_DIR)")
	}
	return dir
}

// Models returns the path of every model.onnx in the suite's Folders,
// sorted, after Require.
func Models(t testing.TB) []string {
	t.Helper()
	dir := Require(t)
	var out []string
	for _, f := range Folders {
		err := filepath.WalkDir(filepath.Join(dir, f), func(p string, e fs.DirEntry, err error) error {
			if err != nil {
				return err
			}
			if !e.IsDir() && e.Name() == "model.onnx" {
				out = append(out, p)
			}
			return nil
		})
		if err != nil {
			t.Fatalf("listing corpus: %v", err)
		}
	}
	if len(out) == 0 {
		Missing(t, "no model.onnx under "+dir)
	}
	sort.Strings(out)
	return out
}

// TFLiteDir returns the folder of real TFLite models shared beside the
// repository (../shared/models/tflite from the module root, found by
// walking up from the working directory to go.mod), skipping the test
// with a visible message when it is absent, or failing it when Required.
func TFLiteDir(t testing.TB) string {
	t.Helper()
	dir, err := os.Getwd()
	if err != nil {
		t.Fatal(err)
	}
	for {
		if _, err := os.Stat(filepath.Join(dir, "go.mod")); err == nil {
			break
		}
		parent := filepath.Dir(dir)
		if parent == dir {
			Missing(t, "no go.mod above the working directory: cannot find ../shared/models/tflite")
			return ""
		}
		dir = parent
	}
	p := filepath.Join(dir, "..", "shared", "models", "tflite")
	if st, err := os.Stat(p); err != nil || !st.IsDir() {
		Missing(t, "shared TFLite models not found at "+p)
	}
	return p
}

// TFLiteModels returns the paths of the .tflite files of TFLiteDir, sorted.
func TFLiteModels(t testing.TB) []string {
	t.Helper()
	paths, _ := filepath.Glob(filepath.Join(TFLiteDir(t), "*.tflite"))
	if len(paths) == 0 {
		Missing(t, "no .tflite file in "+TFLiteDir(t))
	}
	sort.Strings(paths)
	return paths
}
