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
