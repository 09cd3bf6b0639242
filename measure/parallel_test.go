package measure

import (
	"encoding/json"
	"os"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/format"
)

// TestMeasureParallelSameFigures: the passes run side by side
// (Options.Parallel) give the very figures they give one after the other,
// with and without the per-layer view, on the reference architectures
// (model/build), every shared TFLite model and every model of ONNX's
// backend test suite (the corpus). Run with -race, it also checks that the
// two halves share nothing they write.
func TestMeasureParallelSameFigures(t *testing.T) {
	var models []*model.Model
	var names []string
	for _, arch := range []string{"mobilenet_v2", "resnet18"} {
		f, _ := build.Architecture(arch)
		m, err := f(build.Options{Size: 64, Classes: 10})
		if err != nil {
			t.Fatal(err)
		}
		models, names = append(models, m), append(names, arch)
	}
	paths := corpus.TFLiteModels(t)
	if !testing.Short() {
		paths = append(paths, corpus.Models(t)...)
	}
	for _, p := range paths {
		data, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		m, err := format.Open(p, data, format.Options{})
		if err != nil {
			continue // the decoders' own tests cover files that do not open
		}
		models, names = append(models, m), append(names, p)
	}
	for i, m := range models {
		for _, layers := range []bool{false, true} {
			one, err1 := Measure(m, 1, Options{Layers: layers, Lenient: true})
			two, err2 := Measure(m, 1, Options{Layers: layers, Lenient: true, Parallel: true})
			if (err1 == nil) != (err2 == nil) {
				t.Fatalf("%s: errors differ: %v / %v", names[i], err1, err2)
			}
			if err1 != nil {
				continue
			}
			a, _ := json.Marshal(one)
			b, _ := json.Marshal(two)
			if string(a) != string(b) {
				t.Errorf("%s (layers %v): figures differ when the passes run side by side", names[i], layers)
			}
		}
	}
	t.Logf("%d models compared", len(models))
}
