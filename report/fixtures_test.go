package report

import (
	"fmt"
	"time"

	"github.com/loadline/loadline/budget"
)

// The fixtures are an invented scenario, built by hand as evaluation would
// hand them over (where that is easy to get wrong, as for the model no rule
// matches, through budget's evaluation itself: evaluated()): a bird-watching camera ("porch-cam": 512 KiB SRAM, 2 MiB
// flash, weights in flash) and a kitchen timer with keyword spotting
// ("kitchen-timer": 256 KiB SRAM, 1 MiB flash, weights in RAM). The budget
// they were judged against reads:
//
//	models/birdcam/**/*.onnx on porch-cam: ram 90% (460.8 KiB), flash 1.5MiB,
//	  params 300k, macs 60M; growth ram 5%, macs 10%, file 64KiB; warn_at 90%
//	models/kitchen/*.onnx on kitchen-timer: ram 95% (243.2 KiB), flash 768KiB,
//	  macs 5M; growth ram 5%; warn_at 90%
//
// Every number below is consistent with that budget: limits, deltas and
// headrooms are worked out by chk, not typed.

type fixture struct {
	name string
	r    *budget.Result
}

const (
	porchRAMLimit   = 524288 * 90 / 100 // 90% of 512 KiB, rounded down: 471,859 B
	porchFlashLimit = 1572864           // 1.5 MiB
	porchParams     = 300000
	porchMACs       = 60000000
	kitchenRAMLimit = 262144 * 95 / 100 // 95% of 256 KiB: 249,036 B
	kitchenFlash    = 786432            // 768 KiB
	kitchenMACs     = 5000000
)

var (
	baseRev = budget.Revision{Ref: "origin/main", Commit: "3f2a9c1e5b7d4a0c9e8f1b2a3c4d5e6f7a8b9c0d"}
	headRev = budget.Revision{Ref: "HEAD", Commit: "9be04d2a7c1f3e5b8d0a2c4e6f8a1b3c5d7e9f0a"}

	v4Waiver = budget.Waiver{
		Path: "models/birdcam/v4.onnx", Metric: budget.MetricRAM,
		Until:  time.Date(2027, 1, 31, 0, 0, 0, 0, time.UTC),
		Reason: "ring buffer shrinks in firmware 4.2", Line: 27,
	}
	expiredFinding = budget.Finding{Level: budget.Fail, Line: 31, Column: 5,
		Message: "waiver for models/birdcam/v3.onnx ram expired on 2026-11-30 (loadline.yaml:31:5)"}

	porchRAMChange = budget.BudgetChange{Key: "devices.porch-cam.ram", Old: "512KiB", New: "640KiB", Loosened: true}
	macsChange     = budget.BudgetChange{Key: "models[0].limits.macs", Old: "60M", New: "50M", Path: "models/birdcam/**/*.onnx"}

	// porchSources are where the birdcam rule sets each limit and growth
	// allowance in the invented loadline.yaml.
	porchSources = map[string]string{
		"limit ram": "loadline.yaml:12:15", "limit flash": "loadline.yaml:12:26",
		"limit params": "loadline.yaml:12:42", "limit macs": "loadline.yaml:12:55",
		"growth ram": "loadline.yaml:13:15", "growth macs": "loadline.yaml:13:25", "growth file": "loadline.yaml:13:36",
	}
)

// fixtureBudget is the invented loadline.yaml described above.
const fixtureBudget = `version: 1
devices:
  porch-cam: {ram: 512KiB, flash: 2MiB, weights: flash}
  kitchen-timer: {ram: 256KiB, flash: 1MiB, weights: ram}
models:
  - path: "models/birdcam/**/*.onnx"
    device: porch-cam
    limits: {ram: 90%, flash: 1.5MiB, params: 300k, macs: 60M}
    growth: {ram: 5%, macs: 10%, file: 64KiB}
    warn_at: 90%
  - path: models/kitchen/*.onnx
    device: kitchen-timer
    limits: {ram: 95%, flash: 768KiB, macs: 5M}
    growth: {ram: 5%}
    warn_at: 90%
`

