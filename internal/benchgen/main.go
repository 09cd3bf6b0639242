// Command benchgen writes a large generated model for benchmarks: a stack
// of fully connected layers whose weights add up to about the size asked
// for, as ONNX or (-format tflite) as TFLite. Used by
// scripts/bench-measure.sh and scripts/bench-tflite.sh; not part of
// loadline.
package main

import (
	"flag"
	"fmt"
	"os"

	"github.com/loadline/loadline/measure/benchmodel"
	"github.com/loadline/loadline/model/onnx"
	"github.com/loadline/loadline/model/tflite"
)

func main() {
	mb := flag.Int("mb", 200, "approximate size of the weights in MB")
	format := flag.String("format", "onnx", "onnx or tflite")
	flag.Parse()
	if flag.NArg() != 1 {
		fmt.Fprintln(os.Stderr, "usage: benchgen [-mb N] [-format onnx|tflite] OUT")
		os.Exit(2)
	}
	if *format == "tflite" {
		if err := writeTFLite(*mb, flag.Arg(0)); err != nil {
			fmt.Fprintln(os.Stderr, err)
			os.Exit(1)
		}
		return
	}
	m, err := benchmodel.Build(*mb)
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(1)
	}
	b, err := onnx.Encode(m)
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(1)
	}
	if err := os.WriteFile(flag.Arg(0), b, 0o644); err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(1)
	}
	fmt.Printf("%s: %d bytes\n", flag.Arg(0), len(b))
}

// writeTFLite writes a float32 TFLite model of fully connected layers of
// 2048×2048 weights (16 MiB each), as many as make about mb MB.
func writeTFLite(mb int, out string) error {
	const width = 2048
	layers := max(1, mb*1000*1000/(width*width*4))
	b := tflite.NewBuilder(tflite.Float32)
	x := b.Input("x", 1, width)
	for i := range layers {
		x = b.FullyConnected(fmt.Sprintf("fc%d", i), x, width, "RELU")
	}
	b.Output(x)
	m, err := b.Model()
	if err != nil {
		return err
	}
	data, err := tflite.Encode(m)
	if err != nil {
		return err
	}
	if err := os.WriteFile(out, data, 0o644); err != nil {
		return err
	}
	fmt.Printf("%s: %d bytes\n", out, len(data))
	return nil
}
