package measure

import (
	"sync"
	"testing"

	"github.com/loadline/loadline/measure/benchmodel"
	"github.com/loadline/loadline/model/onnx"
)

var (
	largeOnce  sync.Once
	largeBytes []byte
	largeErr   error
)

// largeModel encodes the ~200 MB generated model once per test binary.
func largeModel(b *testing.B) []byte {
	largeOnce.Do(func() {
		m, err := benchmodel.Build(200)
		if err != nil {
			largeErr = err
			return
		}
		largeBytes, largeErr = onnx.Encode(m)
	})
	if largeErr != nil {
		b.Fatal(largeErr)
	}
	return largeBytes
}

// BenchmarkMeasureLarge decodes a generated model of about 200 MB and
// infers and measures it. B/op shows that weights are not copied.
func BenchmarkMeasureLarge(b *testing.B) {
	data := largeModel(b)
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		m, err := onnx.Decode(data, onnx.Options{Path: "bench.onnx"})
		if err != nil {
			b.Fatal(err)
		}
		met, err := Measure(m, int64(len(data)), Options{Dims: map[string]int64{"batch": 1}})
		if err != nil {
			b.Fatal(err)
		}
		if met.Params == 0 || len(met.Unresolved) > 0 {
			b.Fatalf("params %d, unresolved %v", met.Params, met.Unresolved)
		}
	}
}

var (
	nodesOnce  sync.Once
	nodesBytes []byte
	nodesErr   error
)

// BenchmarkMeasureNodes100k decodes and measures a model of about 100,000
// small nodes (benchmodel.BuildNodes): the cost per node, where
// BenchmarkMeasureLarge is the cost per weight byte.
func BenchmarkMeasureNodes100k(b *testing.B) {
	nodesOnce.Do(func() {
		m, err := benchmodel.BuildNodes(100_000)
		if err != nil {
			nodesErr = err
			return
		}
		nodesBytes, nodesErr = onnx.Encode(m)
	})
	if nodesErr != nil {
		b.Fatal(nodesErr)
	}
	b.SetBytes(int64(len(nodesBytes)))
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		m, err := onnx.Decode(nodesBytes, onnx.Options{Path: "nodes.onnx"})
		if err != nil {
			b.Fatal(err)
		}
		met, err := Measure(m, int64(len(nodesBytes)), Options{Dims: map[string]int64{"batch": 1}})
		if err != nil {
			b.Fatal(err)
		}
		if met.Nodes < 100_000 || len(met.Unresolved) > 0 {
			b.Fatalf("%d nodes, unresolved %v", met.Nodes, met.Unresolved)
		}
	}
}
