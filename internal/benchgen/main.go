// Command benchgen writes a large generated ONNX model for benchmarks: a
// stack of fully connected layers whose weights add up to about the size
// asked for. Used by scripts/bench-measure.sh; not part of loadline.
package main

import (
	"flag"
	"fmt"
	"os"

	"github.com/loadline/loadline/measure/benchmodel"
	"github.com/loadline/loadline/model/onnx"
)

func main() {
	mb := flag.Int("mb", 200, "approximate size of the weights in MB")
	flag.Parse()
	if flag.NArg() != 1 {
		fmt.Fprintln(os.Stderr, "usage: benchgen [-mb N] OUT.onnx")
		os.Exit(2)
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
