package measure

import (
	"fmt"
	"maps"
	"math"
	"regexp"
	"slices"
	"strings"

	"github.com/loadline/loadline/model"
)

// Bindings: what the user says about a model's runtime inputs, by name.
// Definition (README "Conventions", `loadline measure --help`):
//
//   - A dim binding (--dim NAME=N, a budget rule's dims:) gives a symbolic
//     dim of the graph inputs its size. A dim the file leaves unnamed is
//     named after its input and axis, "audio.1" for axis 1 of input audio,
//     so that it can be bound and is shown by that name everywhere.
//   - A shape binding (--shape NAME=1x512, inputs: {NAME: [1, 512]}) gives
//     input NAME its whole shape; the symbols the model declares on its
//     axes are bound to those sizes for every input that uses them.
//   - A value binding (--value NAME=16000, inputs: {NAME: 16000}) gives a
//     small input its contents, which constant folding then uses as it
//     uses an initializer's: an If whose condition follows from it runs
//     only the branch taken.
//
// Sizes are whole numbers from 1 up. A binding that names nothing in the
// model, a shape that disagrees with the model's rank or fixed sizes, and a
// value whose element count does not fit the input are errors that list
// what the model has (InferOptions.Lenient collects them instead, for
// callers that apply one set of bindings to many models).

// BindingIssue is a binding that does not fit the model.
type BindingIssue struct {
	// Kind is "dim", "shape" or "value".
	Kind string `json:"kind"`
	// Name is the dim or input named by the binding.
	Name string `json:"name"`
	// Problem says what is wrong, in the user's terms.
	Problem string `json:"problem"`
	// NamesNothing marks a binding whose name is in none of the model's
	// inputs; such a binding is only an error for a model it was meant for.
	NamesNothing bool `json:"names_nothing"`
}

func (b BindingIssue) String() string {
	return fmt.Sprintf("%s binding %s: %s", b.Kind, b.Name, b.Problem)
}

// BindingError is a binding that does not fit the model, with what the
// model has.
type BindingError struct {
	Issue BindingIssue
	// Has lists the model's runtime inputs and the names they can be bound
	// by.
	Has string
}

func (e *BindingError) Error() string {
	return e.Issue.String() + "; " + e.Has
}

// minSize and maxSize bound a bound size; maxValues bounds a value binding.
const (
	maxBoundSize = 1 << 40
	maxValues    = 1 << 16
)

// freshSymbol matches the names a decoder gives dims the file leaves
// unnamed ("?3").
var freshSymbol = regexp.MustCompile(`^\?[0-9]+$`)

// nameInputAxes renames every unnamed dim of the runtime inputs ins to
// "input.axis". An unnamed dim is a fresh symbol ("?N") that appears
// nowhere else among the graph's declared types; a name the file uses
// already is left alone.
func nameInputAxes(g *model.Graph, ins []*model.ValueInfo) []model.Type {
	uses := map[string]int{}
	count := func(t model.Type) {
		for _, d := range t.Shape {
			if d.Symbol != "" {
				uses[d.Symbol]++
			}
		}
	}
	for _, vi := range g.Inputs {
		count(vi.Type)
	}
	for _, vi := range g.Outputs {
		count(vi.Type)
	}
	for _, vi := range g.ValueInfo {
		count(vi.Type)
	}
	out := make([]model.Type, len(ins))
	for i, in := range ins {
		t := in.Type
		if t.RankKnown {
			t.Shape = t.Shape.Clone()
			for a, d := range t.Shape {
				name := fmt.Sprintf("%s.%d", in.Name, a)
				if freshSymbol.MatchString(d.Symbol) && uses[d.Symbol] == 1 && uses[name] == 0 {
					t.Shape[a] = model.Sym(name)
					uses[name]++
				}
			}
		}
		out[i] = t
	}
	return out
}

