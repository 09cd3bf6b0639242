package budget

import (
	"strings"
	"testing"
)

func TestLatencyEnergyQuantities(t *testing.T) {
	for _, c := range []struct {
		text string
		kind Kind
		v    int64
	}{
		{"250ms", Duration, 250_000_000}, {"181.9 ms", Duration, 181_900_000}, {"800us", Duration, 800_000},
		{"800µs", Duration, 800_000}, {"2s", Duration, 2_000_000_000}, {"10mJ", Energy, 10_000_000},
		{"7374uJ", Energy, 7_374_000}, {"0.5J", Energy, 500_000_000},
	} {
		q, err := ParseQuantity(c.text)
		if err != nil || q.Kind != c.kind || q.Value != c.v {
			t.Errorf("ParseQuantity(%q) = %+v, %v; want %v %d", c.text, q, err, c.kind, c.v)
		}
	}
	for _, c := range []struct {
		metric string
		v      int64
		want   string
	}{
		{MetricLatency, 181_900_000, "181.9 ms"}, {MetricLatency, 850_000, "850.0 µs"}, {MetricLatency, 12, "12 ns"},
		{MetricLatency, 1_200_000_000, "1.20 s"}, {MetricEnergy, 7_374_000, "7.37 mJ"}, {MetricEnergy, 412_000, "412.0 µJ"},
		{MetricUnsupported, 2, "2"},
	} {
		if got := FormatValue(c.metric, c.v); got != c.want {
			t.Errorf("FormatValue(%s, %d) = %q, want %q", c.metric, c.v, got, c.want)
		}
	}
}

const targetBudget = `version: 1
devices:
  m4: {ram: 320KiB, flash: 2MiB, target: m4-reference@120MHz}
  bare: {ram: 320KiB}
models:
  - path: "kws/*.tflite"
    device: m4
    limits: {latency: 250ms, energy: 10mJ}
    growth: {latency: 10%}
  - path: "bare/*.onnx"
    device: bare
`

func TestTargetLimits(t *testing.T) {
	f := mustParse(t, targetBudget)
	if f.Devices["m4"].Target == nil || f.Devices["m4"].Target.Value != "m4-reference@120MHz" || f.Devices["bare"].Target != nil {
		t.Fatalf("device targets %+v %+v", f.Devices["m4"].Target, f.Devices["bare"].Target)
	}
	head := &Figures{Target: &TargetFigures{Name: "m4-reference", LatencyMS: 181.9, EnergyUJ: 7374}}
	slow := &Figures{Target: &TargetFigures{Name: "m4-reference", LatencyMS: 600.6, EnergyUJ: 24313,
		Unsupported: []string{"n3 (MyOp): tflite-micro has no kernel for custom operator MyOp"}}}
	res := f.Evaluate([]Input{
		{Path: "kws/a.tflite", Change: Added, Head: head},
		{Path: "kws/b.tflite", Change: Modified, Base: head, Head: slow},
		{Path: "bare/c.onnx", Change: Added, Head: &Figures{}},
	}, EvalOptions{Today: today})
	a, b, c := res.Models[0], res.Models[1], res.Models[2]
	if a.Status != Pass || checkOf(t, a, MetricLatency, "limit").Reason != "latency 181.9 ms ≤ limit 250.0 ms, 68.1 ms left" {
		t.Errorf("a: %s %+v", a.Status, a.Checks)
	}
	if checkOf(t, a, MetricUnsupported, "limit").Status != Pass {
		t.Errorf("a: unsupported check %+v", a.Checks)
	}
	if b.Status != Fail {
		t.Errorf("b: %s", b.Status)
	}
	for _, m := range []string{MetricLatency, MetricEnergy, MetricUnsupported} {
		if checkOf(t, b, m, "limit").Status != Fail {
			t.Errorf("b: %s %+v", m, checkOf(t, b, m, "limit"))
		}
	}
	if r := checkOf(t, b, MetricUnsupported, "limit").Reason; !strings.Contains(r, "custom operator MyOp") {
		t.Errorf("b: unsupported reason %q", r)
	}
	if g := checkOf(t, b, MetricLatency, "growth"); g.Status != Fail || !strings.Contains(g.Reason, "latency grew 230.2%") {
		t.Errorf("b: growth %+v", g)
	}
	if len(c.Checks) != 0 || c.Status != Pass {
		t.Errorf("c: a device without a target gets no device-cost checks: %+v", c.Checks)
	}
	for _, bad := range []struct{ src, want string }{
		{strings.Replace(targetBudget, "latency: 250ms", "latency: 250", 1), `"250": latency is a duration`},
		{strings.Replace(targetBudget, "latency: 250ms", "latency: 1MiB", 1), `"1MiB": latency is a duration`},
		{strings.Replace(targetBudget, "energy: 10mJ", "energy: 10ms", 1), `"10ms": energy is an energy`},
		{strings.Replace(targetBudget, "device: bare", "device: bare\n    limits: {latency: 1s}", 1), `device "bare" names no target to estimate latency on`},
		{strings.Replace(targetBudget, "limits: {latency: 250ms, energy: 10mJ}", "limits: {macs: 5ms}", 1), `"5ms" is a duration; macs is a count`},
	} {
		_, err := Parse("loadline.yaml", []byte(bad.src))
		if err == nil || !strings.Contains(err.Error(), bad.want) {
			t.Errorf("error %v, want %q", err, bad.want)
		}
	}
}

func TestDiffTarget(t *testing.T) {
	base := mustParse(t, targetBudget)
	head := mustParse(t, strings.Replace(targetBudget, "target: m4-reference@120MHz", "target: {base: m4-optimized, clock: 80MHz}", 1))
	var got []BudgetChange
	for _, c := range Diff(base, head) {
		if strings.HasSuffix(c.Key, ".target") {
			got = append(got, c)
		}
	}
	if len(got) != 1 || got[0].Old != "m4-reference@120MHz" || got[0].New != "{base: m4-optimized, clock: 80MHz}" || !got[0].Loosened {
		t.Errorf("target change: %+v", got)
	}
	if d := Diff(base, mustParse(t, targetBudget)); len(d) != 0 {
		t.Errorf("no change: %+v", d)
	}
}