// evaluated judges one model by fixtureBudget through budget's own
// evaluation, and returns its result and the one finding it raised: the
// parts of a fixture that are not worth building by hand (a model no rule
// matches: its ram and flash are unknown, not 0).
func evaluated(in budget.Input) (budget.ModelResult, budget.Finding) {
	f, err := budget.Parse("loadline.yaml", []byte(fixtureBudget))
	if err != nil {
		panic(err)
	}
	res := f.Evaluate([]budget.Input{in}, budget.EvalOptions{Today: time.Date(2026, 12, 2, 0, 0, 0, 0, time.UTC)})
	if len(res.Models) != 1 || len(res.Findings) != 1 {
		panic(fmt.Sprintf("fixture %s: %d results, findings %+v", in.Path, len(res.Models), res.Findings))
	}
	return res.Models[0], res.Findings[0]
}

func i64(v int64) *int64 { return &v }

// chk builds one check the way evaluation fills it: delta and headroom
// from value, base and limit. base or limit < 0 means none.
func chk(metric, kind string, value, base, limit int64, st budget.Status, reason string) budget.Check {
	c := budget.Check{Metric: metric, Kind: kind, Value: value, Status: st, Reason: reason}
	if base >= 0 {
		c.Base = i64(base)
		c.Delta = i64(value - base)
	}
	if limit >= 0 {
		c.Limit = i64(limit)
		c.Headroom = i64(limit - value)
	}
	return c
}

// grown is the largest head value a growth allowance of pct percent lets
// through.
func grown(base, pct int64) int64 { return base + base*pct/100 }

// figs builds figures for a porch-cam model (weights in flash): ram is the
// deployed arena, flash the weights plus 6 % graph overhead.
func porchFigs(file, params, weights, macs, arena int64) *budget.Figures {
	return &budget.Figures{
		FileBytes: file, Params: params, ParamBytes: weights, MACs: macs, FLOPs: 2*macs + macs/20,
		Memory: budget.MemoryFigures{
			Graph:    budget.MemoryView{PeakLiveBytes: arena * 13 / 10, ArenaBytes: arena * 14 / 10},
			Deployed: budget.MemoryView{PeakLiveBytes: arena * 96 / 100, ArenaBytes: arena},
		},
		RAM: arena, Flash: weights + weights*6/100,
	}
}

// limitReason words a limit check as evaluation does.
func limitReason(metric string, v, lim int64, explain string, st budget.Status) string {
	what := Figure(metric, lim)
	if explain != "" {
		what += " (" + explain + ")"
	}
	fv := Figure(metric, v)
	switch st {
	case budget.Fail, budget.Waived:
		return fmt.Sprintf("%s %s > limit %s by %s", metric, fv, what, Figure(metric, v-lim))
	case budget.Warn:
		return fmt.Sprintf("%s %s is %s of limit %s, past warn_at 90%%; %s left", metric, fv, percent(v, lim, false), what, Figure(metric, lim-v))
	}
	return fmt.Sprintf("%s %s ≤ limit %s, %s left", metric, fv, what, Figure(metric, lim-v))
}

// growthReason words a growth check as evaluation does; allowed is "5%"
// for a share of the base, else a figure.
func growthReason(metric string, base, v int64, allowed string) string {
	d := v - base
	fromTo := fmt.Sprintf("(%s → %s)", Figure(metric, base), Figure(metric, v))
	var moved string
	switch {
	case d == 0:
		moved = fmt.Sprintf("%s unchanged at %s", metric, Figure(metric, v))
	case allowed[len(allowed)-1] == '%':
		verb := "grew"
		if d < 0 {
			verb, d = "fell", -d
		}
		moved = fmt.Sprintf("%s %s %s %s", metric, verb, percent(d, base, false), fromTo)
	case d > 0:
		moved = fmt.Sprintf("%s grew %s %s", metric, Figure(metric, d), fromTo)
	default:
		moved = fmt.Sprintf("%s fell %s %s", metric, Figure(metric, -d), fromTo)
	}
	return moved + ", allowed " + allowed
}

