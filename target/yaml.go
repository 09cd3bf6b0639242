package target

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"go.yaml.in/yaml/v3"
)

// FieldError is a problem with one value of a target definition, with its
// place in the YAML document.
type FieldError struct {
	Line, Column int
	Key          string // the key path inside the target ("classes.conv.per_unit")
	Msg          string
	Hint         string
}

func (e *FieldError) Error() string {
	s := e.Msg
	if e.Key != "" {
		s = e.Key + ": " + s
	}
	if e.Hint != "" {
		s += " (" + e.Hint + ")"
	}
	return s
}

var (
	specKeys  = []string{"base", "name", "description", "runtime", "clock", "power", "flash_bytes_per_cycle", "ram_bytes_per_cycle", "classes"}
	classKeys = []string{"per_unit", "fixed"}
)

// FromYAML reads a target definition: a scalar naming a built-in target
// ("m4-reference", "m4-reference@120MHz"), or a mapping that starts from a
// built-in (base: NAME[@CLOCK]) and overrides any of its numbers, or
// defines a target of its own (then name, runtime, clock, power and both
// bandwidths are required). Setting clock without power on a base scales
// the base's power with the clock (Target.WithClock).
func FromYAML(n *yaml.Node) (*Target, error) {
	for n != nil && n.Kind == yaml.AliasNode {
		n = n.Alias
	}
	if n == nil {
		return nil, &FieldError{Msg: "empty target"}
	}
	fail := func(at *yaml.Node, key, msg, hint string) error {
		return &FieldError{Line: at.Line, Column: at.Column, Key: key, Msg: msg, Hint: hint}
	}
	if n.Kind == yaml.ScalarNode {
		t, err := Lookup(n.Value)
		if err != nil {
			return nil, fail(n, "", err.Error(), "")
		}
		return t, nil
	}
	if n.Kind != yaml.MappingNode {
		return nil, fail(n, "", "a target is a built-in name or a mapping", "write e.g. target: m4-reference@120MHz")
	}
	vals := map[string]*yaml.Node{}
	keys := map[string]*yaml.Node{}
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, v := n.Content[i], n.Content[i+1]
		for v.Kind == yaml.AliasNode && v.Alias != nil {
			v = v.Alias
		}
		if !contains(specKeys, k.Value) {
			return nil, fail(k, k.Value, "unknown key", "keys: "+strings.Join(specKeys, ", "))
		}
		if _, dup := vals[k.Value]; dup {
			return nil, fail(k, k.Value, "given twice", "")
		}
		vals[k.Value], keys[k.Value] = v, k
	}
	scalar := func(key string) (string, *yaml.Node, error) {
		v := vals[key]
		if v == nil {
			return "", nil, nil
		}
		if v.Kind != yaml.ScalarNode {
			return "", v, fail(v, key, "want a single value", "")
		}
		return v.Value, v, nil
	}
	number := func(key string, at *yaml.Node, text string) (float64, error) {
		f, err := strconv.ParseFloat(strings.TrimSpace(text), 64)
		if err != nil || f < 0 || math.IsInf(f, 0) || math.IsNaN(f) {
			return 0, fail(at, key, fmt.Sprintf("%q: want a number, 0 or more", text), "")
		}
		return f, nil
	}
	var t *Target
	if s, at, err := scalar("base"); err != nil {
		return nil, err
	} else if at != nil {
		b, err := Lookup(s)
		if err != nil {
			return nil, fail(at, "base", err.Error(), "")
		}
		t = b
		t.Description = ""
	} else {
		t = &Target{Classes: map[Class]ClassCost{}}
		for _, k := range []string{"name", "runtime", "clock", "power", "flash_bytes_per_cycle", "ram_bytes_per_cycle"} {
			if vals[k] == nil {
				return nil, fail(n, k, "missing", "a target of your own needs name, runtime, clock, power, flash_bytes_per_cycle and ram_bytes_per_cycle; or start from a built-in with base: m4-reference")
			}
		}
	}
	for _, key := range specKeys {
		v := vals[key]
		if v == nil || key == "base" {
			continue
		}
		if key == "classes" {
			if v.Kind != yaml.MappingNode {
				return nil, fail(v, key, "want a mapping of class names", "classes: conv, depthwise, dense, recurrent, elementwise, pooling, movement")
			}
			for i := 0; i+1 < len(v.Content); i += 2 {
				ck, cv := v.Content[i], v.Content[i+1]
				for cv.Kind == yaml.AliasNode && cv.Alias != nil {
					cv = cv.Alias
				}
				ckey := "classes." + ck.Value
				if !validClass(ck.Value) {
					return nil, fail(ck, ckey, "unknown operator class", "classes: conv, depthwise, dense, recurrent, elementwise, pooling, movement")
				}
				if cv.Kind != yaml.MappingNode {
					return nil, fail(cv, ckey, "want per_unit and fixed", "write e.g. {per_unit: 6.7, fixed: 1000}")
				}
				cc := t.Classes[Class(ck.Value)]
				for j := 0; j+1 < len(cv.Content); j += 2 {
					fk, fv := cv.Content[j], cv.Content[j+1]
					fkey := ckey + "." + fk.Value
					if !contains(classKeys, fk.Value) {
						return nil, fail(fk, fkey, "unknown key", "keys: per_unit (cycles per MAC or element), fixed (cycles per operator)")
					}
					if fv.Kind != yaml.ScalarNode {
						return nil, fail(fv, fkey, "want a number", "")
					}
					f, err := number(fkey, fv, fv.Value)
					if err != nil {
						return nil, err
					}
					if fk.Value == "per_unit" {
						cc.PerUnit = f
					} else {
						cc.Fixed = f
					}
				}
				t.Classes[Class(ck.Value)] = cc
			}
			continue
		}
		s, at, err := scalar(key)
		if err != nil {
			return nil, err
		}
		switch key {
		case "name":
			if strings.TrimSpace(s) == "" {
				return nil, fail(at, key, "empty name", "")
			}
			t.Name = s
		case "description":
			t.Description = s
		case "runtime":
			if Runtimes[s] == nil {
				return nil, fail(at, key, fmt.Sprintf("unknown runtime %q", s), "runtimes: "+strings.Join(runtimeNames(), ", "))
			}
			t.Runtime = s
		case "clock":
			hz, err := ParseHz(s)
			if err != nil {
				return nil, fail(at, key, err.Error(), "")
			}
			if vals["power"] == nil && t.ClockHz > 0 {
				t = t.WithClock(hz)
			}
			t.ClockHz = hz
		case "power":
			mw, err := ParseMW(s)
			if err != nil {
				return nil, fail(at, key, err.Error(), "")
			}
			t.PowerMW = mw
		case "flash_bytes_per_cycle", "ram_bytes_per_cycle":
			f, err := number(key, at, s)
			if err != nil {
				return nil, err
			}
			if f == 0 {
				return nil, fail(at, key, "must be more than 0", "")
			}
			if key == "flash_bytes_per_cycle" {
				t.FlashBytesPerCycle = f
			} else {
				t.RAMBytesPerCycle = f
			}
		}
	}
	if err := t.Validate(); err != nil {
		return nil, fail(n, "", err.Error(), "")
	}
	return t, nil
}

