// Package check is loadline's pipeline: it reads model files (from disk, and
// later from git revisions), measures them in a bounded pool, and hands the
// figures on for judging and reporting.
package check

import (
	"fmt"
	"path/filepath"
	"runtime"
	"strings"
	"sync"

	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/model/onnx"
)

// MeasureFiles measures each file, in parallel, bounded by the number of
// CPUs. Every path gets an entry, in the order given; a file that cannot be
// read or measured has Error set and the others are still measured.
func MeasureFiles(paths []string, opts measure.Options) []*measure.Metrics {
	out := make([]*measure.Metrics, len(paths))
	sem := make(chan struct{}, max(1, runtime.NumCPU()))
	var wg sync.WaitGroup
	for i, p := range paths {
		wg.Add(1)
		sem <- struct{}{}
		go func() {
			defer wg.Done()
			defer func() { <-sem }()
			out[i] = MeasureFile(p, opts)
		}()
	}
	wg.Wait()
	return out
}

// MeasureFile decodes and measures one model file.
func MeasureFile(path string, opts measure.Options) *measure.Metrics {
	fail := func(err error) *measure.Metrics {
		return &measure.Metrics{Path: path, Format: formatOf(path), Error: err.Error(),
			Inputs: []measure.IOInfo{}, Outputs: []measure.IOInfo{}, Unresolved: []measure.Unresolved{}}
	}
	if formatOf(path) != "onnx" {
		return fail(fmt.Errorf("%s: unsupported model format (loadline reads .onnx files)", path))
	}
	data, release, err := mapFile(path)
	if err != nil {
		return fail(err)
	}
	defer release()
	m, err := onnx.Decode(data, onnx.Options{Path: path})
	if err != nil {
		return fail(err)
	}
	met, err := measure.Measure(m, int64(len(data)), opts)
	if err != nil {
		return fail(fmt.Errorf("%s: %w", path, err))
	}
	met.Path = path
	return met
}

func formatOf(path string) string {
	switch strings.ToLower(filepath.Ext(path)) {
	case ".onnx":
		return "onnx"
	case ".tflite":
		return "tflite"
	}
	return "unknown"
}
