package budget

import (
	"strings"
	"testing"
	"time"
)

// evalBudget is a hand-written fixture. porch-cam: 320 KiB = 327 680 B of
// RAM, so its 90% limit is 294 912 B (288.0 KiB) and warn_at 90% of that
// is 265 420.8 B; 2 MiB of flash. kitchen-timer keeps weights in RAM.
const evalBudget = `version: 1
devices:
  porch-cam: {ram: 320KiB, flash: 2MiB}
  kitchen-timer: {ram: 96KiB, flash: 512KiB, weights: ram}
models:
  - path: "models/porch/**/*.onnx"
    device: porch-cam
    limits: {ram: 90%, flash: 50%, macs: 60M}
    growth: {macs: 10%, file: 64KiB}
  - path: models/kitchen/*.onnx
    device: kitchen-timer
    limits: {ram: 64KiB, flash: 256KiB}
  - path: models/porch/legacy/*.onnx
    device: porch-cam
    limits: {ram: 256KiB}
waivers:
  - path: models/porch/parcel.onnx
    metric: ram
    until: 2027-01-31
    reason: ring buffer shrinks in firmware 4.2
  - path: models/porch/old.onnx
    metric: ram
    until: 2026-01-31
    reason: replaced by parcel.onnx
`

var today = time.Date(2026, 12, 2, 15, 0, 0, 0, time.UTC)

