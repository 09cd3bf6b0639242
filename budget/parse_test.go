package budget

import (
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

// head is the start of most hand-written fixtures below: line 1 version,
// lines 2–9 two devices, so that models begin on line 10.
const head = `version: 1
devices:
  porch-cam:
    ram: 320KiB
    flash: 2MiB
  kitchen-timer:
    ram: 96KiB
    weights: ram
models:
`

// Each case is a hand-written fixture; the wanted line:column were counted
// by hand in the fixture text (lines from 1, columns from 1).
func TestParseErrors(t *testing.T) {
	tests := []struct {
		name string
		yaml string
		want []string
	}{
		{"unknown metric", head + `  - path: models/a.onnx
    device: porch-cam
    limits:
      mac: 60M
`, []string{`loadline.yaml:13:7: models[0].limits: unknown metric "mac" (did you mean "macs"?)`}},
		{"unknown top-level key", `version: 1
modles: []
`, []string{`loadline.yaml:2:1: unknown key "modles" (did you mean "models"?)`}},
		{"unknown rule key", head + `  - path: models/a.onnx
    device: porch-cam
    limit: {ram: 90%}
`, []string{`loadline.yaml:12:5: models[0]: unknown key "limit" (did you mean "limits"?)`}},
		{"unknown device key", `version: 1
devices:
  porch-cam: {ram: 320KiB, flsh: 2MiB}
`, []string{`loadline.yaml:3:28: devices.porch-cam: unknown key "flsh" (did you mean "flash"?)`}},
		{"bad unit", `version: 1
devices:
  porch-cam:
    ram: 1.5 Mib
`, []string{`loadline.yaml:4:10: devices.porch-cam.ram: "1.5 Mib": unknown unit "Mib" (did you mean "MiB"?)`}},
		{"count where bytes are due", head + `  - path: models/a.onnx
    device: porch-cam
    limits: {ram: 300k}
`, []string{`loadline.yaml:12:19: models[0].limits.ram: "300k" is a count; ram is in bytes (write 300KB or 300KiB)`}},
		{"bytes where a count is due", head + `  - path: models/a.onnx
    device: porch-cam
    limits: {params: 300KiB}
`, []string{`loadline.yaml:12:22: models[0].limits.params: "300KiB" is in bytes; params is a count (write 300k)`}},
		{"percent limit on a count", head + `  - path: models/a.onnx
    device: porch-cam
    limits: {macs: 50%}
`, []string{`loadline.yaml:12:20: models[0].limits.macs: "50%": a % limit is a share of the device's capacity, and only ram and flash have one (write the limit as a number, e.g. 60M)`}},
		{"percent limit without capacity", head + `  - path: models/k.onnx
    device: kitchen-timer
    limits: {flash: 75%}
`, []string{`loadline.yaml:12:21: models[0].limits.flash: "75%": device "kitchen-timer" has no flash capacity to take a share of (add devices.kitchen-timer.flash, or write the limit in bytes)`}},
		{"percent over 100", head + `  - path: models/a.onnx
    device: porch-cam
    limits: {ram: 120%}
`, []string{`loadline.yaml:12:19: models[0].limits.ram: "120%": a share of the device must be more than 0% and at most 100%`}},
		{"unknown device", head + `  - path: models/a.onnx
    device: porch-cma
`, []string{`loadline.yaml:11:13: models[0].device: unknown device "porch-cma" (did you mean "porch-cam"?)`}},
		{"unknown device, nothing close", head + `  - path: models/a.onnx
    device: doorbell
`, []string{`loadline.yaml:11:13: models[0].device: unknown device "doorbell" (devices: kitchen-timer, porch-cam)`}},
		{"missing path and device", head + `  - limits: {macs: 60M}
`, []string{
			`loadline.yaml:10:5: models[0]: missing path (say which models the rule covers, e.g. path: "models/**/*.onnx")`,
			`loadline.yaml:10:5: models[0]: missing device (devices: kitchen-timer, porch-cam)`,
		}},
		{"bad glob", head + `  - path: "models/[a.onnx"
    device: porch-cam
`, []string{`loadline.yaml:10:11: models[0].path: "models/[a.onnx" is not a valid glob (check the brackets and braces)`}},
		{"absolute path", head + `  - path: /models/a.onnx
    device: porch-cam
`, []string{`loadline.yaml:10:11: models[0].path: "/models/a.onnx": paths are relative to the repository root (drop the leading /)`}},
		{"weights placement", `version: 1
devices:
  porch-cam: {weights: rma}
`, []string{`loadline.yaml:3:24: devices.porch-cam.weights: "rma": weights live in flash or ram (did you mean "ram"?)`}},
		{"capacity as a percent", `version: 1
devices:
  porch-cam: {ram: 50%}
`, []string{`loadline.yaml:3:20: devices.porch-cam.ram: "50%": a capacity is in bytes, not a share (write e.g. 512KiB)`}},
		{"warn_at as a fraction", head + `  - path: models/a.onnx
    device: porch-cam
    warn_at: 0.9
`, []string{`loadline.yaml:12:14: models[0].warn_at: "0.9": warn_at is a percent of the limit (write 90%)`}},
		{"warn_at as a number", head + `  - path: models/a.onnx
    device: porch-cam
    warn_at: 85
`, []string{`loadline.yaml:12:14: models[0].warn_at: "85": warn_at is a percent of the limit (write 85%)`}},
		{"dims", head + `  - path: models/a.onnx
    device: porch-cam
    dims: {batch: 0, seq: n}
`, []string{
			`loadline.yaml:12:19: models[0].dims.batch: "0": a dim is a whole number from 1 up`,
			`loadline.yaml:12:27: models[0].dims.seq: "n": a dim is a whole number from 1 up`,
		}},
		{"inputs", head + `  - path: models/a.onnx
    device: porch-cam
    inputs: {audio: [1, 0], rate: fast, mode: {shape: [1], speed: 2}}
`, []string{
			`loadline.yaml:12:25: models[0].inputs.audio[1]: "0": a size is a whole number from 1 up`,
			`loadline.yaml:12:35: models[0].inputs.rate: "fast": want a number`,
			`loadline.yaml:12:60: models[0].inputs.mode: unknown key "speed"`,
		}},
		// A negative growth is a required shrink; a shrink of 100 % or
		// more would require a figure below zero.
		{"shrink of everything", head + `  - path: models/a.onnx
    device: porch-cam
    growth: {macs: -100%}
`, []string{`loadline.yaml:12:20: models[0].growth.macs: "-100%": a figure cannot fall by 100% or more (write a shrink below 100%, e.g. -5%)`}},
		{"negative limit", head + `  - path: models/a.onnx
    device: porch-cam
    limits: {macs: -5M}
`, []string{`loadline.yaml:12:20: models[0].limits.macs: "-5M": must not be negative`}},
		{"unknown growth metric", head + `  - path: models/a.onnx
    device: porch-cam
    growth: {memory: 5%}
`, []string{`loadline.yaml:12:14: models[0].growth: unknown metric "memory" (did you mean "arena" or "ram"?)`}},
		{"duplicate key", head + `  - path: models/a.onnx
    device: porch-cam
    limits:
      ram: 90%
      ram: 80%
`, []string{`loadline.yaml:14:7: models[0].limits: duplicate key "ram" (first at 13:7)`}},
		{"waiver: bad date, unknown metric", head + `  - path: models/a.onnx
    device: porch-cam
waivers:
  - path: models/a.onnx
    metric: rma
    until: 2027-1-31
    reason: ring buffer shrinks in firmware 4.2
`, []string{
			`loadline.yaml:14:13: waivers[0].metric: unknown metric "rma" (did you mean "ram"?)`,
			`loadline.yaml:15:12: waivers[0].until: "2027-1-31" is not a date (write YYYY-MM-DD, e.g. 2027-01-31)`,
		}},
		{"waiver: missing reason", head + `  - path: models/a.onnx
    device: porch-cam
waivers:
  - path: models/a.onnx
    metric: ram
    until: 2027-01-31
`, []string{`loadline.yaml:13:5: waivers[0]: missing reason (say why the figure may exceed its budget)`}},
		{"waiver: empty reason", head + `  - path: models/a.onnx
    device: porch-cam
waivers:
  - {path: models/a.onnx, metric: ram, until: 2027-01-31, reason: " "}
`, []string{`loadline.yaml:13:67: waivers[0].reason: empty reason (say why the figure may exceed its budget, for the reviewer who renews it)`}},
		{"bad capacity is reported once", `version: 1
devices:
  porch-cam: {ram: 320k}
models:
  - {path: a.onnx, device: porch-cam, limits: {ram: 90%}}
`, []string{`loadline.yaml:3:20: devices.porch-cam.ram: "320k" is a count; a capacity is in bytes (write 320KB or 320KiB)`}},
		{"errors in file order", `version: 1
models:
  - {path: a.onnx, device: porch-cam, limits: {rma: 1KiB}}
devices:
  porch-cam: {ram: 0}
`, []string{
			`loadline.yaml:3:48: models[0].limits: unknown metric "rma" (did you mean "ram"?)`,
			`loadline.yaml:5:20: devices.porch-cam.ram: "0": a capacity must be more than 0 (leave it out if the device has none to budget)`,
		}},
		{"duplicate waiver", head + `  - path: models/a.onnx
    device: porch-cam
waivers:
  - {path: models/a.onnx, metric: ram, until: 2027-01-31, reason: ring buffer}
  - {path: models/a.onnx, metric: ram, until: 2028-01-31, reason: later}
`, []string{`loadline.yaml:14:6: waivers[1]: a second waiver for models/a.onnx ram (first at 13:6) (keep one, with the date and reason in force)`}},
		{"version", `version: 2
`, []string{`loadline.yaml:1:10: version: version "2" is not one this loadline reads (write version: 1)`}},
		{"missing version", `devices: {}
`, []string{`loadline.yaml:1:1: missing version (start the file with version: 1)`}},
		{"not a mapping", `- version: 1
`, []string{`loadline.yaml:1:1: want a mapping of keys to values, found a list`}},
		{"models not a list", `version: 1
models: {path: a}
`, []string{`loadline.yaml:2:9: models: want a list, found a mapping (write each entry on a line starting with -)`}},
		{"boolean value", `version: 1
devices:
  porch-cam: {weights: true}
`, []string{`loadline.yaml:3:24: devices.porch-cam.weights: "true" reads as a yes/no; want a value (quote it if you mean the text)`}},
		{"yaml syntax", `version: 1
devices:
  porch-cam: {ram: 1
`, []string{`loadline.yaml:3:14: not valid YAML: did not find expected ',' or '}' (is a { } mapping starting on this line left open?)`}},
		{"yaml indentation", `version: 1
models:
  - path: a
    device: porch-cam
   limits: {}
`, []string{`loadline.yaml:3:3: not valid YAML: did not find expected '-' indicator (check the indentation of the list starting on this line)`}},
		{"two documents", `version: 1
---
version: 1
`, []string{`loadline.yaml:2:1: a second YAML document; a budget file holds one (remove the ---)`}},
		{"empty", ``, []string{`loadline.yaml: empty budget file (start with version: 1)`}},
		{"unknown anchor", `version: 1
models: *nope
`, []string{`loadline.yaml:2:9: not valid YAML: unknown anchor 'nope' referenced`}},
		// YAML 1.2.2, 5.1 Character Set: a stream holds UTF-8 text of
		// printable characters; each bad one is placed (hand-counted).
		{"nul byte", "version: 1\nmodels:\n  - path: \"a\x00b\"\n",
			[]string{`loadline.yaml:3:13: a NUL byte (a budget file is UTF-8 text: remove it)`}},
		{"invalid utf-8", "version: 1\nmodels:\n  - path: a\xffb\n",
			[]string{`loadline.yaml:3:12: invalid UTF-8 (byte 0xff) (a budget file is UTF-8 text: remove it)`}},
		{"control character after multibyte text", "version: 1\n# é\x07\n",
			[]string{`loadline.yaml:2:4: control character U+0007, which YAML does not allow (a budget file is UTF-8 text: remove it)`}},
		{"unknown escape", "version: 1\nmodels:\n  - path: \"a\\qb\"\n",
			[]string{`loadline.yaml:3:13: not valid YAML: found unknown escape character`}},
		{"value where a key ends", "version: 1\n  bad: indent\n",
			[]string{`loadline.yaml:2:6: not valid YAML: mapping values are not allowed in this context`}},
		{"reserved indicator", "version: 1\nx: @at\n",
			[]string{`loadline.yaml:2:4: not valid YAML: found character that cannot start any token`}},
		{"unterminated quote", "version: 1\nx: 'open\n",
			[]string{`loadline.yaml:2:1: not valid YAML: found unexpected end of stream`}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			f, err := Parse("loadline.yaml", []byte(tt.yaml))
			if err == nil {
				t.Fatalf("Parse succeeded, want %d errors", len(tt.want))
			}
			if f != nil {
				t.Errorf("Parse returned a file with its errors")
			}
			var es Errors
			if !errors.As(err, &es) {
				t.Fatalf("error %T is not Errors", err)
			}
			var got []string
			for _, e := range es {
				got = append(got, e.Error())
			}
			if strings.Join(got, "\n") != strings.Join(tt.want, "\n") {
				t.Errorf("errors:\n got %s\nwant %s", strings.Join(got, "\n     "), strings.Join(tt.want, "\n     "))
			}
			var one *Error
			if !errors.As(err, &one) || one != es[0] {
				t.Errorf("errors.As(*Error) does not reach the first error")
			}
		})
	}
}