// porchChecks judges porch-cam figures as the birdcam rule does, in
// evaluation's order (budget.Metrics, a metric's limit before its growth);
// the statuses are given so each fixture says what it shows. As evaluation
// does, every check of a model with a base carries the base figure.
func porchChecks(base, head *budget.Figures, ram, ramGrowth, macs budget.Status) []budget.Check {
	const porchRAM = "90% of porch-cam's 512 KiB"
	growth := func(metric string, pct int64, allowed int64, allowedText string, st budget.Status) budget.Check {
		bv, _ := base.Value(metric)
		v, _ := head.Value(metric)
		lim := bv + allowed
		if pct > 0 {
			lim = grown(bv, pct)
		}
		return chk(metric, "growth", v, bv, lim, st, growthReason(metric, bv, v, allowedText))
	}
	checks := []budget.Check{
		chk(budget.MetricRAM, "limit", head.RAM, baseOf(base, budget.MetricRAM), porchRAMLimit, ram, limitReason(budget.MetricRAM, head.RAM, porchRAMLimit, porchRAM, ram)),
	}
	if base != nil {
		checks = append(checks, growth(budget.MetricRAM, 5, 0, "5%", ramGrowth))
	}
	checks = append(checks,
		chk(budget.MetricFlash, "limit", head.Flash, baseOf(base, budget.MetricFlash), porchFlashLimit, budget.Pass, limitReason(budget.MetricFlash, head.Flash, porchFlashLimit, "", budget.Pass)),
		chk(budget.MetricParams, "limit", head.Params, baseOf(base, budget.MetricParams), porchParams, budget.Pass, limitReason(budget.MetricParams, head.Params, porchParams, "", budget.Pass)),
		chk(budget.MetricMACs, "limit", head.MACs, baseOf(base, budget.MetricMACs), porchMACs, macs, limitReason(budget.MetricMACs, head.MACs, porchMACs, "", macs)),
	)
	if base != nil {
		checks = append(checks,
			growth(budget.MetricMACs, 10, 0, "10%", budget.Pass),
			growth(budget.MetricFile, 0, 65536, "64.0 KiB", budget.Pass))
	}
	for i := range checks {
		checks[i].Source = porchSources[checks[i].Kind+" "+checks[i].Metric]
	}
	return checks
}

func baseOf(f *budget.Figures, metric string) int64 {
	if v, ok := f.Value(metric); ok {
		return v
	}
	return -1
}

// worst is the model status its checks give.
func worst(checks []budget.Check) budget.Status {
	s := budget.Pass
	for _, c := range checks {
		if rank(c.Status) < rank(s) {
			s = c.Status
		}
	}
	return s
}

func porchModel(path string, change budget.Change, base, head *budget.Figures, ram, ramGrowth, macs budget.Status) budget.ModelResult {
	m := budget.ModelResult{
		Path: path, Change: change, Device: "porch-cam", Rule: "models/birdcam/**/*.onnx",
		Base: base, Head: head, Checks: porchChecks(base, head, ram, ramGrowth, macs),
	}
	m.Status = worst(m.Checks)
	return m
}