func mustParse(t *testing.T, src string) *File {
	t.Helper()
	f, err := Parse("loadline.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	return f
}

// fig builds figures with an arena, param bytes and file bytes.
func fig(arena, paramBytes, file, macs int64) *Figures {
	return &Figures{FileBytes: file, ParamBytes: paramBytes, MACs: macs, FLOPs: 2 * macs,
		Memory: MemoryFigures{Deployed: MemoryView{ArenaBytes: arena, PeakLiveBytes: arena}}}
}

func checkOf(t *testing.T, mr ModelResult, metric, kind string) Check {
	t.Helper()
	for _, c := range mr.Checks {
		if c.Metric == metric && c.Kind == kind {
			return c
		}
	}
	t.Fatalf("%s: no %s check of %s in %+v", mr.Path, kind, metric, mr.Checks)
	return Check{}
}

func TestEvaluateChecks(t *testing.T) {
	f := mustParse(t, evalBudget)
	const mib = 1 << 20
	tests := []struct {
		name   string
		in     Input
		metric string
		kind   string
		status Status
		reason string
		value  int64
		limit  int64
	}{
		{"pass", Input{Path: "models/porch/bird.onnx", Change: Added, Head: fig(204800, 300000, mib, 40e6)},
			MetricRAM, "limit", Pass,
			"ram 200.0 KiB ≤ limit 288.0 KiB (90% of porch-cam's 320.0 KiB), 88.0 KiB left", 204800, 294912},
		// 270 000 > 265 420.8 (warn) and ≤ 294 912; 270000/294912 = 91.55%;
		// 294 912 − 270 000 = 24 912 B = 24.3 KiB.
		{"warn", Input{Path: "models/porch/bird.onnx", Change: Added, Head: fig(270000, 0, mib, 40e6)},
			MetricRAM, "limit", Warn,
			"ram 263.7 KiB is 91.6% of limit 288.0 KiB (90% of porch-cam's 320.0 KiB), past warn_at 90%; 24.3 KiB left", 270000, 294912},
		// 308 736 − 294 912 = 13 824 B = 13.5 KiB over.
		{"fail", Input{Path: "models/porch/bird.onnx", Change: Added, Head: fig(308736, 0, mib, 40e6)},
			MetricRAM, "limit", Fail,
			"ram 301.5 KiB > limit 288.0 KiB (90% of porch-cam's 320.0 KiB) by 13.5 KiB", 308736, 294912},
		{"waived", Input{Path: "models/porch/parcel.onnx", Change: Added, Head: fig(308736, 0, mib, 40e6)},
			MetricRAM, "limit", Waived,
			"ram 301.5 KiB > limit 288.0 KiB (90% of porch-cam's 320.0 KiB) by 13.5 KiB; waived until 2027-01-31: ring buffer shrinks in firmware 4.2", 308736, 294912},
		{"expired waiver", Input{Path: "models/porch/old.onnx", Change: Modified, Base: fig(308736, 0, mib, 40e6), Head: fig(308736, 0, mib, 40e6)},
			MetricRAM, "limit", Fail,
			"ram 301.5 KiB > limit 288.0 KiB (90% of porch-cam's 320.0 KiB) by 13.5 KiB; its waiver expired on 2026-01-31 (loadline.yaml:21:5)", 308736, 294912},
		{"absolute limit", Input{Path: "models/porch/bird.onnx", Change: Added, Head: fig(0, 0, mib, 61e6)},
			MetricMACs, "limit", Fail, "macs 61.0 M > limit 60.0 M by 1.00 M", 61e6, 60e6},
		// flash: 50% of 2 MiB = 1 MiB; a 1 MiB file is at the limit, past 90%.
		{"% flash limit", Input{Path: "models/porch/bird.onnx", Change: Added, Head: fig(0, 0, mib, 1)},
			MetricFlash, "limit", Warn,
			"flash 1.00 MiB is 100.0% of limit 1.00 MiB (50% of porch-cam's 2.00 MiB), past warn_at 90%; 0 B left", mib, mib},
		// 48.1 M → 53.872 M is exactly +12%; allowed 48.1 M × 1.1 = 52.91 M.
		{"growth % with base", Input{Path: "models/porch/bird.onnx", Change: Modified, Base: fig(0, 0, mib, 48_100_000), Head: fig(0, 0, mib, 53_872_000)},
			MetricMACs, "growth", Fail, "macs grew 12.0% (48.1 M → 53.9 M), allowed 10%", 53_872_000, 52_910_000},
		{"growth % within", Input{Path: "models/porch/bird.onnx", Change: Modified, Base: fig(0, 0, mib, 50e6), Head: fig(0, 0, mib, 52e6)},
			MetricMACs, "growth", Pass, "macs grew 4.0% (50.0 M → 52.0 M), allowed 10%", 52e6, 55e6},
		{"growth shrinking", Input{Path: "models/porch/bird.onnx", Change: Modified, Base: fig(0, 0, mib, 50e6), Head: fig(0, 0, mib, 45e6)},
			MetricMACs, "growth", Pass, "macs fell 10.0% (50.0 M → 45.0 M), allowed 10%", 45e6, 55e6},
		// 1 MiB + 70 KiB = 1 120 256 B; allowed 1 MiB + 64 KiB = 1 114 112 B.
		{"growth absolute", Input{Path: "models/porch/bird.onnx", Change: Modified, Base: fig(0, 0, mib, 1), Head: fig(0, 0, mib+70*1024, 1)},
			MetricFile, "growth", Fail, "file grew 70.0 KiB (1.00 MiB → 1.07 MiB), allowed 64.0 KiB", mib + 70*1024, mib + 64*1024},
		{"growth without base", Input{Path: "models/porch/bird.onnx", Change: Added, Head: fig(0, 0, mib, 50e6)},
			MetricMACs, "growth", Pass, "macs growth not judged: no base figure (new model)", 50e6, -1},
		// kitchen-timer keeps weights in RAM: ram = 40 KiB arena + 30 KiB
		// weights = 70 KiB > 64 KiB.
		{"weights in RAM", Input{Path: "models/kitchen/stop.onnx", Change: Added, Head: fig(40*1024, 30*1024, 200*1024, 1)},
			MetricRAM, "limit", Fail, "ram 70.0 KiB > limit 64.0 KiB by 6.00 KiB", 70 * 1024, 64 * 1024},
		// flash is the file in both placements: 200 KiB ≤ 256 KiB.
		{"flash with weights in RAM", Input{Path: "models/kitchen/stop.onnx", Change: Added, Head: fig(40*1024, 30*1024, 200*1024, 1)},
			MetricFlash, "limit", Pass, "flash 200.0 KiB ≤ limit 256.0 KiB, 56.0 KiB left", 200 * 1024, 256 * 1024},
		// porch-cam keeps weights in flash: the same figures give ram = the arena.
		{"weights in flash", Input{Path: "models/porch/bird.onnx", Change: Added, Head: fig(40*1024, 30*1024, 200*1024, 1)},
			MetricRAM, "limit", Pass, "ram 40.0 KiB ≤ limit 288.0 KiB (90% of porch-cam's 320.0 KiB), 248.0 KiB left", 40 * 1024, 294912},
		{"unknown figure", Input{Path: "models/porch/bird.onnx", Change: Added,
			Head: &Figures{FileBytes: 10, Unknown: map[string]string{MetricArena: "shape of \"frames\" is unresolved"}}},
			MetricRAM, "limit", Fail, `cannot be computed: arena: shape of "frames" is unresolved`, 0, 294912},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			res := f.Evaluate([]Input{tt.in}, EvalOptions{Today: today})
			c := checkOf(t, res.Models[0], tt.metric, tt.kind)
			if c.Status != tt.status || c.Reason != tt.reason || c.Value != tt.value {
				t.Errorf("check = %s %d %q\nwant   %s %d %q", c.Status, c.Value, c.Reason, tt.status, tt.value, tt.reason)
			}
			switch {
			case tt.limit < 0 && c.Limit != nil:
				t.Errorf("limit = %d, want none", *c.Limit)
			case tt.limit >= 0 && (c.Limit == nil || *c.Limit != tt.limit):
				t.Errorf("limit = %v, want %d", c.Limit, tt.limit)
			}
			if c.Limit != nil && c.Headroom != nil && *c.Headroom != *c.Limit-c.Value {
				t.Errorf("headroom = %d, want limit − value", *c.Headroom)
			}
			if tt.status == Waived && (c.Waiver == nil || c.Waiver.Line != 17) {
				t.Errorf("waiver = %+v, want the one at line 17", c.Waiver)
			}
			if tt.in.Base != nil {
				bv, _ := tt.in.Base.Value(tt.metric)
				if tt.metric == MetricRAM {
					bv = tt.in.Base.Memory.Deployed.ArenaBytes // porch-cam: weights in flash
				}
				if c.Base == nil || *c.Base != bv || c.Delta == nil || *c.Delta != c.Value-bv {
					t.Errorf("base, delta = %v, %v; want %d, value − base", c.Base, c.Delta, bv)
				}
			} else if c.Base != nil || c.Delta != nil {
				t.Errorf("an added model has no base, but base = %d", *c.Base)
			}
			if !strings.HasPrefix(c.Source, "loadline.yaml:") {
				t.Errorf("source = %q", c.Source)
			}
		})
	}
}

