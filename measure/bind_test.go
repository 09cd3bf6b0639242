package measure

import (
	"errors"
	"reflect"
	"strings"
	"testing"

	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
)

// rateSwitchModel is a model that branches on a scalar input's value, as
// audio models switch on a sample rate: inputs audio float32 [1, ?] (the
// length left unnamed by the file) and rate int64 []; If rate > 8000 the
// then_branch reshapes audio to [1,1,32,16] (512 samples) and runs a 3×3
// Conv with 8 outputs, padding 1; else the else_branch reshapes it to
// [1,1,16,16] (256 samples) and runs the same Conv. Both end in a global
// average pool and a Flatten to [1,8].
func rateSwitchModel(t *testing.T) *model.Model {
	t.Helper()
	b := build.New("rate_switch", 13, build.Declared())
	audio := b.InputShape("audio", model.Float32, model.Shape{model.Known(1), model.Sym("?1")})
	rate := b.Input("rate", model.Int64)
	cond := b.Greater("is_wide", rate, b.ConstInts("eight_k", model.Int64, nil, []int64{8000}))
	branch := func(prefix string, h, w int64) func(*build.Builder) []build.Value {
		return func(s *build.Builder) []build.Value {
			x := s.Reshape(prefix+"_frames", audio, 1, 1, h, w)
			x = s.Conv(prefix+"_conv", x, build.Conv2D(8, 3, 1, 1))
			x = s.GlobalAveragePool(prefix+"_pool", x)
			return []build.Value{s.Flatten(prefix+"_flat", x, 1)}
		}
	}
	outs := b.If("select", cond, branch("wide", 32, 16), branch("narrow", 16, 16))
	if len(outs) == 1 {
		b.Output(outs[0])
	}
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// TestBindIfOnScalar: with the rate's value bound, only the branch taken is
// inferred, costed and planned. Hand-worked MACs (Conv: output elements ×
// C_in/group × kernel area): wide 8·32·16 · 1 · 3·3 = 36,864; narrow
// 8·16·16 · 1 · 3·3 = 18,432.
func TestBindIfOnScalar(t *testing.T) {
	const wide, narrow = 8 * 32 * 16 * 9, 8 * 16 * 16 * 9 // hand-worked: 36,864 and 18,432
	m := rateSwitchModel(t)
	cases := []struct {
		name   string
		opts   Options
		macs   int64
		taken  string
		unres  int
		reason string
	}{
		{"16 kHz, 512 samples", Options{Shapes: map[string][]int64{"audio": {1, 512}}, Values: map[string][]float64{"rate": {16000}}}, wide, "then_branch", 0, ""},
		{"8 kHz, 256 samples", Options{Dims: map[string]int64{"audio.1": 256}, Values: map[string][]float64{"rate": {8000}}}, narrow, "else_branch", 0, ""},
		// Undecided: both branches are inferred; the narrow one cannot be
		// for 512 samples (its 4 nodes are unresolved), and the If says
		// which binding decides, first; the costlier branch is counted.
		{"512 samples, rate unbound", Options{Shapes: map[string][]int64{"audio": {1, 512}}}, wide, "", 5, "--value rate=V"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			met, err := Measure(m, 0, c.opts)
			if err != nil {
				t.Fatal(err)
			}
			if met.MACs != c.macs {
				t.Errorf("MACs %d, want %d", met.MACs, c.macs)
			}
			if len(met.Unresolved) != c.unres {
				t.Errorf("unresolved %v, want %d entries", met.Unresolved, c.unres)
			}
			if c.reason != "" && (len(met.Unresolved) == 0 || !strings.Contains(met.Unresolved[0].Reason, c.reason) || !strings.Contains(met.Unresolved[0].Reason, "else_branch cannot be inferred")) {
				t.Errorf("unresolved %v, want the else_branch named with %q", met.Unresolved, c.reason)
			}
			if c.taken != "" && !reflect.DeepEqual(met.DecidedIfs, []DecidedIf{{Node: "select", Branch: c.taken}}) {
				t.Errorf("decided %v, want select → %s", met.DecidedIfs, c.taken)
			}
			if c.taken == "" {
				if len(met.MissingBindings) != 1 || met.MissingBindings[0].Bind != "--value rate=V" {
					t.Errorf("missing bindings %+v, want the rate's value", met.MissingBindings)
				}
			}
		})
	}
	// Nothing bound: the length is named after its input and axis, and
	// shown so in the inputs and in what is missing.
	met, err := Measure(m, 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if got := met.Inputs[0].Shape; !reflect.DeepEqual(got, []any{int64(1), "audio.1"}) {
		t.Errorf("audio's shape %v, want [1 audio.1]", got)
	}
	var names []string
	for _, mb := range met.MissingBindings {
		names = append(names, mb.Bind)
	}
	if !reflect.DeepEqual(names, []string{"--dim audio.1=N", "--value rate=V"}) {
		t.Errorf("missing bindings %v", met.MissingBindings)
	}
}

// TestBindValidation: a binding naming nothing lists what the model has;
// sizes from 1 up; shapes and values must fit the input.
func TestBindValidation(t *testing.T) {
	m := rateSwitchModel(t)
	cases := []struct {
		name string
		opts Options
		want string
	}{
		{"dim names nothing", Options{Dims: map[string]int64{"batch": 1}}, `dim binding batch: the model has no input dim of that name; the model's inputs: audio float32[1,audio.1] (dim audio.1); rate int64[] (a value)`},
		{"shape names nothing", Options{Shapes: map[string][]int64{"audoi": {1, 512}}}, "shape binding audoi: the model has no input of that name"},
		{"value names nothing", Options{Values: map[string][]float64{"sample_rate": {1}}}, "value binding sample_rate: the model has no input of that name"},
		{"zero dim", Options{Dims: map[string]int64{"audio.1": 0}}, "size 0 is not a whole number from 1 up"},
		{"negative shape", Options{Shapes: map[string][]int64{"audio": {1, -5}}}, "size -5 on axis 1"},
		{"wrong rank", Options{Shapes: map[string][]int64{"audio": {512}}}, "input audio has rank 2 ([1,audio.1]), the binding gives 1 dims"},
		{"fixed size differs", Options{Shapes: map[string][]int64{"audio": {2, 512}}}, "axis 0 of input audio is 1 in the model, the binding says 2"},
		{"value count", Options{Values: map[string][]float64{"rate": {8000, 16000}}}, "input rate has 1 element(s) (shape []), the binding gives 2"},
		{"fractional int", Options{Values: map[string][]float64{"rate": {8000.5}}}, "the value must be a whole number"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := Measure(m, 0, c.opts)
			var be *BindingError
			if !errors.As(err, &be) || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error %v, want a BindingError containing %q", err, c.want)
			}
			if !strings.Contains(be.Has, "audio float32[1,audio.1]") {
				t.Errorf("the error does not list the inputs: %q", be.Has)
			}
			c.opts.Lenient = true
			met, err := Measure(m, 0, c.opts)
			if err != nil || len(met.BindingIssues) != 1 {
				t.Errorf("lenient: %v, issues %v", err, met)
			}
		})
	}
}