// trackerModel is within budget and a little smaller than before.
func trackerModel() budget.ModelResult {
	m := porchModel("models/birdcam/tracker.onnx", budget.Modified,
		porchFigs(402304, 88200, 90100, 12400000, 196608),
		porchFigs(398720, 87100, 88900, 12150000, 192512),
		budget.Pass, budget.Pass, budget.Pass)
	m.Detail = &budget.Detail{
		TopMACs: []budget.Layer{
			{Node: "backbone/conv3", Op: "Conv", Value: 3110400},
			{Node: "backbone/conv4", Op: "Conv", Value: 2764800},
			{Node: "head/assoc", Op: "MatMul", Value: 1310720},
		},
		TopMemory: []budget.Layer{
			{Node: "backbone/conv1", Op: "Conv", Value: 73728},
			{Node: "backbone/conv2", Op: "Conv", Value: 49152},
		},
		LiveBytes: liveCurve(24, 7, 249856),
		PeakStep:  7,
		Views: []budget.DetailView{
			{Name: "graph", LiveBytes: liveCurve(24, 7, 249856), PeakStep: 7, PeakBytes: 249856},
			{Name: "deployed", Judged: true, LiveBytes: liveCurve(24, 5, 122880), PeakStep: 5, PeakBytes: 122880,
				AtPeak: []budget.DetailTensor{{Name: "backbone/conv1_out", Bytes: 73728, Offset: 0}, {Name: "backbone/conv2_out", Bytes: 49152, Offset: 73728}}},
		},
	}
	return m
}

// detectorModel breaks its ram limit and its ram growth: a new
// high-resolution stage.
func detectorModel() budget.ModelResult {
	m := porchModel("models/birdcam/detector.onnx", budget.Modified,
		porchFigs(1210400, 258400, 281900, 43800000, 410624),
		porchFigs(1236000, 262000, 284600, 47300000, 509952),
		budget.Fail, budget.Fail, budget.Pass)
	m.Detail = &budget.Detail{
		TopMACs: []budget.Layer{
			{Node: "stem/conv0", Op: "Conv", Value: 10838016},
			{Node: "hires/conv1", Op: "Conv", Value: 8128512},
			{Node: "block2/expand", Op: "Conv", Value: 5419008},
			{Node: "block3/expand", Op: "Conv", Value: 4064256},
			{Node: "block4/project", Op: "Conv", Value: 2709504},
			{Node: "head/cls", Op: "Gemm", Value: 1280000},
		},
		TopMemory: []budget.Layer{
			{Node: "hires/conv1", Op: "Conv", Value: 225792},
			{Node: "stem/conv0", Op: "Conv", Value: 150528},
			{Node: "hires/upsample", Op: "Resize", Value: 112896},
		},
		LiveBytes: liveCurve(150, 61, 662938),
		PeakStep:  61,
	}
	return m
}

// classifierModel is within its limits but its MACs pass the warning line.
func classifierModel() budget.ModelResult {
	return porchModel("models/birdcam/classifier.onnx", budget.Modified,
		porchFigs(760320, 184000, 190200, 51200000, 294912),
		porchFigs(771584, 186400, 192700, 55800000, 301056),
		budget.Pass, budget.Pass, budget.Warn)
}

// v4Model is over its ram limit under a waiver.
func v4Model() budget.ModelResult {
	m := porchModel("models/birdcam/v4.onnx", budget.Modified,
		porchFigs(1302528, 276000, 289800, 52100000, 487424),
		porchFigs(1304576, 276000, 289800, 52400000, 489472),
		budget.Waived, budget.Pass, budget.Pass)
	w := v4Waiver
	m.Checks[0].Waiver = &w
	m.Checks[0].Reason += "; waived until 2027-01-31: ring buffer shrinks in firmware 4.2"
	m.Status = budget.Waived
	return m
}

// v3Model is over its ram limit and its waiver has expired.
func v3Model() budget.ModelResult {
	m := porchModel("models/birdcam/v3.onnx", budget.Modified,
		porchFigs(1288192, 274500, 288300, 51800000, 479232),
		porchFigs(1290240, 274500, 288300, 51900000, 480256),
		budget.Fail, budget.Pass, budget.Pass)
	m.Checks[0].Reason += "; its waiver expired on 2026-11-30"
	return m
}