func TestEvaluateModels(t *testing.T) {
	f := mustParse(t, evalBudget)
	const mib = 1 << 20
	small := fig(1024, 0, 1024, 1e6)
	in := []Input{
		{Path: "models/porch/bird.onnx", Change: Modified, Base: small, Head: small},
		{Path: "models/porch/gone.onnx", Change: Removed, Base: fig(999999, 0, mib, 99e6)},
		{Path: "models/porch/broken.onnx", Change: Modified, Base: small, Error: "models/porch/broken.onnx: truncated at byte 12"},
		{Path: "models/attic/owl.onnx", Change: Added, Head: small},
		{Path: "models/attic/bat.onnx", Change: Added, Error: "models/attic/bat.onnx: not an ONNX file"},
		{Path: "models/kitchen/stop.onnx", OldPath: "models/kitchen/halt.onnx", Change: Renamed, Base: small, Head: small},
	}
	res := f.Evaluate(in, EvalOptions{Today: today})
	if len(res.Models) != len(in) {
		t.Fatalf("%d results for %d models", len(res.Models), len(in))
	}
	want := []Status{Pass, Pass, Fail, Warn, Fail, Pass}
	for i, mr := range res.Models {
		if mr.Status != want[i] {
			t.Errorf("%s: status %s, want %s (%+v)", mr.Path, mr.Status, want[i], mr)
		}
	}
	gone := res.Models[1]
	if len(gone.Checks) != 0 || len(gone.Notes) != 1 || gone.Notes[0] != "removed: nothing to judge" || gone.Head != nil || gone.Base.RAM != 999999 {
		t.Errorf("removed = %+v", gone)
	}
	if res.Models[2].Error != "models/porch/broken.onnx: truncated at byte 12" {
		t.Errorf("broken = %+v", res.Models[2])
	}
	owl := res.Models[3]
	if !owl.Unbudgeted || owl.Device != "" || owl.Head.Unknown[MetricRAM] == "" {
		t.Errorf("unbudgeted = %+v", owl)
	}
	if bat := res.Models[4]; !bat.Unbudgeted || bat.Error == "" {
		t.Errorf("unmeasurable and unbudgeted = %+v", bat)
	}
	if res.Models[5].Device != "kitchen-timer" || res.Models[5].OldPath != "models/kitchen/halt.onnx" {
		t.Errorf("renamed = %+v", res.Models[5])
	}
	if bird := res.Models[0]; bird.Device != "porch-cam" || bird.Rule != "models/porch/**/*.onnx" || bird.Head.RAM != 1024 || bird.Head.Flash != 1024 {
		t.Errorf("bird = %+v", bird)
	}
	// The expired waiver warns (it fails only the checks it excused, of
	// the models it covers: old.onnx is over its ram limit); the
	// unbudgeted model warns.
	wantProblems := []string{
		"waiver for models/porch/old.onnx ram limit and growth expired on 2026-01-31 (loadline.yaml:21:5): it no longer excuses anything; renew it with a later date or remove it",
		"models/attic/owl.onnx is not budgeted: no models entry in loadline.yaml matches it",
		"models/attic/bat.onnx is not budgeted: no models entry in loadline.yaml matches it",
	}
	if strings.Join(res.Problems, "\n") != strings.Join(wantProblems, "\n") {
		t.Errorf("problems:\n%s\nwant\n%s", strings.Join(res.Problems, "\n"), strings.Join(wantProblems, "\n"))
	}
	if res.Findings[0].Level != Warn || res.Findings[1].Level != Warn || res.Findings[0].Line != 21 {
		t.Errorf("findings = %+v", res.Findings)
	}
	if res.Verdict != Fail {
		t.Errorf("verdict = %s, want fail", res.Verdict)
	}
	if len(res.Waivers) != 1 || res.Waivers[0].Path != "models/porch/parcel.onnx" {
		t.Errorf("waivers in force = %+v", res.Waivers)
	}
}