func runtimeNames() []string {
	var out []string
	for n := range Runtimes {
		out = append(out, n)
	}
	sortStrings(out)
	return out
}

// YAML writes the target as a definition FromYAML reads back (under a
// device's target: key, or in a file), with a comment per class saying
// whether its number was fitted.
func (t *Target) YAML(fitted map[Class]bool, indent string) string {
	var b strings.Builder
	w := func(format string, a ...any) { fmt.Fprintf(&b, indent+format+"\n", a...) }
	w("name: %s", yamlString(t.Name))
	if t.Description != "" {
		w("description: %s", yamlString(t.Description))
	}
	w("runtime: %s", t.Runtime)
	w("clock: %s", FormatHz(t.ClockHz))
	w("power: %smW", num(t.PowerMW))
	w("flash_bytes_per_cycle: %s", num(t.FlashBytesPerCycle))
	w("ram_bytes_per_cycle: %s", num(t.RAMBytesPerCycle))
	w("classes:")
	for _, c := range sortedClasses(t) {
		cc := t.Classes[c]
		note := "kept"
		if fitted[c] {
			note = "fitted"
		}
		w("  %-12s {per_unit: %s, fixed: %s}   # cycles per %s; %s", string(c)+":", num(cc.PerUnit), num(cc.Fixed), c.Unit(), note)
	}
	return b.String()
}

// num prints a number with four significant digits, without exponent for
// the sizes targets use.
func num(f float64) string {
	if f == 0 {
		return "0"
	}
	s := strconv.FormatFloat(f, 'g', 4, 64)
	if strings.ContainsAny(s, "e") {
		s = strconv.FormatFloat(f, 'f', -1, 64)
	}
	return s
}

func yamlString(s string) string {
	out, err := yaml.Marshal(s)
	if err != nil {
		return strconv.Quote(s)
	}
	return strings.TrimSpace(string(out))
}
