package budget

import (
	"errors"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"
)

// FuzzParse feeds the budget parser arbitrary bytes, seeded with the
// fixtures under testdata/budget and the hand-written fixtures of the
// tests. It must not panic, and what it accepts must evaluate and diff
// without panicking.
func FuzzParse(f *testing.F) {
	paths, _ := filepath.Glob(filepath.Join("..", "testdata", "budget", "*.yaml"))
	for _, p := range paths {
		data, err := os.ReadFile(p)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
	}
	f.Add([]byte(evalBudget))
	f.Add([]byte(diffBase))
	f.Add([]byte(diffHead))
	f.Add([]byte("version: 1\nmodels: &a [*a]\n"))
	f.Add([]byte("version: 1\ndevices: {d: {ram: 1KiB}}\nmodels:\n  - path: \"**\"\n    device: d\n    dims: {batch: 1}\n    inputs: {audio: [1, 512], rate: 16000, mode: {shape: [1], value: [2]}}\n"))
	f.Add([]byte("a: &a {<<: [*a, *a]}\n"))
	f.Add([]byte("version: 1\nmodels:\n  - path: \"a\x00b\"\n"))
	f.Add([]byte("version: 1\nx: 'open\n"))
	f.Add([]byte("version: 1\nmodels: *nope\n"))
	inputs := []Input{
		{Path: "models/porch/bird.onnx", Change: Modified, Base: fig(1000, 10, 2000, 5), Head: fig(2000, 20, 4000, 10)},
		{Path: "models/kitchen/stop.onnx", Change: Added, Head: &Figures{Unknown: map[string]string{MetricArena: "x"}}},
		{Path: "models/x.onnx", Change: Removed, Base: fig(1, 1, 1, 1)},
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		file, err := Parse("loadline.yaml", data)
		if err != nil {
			if file != nil {
				t.Fatal("a file returned with errors")
			}
			if strings.TrimSpace(err.Error()) == "" {
				t.Fatal("an empty error")
			}
			// A YAML syntax error, a bad byte or character is placed.
			var es Errors
			if errors.As(err, &es) {
				for _, e := range es {
					if (strings.HasPrefix(e.Msg, "not valid YAML") || strings.Contains(e.Msg, "UTF-8") || strings.Contains(e.Msg, "NUL") ||
						strings.HasPrefix(e.Msg, "control character")) && (e.Line <= 0 || e.Column <= 0) {
						t.Fatalf("%q: no line and column: %v", data, e)
					}
				}
			}
			return
		}
		res := file.Evaluate(inputs, EvalOptions{Today: time.Date(2026, 12, 2, 0, 0, 0, 0, time.UTC)})
		if len(res.Models) != len(inputs) {
			t.Fatalf("%d results for %d inputs", len(res.Models), len(inputs))
		}
		if changes := Diff(file, file); len(changes) != 0 {
			t.Fatalf("a file compared with itself has changes: %+v", changes)
		}
		for _, c := range Diff(nil, file) {
			if c.Key == "" {
				t.Fatalf("a change without a key: %+v", c)
			}
		}
	})
}

// FuzzParseQuantity checks that the unit parser never panics and that
// what it accepts is consistent: non-negative, and printed back it reads
// as the same quantity.
func FuzzParseQuantity(f *testing.F) {
	for _, s := range []string{"512", "512B", "64KiB", "1.5MiB", "1.5 Mib", "64KB", "2MB", "300k", "60M", "1.2G", "950",
		"90%", "12.5%", "-5%", "1e6", "1,5MiB", ".5", "99999999999999999999", "9.99999999999999999999TiB"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		q, err := ParseQuantity(s)
		if err != nil {
			if err.Error() == "" {
				t.Fatal("empty error")
			}
			return
		}
		if q.Value < 0 {
			t.Fatalf("ParseQuantity(%q) = %d, negative", s, q.Value)
		}
		var again string
		switch q.Kind {
		case Plain, Count:
			again = strconv.FormatInt(q.Value, 10)
		case Bytes:
			again = strconv.FormatInt(q.Value, 10) + "B"
		default:
			return
		}
		back, err := ParseQuantity(again)
		if err != nil || back.Value != q.Value {
			t.Fatalf("ParseQuantity(%q) = %d, but %q reads as %v, %v", s, q.Value, again, back, err)
		}
	})
}