// boundInputs applies the bindings of opts to the runtime inputs ins of
// graph g. It returns each input's value, the dims in force (opts.Dims
// and those the shape bindings imply), and the bindings that do not fit;
// with strict set the first of those is returned as a *BindingError.
func boundInputs(g *model.Graph, ins []*model.ValueInfo, opts InferOptions, strict bool) ([]*Value, map[string]int64, []BindingIssue, error) {
	types := nameInputAxes(g, ins)
	byName := map[string]int{}
	symbols := map[string]bool{}
	for i, in := range ins {
		byName[in.Name] = i
		for _, d := range types[i].Shape {
			if d.Symbol != "" {
				symbols[d.Symbol] = true
			}
		}
	}
	var issues []BindingIssue
	bad := func(kind, name string, nothing bool, format string, args ...any) {
		issues = append(issues, BindingIssue{Kind: kind, Name: name, Problem: fmt.Sprintf(format, args...), NamesNothing: nothing})
	}
	dims := map[string]int64{}
	for _, name := range slices.Sorted(maps.Keys(opts.Dims)) {
		v := opts.Dims[name]
		switch {
		case v < 1 || v > maxBoundSize:
			bad("dim", name, false, "size %d is not a whole number from 1 up", v)
		case !symbols[name]:
			bad("dim", name, true, "the model has no input dim of that name")
		default:
			dims[name] = v
		}
	}
	// Shapes, and the 1-D values that give their input's length.
	shapes := map[string][]int64{}
	for name, s := range opts.Shapes {
		shapes[name] = s
	}
	for name, vals := range opts.Values {
		if i, ok := byName[name]; ok && shapes[name] == nil {
			if t := types[i]; t.RankKnown && len(t.Shape) == 1 && !t.Shape[0].IsKnown() {
				shapes[name] = []int64{int64(len(vals))}
			}
		}
	}
	for _, name := range slices.Sorted(maps.Keys(shapes)) {
		s := shapes[name]
		i, ok := byName[name]
		if !ok {
			bad("shape", name, true, "the model has no input of that name")
			continue
		}
		t := types[i]
		if t.RankKnown && len(t.Shape) != len(s) {
			bad("shape", name, false, "input %s has rank %d (%s), the binding gives %d dims", name, len(t.Shape), t.Shape, len(s))
			continue
		}
		okShape := true
		for a, v := range s {
			if v < 1 || v > maxBoundSize {
				bad("shape", name, false, "size %d on axis %d is not a whole number from 1 up", v, a)
				okShape = false
				break
			}
			if !t.RankKnown {
				continue
			}
			d := t.Shape[a]
			if d.IsKnown() && d.Value != v {
				bad("shape", name, false, "axis %d of input %s is %d in the model, the binding says %d", a, name, d.Value, v)
				okShape = false
				break
			}
			if !d.IsKnown() {
				if prev, set := dims[d.Symbol]; set && prev != v {
					bad("shape", name, false, "axis %d of input %s is dim %s, bound to %d elsewhere; the binding says %d", a, name, d.Symbol, prev, v)
					okShape = false
					break
				}
			}
		}
		if !okShape {
			continue
		}
		if !t.RankKnown {
			t.Shape, t.RankKnown = model.KnownShape(s...), true
			types[i] = t
			continue
		}
		for a, v := range s {
			if d := t.Shape[a]; !d.IsKnown() {
				dims[d.Symbol] = v
			}
		}
	}
	vals := make([]*Value, len(ins))
	for i := range ins {
		vals[i] = &Value{Type: bindDims(types[i], dims)}
	}
	for _, name := range slices.Sorted(maps.Keys(opts.Values)) {
		x := opts.Values[name]
		i, ok := byName[name]
		if !ok {
			bad("value", name, true, "the model has no input of that name")
			continue
		}
		v := vals[i]
		if v.Type.Kind != model.KindTensor {
			bad("value", name, false, "input %s is a %s, not a tensor", name, v.Type.Kind)
			continue
		}
		n, known := v.Type.Shape.Elements()
		switch {
		case !v.Type.RankKnown || !known:
			bad("value", name, false, "input %s has shape %s; bind its shape too", name, v.Type.Shape)
			continue
		case n != int64(len(x)):
			bad("value", name, false, "input %s has %d element(s) (shape %s), the binding gives %d", name, n, v.Type.Shape, len(x))
			continue
		case len(x) > maxValues:
			bad("value", name, false, "%d values are more than the %d a value binding may hold", len(x), maxValues)
			continue
		}
		dt := v.Type.DType
		switch {
		case dt.IsFloat():
			v.setHeld(&Data{Floats: append([]float64{}, x...)})
		case dt == model.String || dt == model.Complex64 || dt == model.Complex128 || dt == model.Undefined:
			bad("value", name, false, "input %s is %s; a value binding holds numbers", name, dt)
			continue
		default:
			ints := make([]int64, len(x))
			whole := true
			for j, f := range x {
				if f != math.Trunc(f) || math.Abs(f) > 1<<53 {
					whole = false
					break
				}
				ints[j] = int64(f)
			}
			if !whole {
				bad("value", name, false, "input %s is %s; the value must be a whole number", name, dt)
				continue
			}
			v.setHeld(intData(ints...))
		}
	}
	if strict && len(issues) > 0 {
		return nil, nil, issues, &BindingError{Issue: issues[0], Has: inputsText(ins, vals)}
	}
	return vals, dims, issues, nil
}

// InputsText lists a model's runtime inputs and the names that bind them,
// for messages: "the model's inputs: audio float32[1,audio.1] (dim
// audio.1); rate int64[] (a value)".
func InputsText(ios []IOInfo) string {
	if len(ios) == 0 {
		return "the model has no runtime inputs"
	}
	parts := make([]string, len(ios))
	for i, io := range ios {
		var how []string
		seen := map[string]bool{}
		small := io.Shape != nil
		n := int64(1)
		for _, d := range io.Shape {
			switch d := d.(type) {
			case string:
				small = false
				if !seen[d] {
					seen[d] = true
					how = append(how, "dim "+d)
				}
			case int64:
				n *= max(d, 0)
				if n > 16 {
					small = false
				}
			}
		}
		if small && !strings.HasPrefix(io.DType, "sequence") {
			how = append(how, "a value")
		}
		s := io.Name + " " + io.DType + io.ShapeText()
		if len(how) > 0 {
			s += " (" + strings.Join(how, ", ") + ")"
		}
		parts[i] = s
	}
	return "the model's inputs: " + strings.Join(parts, "; ")
}

