// Command benchgen writes the generated inputs of the benchmarks: a large
// model (a stack of fully connected layers whose weights add up to about
// the size asked for), as ONNX or (-format tflite) as TFLite, a model of
// many small nodes (-nodes), or a git repository whose last commit changes
// N models (-repo). Used by the scripts in scripts/; not part of loadline.
package main

import (
	"flag"
	"fmt"
	"os"

	"github.com/loadline/loadline/internal/benchrepo"
	"github.com/loadline/loadline/measure/benchmodel"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/onnx"
	"github.com/loadline/loadline/model/tflite"
)

func main() {
	mb := flag.Int("mb", 200, "approximate size of the weights in MB (with -repo: of each model; 0 is a small classifier)")
	format := flag.String("format", "onnx", "onnx or tflite")
	nodes := flag.Int("nodes", 0, "write an ONNX model of about this many small nodes instead")
	repo := flag.Int("repo", 0, "write a git repository whose last commit changes this many models, into OUT")
	pack := flag.Bool("pack", false, "with -repo: pack the objects, as a clone has them")
	flag.Parse()
	if flag.NArg() != 1 {
		fmt.Fprintln(os.Stderr, "usage: benchgen [-mb N] [-format onnx|tflite] OUT | benchgen -nodes N OUT | benchgen -repo N [-mb M] [-pack] OUT")
		os.Exit(2)
	}
	if *repo > 0 {
		if err := benchrepo.Write(flag.Arg(0), *repo, *mb, *pack); err != nil {
			fmt.Fprintln(os.Stderr, err)
			os.Exit(1)
		}
		return
	}
	if *format == "tflite" {
		if err := writeTFLite(*mb, flag.Arg(0)); err != nil {
			fmt.Fprintln(os.Stderr, err)
			os.Exit(1)
		}
		return
	}
	build := func() (*model.Model, error) { return benchmodel.Build(*mb) }
	if *nodes > 0 {
		build = func() (*model.Model, error) { return benchmodel.BuildNodes(*nodes) }
	}
	m, err := build()
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
