package check

import (
	"fmt"
	"io"
	"os"
	"path/filepath"

	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
	"github.com/loadline/loadline/report"
)

// DemoModel is one model of the invented demo scenario.
type DemoModel struct {
	Path  string // relative to the demo folder
	About string
	Build func() (*model.Model, error)
}

// DemoScenario is the demo's invented fleet: Wrenfield Labs ships a bird
// detector on a porch camera and a wake-word model on a kitchen timer. The
// names are made up for the demo; the figures are whatever loadline
// measures on the models built here.
func DemoScenario() []DemoModel {
	return []DemoModel{
		{"models/porch-cam/birdspot.onnx", "bird detector for the porch camera: MobileNet v1 0.25 at 128×128, float32",
			func() (*model.Model, error) {
				return build.MobileNetV1(build.Options{Size: 128, Width: 0.25, Classes: 12})
			}},
		{"models/kitchen-timer/wakeword.onnx", "wake-word spotter for the kitchen timer: a small depthwise-separable CNN on 49×10 MFCCs, symbolic batch",
			buildWakeword},
	}
}

// buildWakeword builds a small keyword-spotting network of our own design,
// in the spirit of the depthwise-separable CNNs used for the job.
func buildWakeword() (*model.Model, error) {
	b := build.New("wakeword", 13)
	x := b.InputShape("mfcc", model.Float32, model.Shape{model.Sym("batch"), model.Known(1), model.Known(49), model.Known(10)})
	x = b.Conv("conv0", x, build.Conv2D(64, 3, 2, 1).WithBias())
	x = b.Relu("relu0", x)
	for i := range 4 {
		p := fmt.Sprintf("block%d", i)
		x = b.Conv(p+".dw", x, build.Conv2D(64, 3, 1, 1).Grouped(64).WithBias())
		x = b.Relu(p+".dw_relu", x)
		x = b.Conv(p+".pw", x, build.Conv2D(64, 1, 1, 0).WithBias())
		x = b.Relu(p+".pw_relu", x)
	}
	x = b.GlobalAveragePool("pool", x)
	x = b.Flatten("flatten", x, 1)
	x = b.Gemm("classifier", x, 12, true)
	x = b.Softmax("probs", x, 1)
	b.Output(x)
	return b.Model()
}

// RunDemo writes the demo models into dir, measures them and prints the
// report to w. It returns the measured figures.
func RunDemo(dir string, w io.Writer) ([]*measure.Metrics, error) {
	var paths []string
	for _, d := range DemoScenario() {
		m, err := d.Build()
		if err != nil {
			return nil, fmt.Errorf("building %s: %w", d.Path, err)
		}
		data, err := onnx.Encode(m)
		if err != nil {
			return nil, fmt.Errorf("encoding %s: %w", d.Path, err)
		}
		p := filepath.Join(dir, d.Path)
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			return nil, err
		}
		if err := os.WriteFile(p, data, 0o644); err != nil {
			return nil, err
		}
		fmt.Fprintf(w, "built %s — %s\n", d.Path, d.About)
		paths = append(paths, p)
	}
	fmt.Fprintln(w)
	// The wake-word model's batch is symbolic: bind it, as a budget rule's dims would.
	entries := MeasureFiles(paths, measure.Options{Dims: map[string]int64{"batch": 1}})
	for _, e := range entries {
		if rel, err := filepath.Rel(dir, e.Path); err == nil {
			e.Path = rel
		}
		if e.Error != "" {
			return entries, fmt.Errorf("%s: %s", e.Path, e.Error)
		}
	}
	if err := report.MeasureText(w, entries); err != nil {
		return entries, err
	}
	return entries, nil
}
