package check

import (
	"fmt"
	"sort"
	"strings"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/measure"
)

// Bindings are values for models' runtime inputs given on the command
// line (--dim, --shape, --value); they win over a budget rule's dims: and
// inputs:.
type Bindings struct {
	Dims   map[string]int64
	Shapes map[string][]int64
	Values map[string][]float64
}

// boundSet is the bindings one model is measured with, and where each was
// written, for messages.
type boundSet struct {
	dims   map[string]int64
	shapes map[string][]int64
	values map[string][]float64
	// where maps "kind\x00name" to the place the binding was written:
	// "loadline.yaml:12:11: models[0].dims.batch", or the flag.
	where map[string]string
	// strict marks bindings that are an error whenever they name nothing
	// in the model (the command line's, given for the files named).
	strict map[string]bool
}

// bindingsFor merges a budget rule's bindings for one model (file is the
// budget file's name) with the command line's.
func bindingsFor(file string, rule []budget.Binding, cli Bindings, strictCLI bool) *boundSet {
	s := &boundSet{dims: map[string]int64{}, shapes: map[string][]int64{}, values: map[string][]float64{},
		where: map[string]string{}, strict: map[string]bool{}}
	for _, b := range rule {
		switch b.Kind {
		case "dim":
			s.dims[b.Name] = b.Dim
		case "shape":
			s.shapes[b.Name] = b.Shape
		case "value":
			s.values[b.Name] = b.Value
		}
		s.where[b.Kind+"\x00"+b.Name] = b.Place(file)
	}
	for name, v := range cli.Dims {
		s.dims[name] = v
		s.where["dim\x00"+name] = fmt.Sprintf("--dim %s=%d", name, v)
		s.strict["dim\x00"+name] = strictCLI
	}
	for name, v := range cli.Shapes {
		s.shapes[name] = v
		s.where["shape\x00"+name] = "--shape " + name + "=" + shapeFlag(v)
		s.strict["shape\x00"+name] = strictCLI
	}
	for name, v := range cli.Values {
		s.values[name] = v
		s.where["value\x00"+name] = "--value " + name + "=" + valueFlag(v)
		s.strict["value\x00"+name] = strictCLI
	}
	return s
}

func shapeFlag(s []int64) string {
	parts := make([]string, len(s))
	for i, d := range s {
		parts[i] = fmt.Sprint(d)
	}
	return strings.Join(parts, "x")
}

func valueFlag(v []float64) string {
	parts := make([]string, len(v))
	for i, x := range v {
		parts[i] = fmt.Sprint(x)
	}
	return strings.Join(parts, ",")
}

// options returns measuring options carrying the bindings; measuring is
// lenient, and check judges the issues (judge).
func (s *boundSet) options(base measure.Options) measure.Options {
	base.Dims, base.Shapes, base.Values, base.Lenient = s.dims, s.shapes, s.values, true
	return base
}

// key is a stable text of the bindings, for grouping jobs.
func (s *boundSet) key() string {
	var parts []string
	for k, v := range s.dims {
		parts = append(parts, "d "+k+"="+fmt.Sprint(v))
	}
	for k, v := range s.shapes {
		parts = append(parts, "s "+k+"="+fmt.Sprint(v))
	}
	for k, v := range s.values {
		parts = append(parts, "v "+k+"="+fmt.Sprint(v))
	}
	sort.Strings(parts)
	return strings.Join(parts, "\x00")
}

// judge turns the bindings that do not fit a measured model into its
// error, naming where each was written and what the model has. A binding
// that names nothing in the model is an error when the model is left
// waiting for a binding (it was likely meant for one of those) or when it
// is strict; otherwise, as for a rule covering models with and without a
// batch dim, it is ignored. It reports whether m became an error entry.
func (s *boundSet) judge(m *measure.Metrics) bool {
	if m == nil || m.Error != "" || len(m.BindingIssues) == 0 {
		return false
	}
	var msgs []string
	for _, is := range m.BindingIssues {
		k := is.Kind + "\x00" + is.Name
		if is.NamesNothing && len(m.MissingBindings) == 0 && !s.strict[k] {
			continue
		}
		where := s.where[k]
		if where == "" {
			where = is.Kind + " " + is.Name
		}
		msgs = append(msgs, fmt.Sprintf("%s: %s", where, is.Problem))
	}
	if len(msgs) == 0 {
		return false
	}
	m.Error = fmt.Sprintf("%s: bindings that do not fit the model: %s; %s", m.Path, strings.Join(msgs, "; "), measure.InputsText(m.Inputs))
	return true
}