// TestBindShapeSharedSymbol: a shape binding binds the symbols on its axes
// for every input using them.
func TestBindShapeSharedSymbol(t *testing.T) {
	b := build.New("two", 13)
	x := b.InputShape("x", model.Float32, model.Shape{model.Sym("batch"), model.Known(4)})
	y := b.InputShape("y", model.Float32, model.Shape{model.Sym("batch"), model.Known(4)})
	b.Output(b.Add("s", x, y))
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	met, err := Measure(m, 0, Options{Shapes: map[string][]int64{"x": {3, 4}}})
	if err != nil {
		t.Fatal(err)
	}
	// Hand-worked: x, y and s are 3·4 float32 = 48 B each; all live at
	// the Add's step → peak 144 B.
	if got := met.Inputs[1].Shape; !reflect.DeepEqual(got, []any{int64(3), int64(4)}) || met.Memory.Graph.PeakLiveBytes != 144 || len(met.Unresolved) != 0 {
		t.Errorf("y %v, peak %d, unresolved %v; want [3 4], 144, none", got, met.Memory.Graph.PeakLiveBytes, met.Unresolved)
	}
	if _, err := Measure(m, 0, Options{Shapes: map[string][]int64{"x": {3, 4}}, Dims: map[string]int64{"batch": 2}}); err == nil || !strings.Contains(err.Error(), "bound to 2 elsewhere") {
		t.Errorf("a shape disagreeing with --dim: %v", err)
	}
}
