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
	"github.com/loadline/loadline/model/tflite"
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
    target: m4-optimized@120MHz   # latency, energy and operator support estimated on it
    models:                       # what the firmware runs, judged together
      - {path: models/kitchen-timer/wakeword.onnx, every: 250ms}
  doorbell:           # microcontroller in a doorbell, runs a TFLite model
    ram: 64KiB
    flash: 128KiB
    weights: flash
    target: m4-reference@120MHz
    models:
      - {path: models/doorbell/chime.tflite, every: 50ms}
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
  - path: "models/doorbell/**/*.tflite"
    device: doorbell
    limits: {ram: 75%, flash: 64KiB, macs: 2M}
    growth: {ram: 25%, macs: 25%}
`

// DemoToday is the date the demo's check runs on: the day after the
// retrain commit, so that the scenario (its waiver included) reads the
// same whatever the date the demo is run.
var DemoToday = time.Date(2026, 11, 5, 12, 0, 0, 0, time.UTC)

// demoWaiver is added to the budget file with the baseline, for the
// sign-off report's list of waivers about to expire.
const demoWaiver = `waivers:
  - path: models/kitchen-timer/wakeword.onnx
    metric: params
    until: 2026-11-30
    reason: params limit is raised once the 64-channel spotter is signed off
`

// demoCommit is one commit of the demo's history; tag names the release
// it is, if any.
type demoCommit struct {
	message string
	models  map[string]func() (*model.Model, error)
	tag     string
	// encoded are models written in their own format (TFLite) by their
	// own encoder.
	encoded map[string]func() ([]byte, error)
}

// demoReleases are the invented scenario's earlier releases on main, for
// the sign-off report's trend: the bird detector's input grows from 96×96
// to 128×128 and the spotter from 40 to 64 channels over three releases.
var demoReleases = []demoCommit{
	{"Release 1.0: bird detector at 96×96, wake-word spotter with 40 channels", map[string]func() (*model.Model, error){
		"models/porch-cam/birdspot.onnx": func() (*model.Model, error) {
			return build.MobileNetV1(build.Options{Size: 96, Width: 0.25, Classes: 12})
		},
		"models/kitchen-timer/wakeword.onnx": func() (*model.Model, error) { return buildWakeword(40) },
	}, "v1.0.0", nil},
	{"Release 1.1: bird detector at 112×112, wake-word spotter with 48 channels", map[string]func() (*model.Model, error){
		"models/porch-cam/birdspot.onnx": func() (*model.Model, error) {
			return build.MobileNetV1(build.Options{Size: 112, Width: 0.25, Classes: 12})
		},
		"models/kitchen-timer/wakeword.onnx": func() (*model.Model, error) { return buildWakeword(48) },
	}, "v1.1.0", nil},
	{"Release 1.2: wake-word spotter with 56 channels", map[string]func() (*model.Model, error){
		"models/kitchen-timer/wakeword.onnx": func() (*model.Model, error) { return buildWakeword(56) },
	}, "v1.2.0", nil},
}

var demoHistory = []demoCommit{
	{"Baseline: bird detector at 128×128, wake-word spotter with 64 channels", map[string]func() (*model.Model, error){
		"models/porch-cam/birdspot.onnx": func() (*model.Model, error) {
			return build.MobileNetV1(build.Options{Size: 128, Width: 0.25, Classes: 12})
		},
		"models/kitchen-timer/wakeword.onnx": func() (*model.Model, error) { return buildWakeword(64) },
	}, "", map[string]func() ([]byte, error){
		"models/doorbell/chime.tflite": func() ([]byte, error) { return buildChime(16) },
	}},
	{"Retrain: bird detector at 160×160, wake-word spotter with 80 channels", map[string]func() (*model.Model, error){
		"models/porch-cam/birdspot.onnx": func() (*model.Model, error) {
			return build.MobileNetV1(build.Options{Size: 160, Width: 0.25, Classes: 12})
		},
		"models/kitchen-timer/wakeword.onnx": func() (*model.Model, error) { return buildWakeword(80) },
	}, "", map[string]func() ([]byte, error){
		"models/doorbell/chime.tflite": func() ([]byte, error) { return buildChime(18) },
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

// buildChime builds the doorbell's chime detector, a small int8 TFLite
// network of our own design (a convolution and a depthwise-separable
// block on 49×10 MFCC frames), written with the TFLite encoder.
func buildChime(width int32) ([]byte, error) {
	b := tflite.NewBuilder(tflite.Int8)
	x := b.Input("mfcc", 1, 49, 10, 1)
	x = b.Conv2D("conv0", x, width, 3, 2, true, "RELU")
	x = b.DepthwiseConv2D("dw1", x, 3, 1, true, "RELU")
	x = b.Conv2D("pw1", x, width, 1, 1, true, "RELU")
	x = b.AveragePool2D("pool", x)
	x = b.Reshape("flatten", x, 1, width)
	x = b.FullyConnected("classifier", x, 3, "NONE")
	b.Output(b.Softmax("probs", x))
	m, err := b.Model()
	if err != nil {
		return nil, err
	}
	return tflite.Encode(m)
}

// DemoRepo builds the demo repository in dir: the budget file, three
// tagged releases and the baseline on main, the retrain on a branch that is
// checked out. It uses no git command and no network.
func DemoRepo(dir string, log io.Writer) error {
	r, err := git.PlainInitWithOptions(dir, &git.PlainInitOptions{InitOptions: git.InitOptions{DefaultBranch: plumbing.NewBranchReferenceName("main")}})
	if err != nil {
		return err
	}
	wt, err := r.Worktree()
	if err != nil {
		return err
	}
	who := &object.Signature{Name: "Wrenfield Dev", Email: "dev@wrenfield.example", When: time.Date(2026, 7, 27, 9, 0, 0, 0, time.UTC)}
	history := append(append([]demoCommit{}, demoReleases...), demoHistory...)
	for i, c := range history {
		if i == len(demoReleases) {
			// The releases were six weeks apart; the baseline and the
			// retrain follow the last one.
			who.When = time.Date(2026, 11, 2, 9, 0, 0, 0, time.UTC)
		}
		if i == len(demoReleases)+1 {
			if err := wt.Checkout(&git.CheckoutOptions{Branch: plumbing.NewBranchReferenceName("retrain-160"), Create: true}); err != nil {
				return err
			}
		}
		files := map[string][]byte{}
		if i == 0 {
			files[DefaultBudgetFile] = []byte(demoBudget)
		}
		if i == len(demoReleases) {
			files[DefaultBudgetFile] = []byte(demoBudget + demoWaiver)
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
		for p, f := range c.encoded {
			data, err := f()
			if err != nil {
				return fmt.Errorf("building %s: %w", p, err)
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
		if i < len(demoReleases) {
			who.When = who.When.Add(6 * 7 * 24 * time.Hour)
		} else {
			who.When = who.When.Add(24 * time.Hour)
		}
		h, err := wt.Commit(c.message, &git.CommitOptions{Author: who, Committer: who})
		if err != nil {
			return err
		}
		line := "commit " + h.String()[:7] + "  " + c.message
		if c.tag != "" {
			if _, err := r.CreateTag(c.tag, h, nil); err != nil {
				return err
			}
			line += "  (tag " + c.tag + ")"
		}
		fmt.Fprintln(log, line)
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
