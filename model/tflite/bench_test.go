package tflite

import (
	"fmt"
	"os"
	"path/filepath"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
)

// BenchmarkDecodeShared decodes the largest shared TFLite model.
func BenchmarkDecodeShared(b *testing.B) {
	data, err := os.ReadFile(filepath.Join(corpus.TFLiteDir(b), "vww_96_float.tflite"))
	if err != nil {
		b.Fatal(err)
	}
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Decode(data, Options{Path: "vww_96_float.tflite"}); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkDecodeGenerated decodes a generated 64 MiB float32 model of
// fully connected layers: its weights are skipped, not read.
func BenchmarkDecodeGenerated(b *testing.B) {
	bl := NewBuilder(Float32)
	x := bl.Input("x", 1, 2048)
	for i := range 4 {
		x = bl.FullyConnected(fmt.Sprintf("fc%d", i), x, 2048, "RELU")
	}
	bl.Output(x)
	m, err := bl.Model()
	if err != nil {
		b.Fatal(err)
	}
	data, err := Encode(m)
	if err != nil {
		b.Fatal(err)
	}
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		if _, err := Decode(data, Options{Path: "gen.tflite"}); err != nil {
			b.Fatal(err)
		}
	}
}
