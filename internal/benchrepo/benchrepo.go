// Package benchrepo writes the git repositories the check benchmarks and
// the speed script measure: a base commit and a head commit that changes
// every model, with a budget file that covers them.
package benchrepo

import (
	"fmt"
	"os"
	"os/exec"
	"path/filepath"

	"github.com/loadline/loadline/measure/benchmodel"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
)

// Budget is the budget file of the benchmark repositories.
const Budget = `version: 1
devices:
  hub: {ram: 64MiB, flash: 1GiB}
models:
  - path: "models/*.onnx"
    device: hub
    dims: {batch: 1}
    limits: {flash: 100MiB}
`

// Git runs git in the repository dir, away from the machine's and the
// user's git configuration.
func Git(dir string, args ...string) error {
	cmd := exec.Command("git", args...)
	cmd.Dir = dir
	cmd.Env = append(os.Environ(), "GIT_CONFIG_NOSYSTEM=1", "HOME="+dir)
	if out, err := cmd.CombinedOutput(); err != nil {
		return fmt.Errorf("git %v: %v\n%s", args, err, out)
	}
	return nil
}

// Init makes dir (created if absent) a repository on branch main, with
// the benchmarks' committer, unsigned commits, a models folder and the
// budget file Budget.
func Init(dir string) error {
	if err := os.MkdirAll(filepath.Join(dir, "models"), 0o755); err != nil {
		return err
	}
	for _, args := range [][]string{
		{"init", "-q", "-b", "main"},
		{"config", "user.email", "bench@wrenfield.example"},
		{"config", "user.name", "bench"},
		{"config", "commit.gpgsign", "false"},
	} {
		if err := Git(dir, args...); err != nil {
			return err
		}
	}
	return os.WriteFile(filepath.Join(dir, "loadline.yaml"), []byte(Budget), 0o644)
}

// Write makes a repository in dir (which must be empty or absent) whose
// last commit modifies n models in one folder, models/mNNNN.onnx: with mb >
// 0 each is the generated model of about mb MB of weights (different
// weights on each side), with mb = 0 a small convolutional classifier
// (named differently on each side). pack packs the objects as a clone has
// them; otherwise they stay loose, as fresh commits leave them.
func Write(dir string, n, mb int, pack bool) error {
	if err := Init(dir); err != nil {
		return err
	}
	git := func(args ...string) error { return Git(dir, args...) }
	if err := git("config", "core.compression", "1"); err != nil {
		return err
	}
	for side := range 2 {
		for i := range n {
			var m *model.Model
			var err error
			if mb > 0 {
				m, err = benchmodel.BuildSeeded(mb, uint64(100*side+i+1))
			} else {
				m, err = build.ConvClassifier(fmt.Sprintf("m%d-side%d", i, side), 16, 8)
			}
			if err != nil {
				return err
			}
			data, err := onnx.Encode(m)
			if err != nil {
				return err
			}
			if err := os.WriteFile(filepath.Join(dir, "models", fmt.Sprintf("m%04d.onnx", i)), data, 0o644); err != nil {
				return err
			}
		}
		if err := git("add", "-A"); err != nil {
			return err
		}
		if err := git("commit", "-q", "-m", fmt.Sprintf("side %d", side)); err != nil {
			return err
		}
	}
	if pack {
		return git("gc", "-q")
	}
	return nil
}
