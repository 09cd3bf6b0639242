package main

import (
	"math"
	"strings"
	"testing"
)

// FuzzBindFlags: whatever --dim, --shape and --value are given, parse
// returns an error that names the flag, or bindings within their bounds:
// sizes from 1 to 2^40, a shape of 1 to 64 dims, at most 2^16 finite
// values, and never more entries than the argument has bytes. Seeds: the
// examples of --help and the tests.
func FuzzBindFlags(f *testing.F) {
	f.Add("batch=1", "audio=1x512", "rate=16000")
	f.Add("audio.1=16000", "x=1X3x224x224", "ids=1,2,3")
	f.Add("=1", "audio=", "rate=")
	f.Add("a=b=2", "s=1x0", "v=NaN")
	f.Add("n=1099511627777", "s="+strings.Repeat("1x", 65)+"1", "v=1e400")
	f.Fuzz(func(t *testing.T, dim, shape, value string) {
		b := bindFlags{dims: []string{dim}, shapes: []string{shape}, values: []string{value}}
		out, err := b.parse()
		if err != nil {
			msg := err.Error()
			if !strings.HasPrefix(msg, "--dim ") && !strings.HasPrefix(msg, "--shape ") && !strings.HasPrefix(msg, "--value ") {
				t.Fatalf("the error does not name its flag: %v", err)
			}
			return
		}
		if len(out.Dims) != 1 || len(out.Shapes) != 1 || len(out.Values) != 1 {
			t.Fatalf("%q %q %q: %d dims, %d shapes, %d values bound", dim, shape, value, len(out.Dims), len(out.Shapes), len(out.Values))
		}
		for name, n := range out.Dims {
			if name == "" || n < 1 || n > 1<<40 {
				t.Fatalf("--dim %q: %q=%d", dim, name, n)
			}
		}
		for name, s := range out.Shapes {
			if name == "" || len(s) < 1 || len(s) > 64 || len(s) > len(shape) {
				t.Fatalf("--shape %q: %q has %d dims", shape, name, len(s))
			}
			for _, n := range s {
				if n < 1 || n > 1<<40 {
					t.Fatalf("--shape %q: dim %d", shape, n)
				}
			}
		}
		for name, v := range out.Values {
			if name == "" || len(v) < 1 || len(v) > 1<<16 || len(v) > len(value) {
				t.Fatalf("--value %q: %q has %d values", value, name, len(v))
			}
			for _, x := range v {
				if math.IsNaN(x) || math.IsInf(x, 0) {
					t.Fatalf("--value %q: %v", value, x)
				}
			}
		}
	})
}
