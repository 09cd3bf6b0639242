package target

import (
	"errors"
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"
)

func parseNode(t *testing.T, text string) *yaml.Node {
	t.Helper()
	var doc yaml.Node
	if err := yaml.Unmarshal([]byte(text), &doc); err != nil {
		t.Fatal(err)
	}
	return doc.Content[0]
}

func TestFromYAML(t *testing.T) {
	tg, err := FromYAML(parseNode(t, "m4-reference@60MHz"))
	if err != nil || tg.ClockHz != 60e6 {
		t.Fatalf("scalar: %+v %v", tg, err)
	}
	// A base with overrides: the clock halves the power (no power given);
	// conv's per_unit is replaced and its fixed kept.
	tg, err = FromYAML(parseNode(t, "base: m4-reference\nname: board\nclock: 60MHz\nclasses:\n  conv: {per_unit: 7}\n"))
	if err != nil {
		t.Fatal(err)
	}
	ref := Builtin["m4-reference"]
	if tg.Name != "board" || tg.ClockHz != 60e6 || !near(tg.PowerMW, ref.PowerMW/2) || tg.Classes[Conv].PerUnit != 7 || tg.Classes[Conv].Fixed != ref.Classes[Conv].Fixed {
		t.Errorf("override: %+v", tg)
	}
	// Round trip through YAML.
	out := ref.YAML(map[Class]bool{Conv: true}, "")
	back, err := FromYAML(parseNode(t, out))
	if err != nil {
		t.Fatalf("%v\n%s", err, out)
	}
	if back.Name != ref.Name || back.ClockHz != ref.ClockHz || back.PowerMW != ref.PowerMW || back.Classes[Depthwise] != ref.Classes[Depthwise] || back.Runtime != ref.Runtime {
		t.Errorf("round trip:\n%s\n%+v", out, back)
	}
	if !strings.Contains(out, "conv:        {per_unit: 6.72, fixed: 1000}   # cycles per MAC; fitted") {
		t.Errorf("yaml:\n%s", out)
	}
	for _, c := range []struct{ text, want string }{
		{"m5", `unknown target "m5"`},
		{"base: m4-reference\nclok: 1MHz", "clok: unknown key"},
		{"name: x\nruntime: tflite-micro\nclock: 1MHz\npower: 1mW\nflash_bytes_per_cycle: 1", "ram_bytes_per_cycle: missing"},
		{"base: m4-reference\nclock: fast", `clock: "fast": a clock is a number with a unit`},
		{"base: m4-reference\nruntime: tvm", `runtime: unknown runtime "tvm"`},
		{"base: m4-reference\nclasses:\n  convolution: {per_unit: 1}", "classes.convolution: unknown operator class"},
		{"base: m4-reference\nclasses:\n  conv: {per_unit: -1}", `classes.conv.per_unit: "-1": want a number, 0 or more`},
		{"base: m4-reference\nram_bytes_per_cycle: 0", "ram_bytes_per_cycle: must be more than 0"},
		{"[1, 2]", "a target is a built-in name or a mapping"},
	} {
		_, err := FromYAML(parseNode(t, c.text))
		var fe *FieldError
		if err == nil || !errors.As(err, &fe) || !strings.Contains(err.Error(), c.want) || fe.Line == 0 {
			t.Errorf("%q: error %v, want %q with a line", c.text, err, c.want)
		}
	}
}