func TestEvaluateVerdict(t *testing.T) {
	f := mustParse(t, evalBudget)
	// A day before the old waiver expired: no finding from it.
	before := time.Date(2026, 1, 31, 23, 59, 0, 0, time.UTC)
	ok := fig(1024, 0, 1024, 1e6)
	tests := []struct {
		name   string
		in     []Input
		opts   EvalOptions
		status Status
	}{
		{"all pass", []Input{{Path: "models/porch/a.onnx", Change: Added, Head: ok}}, EvalOptions{Today: before}, Pass},
		{"unbudgeted warns", []Input{{Path: "other/a.onnx", Change: Added, Head: ok}}, EvalOptions{Today: before}, Warn},
		{"unbudgeted fails when strict", []Input{{Path: "other/a.onnx", Change: Added, Head: ok}}, EvalOptions{Today: before, Strict: true}, Fail},
		{"waived counts as pass", []Input{{Path: "models/porch/parcel.onnx", Change: Added, Head: fig(308736, 0, 1024, 1)}}, EvalOptions{Today: before}, Pass},
		// An expired waiver warns a change that touches none of its
		// models, and fails a model it covers that is over the limit.
		{"expired waiver warns", nil, EvalOptions{Today: today}, Warn},
		{"expired waiver fails its model", []Input{{Path: "models/porch/old.onnx", Change: Modified, Head: fig(308736, 0, 1024, 1)}}, EvalOptions{Today: today}, Fail},
		{"expired waiver, model within budget", []Input{{Path: "models/porch/old.onnx", Change: Modified, Head: ok}}, EvalOptions{Today: today}, Warn},
		{"nothing", nil, EvalOptions{Today: before}, Pass},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := f.Evaluate(tt.in, tt.opts).Verdict; got != tt.status {
				t.Errorf("verdict %s, want %s", got, tt.status)
			}
		})
	}
}