// wakewordModel is new, on the kitchen timer, whose weights sit in RAM.
func wakewordModel() budget.ModelResult {
	head := &budget.Figures{
		FileBytes: 96512, Params: 71200, ParamBytes: 73400, MACs: 3120000, FLOPs: 6480000,
		Memory: budget.MemoryFigures{
			Graph:    budget.MemoryView{PeakLiveBytes: 151552, ArenaBytes: 163840},
			Deployed: budget.MemoryView{PeakLiveBytes: 112640, ArenaBytes: 118784},
		},
		RAM: 118784 + 73400, Flash: 76100,
	}
	m := budget.ModelResult{
		Path: "models/kitchen/wakeword.onnx", Change: budget.Added, Device: "kitchen-timer", Rule: "models/kitchen/*.onnx",
		Head: head,
		Checks: []budget.Check{
			chk(budget.MetricRAM, "limit", head.RAM, -1, kitchenRAMLimit, budget.Pass,
				limitReason(budget.MetricRAM, head.RAM, kitchenRAMLimit, "95% of kitchen-timer's 256 KiB", budget.Pass)),
			chk(budget.MetricRAM, "growth", head.RAM, -1, -1, budget.Pass, "ram growth not judged: no base figure (new model)"),
			chk(budget.MetricFlash, "limit", head.Flash, -1, kitchenFlash, budget.Pass,
				limitReason(budget.MetricFlash, head.Flash, kitchenFlash, "", budget.Pass)),
			chk(budget.MetricMACs, "limit", head.MACs, -1, kitchenMACs, budget.Pass,
				limitReason(budget.MetricMACs, head.MACs, kitchenMACs, "", budget.Pass)),
		},
		Status: budget.Pass,
	}
	m.Detail = &budget.Detail{
		TopMACs: []budget.Layer{
			{Node: "dwconv1", Op: "Conv", Value: 1036800},
			{Node: "pwconv1", Op: "Conv", Value: 921600},
			{Node: "gru", Op: "GRU", Value: 737280},
		},
		LiveBytes: liveCurve(9, 2, 151552),
		PeakStep:  2,
	}
	return m
}

// legacyModel was deleted in the change.
func legacyModel() budget.ModelResult {
	return budget.ModelResult{
		Path: "models/birdcam/legacy.onnx", Change: budget.Removed, Device: "porch-cam", Rule: "models/birdcam/**/*.onnx",
		Base:   porchFigs(2210816, 412000, 430100, 88000000, 601088),
		Status: budget.Pass, Notes: []string{"removed: nothing to judge"},
	}
}

// liveCurve is a made-up live-memory profile: rising to peak at step
// peakStep, then falling back with a second, smaller hump.
func liveCurve(steps, peakStep int, peak int64) []int64 {
	out := make([]int64, steps)
	for i := range out {
		var v int64
		if i <= peakStep {
			v = peak/5 + (peak-peak/5)*int64(i)/int64(max(peakStep, 1))
		} else {
			rest := int64(steps - peakStep)
			v = peak - (peak*3/4)*int64(i-peakStep)/rest
			if d := i - (peakStep+steps)/2 - steps/10; d > -steps/12 && d < steps/12 {
				v += peak / 4 // the second hump
			}
		}
		out[i] = min(v, peak)
	}
	out[peakStep] = peak
	return out
}

func one(name string, verdict budget.Status, m budget.ModelResult) fixture {
	return fixture{name, &budget.Result{Base: baseRev, Head: headRev, Verdict: verdict, Models: []budget.ModelResult{m}}}
}

