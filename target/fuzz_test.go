package target

import (
	"testing"

	"go.yaml.in/yaml/v3"
)

// FuzzFromYAML: a target definition of any bytes is read or refused with an
// error, never a panic, and a target read passes Validate.
func FuzzFromYAML(f *testing.F) {
	for _, s := range []string{
		"m4-reference@120MHz",
		"base: m4-reference\nclock: 60MHz\nclasses:\n  conv: {per_unit: 7}\n",
		Builtin["m4-optimized"].YAML(nil, ""),
		"a: &x [*x]",
		"base: m4-reference\nclasses: {conv: &c {per_unit: 1}, dense: *c}",
	} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		var doc yaml.Node
		if yaml.Unmarshal([]byte(s), &doc) != nil || len(doc.Content) == 0 {
			return
		}
		tg, err := FromYAML(doc.Content[0])
		if err == nil {
			if verr := tg.Validate(); verr != nil {
				t.Fatalf("accepted an invalid target: %v", verr)
			}
			tg.Cost([]Node{{Op: "Conv", MACs: 10}}, "")
		}
	})
}

// FuzzParseHz: clocks of any text parse to a positive finite value or an
// error.
func FuzzParseHz(f *testing.F) {
	for _, s := range []string{"120MHz", "1.5 GHz", "0Hz", "1e999MHz", "..MHz", ""} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		if hz, err := ParseHz(s); err == nil && !(hz > 0) {
			t.Fatalf("ParseHz(%q) = %v", s, hz)
		}
	})
}
