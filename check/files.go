// Package check is loadline's pipeline: it reads model files (from disk, and
// later from git revisions), measures them in a bounded pool, and hands the
// figures on for judging and reporting.
package check

import (
	"fmt"
	"math"
	"runtime"
	"runtime/debug"
	"sync"

	"github.com/loadline/loadline/internal/regular"
	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/model/format"
)

// MeasureFiles measures each file, in parallel, bounded by the number of
// CPUs. Every path gets an entry, in the order given; a file that cannot be
// read or measured has Error set and the others are still measured.
func MeasureFiles(paths []string, opts measure.Options) []*measure.Metrics {
	out := make([]*measure.Metrics, len(paths))
	if len(paths) < runtime.NumCPU() {
		// A core to spare for each file: each model's passes run side
		// by side (the figures are the same).
		opts.Parallel = true
	}
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

// mappedFile is a model file's bytes: mapped read-only where the system
// allows it, else read whole.
type mappedFile struct {
	data []byte
	// release unmaps the file; sub-slices of data must not be kept past it.
	release func()
	// readBehind, for a mapped file, gives back to the kernel the pages
	// that lie wholly before the end of b (a slice of data), once the
	// reading has passed them (measure.Options.WeightsRead); nil for a
	// file read whole.
	readBehind func(b []byte)
	// passed, for a mapped file, gives back the pages before offset, once
	// decoding has passed them (format.Options.Passed); decoded gives back
	// every page read so far, once the model is decoded. Both nil for a
	// file read whole.
	passed  func(offset int)
	decoded func()
}

// readWhole reads a model file whole, where it is not mapped.
func readWhole(path string) (*mappedFile, error) {
	b, err := regular.ReadFile(path, math.MaxInt64)
	return &mappedFile{data: b, release: func() {}}, err
}

// MeasureFile decodes and measures one model file.
func MeasureFile(path string, opts measure.Options) (m *measure.Metrics) {
	f, err := mapFile(path)
	if err != nil {
		return failed(path, err)
	}
	defer f.release()
	opts.WeightsRead = f.readBehind
	// The file is memory-mapped: if it is truncated while being read, the
	// read faults. Turn that fault into an error for this file instead of
	// a crash of the whole run; any other panic is a bug and goes on up.
	return onMapped(path, func() *measure.Metrics {
		return decodeAndMeasure(path, f.data, format.Options{Passed: f.passed}, opts, f.decoded)
	})
}

// onMapped runs f, which reads a memory-mapped file, turning a fault on
// its pages into the file's error entry.
func onMapped(path string, f func() *measure.Metrics) (m *measure.Metrics) {
	if fault := catchFault(func() { m = f() }); fault != nil {
		return failed(path, fmt.Errorf("%s changed while it was being read (%v); measure it again", path, fault))
	}
	return m
}

// catchFault runs f and returns the memory fault it met reading a mapped
// file (a file cut short after it was mapped faults on the pages past its
// new end), nil when none; any other panic goes on up.
func catchFault(f func()) (fault error) {
	defer debug.SetPanicOnFault(debug.SetPanicOnFault(true))
	defer func() {
		if r := recover(); r != nil {
			// A memory fault's runtime.Error has an Addr method
			// (runtime/debug.SetPanicOnFault).
			re, ok := r.(interface {
				runtime.Error
				Addr() uintptr
			})
			if !ok {
				panic(r)
			}
			fault = re
		}
	}()
	f()
	return nil
}

// failed is the entry of a model that could not be measured: every list
// empty, not null, as the JSON contract has them.
func failed(path string, err error) *measure.Metrics {
	return &measure.Metrics{Path: path, Format: formatOf(path), Error: err.Error(),
		Inputs: []measure.IOInfo{}, Outputs: []measure.IOInfo{}, Unresolved: []measure.Unresolved{}}
}

// decodeAndMeasure opens the model file path held in data through the one
// door that reads every format (model/format) and measures it, calling
// decoded (when set) between the two; errors come back as a failed entry
// named path.
func decodeAndMeasure(path string, data []byte, dec format.Options, opts measure.Options, decoded func()) *measure.Metrics {
	m, err := format.Open(path, data, dec)
	if err != nil {
		return failed(path, err)
	}
	if decoded != nil {
		decoded()
	}
	met, err := measure.Measure(m, int64(len(data)), opts)
	if err != nil {
		return failed(path, fmt.Errorf("%s: %w", path, err))
	}
	met.Path = path
	return met
}

// formatOf is the format a file's name suggests, for the entry of a file
// that could not be opened.
func formatOf(path string) string {
	if f := format.Hint(path); f != "" {
		return f
	}
	return "unknown"
}