func TestParseExample(t *testing.T) {
	f, err := Load(filepath.Join("..", "testdata", "budget", "porch.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	if f.Version != 1 || len(f.Devices) != 3 || len(f.Rules) != 3 || len(f.Waivers) != 1 {
		t.Fatalf("decoded %d devices, %d rules, %d waivers", len(f.Devices), len(f.Rules), len(f.Waivers))
	}
	cam := f.Devices["porch-cam"]
	if v, _ := cam.Capacity(MetricRAM); v != 320*1024 {
		t.Errorf("porch-cam ram = %d, want %d", v, 320*1024)
	}
	if hub := f.Devices["hub"]; hub.Weights != WeightsFlash || hub.RAM != nil {
		t.Errorf("hub = %+v; want weights flash by default and no ram", hub)
	}
	r := f.Rules[0]
	if r.Path != "models/porch/**/*.onnx" || r.Device != "porch-cam" || r.WarnAt != 850000 || r.Dims["frames"] != 4 {
		t.Errorf("rule 0 = %+v", r)
	}
	if s := r.Limits[MetricRAM]; s.Kind != Percent || s.Value != 900000 || s.Line != 19 || s.Column != 19 {
		t.Errorf("rule 0 ram limit = %+v, want 90%% at 19:19", s)
	}
	if s := r.Growth[MetricFile]; s.Kind != Bytes || s.Value != 65536 {
		t.Errorf("rule 0 file growth = %+v", s)
	}
	if r := f.Rules[1]; r.WarnAt != DefaultWarnAt || r.WarnAtSet || r.Limits[MetricFLOPs].Value != 12e6 {
		t.Errorf("rule 1 = %+v", r)
	}
	w := f.Waivers[0]
	if w.Until.Format("2006-01-02") != "2027-01-31" || w.Line != 35 || w.Column != 5 || w.Metric != MetricRAM {
		t.Errorf("waiver = %+v", w)
	}
	if got := f.Match("models/porch/night/parcel-v3.onnx"); len(got) != 1 || got[0] != f.Rules[0] {
		t.Errorf("Match porch = %v", got)
	}
	if got := f.Match("./models/kitchen/wake-stop.onnx"); len(got) != 1 || got[0] != f.Rules[1] {
		t.Errorf("Match kitchen = %v", got)
	}
	dims, err := f.Dims("models/porch/a.onnx")
	if err != nil || dims["batch"] != 1 || dims["frames"] != 4 {
		t.Errorf("Dims = %v, %v", dims, err)
	}
}

func TestParseAnchorsAndMerge(t *testing.T) {
	f, err := Load(filepath.Join("..", "testdata", "budget", "anchors.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	gate := f.Rules[1]
	if gate.Limits[MetricMACs].Value != 40e6 {
		t.Errorf("explicit macs must win over the merged one: %+v", gate.Limits[MetricMACs])
	}
	if gate.Limits[MetricFlash].Value != 1572864 || gate.Limits[MetricRAM].Value != 900000 {
		t.Errorf("merged limits = %+v", gate.Limits)
	}
}

func TestParseHostile(t *testing.T) {
	t.Run("too large", func(t *testing.T) {
		data := []byte("version: 1\n# " + strings.Repeat("x", MaxFileSize) + "\n")
		_, err := Parse("loadline.yaml", data)
		want := "loadline.yaml: file is 1.00 MiB; a budget file may be at most 1.00 MiB (is this the right file?)"
		if err == nil || err.Error() != want {
			t.Errorf("got %v, want %s", err, want)
		}
		path := filepath.Join(t.TempDir(), "loadline.yaml")
		if err := os.WriteFile(path, append(data, make([]byte, 2<<20)...), 0o644); err != nil {
			t.Fatal(err)
		}
		if _, err := Load(path); err == nil || !strings.Contains(err.Error(), "file is 3.00 MiB") {
			t.Errorf("Load: %v", err)
		}
	})
	t.Run("billion laughs", func(t *testing.T) {
		// Each level lists the one before ten times: expanded, level 9 is
		// 10⁹ rules. The decoder must stop on its visit budget instead.
		var b strings.Builder
		b.WriteString("version: 1\ndevices: {d: {ram: 1KiB}}\nx0: &a0 {path: a, device: d}\n")
		for i := 1; i < 10; i++ {
			b.WriteString("x" + string(rune('0'+i)) + ": &a" + string(rune('0'+i)) + " [")
			for j := 0; j < 10; j++ {
				if j > 0 {
					b.WriteString(", ")
				}
				b.WriteString("*a" + string(rune('0'+i-1)))
			}
			b.WriteString("]\n")
		}
		b.WriteString("models: *a9\n")
		_, err := Parse("loadline.yaml", []byte(b.String()))
		if err == nil {
			t.Fatal("Parse succeeded")
		}
		// The models list of ten aliases is not a list of rules, and the
		// unknown x keys are reported; what matters is that it ends.
		if !strings.Contains(err.Error(), `unknown key "x0"`) {
			t.Errorf("got %v", err)
		}
	})
	t.Run("wide aliases", func(t *testing.T) {
		// 5 000 aliases to a rule with 50 unknown keys: 250 000 findings if
		// nothing bounded them.
		var b strings.Builder
		b.WriteString("version: 1\ndevices: {d: {ram: 1KiB}}\nmodels:\n  - &r {path: a, device: d")
		for i := 0; i < 50; i++ {
			b.WriteString(", k" + strings.Repeat("z", i) + ": 1")
		}
		b.WriteString("}\n")
		for i := 0; i < 5000; i++ {
			b.WriteString("  - *r\n")
		}
		_, err := Parse("loadline.yaml", []byte(b.String()))
		var es Errors
		if !errors.As(err, &es) || len(es) > maxErrors+1 {
			t.Fatalf("got %d errors, want at most %d", len(es), maxErrors+1)
		}
		if last := es[len(es)-1].Error(); !strings.Contains(last, "stopping") {
			t.Errorf("last error = %s", last)
		}
	})
	t.Run("nested merges", func(t *testing.T) {
		// Each level merges the one before ten times over: 10⁸ visits
		// expanded, in a file of a few hundred bytes.
		var b strings.Builder
		b.WriteString("version: 1\ndevices: {d: {ram: 1KiB}}\nmodels:\n  - {path: a, device: d, limits: &m0 {ram: 1KiB}}\n")
		for i := 1; i <= 8; i++ {
			b.WriteString("  - {path: a, device: d, limits: &m" + string(rune('0'+i)) + " {<<: [")
			for j := 0; j < 10; j++ {
				if j > 0 {
					b.WriteString(", ")
				}
				b.WriteString("*m" + string(rune('0'+i-1)))
			}
			b.WriteString("]}}\n")
		}
		_, err := Parse("loadline.yaml", []byte(b.String()))
		if err == nil || !strings.Contains(err.Error(), "more than 200000 YAML nodes after expanding aliases") {
			t.Errorf("got %v", err)
		}
	})
	t.Run("deep nesting", func(t *testing.T) {
		data := []byte("version: 1\nmodels: " + strings.Repeat("[", 500_000) + "\n")
		_, err := Parse("loadline.yaml", data)
		if err == nil || !strings.Contains(err.Error(), "not valid YAML") {
			t.Errorf("got %v", err)
		}
	})
	t.Run("long scalar", func(t *testing.T) {
		data := []byte("version: 1\ndevices:\n  d: {ram: " + strings.Repeat("9", 900_000) + "}\n")
		_, err := Parse("loadline.yaml", data)
		want := `loadline.yaml:3:12: devices.d.ram: "99999999999999999999…": value is 900000 characters long; a quantity needs at most 64`
		if err == nil || err.Error() != want {
			t.Errorf("got %v, want %s", err, want)
		}
	})
	t.Run("self-merge", func(t *testing.T) {
		_, err := Parse("loadline.yaml", []byte("version: 1\ndevices: &d {<<: *d}\n"))
		want := "loadline.yaml:2:18: devices: merges nested too deep"
		if err == nil || err.Error() != want {
			t.Errorf("got %v, want %s", err, want)
		}
	})
}

func TestLoadMissing(t *testing.T) {
	_, err := Load(filepath.Join(t.TempDir(), "loadline.yaml"))
	if !errors.Is(err, os.ErrNotExist) {
		t.Errorf("Load of a missing file: %v", err)
	}
}

func TestErrorsPrint(t *testing.T) {
	es := Errors{
		{File: "loadline.yaml", Line: 3, Column: 5, Key: "devices.d", Msg: `unknown key "rma"`, Hint: `did you mean "ram"?`},
		{File: "loadline.yaml", Msg: "empty budget file"},
		{File: "loadline.yaml", Line: 7, Msg: "not valid YAML: x"},
	}
	want := "loadline.yaml:3:5: devices.d: unknown key \"rma\" (did you mean \"ram\"?)\nloadline.yaml: empty budget file\nloadline.yaml:7: not valid YAML: x"
	if es.Error() != want {
		t.Errorf("got\n%s\nwant\n%s", es.Error(), want)
	}
}

// TestParseBindings: dims: and inputs: entries, in their compact and
// spelled-out forms, each with the place of its key.
func TestParseBindings(t *testing.T) {
	f, err := Parse("loadline.yaml", []byte(`version: 1
devices:
  kws: {ram: 64KiB}
models:
  - path: "models/**"
    device: kws
    dims: {batch: 1}
    inputs: {audio: [1, 512], rate: 16000, mode: {value: [0, 1]}, feats: {shape: [1, 40]}}
`))
	if err != nil {
		t.Fatal(err)
	}
	got, err := f.Bindings("models/kws.onnx")
	if err != nil {
		t.Fatal(err)
	}
	want := []Binding{
		{Kind: "dim", Name: "batch", Dim: 1, Key: "models[0].dims.batch", Line: 7, Column: 12},
		{Kind: "shape", Name: "audio", Shape: []int64{1, 512}, Key: "models[0].inputs.audio", Line: 8, Column: 14},
		{Kind: "value", Name: "rate", Value: []float64{16000}, Key: "models[0].inputs.rate", Line: 8, Column: 31},
		{Kind: "value", Name: "mode", Value: []float64{0, 1}, Key: "models[0].inputs.mode.value", Line: 8, Column: 51},
		{Kind: "shape", Name: "feats", Shape: []int64{1, 40}, Key: "models[0].inputs.feats.shape", Line: 8, Column: 75},
	}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("bindings\n got %+v\nwant %+v", got, want)
	}
	if p := got[1].Place(f.Name); p != "loadline.yaml:8:14: models[0].inputs.audio" {
		t.Errorf("place %q", p)
	}
}