func TestEvaluateConflictingRules(t *testing.T) {
	f := mustParse(t, evalBudget)
	// models/porch/legacy/x.onnx matches rule 0 (ram 90% = 288 KiB, line 8)
	// and rule 2 (ram 256KiB, line 15).
	res := f.Evaluate([]Input{{Path: "models/porch/legacy/x.onnx", Change: Added, Head: fig(1024, 0, 1024, 1)}}, EvalOptions{Today: today})
	mr := res.Models[0]
	c := checkOf(t, mr, MetricRAM, "limit")
	want := `rules disagree on the ram limit: models[0] "models/porch/**/*.onnx" (loadline.yaml:6:5) says 90% of porch-cam's 320.0 KiB = 288.0 KiB, models[2] "models/porch/legacy/*.onnx" (loadline.yaml:13:5) says 256KiB`
	if c.Status != Fail || c.Reason != want {
		t.Errorf("check = %s %q\nwant %q", c.Status, c.Reason, want)
	}
	if mr.Status != Fail || mr.Rule != "models/porch/**/*.onnx, models/porch/legacy/*.onnx" {
		t.Errorf("model = %+v", mr)
	}
	// The rules agree on everything else: macs is still judged.
	if c := checkOf(t, mr, MetricMACs, "limit"); c.Status != Pass {
		t.Errorf("macs = %+v", c)
	}
	found := false
	for _, p := range res.Problems {
		found = found || p == "models/porch/legacy/x.onnx: "+want
	}
	if !found {
		t.Errorf("problems = %q", res.Problems)
	}

	g := mustParse(t, `version: 1
devices:
  porch-cam: {ram: 320KiB}
  kitchen-timer: {ram: 96KiB}
models:
  - path: "models/**"
    device: porch-cam
    dims: {batch: 1}
  - path: "models/k/*"
    device: kitchen-timer
    dims: {batch: 2}
`)
	mr = g.Evaluate([]Input{{Path: "models/k/a.onnx", Change: Added, Head: fig(1, 1, 1, 1)}}, EvalOptions{Today: today}).Models[0]
	wantNotes := []string{
		`rules disagree on the device: models[0] "models/**" (loadline.yaml:6:5) says "porch-cam", models[1] "models/k/*" (loadline.yaml:9:5) says "kitchen-timer"`,
		`rules disagree on dim batch: models[0] "models/**" (loadline.yaml:6:5) says 1, models[1] "models/k/*" (loadline.yaml:9:5) says 2`,
	}
	if mr.Status != Fail || strings.Join(mr.Notes, "\n") != strings.Join(wantNotes, "\n") {
		t.Errorf("notes:\n%s\nwant\n%s", strings.Join(mr.Notes, "\n"), strings.Join(wantNotes, "\n"))
	}
	if mr.Device != "" || len(mr.Checks) != 0 || mr.Head.Unknown[MetricRAM] != "the rules matching this model disagree on its device" {
		t.Errorf("with no agreed device nothing is judged: %+v", mr)
	}
	if _, err := g.Dims("models/k/a.onnx"); err == nil || !strings.Contains(err.Error(), "rules disagree on dim batch") {
		t.Errorf("Dims: %v", err)
	}
}

func TestDeploy(t *testing.T) {
	in := fig(1000, 300, 5000, 1)
	in.Unknown = map[string]string{MetricWeights: "int4 packing unknown"}
	flash := &Device{Name: "porch-cam", Weights: WeightsFlash}
	ram := &Device{Name: "kitchen-timer", Weights: WeightsRAM}
	if got := flash.Deploy(in); got.RAM != 1000 || got.Flash != 5000 || got.Unknown[MetricRAM] != "" {
		t.Errorf("weights in flash: %+v", got)
	}
	got := ram.Deploy(in)
	if got.RAM != 1300 || got.Flash != 5000 || got.Unknown[MetricRAM] != "weights: int4 packing unknown" {
		t.Errorf("weights in ram: %+v", got)
	}
	if len(in.Unknown) != 1 {
		t.Errorf("Deploy changed its input: %v", in.Unknown)
	}
}

// TestEvaluateWaivedModelStatus: a model whose only failure is waived has
// status waived (reports count it "over budget but waived" and list it,
// not among the models within budget); a waived check next to a warning
// leaves the model at warn; the verdict counts waived as pass.
func TestEvaluateWaivedModelStatus(t *testing.T) {
	// Without the expired waiver, which fails the verdict on its own.
	src, _, _ := strings.Cut(evalBudget, "  - path: models/porch/old.onnx")
	f := mustParse(t, src)
	// parcel.onnx: ram 300 KiB > the 288 KiB limit, waived until 2027-01-31.
	waivedOnly := Input{Path: "models/porch/parcel.onnx", Change: Added, Head: fig(300*1024, 1000, 1000, 1e6)}
	// and MACs 58M: past warn_at (90% of 60M = 54M), under the limit.
	waivedAndWarn := Input{Path: "models/porch/parcel.onnx", Change: Added, Head: fig(300*1024, 1000, 1000, 58e6)}
	for _, tt := range []struct {
		name    string
		in      Input
		status  Status
		verdict Status
	}{
		{"waived only", waivedOnly, Waived, Pass},
		{"waived and a warning", waivedAndWarn, Warn, Warn},
	} {
		t.Run(tt.name, func(t *testing.T) {
			res := f.Evaluate([]Input{tt.in}, EvalOptions{Today: today})
			if c := checkOf(t, res.Models[0], MetricRAM, "limit"); c.Status != Waived {
				t.Fatalf("ram check %s, want waived: %s", c.Status, c.Reason)
			}
			if got := res.Models[0].Status; got != tt.status {
				t.Errorf("model status %s, want %s", got, tt.status)
			}
			if res.Verdict != tt.verdict {
				t.Errorf("verdict %s, want %s", res.Verdict, tt.verdict)
			}
		})
	}
}
