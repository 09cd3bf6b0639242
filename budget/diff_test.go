package budget

import (
	"fmt"
	"strings"
	"testing"
	"time"
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
		"waivers[1]: (none) → models/porch/c.onnx flash limit and growth until 2027-01-31: fonts loosened",
		"waivers[1]: models/porch/b.onnx macs limit and growth until 2027-01-31: new head → (none)",
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

// TestDiffWaivers: a waiver added with a date already past excuses nothing
// and is listed as expired, not as loosening; a waiver that excuses more,
// or has its ceiling raised, loosens.
func TestDiffWaivers(t *testing.T) {
	const head = `version: 1
devices: {cam: {ram: 256KiB}}
models:
  - {path: "m/*.onnx", device: cam}
waivers:
`
	base := mustParse(t, head+`  - {path: m/a.onnx, metric: macs, excuses: limit, up_to: 300M, until: 2027-01-31, reason: r}
`)
	next := mustParse(t, head+`  - {path: m/a.onnx, metric: macs, excuses: [limit, growth], up_to: 320M, until: 2027-01-31, reason: r}
  - {path: m/b.onnx, metric: ram, until: 2026-01-01, reason: late}
`)
	today := time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC)
	var got []string
	for _, c := range DiffOn(base, next, today) {
		got = append(got, fmt.Sprintf("%s: %s → %s loosened=%v", c.Key, c.Old, c.New, c.Loosened))
	}
	want := []string{
		"waivers[0].excuses: limit → limit, growth loosened=true",
		"waivers[0].up_to: 300M → 320M loosened=true",
		"waivers[1]:  → m/b.onnx ram limit and growth until 2026-01-01: late (expired already: it excuses nothing) loosened=false",
	}
	if strings.Join(got, "\n") != strings.Join(want, "\n") {
		t.Errorf("DiffOn:\n%s\nwant\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
}
