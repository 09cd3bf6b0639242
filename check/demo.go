package check

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"time"

	git "github.com/go-git/go-git/v5"
	"github.com/go-git/go-git/v5/plumbing"
	"github.com/go-git/go-git/v5/plumbing/object"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
)

// The demo's invented scenario. Wrenfield Labs (a made-up company) ships a
// bird detector on a porch camera and a wake-word spotter on a kitchen
// timer; both devices and their capacities are invented for the demo. The
// figures the demo prints are whatever loadline measures on the models
// built here.
const demoBudget = `# Wrenfield Labs' budget file (an invented scenario for loadline demo).
version: 1
devices:
  porch-cam:          # camera hub with a small MCU
    ram: 512KiB
    flash: 2MiB
    weights: flash
  kitchen-timer:      # microcontroller in a kitchen timer
    ram: 128KiB
    flash: 256KiB
    weights: flash
models:
  - path: "models/porch-cam/**/*.onnx"
    device: porch-cam
    limits: {ram: 90%, flash: 1.5MiB, macs: 30M}
    growth: {ram: 10%, macs: 20%}
  - path: "models/kitchen-timer/**/*.onnx"
    device: kitchen-timer
    dims: {batch: 1}
    limits: {ram: 80%, flash: 200KiB, params: 40k, macs: 6M}
    growth: {params: 60%, macs: 60%}
    warn_at: 90%
`

// demoCommit is one commit of the demo's history.
type demoCommit struct {
	message string
	models  map[string]func() (*model.Model, error)
}

var demoHistory = []demoCommit{
	{"Baseline: bird detector at 128×128, wake-word spotter with 64 channels", map[string]func() (*model.Model, error){
		"models/porch-cam/birdspot.onnx": func() (*model.Model, error) {
			return build.MobileNetV1(build.Options{Size: 128, Width: 0.25, Classes: 12})
		},
		"models/kitchen-timer/wakeword.onnx": func() (*model.Model, error) { return buildWakeword(64) },
	}},
	{"Retrain: bird detector at 160×160, wake-word spotter with 80 channels", map[string]func() (*model.Model, error){
		"models/porch-cam/birdspot.onnx": func() (*model.Model, error) {
			return build.MobileNetV1(build.Options{Size: 160, Width: 0.25, Classes: 12})
		},
		"models/kitchen-timer/wakeword.onnx": func() (*model.Model, error) { return buildWakeword(80) },
	}},
}

// buildWakeword builds a small keyword-spotting network of our own design
// (depthwise-separable convolutions on 49×10 MFCC frames), with a symbolic
// batch dimension that the budget rule binds.
func buildWakeword(ch int64) (*model.Model, error) {
	b := build.New("wakeword", 13)
	x := b.InputShape("mfcc", model.Float32, model.Shape{model.Sym("batch"), model.Known(1), model.Known(49), model.Known(10)})
	x = b.Conv("conv0", x, build.Conv2D(ch, 3, 2, 1).WithBias())
	x = b.Relu("relu0", x)
	for i := range 4 {
		p := fmt.Sprintf("block%d", i)
		x = b.Conv(p+".dw", x, build.Conv2D(ch, 3, 1, 1).Grouped(ch).WithBias())
		x = b.Relu(p+".dw_relu", x)
		x = b.Conv(p+".pw", x, build.Conv2D(ch, 1, 1, 0).WithBias())
		x = b.Relu(p+".pw_relu", x)
	}
	x = b.GlobalAveragePool("pool", x)
	x = b.Flatten("flatten", x, 1)
	x = b.Gemm("classifier", x, 12, true)
	x = b.Softmax("probs", x, 1)
	b.Output(x)
	return b.Model()
}

// DemoRepo builds the demo repository in dir: the budget file and the
// baseline on main, the retrain on a branch that is checked out. It uses
// no git command and no network.
func DemoRepo(dir string, log io.Writer) error {
	r, err := git.PlainInitWithOptions(dir, &git.PlainInitOptions{InitOptions: git.InitOptions{DefaultBranch: plumbing.NewBranchReferenceName("main")}})
	if err != nil {
		return err
	}
	wt, err := r.Worktree()
	if err != nil {
		return err
	}
	who := &object.Signature{Name: "Wrenfield Dev", Email: "dev@wrenfield.example", When: time.Date(2026, 11, 2, 9, 0, 0, 0, time.UTC)}
	for i, c := range demoHistory {
		if i == 1 {
			if err := wt.Checkout(&git.CheckoutOptions{Branch: plumbing.NewBranchReferenceName("retrain-160"), Create: true}); err != nil {
				return err
			}
		}
		files := map[string][]byte{}
		if i == 0 {
			files[DefaultBudgetFile] = []byte(demoBudget)
		}
		for p, f := range c.models {
			m, err := f()
			if err != nil {
				return fmt.Errorf("building %s: %w", p, err)
			}
			data, err := onnx.Encode(m)
			if err != nil {
				return fmt.Errorf("encoding %s: %w", p, err)
			}
			files[p] = data
		}
		for p, data := range files {
			full := filepath.Join(dir, filepath.FromSlash(p))
			if err := os.MkdirAll(filepath.Dir(full), 0o755); err != nil {
				return err
			}
			if err := os.WriteFile(full, data, 0o644); err != nil {
				return err
			}
			if _, err := wt.Add(p); err != nil {
				return err
			}
		}
		who.When = who.When.Add(24 * time.Hour)
		h, err := wt.Commit(c.message, &git.CommitOptions{Author: who, Committer: who})
		if err != nil {
			return err
		}
		fmt.Fprintf(log, "commit %s  %s\n", h.String()[:7], c.message)
	}
	return nil
}

// DemoSummary explains a demo result in two lines.
func DemoSummary(res *budget.Result) string {
	var broke, grew []string
	for _, m := range res.Models {
		for _, c := range m.Checks {
			if c.Status == budget.Fail {
				broke = append(broke, m.Path+" "+c.Metric+" "+c.Kind)
			}
		}
		if m.Status != budget.Fail && m.Base != nil && m.Head != nil && m.Head.Params > m.Base.Params {
			grew = append(grew, m.Path)
		}
	}
	return fmt.Sprintf("What happened: the retrain broke %d budget check(s) (%s), so CI would fail the pull request;\n"+
		"%s grew but stayed within its limits and allowed growth. Each figure above was measured from the committed files.",
		len(broke), strings.Join(broke, ", "), strings.Join(grew, ", "))
}