// fixtures are the results every renderer's goldens are made from.
func fixtures() []fixture {
	fail := one("fail", budget.Fail, detectorModel())
	fail.r.BudgetChanges = []budget.BudgetChange{porchRAMChange, macsChange}

	waived := one("waived", budget.Pass, v4Model())
	waived.r.Waivers = []budget.Waiver{v4Waiver}

	expired := one("expired-waiver", budget.Fail, v3Model())
	expired.r.Findings = []budget.Finding{expiredFinding}
	expired.r.Problems = []string{expiredFinding.Message}

	return []fixture{
		one("pass", budget.Pass, trackerModel()),
		one("warn", budget.Warn, classifierModel()),
		fail,
		waived,
		expired,
		one("added", budget.Pass, wakewordModel()),
		one("removed", budget.Pass, legacyModel()),
		mixed(),
		many(),
	}
}

// mixed is one pull request with a bit of everything, as a reviewer sees
// it: listed by path, as evaluation lists them.
func mixed() fixture {
	renamed := trackerModel()
	renamed.Change, renamed.OldPath = budget.Renamed, "models/birdcam/track.onnx"
	broken := budget.ModelResult{
		Path: "models/birdcam/broken.onnx", Change: budget.Modified, Device: "porch-cam", Rule: "models/birdcam/**/*.onnx",
		Base:   porchFigs(640000, 150000, 155000, 20000000, 200704),
		Status: budget.Fail,
		Error:  "model/onnx: models/birdcam/broken.onnx: graph.node[3].attribute[1]: truncated field at byte 18244",
	}
	stray, strayFinding := evaluated(budget.Input{Path: "models/experiments/tiny.onnx", Change: budget.Added,
		Head: &budget.Figures{FileBytes: 18432, Params: 4100, ParamBytes: 16400, MACs: 210000, FLOPs: 430000}})
	return fixture{"mixed", &budget.Result{
		Base: baseRev, Head: headRev, Verdict: budget.Fail,
		Models: []budget.ModelResult{
			broken, classifierModel(), detectorModel(), legacyModel(), renamed, v3Model(), v4Model(),
			stray, wakewordModel(),
		},
		BudgetChanges: []budget.BudgetChange{porchRAMChange, macsChange},
		Waivers:       []budget.Waiver{v4Waiver},
		Findings:      []budget.Finding{expiredFinding, strayFinding},
		Problems:      []string{expiredFinding.Message, strayFinding.Message},
	}}
}

// many is a change that retrained a whole zoo of 200 camera models: three
// break their ram limit, five come close on MACs, the rest pass.
func many() fixture {
	r := &budget.Result{Base: baseRev, Head: headRev, Verdict: budget.Fail}
	for i := 1; i <= 200; i++ {
		arena := int64(300000 + (i*7919)%120000)
		macs := int64(30000000 + (i*104729)%20000000)
		ram, macsSt := budget.Pass, budget.Pass
		switch {
		case i%67 == 13: // 13, 80, 147
			arena, ram = 480000+int64(i)*16, budget.Fail
		case i%41 == 7: // 7, 48, 89, 130, 171
			macs, macsSt = 54500000+int64(i)*1000, budget.Warn
		}
		base := porchFigs(900000+int64(i)*512, 200000+int64(i)*100, 210000+int64(i)*100, macs-500000, arena-4096)
		head := porchFigs(900000+int64(i)*512+1024, 200000+int64(i)*100, 210000+int64(i)*100, macs, arena)
		growth := budget.Pass
		if ram == budget.Fail && head.RAM > grown(base.RAM, 5) {
			growth = budget.Fail
		}
		m := porchModel(fmt.Sprintf("models/birdcam/zoo/cam-%03d.onnx", i), budget.Modified, base, head, ram, growth, macsSt)
		// The zoo's own rule, models/birdcam/zoo/*.onnx, keeps to ram, its
		// growth and macs: three checks a model.
		m.Rule = "models/birdcam/zoo/*.onnx"
		var kept []budget.Check
		for _, c := range m.Checks {
			if c.Metric == budget.MetricRAM || c.Metric == budget.MetricMACs && c.Kind == "limit" {
				kept = append(kept, c)
			}
		}
		m.Checks = kept
		r.Models = append(r.Models, m)
	}
	return fixture{"many", r}
}