// inputsText is InputsText of runtime inputs and their values.
func inputsText(ins []*model.ValueInfo, vals []*Value) string {
	ios := make([]IOInfo, len(ins))
	for i, in := range ins {
		ios[i] = ioInfo(NamedValue{in.Name, vals[i]})
	}
	return InputsText(ios)
}

// MissingBinding is one binding that unresolved figures wait for: an
// unbound dim of a runtime input, or the value of a small input that
// decides an If.
type MissingBinding struct {
	// Input is the first runtime input that has the dim (or whose value
	// is missing); Axis is the dim's axis, -1 for a value.
	Input string `json:"input"`
	Axis  int    `json:"axis"`
	// Name is the dim's symbol, or the input's name for a value.
	Name string `json:"name"`
	// Bind is the flag that supplies it ("--dim audio.1=N").
	Bind string `json:"bind"`
	// Blocks says what waits for it, in words.
	Blocks string `json:"blocks"`
	// Nodes counts the unresolved entries it explains.
	Nodes int `json:"nodes"`
}

// symbolTokens splits a message into the words a symbol may be.
var symbolTokens = regexp.MustCompile(`[^A-Za-z0-9_.?]+`)

// missingBindings finds, among the unresolved entries, those waiting for a
// binding: the symbolic dims of the runtime inputs they mention, and the
// small inputs on which an undecided If's condition depends.
func missingBindings(inf *Inference, unresolved []Unresolved) []MissingBinding {
	out := []MissingBinding{}
	if len(unresolved) == 0 {
		return out
	}
	tokens := make([]map[string]bool, len(unresolved))
	for i, u := range unresolved {
		tokens[i] = reasonTokens(u.Reason)
	}
	seen := map[string]bool{}
	for _, in := range inf.Inputs {
		for a, d := range in.Value.Type.Shape {
			if d.IsKnown() || seen[d.Symbol] {
				continue
			}
			seen[d.Symbol] = true
			var macs, mem, shapes int
			for i, u := range unresolved {
				if !tokens[i][d.Symbol] {
					continue
				}
				switch {
				case strings.HasPrefix(u.Reason, "MACs unknown"), strings.HasPrefix(u.Reason, "FLOPs unknown"):
					macs++
				case strings.HasPrefix(u.Reason, "memory unknown"):
					mem++
				default:
					shapes++
				}
			}
			if macs+mem+shapes == 0 {
				continue
			}
			out = append(out, MissingBinding{Input: in.Name, Axis: a, Name: d.Symbol, Bind: "--dim " + d.Symbol + "=N",
				Blocks: blocksText(macs, mem, shapes), Nodes: macs + mem + shapes})
		}
	}
	// Values deciding Ifs.
	decides := map[string][]string{}
	var order []string
	for _, u := range inf.Undecided {
		for _, d := range u.Inputs {
			if decides[d] == nil {
				order = append(order, d)
			}
			decides[d] = append(decides[d], u.Node)
		}
	}
	for _, name := range order {
		var v *Value
		for _, in := range inf.Inputs {
			if in.Name == name {
				v = in.Value
			}
		}
		if v == nil || v.Const() != nil {
			continue
		}
		if n, ok := v.Type.Shape.Elements(); !v.Type.RankKnown || !ok || n > 16 {
			continue // a tensor input: its dims are listed above, if unbound
		}
		mb := MissingBinding{Input: name, Axis: -1, Name: name, Bind: "--value " + name + "=V",
			Blocks: "decides If " + strings.Join(decides[name], ", ") + " (the costlier branch is counted)"}
		for _, u := range unresolved {
			if Waits(u, mb) {
				mb.Nodes++
			}
		}
		out = append(out, mb)
	}
	return out
}

func blocksText(macs, mem, shapes int) string {
	var parts []string
	if macs > 0 {
		parts = append(parts, fmt.Sprintf("MACs of %d node(s)", macs))
	}
	if mem > 0 {
		parts = append(parts, fmt.Sprintf("memory of %d tensor(s)", mem))
	}
	if shapes > 0 {
		parts = append(parts, fmt.Sprintf("shapes of %d node(s)", shapes))
	}
	return strings.Join(parts, ", ")
}

// reasonTokens splits a message into the words a symbol may be.
func reasonTokens(msg string) map[string]bool {
	out := map[string]bool{}
	for _, w := range symbolTokens.Split(msg, -1) {
		out[strings.TrimRight(w, ".")] = true
	}
	return out
}

// Waits reports whether an unresolved entry waits for binding b: its
// reason names b's dim, or it is an If whose condition b's value decides.
func Waits(u Unresolved, b MissingBinding) bool {
	if b.Axis < 0 {
		return strings.Contains(u.Reason, "--value "+b.Name+"=")
	}
	return reasonTokens(u.Reason)[b.Name]
}
