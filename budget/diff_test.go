package budget

import (
	"fmt"
	"strings"
	"testing"
)

// Hand-written fixtures: a base budget and a head that changes each kind
// of entry once.
const diffBase = `version: 1
devices:
  porch-cam: {ram: 320KiB, flash: 2MiB}
  kitchen-timer: {ram: 96KiB, weights: ram}
  attic: {ram: 1MiB}
models:
  - path: "models/porch/**"
    device: porch-cam
    dims: {batch: 2}
    limits: {ram: 90%, macs: 60M, params: 300k}
    growth: {macs: 10%, file: 64KiB}
  - path: models/kitchen/*.onnx
    device: kitchen-timer
    limits: {ram: 64KiB}
  - path: models/attic/*.onnx
    device: attic
waivers:
  - {path: models/porch/a.onnx, metric: ram, until: 2027-01-31, reason: ring buffer}
  - {path: models/porch/b.onnx, metric: macs, until: 2027-01-31, reason: new head}
`

const diffHead = `version: 1
devices:
  porch-cam: {ram: 384KiB, flash: 2MiB}
  kitchen-timer: {ram: 96KiB, weights: flash}
  hub: {flash: 64MB}
models:
  - path: models/kitchen/*.onnx
    device: kitchen-timer
    limits: {ram: 48KiB, flash: 256KiB}
  - path: "models/porch/**"
    device: porch-cam
    dims: {batch: 1}
    limits: {ram: 90%, macs: 50M}
    growth: {macs: 15%, file: 5%}
    warn_at: 95%
  - path: models/hub/*.onnx
    device: hub
waivers:
  - {path: models/porch/a.onnx, metric: ram, until: 2027-06-30, reason: ring buffer again}
  - {path: models/porch/c.onnx, metric: flash, until: 2027-01-31, reason: fonts}
`

func TestDiff(t *testing.T) {
	base, head := mustParse(t, diffBase), mustParse(t, diffHead)
	want := []string{
		"devices.attic: ram 1MiB, weights flash → (none) loosened",
		"devices.hub: (none) → flash 64MB, weights flash",
		"devices.kitchen-timer.weights: ram → flash loosened",
		"devices.porch-cam.ram: 320KiB → 384KiB loosened",
		"models[2]: path models/attic/*.onnx, device attic → (none) loosened",
		"models[0].limits.ram: 64KiB → 48KiB",
		"models[0].limits.flash: (none) → 256KiB",
		"models[1].dims.batch: 2 → 1 loosened",
		// 90% of 320 KiB = 288 KiB becomes 90% of 384 KiB = 345.6 KiB.
		"models[1].limits.ram: 90% (288.0 KiB) → 90% (345.6 KiB) loosened",
		"models[1].limits.params: 300k → (none) loosened",
		"models[1].limits.macs: 60M → 50M",
		"models[1].growth.macs: 10% → 15% loosened",
		"models[1].growth.file: 64KiB → 5% loosened",
		"models[1].warn_at: 90% → 95% loosened",
		"models[2]: (none) → path models/hub/*.onnx, device hub",
		"waivers[0].until: 2027-01-31 → 2027-06-30 loosened",
		"waivers[0].reason: ring buffer → ring buffer again",
		"waivers[1]: (none) → models/porch/c.onnx flash until 2027-01-31: fonts loosened",
		"waivers[1]: models/porch/b.onnx macs until 2027-01-31: new head → (none)",
	}
	var got []string
	for _, c := range Diff(base, head) {
		got = append(got, show(c))
	}
	if strings.Join(got, "\n") != strings.Join(want, "\n") {
		t.Errorf("Diff:\n%s\nwant\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
	if d := Diff(head, head); len(d) != 0 {
		t.Errorf("Diff of a file with itself = %v", d)
	}
}

func TestDiffNil(t *testing.T) {
	head := mustParse(t, diffHead)
	for _, c := range Diff(nil, head) {
		if c.Loosened && !strings.HasPrefix(c.Key, "waivers") {
			t.Errorf("a budget where there was none only tightens, but %s", show(c))
		}
	}
	for _, c := range Diff(head, nil) {
		if !c.Loosened && !strings.HasPrefix(c.Key, "waivers") {
			t.Errorf("deleting the budget loosens everything, but %s", show(c))
		}
	}
}

func show(c BudgetChange) string {
	or := func(s string) string {
		if s == "" {
			return "(none)"
		}
		return s
	}
	s := fmt.Sprintf("%s: %s → %s", c.Key, or(c.Old), or(c.New))
	if c.Loosened {
		s += " loosened"
	}
	return s
}

// TestDiffDeviceMove: a rule moved to another device is marked loosened
// when the new device lets more through: a capacity bigger or gone, or
// weights moved out of RAM (so ram no longer counts them); a smaller or an
// added capacity, or weights moved into RAM, is not loosening.
func TestDiffDeviceMove(t *testing.T) {
	doc := func(a, b string) string {
		return "version: 1\ndevices:\n  a: {" + a + "}\n  b: {" + b + "}\nmodels:\n  - path: m.onnx\n    device: %s\n"
	}
	for _, tc := range []struct {
		name, a, b string
		loosened   bool
	}{
		{"smaller ram", "ram: 320KiB", "ram: 256KiB", false},
		{"bigger ram", "ram: 256KiB", "ram: 320KiB", true},
		{"same capacities", "ram: 256KiB, flash: 2MiB", "ram: 256KiB, flash: 2MiB", false},
		{"bigger flash", "ram: 256KiB, flash: 1MiB", "ram: 256KiB, flash: 2MiB", true},
		{"flash gone", "ram: 256KiB, flash: 2MiB", "ram: 256KiB", true},
		{"flash added", "ram: 256KiB", "ram: 256KiB, flash: 2MiB", false},
		{"weights leave ram", "ram: 256KiB, weights: ram", "ram: 256KiB, weights: flash", true},
		{"weights enter ram", "ram: 256KiB, weights: flash", "ram: 256KiB, weights: ram", false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			d := doc(tc.a, tc.b)
			base, head := mustParse(t, fmt.Sprintf(d, "a")), mustParse(t, fmt.Sprintf(d, "b"))
			var got []BudgetChange
			for _, c := range Diff(base, head) {
				if strings.HasSuffix(c.Key, ".device") {
					got = append(got, c)
				}
			}
			if len(got) != 1 || got[0].Old != "a" || got[0].New != "b" || got[0].Loosened != tc.loosened {
				t.Errorf("device changes %+v; want one a → b, loosened %v", got, tc.loosened)
			}
		})
	}
	// A device the file does not define cannot be compared: a reviewer looks.
	if !deviceLooser(nil, &Device{}) || !deviceLooser(&Device{}, nil) {
		t.Error("a missing device must count as loosening")
	}
}
