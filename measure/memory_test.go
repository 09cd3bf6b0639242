package measure

import (
	"cmp"
	"encoding/json"
	"fmt"
	"math"
	"math/rand"
	"reflect"
	"slices"
	"sort"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
)

// planBuilt infers a built model and plans its memory.
func planBuilt(t testing.TB, m *model.Model, err error) *MemoryPlan {
	t.Helper()
	if err != nil {
		t.Fatal(err)
	}
	inf, err := Infer(m, InferOptions{})
	if err != nil {
		t.Fatal(err)
	}
	return PlanMemory(inf)
}

// checkPlacements is the independent checker: brute force over all pairs,
// no two tensors whose lifetimes overlap share a byte, and every tensor
// lies inside the arena.
func checkPlacements(t *testing.T, ps []Placement, arena int64) {
	t.Helper()
	for i, p := range ps {
		if p.Offset < 0 || p.Offset+p.Size > arena {
			t.Fatalf("%s at [%d,%d) outside arena %d", p.Name, p.Offset, p.Offset+p.Size, arena)
		}
		for _, o := range ps[i+1:] {
			timeOverlap := p.First <= o.Last && o.First <= p.Last
			byteOverlap := p.Size > 0 && o.Size > 0 && p.Offset < o.Offset+o.Size && o.Offset < p.Offset+p.Size
			if timeOverlap && byteOverlap {
				t.Fatalf("%s [%d,%d) steps %d..%d and %s [%d,%d) steps %d..%d share bytes",
					p.Name, p.Offset, p.Offset+p.Size, p.First, p.Last, o.Name, o.Offset, o.Offset+o.Size, o.First, o.Last)
			}
		}
	}
}

// TestMemoryChain: x → Relu → Relu → Relu, float32 [1,8]: every tensor is
// 8 × 4 = 32 bytes. Hand-worked:
//
//	step 0 (a = Relu(x)): x (0..0) + a (0..1) = 32 + 32 = 64
//	step 1 (b = Relu(a)): a + b (1..2)         = 64
//	step 2 (c = Relu(b)): b + c (2..2, output) = 64
//
// so the peak is max(in + out) = 64 at step 0. Greedy by size (all 32, ties
// by first step then name: a, x, b, c): a at 0; x overlaps a → 32; b
// overlaps a → 32; c overlaps b → 0. Arena 64 = peak.
func TestMemoryChain(t *testing.T) {
	b := build.New("chain", 13, build.Declared())
	x := b.Input("x", model.Float32, 1, 8)
	y := b.Relu("a", x)
	y = b.Relu("b", y)
	y = b.Relu("c", y)
	b.Output(y)
	m, err := b.Model()
	p := planBuilt(t, m, err)
	if p.PeakLiveBytes != 64 || p.PeakStep != 0 { // hand-worked: 32 + 32 at step 0
		t.Errorf("peak %d at step %d, want 64 at step 0", p.PeakLiveBytes, p.PeakStep)
	}
	if want := []int64{64, 64, 64}; !reflect.DeepEqual(p.LiveBytesByStep, want) { // hand-worked
		t.Errorf("live bytes by step %v, want %v", p.LiveBytesByStep, want)
	}
	if p.ArenaBytes != 64 { // hand-worked: greedy equals the peak on a chain
		t.Errorf("arena %d, want 64", p.ArenaBytes)
	}
	if want := []string{"x", "a"}; !reflect.DeepEqual(p.LiveAtPeak, want) {
		t.Errorf("live at peak %v, want %v", p.LiveAtPeak, want)
	}
	checkPlacements(t, p.Placements, p.ArenaBytes)
	if len(p.Unresolved) != 0 {
		t.Errorf("unresolved %v", p.Unresolved)
	}
}

// TestMemorySkipConcat: a residual Add and a branch joined by Concat,
// float32. x, a, b, c, d, e are [1,2,4,4] = 32 elements = 128 B; f =
// Concat(d, e, axis 1) is [1,4,4,4] = 256 B.
//
//	step 0 a = Relu(x)      step 3 d = Relu(c)
//	step 1 b = Sigmoid(a)   step 4 e = Tanh(c)
//	step 2 c = Add(a, b)    step 5 f = Concat(d, e) (graph output)
//
// Lifetimes: x 0..0, a 0..2, b 1..2, c 2..4, d 3..5, e 4..5, f 5..5.
// Live bytes, hand-worked:
//
//	step 0: x + a         = 128 + 128       = 256
//	step 1: a + b         = 128 + 128       = 256
//	step 2: a + b + c     = 3 × 128         = 384
//	step 3: c + d         = 2 × 128         = 256
//	step 4: c + d + e     = 3 × 128         = 384
//	step 5: d + e + f     = 128 + 128 + 256 = 512  ← peak
//
// Greedy by size, hand-worked: f (256) first at 0. Then the 128s by first
// step, then name: a (0..2) meets nothing placed that overlaps (f is step 5)
// → 0; x (0..0) meets a [0,128) → 128; b (1..2) meets a → 128; c (2..4)
// meets a [0,128) and b [128,256) → 256; d (3..5) meets f [0,256) and c
// [256,384) → 384; e (4..5) meets f, c, d → 512. Arena = 512 + 128 = 640,
// ratio 640 / 512 = 1.25: greedy by size is a heuristic, and here placing f
// first costs 128 B over the lower bound (d, e at [0,256) with c, f sharing
// [256,512) would reach it).
func TestMemorySkipConcat(t *testing.T) {
	bd := build.New("skip", 13, build.Declared())
	x := bd.Input("x", model.Float32, 1, 2, 4, 4)
	a := bd.Relu("a", x)
	b := bd.Sigmoid("b", a)
	c := bd.Add("c", a, b)
	d := bd.Relu("d", c)
	e := bd.Tanh("e", c)
	f := bd.Concat("f", 1, d, e)
	bd.Output(f)
	m, err := bd.Model()
	p := planBuilt(t, m, err)
	if want := []int64{256, 256, 384, 256, 384, 512}; !reflect.DeepEqual(p.LiveBytesByStep, want) { // hand-worked, above
		t.Errorf("live bytes by step %v, want %v", p.LiveBytesByStep, want)
	}
	if p.PeakLiveBytes != 512 || p.PeakStep != 5 { // hand-worked: d + e + f
		t.Errorf("peak %d at step %d, want 512 at step 5", p.PeakLiveBytes, p.PeakStep)
	}
	if want := []string{"d", "e", "f"}; !reflect.DeepEqual(p.LiveAtPeak, want) {
		t.Errorf("live at peak %v, want %v", p.LiveAtPeak, want)
	}
	if p.ArenaBytes != 640 { // hand-worked greedy layout, above
		t.Errorf("arena %d, want 640", p.ArenaBytes)
	}
	wantOff := map[string]int64{"f": 0, "a": 0, "x": 128, "b": 128, "c": 256, "d": 384, "e": 512} // hand-worked
	for _, pl := range p.Placements {
		if pl.Offset != wantOff[pl.Name] {
			t.Errorf("%s at %d, want %d", pl.Name, pl.Offset, wantOff[pl.Name])
		}
	}
	if r := p.Ratio(); r != 1.25 {
		t.Errorf("ratio %g, want 1.25", r)
	}
	checkPlacements(t, p.Placements, p.ArenaBytes)
}

// TestMemorySymbolic: a tensor whose shape keeps a symbol is left out and
// listed, never counted as zero. x is float32 [batch,4]; with batch unbound
// neither x nor y can be sized.
func TestMemorySymbolic(t *testing.T) {
	b := build.New("sym", 13, build.Declared())
	x := b.InputShape("x", model.Float32, model.Shape{model.Sym("batch"), model.Known(4)})
	b.Output(b.Relu("y", x))
	m, err := b.Model()
	p := planBuilt(t, m, err)
	if len(p.Unresolved) != 2 {
		t.Fatalf("unresolved %v, want x and y", p.Unresolved)
	}
	if got, want := p.Unresolved[0].Reason, `memory unknown: shape [batch,4] symbolic (tensor "x")`; got != want {
		t.Errorf("reason %q, want %q", got, want)
	}
	if p.PeakLiveBytes != 0 {
		t.Errorf("peak %d, want 0 (nothing sizable)", p.PeakLiveBytes)
	}
	// Bound, the same graph is sized: 1 × 4 × 4 B = 16 B each, both live at
	// step 0: 32 B (hand-worked).
	inf, err := Infer(m, InferOptions{Dims: map[string]int64{"batch": 1}})
	if err != nil {
		t.Fatal(err)
	}
	if q := PlanMemory(inf); q.PeakLiveBytes != 32 || len(q.Unresolved) != 0 {
		t.Errorf("bound: peak %d, unresolved %v; want 32, none", q.PeakLiveBytes, q.Unresolved)
	}
}

// TestMemoryStaticExcluded: initializers, Constant outputs and values folded
// from them (a DequantizeLinear of an int8 weight) are not activations.
// x is float32 [1,4] = 16 B; y = Add(x, w) with w = Dequantize(wq): only x
// and y count, 16 + 16 = 32 B at step 1 (hand-worked).
func TestMemoryStaticExcluded(t *testing.T) {
	b := build.New("static", 13, build.Declared())
	x := b.Input("x", model.Float32, 1, 4)
	w := b.QuantizedWeight("w", model.Int8, 1, 4)
	b.Output(b.Add("y", x, w))
	m, err := b.Model()
	p := planBuilt(t, m, err)
	var names []string
	for _, pl := range p.Placements {
		names = append(names, pl.Name)
	}
	if !reflect.DeepEqual(names, []string{"x", "y"}) {
		t.Errorf("counted %v, want [x y]", names)
	}
	if p.PeakLiveBytes != 32 { // hand-worked: x 16 B + y 16 B
		t.Errorf("peak %d, want 32", p.PeakLiveBytes)
	}
}

// randomOpsMix are the ops of random DAGs: op-agnostic for the graph view,
// and each a rewrite of the deployed view.
var randomOpsMix = []string{"Custom", "Custom", "Relu", "Clip", "Reshape", "Identity", "BatchNormalization", "Conv", "QuantizeLinear", "DequantizeLinear", "Cast", "Mul", "Sigmoid"}

// sameShapeOps keep their first input's shape (and, in these uint8 graphs,
// its bytes) in their first output, as they do in real graphs.
var sameShapeOps = map[string]bool{"Cast": true, "Mul": true, "Sigmoid": true, "Relu": true, "Clip": true, "Reshape": true, "Identity": true, "BatchNormalization": true, "QuantizeLinear": true, "DequantizeLinear": true}

// randomGraph builds a random DAG directly as an Inference: 1–3 graph inputs,
// up to 40 nodes of 1–3 inputs and 1–2 outputs each, uint8 tensors of shape
// [1, c, l] (so bytes = elements = c·l, 0 to 8·125), a few outputs marked
// as weights (static), a few graph outputs. Some Convs are depthwise: group
// equal to their input's and output's channels. The ops of sameShapeOps
// keep their input's shape.
func randomGraph(r *rand.Rand) *Inference {
	g := &model.Graph{}
	vals := map[string]*Value{}
	var avail []string
	newVal := func(name string, weight bool, c int64) {
		if c < 0 {
			c = 1 + int64(r.Intn(8))
		}
		vals[name] = &Value{Type: model.TensorType(model.Uint8, model.KnownShape(1, c, int64(r.Intn(126)))), Weight: weight}
	}
	for i := range 1 + r.Intn(3) {
		name := fmt.Sprintf("in%d", i)
		g.Inputs = append(g.Inputs, &model.ValueInfo{Name: name})
		newVal(name, false, -1)
		avail = append(avail, name)
	}
	for i := range r.Intn(41) {
		n := &model.Node{Name: fmt.Sprintf("n%d", i), Op: randomOpsMix[r.Intn(len(randomOpsMix))]}
		for range 1 + r.Intn(3) {
			// Mostly recent tensors, sometimes far back: skip connections.
			j := len(avail) - 1 - r.Intn(min(len(avail), 4))
			if r.Intn(5) == 0 {
				j = r.Intn(len(avail))
			}
			n.Inputs = append(n.Inputs, avail[j])
		}
		c := int64(-1)
		if n.Op == "Conv" && r.Intn(2) == 0 {
			c = vals[n.Inputs[0]].Type.Shape[1].Value
			n.Attrs = []*model.Attr{{Name: "group", Kind: model.AttrInt, Int: c}}
		}
		for k := range 1 + r.Intn(2) {
			name := fmt.Sprintf("t%d_%d", i, k)
			n.Outputs = append(n.Outputs, name)
			newVal(name, r.Intn(10) == 0, c)
			if k == 0 && sameShapeOps[n.Op] {
				vals[name].Type = vals[n.Inputs[0]].Type
			}
			avail = append(avail, name)
		}
		g.Nodes = append(g.Nodes, n)
	}
	for range 1 + r.Intn(2) {
		name := avail[len(avail)-1-r.Intn(min(len(avail), 3))]
		g.Outputs = append(g.Outputs, &model.ValueInfo{Name: name})
	}
	return &Inference{Model: &model.Model{Graph: g}, Values: &Values{byName: vals}}
}

// bruteLiveBytes is the independent peak checker: at each step, sums the
// tensors for which liveness holds as the README's "Conventions" (activation
// memory, graph view) and memory.go's definition state it, by scanning the
// whole graph for each (tensor, step).
func bruteLiveBytes(inf *Inference) []int64 {
	g := inf.Model.Graph
	steps := max(1, len(g.Nodes))
	type tensor struct {
		name string
		prod int
	}
	var ts []tensor
	for _, in := range g.Inputs {
		ts = append(ts, tensor{in.Name, 0})
	}
	// Static: a weight, or the output of a node that reads only static
	// values (folded at load time).
	type heldLife struct {
		name        string
		first, last int
	}
	var held []heldLife
	static := map[string]bool{}
	for i, n := range g.Nodes {
		folded := true
		for _, in := range n.Inputs {
			folded = folded && static[in]
		}
		for _, o := range n.Outputs {
			static[o] = inf.Values.Get(o).Weight || folded
			if !static[o] {
				ts = append(ts, tensor{o, i})
			}
		}
	}
	// Held (static.go): a folded output with more than one element and
	// more elements than its folded inputs' sources at data positions,
	// read by a node that is not folded or a graph output. From stored
	// values alone and never read at a data position: live at every step;
	// from an inferred value: live from its producer through its last
	// reader that is not folded.
	elems := func(name string) int64 { n, _ := inf.Values.Get(name).Type.Shape.Elements(); return n }
	src := map[string]int64{}
	stored := map[string]bool{}
	folded := make([]bool, len(g.Nodes))
	for i, n := range g.Nodes {
		folded[i] = true
		for _, in := range n.Inputs {
			folded[i] = folded[i] && static[in]
		}
		if !folded[i] {
			continue
		}
		var from int64
		fromStored := true
		for j, in := range n.Inputs {
			e, ok := src[in]
			if !ok {
				e = elems(in)
				fromStored = fromStored && inf.Values.Get(in).Weight
			} else {
				fromStored = fromStored && stored[in]
			}
			if !isShapeOperand(n, j) {
				from += e
			}
		}
		for _, o := range n.Outputs {
			src[o], stored[o] = from, fromStored
		}
	}
	for i, n := range g.Nodes {
		if !folded[i] {
			continue
		}
		for _, o := range n.Outputs {
			if elems(o) <= 1 || elems(o) <= src[o] {
				continue
			}
			first, last, data := -1, -1, false
			for c, m := range g.Nodes {
				for j, in := range m.Inputs {
					if in == o && !folded[c] {
						first, last = i, c
						data = data || !isShapeOperand(m, j)
					}
				}
			}
			for _, out := range g.Outputs {
				if out.Name == o {
					first, last = i, steps-1
				}
			}
			switch {
			case first < 0 || stored[o] && data:
				continue // not held, or a parameter
			case stored[o]:
				first, last = 0, steps-1
			}
			held = append(held, heldLife{o, first, last})
		}
	}

	out := make([]int64, steps)
	for s := range steps {
		for _, h := range held {
			if h.first <= s && s <= h.last {
				out[s] += elems(h.name)
			}
		}
		for _, t := range ts {
			if t.prod > s {
				continue
			}
			live := t.prod == s
			for _, o := range g.Outputs {
				live = live || o.Name == t.name
			}
			for c := s; c < len(g.Nodes) && !live; c++ {
				for _, in := range g.Nodes[c].Inputs {
					live = live || in == t.name
				}
			}
			if live {
				n, _ := inf.Values.Get(t.name).Type.Shape.Elements()
				out[s] += n
			}
		}
	}
	return out
}

// TestMemoryPlanRandomDAGs: property tests on 200 random DAGs (fixed seeds):
// the live bytes match the brute-force checker, arena ≥ peak, no two
// tensors with overlapping lifetimes share a byte, and planning is
// deterministic.
func TestMemoryPlanRandomDAGs(t *testing.T) {
	for seed := range int64(200) {
		inf := randomGraph(rand.New(rand.NewSource(seed)))
		p := PlanMemory(inf)
		if want := bruteLiveBytes(inf); !reflect.DeepEqual(p.LiveBytesByStep, want) {
			t.Fatalf("seed %d: live bytes %v, brute force %v", seed, p.LiveBytesByStep, want)
		}
		if p.ArenaBytes < p.PeakLiveBytes {
			t.Fatalf("seed %d: arena %d < peak %d", seed, p.ArenaBytes, p.PeakLiveBytes)
		}
		checkPlacements(t, p.Placements, p.ArenaBytes)
		if q := PlanMemory(inf); !reflect.DeepEqual(p, q) {
			t.Fatalf("seed %d: two plans of the same graph differ", seed)
		}
	}
}

// naiveArena is greedy by size written the obvious O(n²) way, to check the
// segment-tree planner's layout exactly.
func naiveArena(ts []Lifetime) ([]Placement, int64) {
	ps := make([]Placement, len(ts))
	idx := make([]int, len(ts))
	for i, t := range ts {
		ps[i] = Placement{Name: t.Name, Size: max(t.Size, 0), First: t.First, Last: max(t.Last, t.First)}
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool {
		x, y := ps[idx[a]], ps[idx[b]]
		if x.Size != y.Size {
			return x.Size > y.Size
		}
		if x.First != y.First {
			return x.First < y.First
		}
		if x.Name != y.Name {
			return x.Name < y.Name
		}
		return x.Last < y.Last
	})
	var arena int64
	var placed []int
	for _, i := range idx {
		p := &ps[i]
		var over []int
		for _, j := range placed {
			if ps[j].First <= p.Last && p.First <= ps[j].Last {
				over = append(over, j)
			}
		}
		sort.SliceStable(over, func(a, b int) bool { return ps[over[a]].Offset < ps[over[b]].Offset })
		var end int64
		best, bestGap := int64(-1), int64(-1)
		for _, j := range over {
			if gap := ps[j].Offset - end; gap >= p.Size && (bestGap < 0 || gap < bestGap) {
				best, bestGap = end, gap
			}
			end = max(end, ps[j].Offset+ps[j].Size)
		}
		if best < 0 {
			best = end
		}
		p.Offset = best
		arena = max(arena, best+p.Size)
		placed = append(placed, i)
	}
	return ps, arena
}

// randomLifetimes: up to 300 tensors over up to 100 steps, sizes 0–4095,
// lifetimes of any length, some sizes repeated so that ties are common.
func randomLifetimes(r *rand.Rand) []Lifetime {
	steps := 1 + r.Intn(100)
	ts := make([]Lifetime, r.Intn(301))
	for i := range ts {
		first := r.Intn(steps)
		size := int64(r.Intn(4096))
		if r.Intn(3) == 0 {
			size = int64(64 * r.Intn(4))
		}
		ts[i] = Lifetime{Name: fmt.Sprintf("t%d", r.Intn(len(ts))), Size: size, First: first, Last: first + r.Intn(steps-first)}
	}
	return ts
}

// TestPlanArenaRandom: on 200 random lifetime sets, the planner agrees with
// the naive greedy, arena ≥ the brute-force peak, no byte is shared by
// tensors live at once, and the layout is deterministic.
func TestPlanArenaRandom(t *testing.T) {
	for seed := range int64(200) {
		ts := randomLifetimes(rand.New(rand.NewSource(seed)))
		ps, arena := PlanArena(ts)
		checkPlacements(t, ps, arena)
		var peak int64
		for s := range 100 {
			var live int64
			for _, lt := range ts {
				if lt.First <= s && s <= lt.Last {
					live += lt.Size
				}
			}
			peak = max(peak, live)
		}
		if arena < peak {
			t.Fatalf("seed %d: arena %d < peak %d", seed, arena, peak)
		}
		nps, narena := naiveArena(ts)
		if narena != arena || !reflect.DeepEqual(nps, ps) {
			t.Fatalf("seed %d: planner arena %d, naive greedy %d (or layouts differ)", seed, arena, narena)
		}
		ps2, arena2 := PlanArena(ts)
		if arena2 != arena || !reflect.DeepEqual(ps2, ps) {
			t.Fatalf("seed %d: not deterministic", seed)
		}
	}
}

// TestPlanArenaEdges: empty input, zero sizes, an inverted lifetime, and
// steps far apart (the planner works on the steps' ranks, so extreme step
// numbers cost no memory).
func TestPlanArenaEdges(t *testing.T) {
	far := []Lifetime{{"lo", 8, -1 << 62, -1 << 62}, {"hi", 8, 1 << 62, 1 << 62}, {"all", 4, -1 << 62, 1 << 62}}
	// Hand-worked: lo and hi (8 B) go first, both at 0, never live
	// together; all (4 B) meets both, so it goes at 8: arena 12.
	if ps, a := PlanArena(far); a != 12 || ps[0].Offset != 0 || ps[1].Offset != 0 || ps[2].Offset != 8 {
		t.Errorf("far: arena %d, placements %+v; want 12, offsets 0, 0, 8", a, ps)
	}
	if ps, a := PlanArena(nil); len(ps) != 0 || a != 0 {
		t.Errorf("empty: %v %d", ps, a)
	}
	ps, a := PlanArena([]Lifetime{{"z", 0, 0, 3}, {"a", 10, 0, 0}, {"b", 10, 5, 2}})
	// a at 0 (largest, first); b is live at step 5 only, overlapping nothing
	// placed → 0; z (0 B) → 0. Arena 10 (hand-worked).
	if a != 10 || ps[1].Offset != 0 || ps[2].Offset != 0 || ps[2].Last != 5 {
		t.Errorf("edges: arena %d, placements %+v", a, ps)
	}
}

// TestMemoryMobileNetV2: MobileNetV2 1.0, float32, 224×224, batch 1, graph
// view (torchvision export form: Conv, BatchNormalization and Clip each their
// own tensor). Hand-derived: features.2 (t = 6, 16 → 24 channels, stride 2)
// expands its 16×112×112 input to 96×112×112 float32 = 1,204,224 elements
// = 4,816,896 B. At the step of its BatchNormalization the Conv output and
// the BN output are both live and nothing else is: the block input's last
// consumer was the expansion Conv (stride 2: no residual), every weight,
// BN statistic and Clip bound is an initializer. So that step holds
// 112·112·96·4·2 = 9,633,792 B. No other step holds more: the only other
// tensors of 112×112 resolution have 16 or 32 channels (at most 3 × 32 ×
// 112² × 4 = 4,816,896 B across any three of them), features.2's depthwise
// step holds its 4,816,896 B input and 96×56×56×4 = 1,204,224 B output, and
// from 56×56 on the widest tensors are 144×56×56×4 = 1,806,336 B, at most
// three live at once (5,419,008 B). The peak is exactly 9,633,792 B and is
// first reached at features.2.conv.0.1 (the Clip step after it holds the
// same, BN output + Clip output).
func TestMemoryMobileNetV2(t *testing.T) {
	m, err := build.MobileNetV2(build.Options{Declared: true})
	p := planBuilt(t, m, err)
	t.Logf("mobilenet_v2 float32 224 graph view: peak %d B at step %d %v, arena %d B, ratio %.4f",
		p.PeakLiveBytes, p.PeakStep, p.LiveAtPeak, p.ArenaBytes, p.Ratio())
	if p.PeakLiveBytes != 112*112*96*4*2 { // hand-derived, above: 9,633,792 B
		t.Errorf("peak %d, want 112·112·96·4·2 = 9,633,792", p.PeakLiveBytes)
	}
	if want := []string{"features.2.conv.0.0", "features.2.conv.0.1"}; !reflect.DeepEqual(p.LiveAtPeak, want) {
		t.Errorf("live at peak %v, want %v", p.LiveAtPeak, want)
	}
	if p.ArenaBytes < p.PeakLiveBytes {
		t.Errorf("arena %d < peak %d", p.ArenaBytes, p.PeakLiveBytes)
	}
	checkPlacements(t, p.Placements, p.ArenaBytes)
	if len(p.Unresolved) != 0 {
		t.Errorf("unresolved %v", p.Unresolved)
	}
}

// TestMemoryReferenceArchitectures logs the graph and deployed views of
// every reference architecture and checks the invariants on each.
func TestMemoryReferenceArchitectures(t *testing.T) {
	for _, arch := range build.Architectures() {
		f, _ := build.Architecture(arch)
		m, err := f(build.Options{Declared: true})
		p := planBuilt(t, m, err)
		inf, err := Infer(m, InferOptions{})
		if err != nil {
			t.Fatal(err)
		}
		d := PlanDeployed(inf, DefaultDeployOptions())
		t.Logf("%-22s graph peak %10d B arena %10d B ratio %.4f (%d tensors) | deployed peak %10d B arena %10d B ratio %.4f (%d buffers)",
			arch, p.PeakLiveBytes, p.ArenaBytes, p.Ratio(), len(p.Placements), d.PeakLiveBytes, d.ArenaBytes, d.Ratio(), len(d.Placements))
		for _, q := range []*MemoryPlan{p, d} {
			if q.ArenaBytes < q.PeakLiveBytes || len(q.Unresolved) != 0 {
				t.Errorf("%s: arena %d, peak %d, unresolved %v", arch, q.ArenaBytes, q.PeakLiveBytes, q.Unresolved)
			}
			checkPlacements(t, q.Placements, q.ArenaBytes)
		}
		if d.PeakLiveBytes > p.PeakLiveBytes {
			t.Errorf("%s: deployed peak %d above graph peak %d", arch, d.PeakLiveBytes, p.PeakLiveBytes)
		}
	}
}

// chainWithSkips is the benchmark's synthetic graph: n tensors, tensor i
// produced at step i and read at step i+1, every fourth also read four
// steps later (a skip connection), sizes 1 KiB to 1 MiB from a fixed seed.
func chainWithSkips(n int) []Lifetime {
	r := rand.New(rand.NewSource(1))
	ts := make([]Lifetime, n)
	for i := range ts {
		last := i + 1
		if i%4 == 0 {
			last = i + 5
		}
		ts[i] = Lifetime{Name: fmt.Sprintf("t%d", i), Size: int64(1024 + r.Intn(1<<20)), First: i, Last: min(last, n-1)}
	}
	return ts
}

// BenchmarkPlanArena10k plans a 10,000-tensor chain with skips.
func BenchmarkPlanArena10k(b *testing.B) {
	ts := chainWithSkips(10000)
	b.ReportAllocs()
	for b.Loop() {
		PlanArena(ts)
	}
}

// TestMemoryMeasureJSON: Measure reports the graph and deployed views
// (default rewrites) under the keys of the loadline.measure/v1 document
// (memory.graph and memory.deployed, as the README's "Conventions" names them).
func TestMemoryMeasureJSON(t *testing.T) {
	m, err := build.MobileNetV2(build.Options{Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	met, err := Measure(m, 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	js, err := json.Marshal(met)
	if err != nil {
		t.Fatal(err)
	}
	var got struct {
		Memory struct {
			Graph      map[string]int64 `json:"graph"`
			Deployed   map[string]int64 `json:"deployed"`
			Runtime    *RuntimeView     `json:"runtime"`
			Persistent *int64           `json:"persistent_bytes"`
		} `json:"memory"`
	}
	if err := json.Unmarshal(js, &got); err != nil {
		t.Fatal(err)
	}
	if got.Memory.Runtime != nil || got.Memory.Persistent == nil || *got.Memory.Persistent != 0 {
		t.Errorf("memory.runtime %v, persistent_bytes %v: an ONNX model has no runtime view and 0 persistent bytes", got.Memory.Runtime, got.Memory.Persistent)
	}
	g := got.Memory.Graph
	if g["peak_live_bytes"] != 9_633_792 || g["arena_bytes"] < g["peak_live_bytes"] { // hand-derived in TestMemoryMobileNetV2
		t.Errorf("memory.graph = %v, want peak_live_bytes 9633792 and arena_bytes ≥ it", g)
	}
	d := got.Memory.Deployed
	if d["peak_live_bytes"] != 6_021_120 || d["arena_bytes"] < d["peak_live_bytes"] { // derived in TestDeployedMobileNetV2
		t.Errorf("memory.deployed = %v, want peak_live_bytes 6021120 and arena_bytes ≥ it", d)
	}
}

// ifModel is cond (bool scalar) and x (float32 [1,4], 16 B) →
// y = If(cond) → z = Relu(y). The then branch reads x from the enclosing
// graph: t1 = Relu(x), t2 = Relu(t1); the else branch is e = Identity(x).
func ifModel() *model.Model {
	f32 := model.TensorType(model.Float32, model.KnownShape(1, 4))
	then := &model.Graph{Name: "then",
		Nodes:   []*model.Node{{Name: "r1", Op: "Relu", Inputs: []string{"x"}, Outputs: []string{"t1"}}, {Name: "r2", Op: "Relu", Inputs: []string{"t1"}, Outputs: []string{"t2"}}},
		Outputs: []*model.ValueInfo{{Name: "t2", Type: f32}}}
	els := &model.Graph{Name: "else",
		Nodes:   []*model.Node{{Name: "id", Op: "Identity", Inputs: []string{"x"}, Outputs: []string{"e"}}},
		Outputs: []*model.ValueInfo{{Name: "e", Type: f32}}}
	g := &model.Graph{
		Inputs: []*model.ValueInfo{{Name: "cond", Type: model.TensorType(model.Bool, model.Shape{})}, {Name: "x", Type: f32}},
		Nodes: []*model.Node{
			{Name: "if", Op: "If", Inputs: []string{"cond"}, Outputs: []string{"y"}, Attrs: []*model.Attr{
				{Name: "then_branch", Kind: model.AttrGraph, Graph: then}, {Name: "else_branch", Kind: model.AttrGraph, Graph: els}}},
			{Name: "relu", Op: "Relu", Inputs: []string{"y"}, Outputs: []string{"z"}},
		},
		Outputs: []*model.ValueInfo{{Name: "z"}},
	}
	return &model.Model{Format: "onnx", IRVersion: 8, Opsets: map[string]int64{"": 13}, Graph: g}
}

// TestMemorySubgraph: a body's own peak is added at its node's step, and
// outer values a body reads stay live through that step. Hand-worked:
//
// then branch: t1 0..1, t2 1..1 (16 B each): peak 32; else branch: e 16.
// Body peak = max(32, 16) = 32, body arena 32.
// Main graph: cond 0..0 (1 B), x 0..0 (read by the then and else bodies at
// step 0, 16 B), y 0..1 (16 B), z 1..1 (16 B).
//
//	step 0: 1 + 16 + 16 + 32 (body) = 65   ← peak
//	step 1: y + z = 16 + 16          = 32
//
// Arena: the body block (32) at 0; x (16, 0..0) → 32; y (16, 0..1) → 48;
// z (16, 1..1) meets y only → 0; cond (1 B) meets the body, x and y → 64.
// Arena 65.
//
// Deployed (default): in the then branch Relu r2 fuses into r1 (t1 is never
// stored), so its peak is 16; the else branch's Identity reads an outer
// value, which stays where it is: 16. The main Relu reads the If's output
// and is not fused into a control-flow node. Step 0: 1 + 16 + 16 + 16 = 49.
func TestMemorySubgraph(t *testing.T) {
	inf, err := Infer(ifModel(), InferOptions{})
	if err != nil {
		t.Fatal(err)
	}
	p := PlanMemory(inf)
	if want := []int64{65, 32}; !reflect.DeepEqual(p.LiveBytesByStep, want) { // hand-worked, above
		t.Errorf("live bytes by step %v, want %v (unresolved %v)", p.LiveBytesByStep, want, p.Unresolved)
	}
	if p.ArenaBytes != 65 { // hand-worked, above
		t.Errorf("arena %d, want 65", p.ArenaBytes)
	}
	if want := []string{"cond", "x", "y", "if (subgraph)"}; !reflect.DeepEqual(p.LiveAtPeak, want) {
		t.Errorf("live at peak %v, want %v", p.LiveAtPeak, want)
	}
	checkPlacements(t, p.Placements, p.ArenaBytes)
	if d := PlanDeployed(inf, DefaultDeployOptions()); !reflect.DeepEqual(d.LiveBytesByStep, []int64{49, 32}) { // hand-worked, above
		t.Errorf("deployed live bytes by step %v, want [49 32]", d.LiveBytesByStep)
	}
}

// TestMemoryCorpus plans every model of ONNX's backend test suite (Debian
// package libonnx-testdata, inputs at the dims of their test data, as the
// shape score prepares them) in both views: no panic, arena ≥ peak, no
// shared bytes, the deployed view with no rewrites equal to the graph view,
// and every rewrite at most the graph view's bytes at each step.
func TestMemoryCorpus(t *testing.T) {
	paths := corpus.Models(t)
	all := DefaultDeployOptions()
	all.InPlaceDepthwise = true
	var planned, complete, withBodies int
	for _, path := range paths {
		sc, err := prepareCase(t, path)
		if err != nil {
			t.Errorf("%s: %v", shortPath(path), err)
			continue
		}
		inf, err := Infer(sc.model, InferOptions{})
		if err != nil {
			t.Errorf("%s: %v", shortPath(path), err)
			continue
		}
		planned++
		g := PlanMemory(inf)
		if len(g.Unresolved) == 0 {
			complete++
		}
		if len(inf.Subgraphs) > 0 {
			withBodies++
		}
		if off := PlanDeployed(inf, DeployOptions{}); !reflect.DeepEqual(g, off) {
			t.Errorf("%s: deployed view with no rewrites differs from the graph view", shortPath(path))
		}
		for _, p := range []*MemoryPlan{g, PlanDeployed(inf, DefaultDeployOptions()), PlanDeployed(inf, all)} {
			if p.ArenaBytes < p.PeakLiveBytes {
				t.Errorf("%s: arena %d < peak %d", shortPath(path), p.ArenaBytes, p.PeakLiveBytes)
			}
			checkPlacements(t, p.Placements, p.ArenaBytes)
			if p == g {
				continue
			}
			for s := range p.LiveBytesByStep {
				if p.LiveBytesByStep[s] > g.LiveBytesByStep[s] {
					t.Errorf("%s: step %d holds %d B deployed, above the graph view's %d", shortPath(path), s, p.LiveBytesByStep[s], g.LiveBytesByStep[s])
					break
				}
			}
		}
	}
	t.Logf("%d of %d corpus models planned, %d with every tensor sized, %d with subgraphs", planned, len(paths), complete, withBodies)
	if planned != len(paths) {
		t.Errorf("planned %d of %d corpus models; every one must be", planned, len(paths))
	}
}

// planArenaSegmentTree is the planner as it was before the byte-run tree:
// the same greedy by size, finding every placed tensor that overlaps a
// tensor in time with a segment tree over the steps and looking at each in
// offset order (O(n log n + Σ k log k), k the overlapping tensors: quadratic
// when thousands are live at once). Kept as the reference PlanArena must
// agree with exactly.
func planArenaSegmentTree(tensors []Lifetime) (placements []Placement, arena int64) {
	n := len(tensors)
	placements = make([]Placement, n)
	if n == 0 {
		return placements, 0
	}
	// The tree runs over the ranks of the distinct step values, so that
	// steps far apart cost nothing.
	stepVals := make([]int, 0, 2*n)
	for i, t := range tensors {
		last := max(t.Last, t.First)
		placements[i] = Placement{Name: t.Name, Size: max(t.Size, 0), First: t.First, Last: last}
		stepVals = append(stepVals, t.First, last)
	}
	slices.Sort(stepVals)
	stepVals = slices.Compact(stepVals)
	rank := func(step int) int {
		r, _ := slices.BinarySearch(stepVals, step)
		return r
	}
	idx := make([]int, n)
	for i := range idx {
		idx[i] = i
	}
	slices.SortFunc(idx, func(a, b int) int {
		x, y := &placements[a], &placements[b]
		switch {
		case x.Size != y.Size:
			return cmp.Compare(y.Size, x.Size)
		case x.First != y.First:
			return cmp.Compare(x.First, y.First)
		case x.Name != y.Name:
			return cmp.Compare(x.Name, y.Name)
		case x.Last != y.Last:
			return cmp.Compare(x.Last, y.Last)
		}
		return cmp.Compare(a, b)
	})

	tree := newStepTree(len(stepVals), n)
	stamp := make([]int32, n) // stamp[j] == q+1: tensor j already met in query q
	var cand []int32
	for q, i := range idx {
		p := &placements[i]
		a, b := rank(p.First), rank(p.Last)
		cand = tree.query(a, b, int32(q+1), stamp, cand[:0])
		slices.SortFunc(cand, func(x, y int32) int {
			if c := cmp.Compare(placements[x].Offset, placements[y].Offset); c != 0 {
				return c
			}
			return cmp.Compare(x, y)
		})
		var prevEnd int64
		best, bestGap := int64(-1), int64(-1)
		for _, j := range cand {
			o := &placements[j]
			if gap := o.Offset - prevEnd; gap >= p.Size && (bestGap < 0 || gap < bestGap) {
				best, bestGap = prevEnd, gap
			}
			prevEnd = max(prevEnd, o.Offset+o.Size)
		}
		if best < 0 {
			best = prevEnd
		}
		p.Offset = best
		arena = max(arena, p.Offset+p.Size)
		tree.insert(a, b, int32(i))
	}
	return placements, arena
}

// randomPacked: up to 1,200 tensors, most of them live until one late step
// (a fan-in, where thousands are live at once), the rest anywhere; sizes
// drawn from a few values so that ties and exact fits are common, some zero
// or negative, some lifetimes inverted.
func randomPacked(r *rand.Rand) []Lifetime {
	steps := 2 + r.Intn(400)
	ts := make([]Lifetime, r.Intn(1201))
	sizes := []int64{0, 16, 48, 64, 64, 100, 128, 1000, -5}
	for i := range ts {
		first := r.Intn(steps)
		last := steps - 1
		switch r.Intn(4) {
		case 0:
			last = first + r.Intn(steps-first)
		case 1:
			last = first - r.Intn(3) // inverted sometimes
		}
		size := sizes[r.Intn(len(sizes))]
		if r.Intn(4) == 0 {
			size = int64(r.Intn(5000))
		}
		ts[i] = Lifetime{Name: fmt.Sprintf("t%d", r.Intn(len(ts)+1)), Size: size, First: first, Last: last}
	}
	return ts
}

// TestPlanArenaMatchesReference: on random lifetimes, small and scattered
// (randomLifetimes) and large with thousands live at once (randomPacked),
// the planner's arena and every placement are exactly those of the
// segment-tree planner it replaced.
func TestPlanArenaMatchesReference(t *testing.T) {
	for seed := range int64(240) {
		r := rand.New(rand.NewSource(seed))
		ts := randomLifetimes(r)
		if seed%3 == 0 {
			ts = randomPacked(r)
		}
		ps, arena := PlanArena(ts)
		rps, rarena := planArenaSegmentTree(ts)
		if arena != rarena || !reflect.DeepEqual(ps, rps) {
			for i := range ps {
				if ps[i] != rps[i] {
					t.Fatalf("seed %d (%d tensors): arena %d, reference %d; first difference at %d: %+v, reference %+v", seed, len(ts), arena, rarena, i, ps[i], rps[i])
				}
			}
			t.Fatalf("seed %d: arena %d, reference %d", seed, arena, rarena)
		}
	}
}

// TestPlanArenaFanInBounded: 20,000 tensors of 64 B all live at the last
// step (N Relu outputs feeding one Sum) are planned without looking at every
// overlapping tensor: each query meets a few byte runs per tree level, not
// the thousands of tensors live at once (the reference planner looks at
// all of them: 2·10^8 in all).
func TestPlanArenaFanInBounded(t *testing.T) {
	const n = 20000
	ts := make([]Lifetime, n)
	for i := range ts {
		ts[i] = Lifetime{Name: fmt.Sprintf("r%d", i), Size: 64, First: i, Last: n}
	}
	ps, arena := PlanArena(ts)
	// Hand-worked: every tensor overlaps every other at step n, so they are
	// stacked: r_i at 64·i, arena 64·n.
	if arena != 64*n || ps[n-1].Offset != 64*(n-1) {
		t.Errorf("arena %d, last offset %d; want %d, %d", arena, ps[n-1].Offset, 64*n, 64*(n-1))
	}
	// The same insertions and queries on the tree itself (steps 0..n are
	// their own ranks): count the runs each query meets.
	tree := newRunTree[int64](n + 1)
	var buf []byteRun[int64]
	most, total := 0, 0
	for i := range ts {
		buf = tree.query(i, n, buf[:0])
		most, total = max(most, len(buf)), total+len(buf)
		tree.insert(i, n, byteRun[int64]{int64(64 * i), int64(64 * (i + 1))})
	}
	// A query visits at most 2·⌈log2(20001)⌉ + 2 = 32 nodes, a run or two each.
	if most > 64 {
		t.Errorf("a query met %d runs (%d in all); the runs should stay joined", most, total)
	}
	t.Logf("queries met %d runs at most, %d in all", most, total)
}

// TestRunListAdd adds random byte ranges to the lists of one tree, some
// far apart and some touching, and compares each list with the union
// worked out byte by byte (hand-checkable reference: a bitmap of 256
// bytes), so that lists growing past their room, shrinking by joins and
// moving in the pool all keep their runs sorted, disjoint and joined.
func TestRunListAdd(t *testing.T) {
	rng := rand.New(rand.NewSource(7))
	tree := newRunTree[int64](4)
	const lists = 3
	var ls [lists]runList
	var bytes [lists][256]bool
	for step := 0; step < 3000; step++ {
		k := rng.Intn(lists)
		lo := rng.Int63n(250)
		hi := lo + 1 + rng.Int63n(min(6, 256-lo))
		if step%500 == 0 {
			ls[k], bytes[k] = runList{}, [256]bool{} // start again: lists long and short
		}
		ls[k] = tree.add(ls[k], byteRun[int64]{lo, hi})
		for b := lo; b < hi; b++ {
			bytes[k][b] = true
		}
		var want []byteRun[int64]
		for b := int64(0); b < 256; b++ {
			if !bytes[k][b] {
				continue
			}
			if n := len(want); n > 0 && want[n-1].hi == b {
				want[n-1].hi++
			} else {
				want = append(want, byteRun[int64]{b, b + 1})
			}
		}
		if got := tree.runs(ls[k]); !slices.Equal(got, want) {
			t.Fatalf("step %d, list %d: runs %v, want %v", step, k, got, want)
		}
	}
}

// TestPlanArenaWideOffsets: when the tensors together pass 2^31 bytes the
// planner keeps 64-bit offsets (below, 32-bit ones halve its memory); the
// placements are still the naive greedy's. Hand-worked edge: two tensors
// live at once of 2^31−11 and 20 bytes are stacked, the second at
// 2^31−11, arena 2^31+9, which a 32-bit offset cannot hold.
func TestPlanArenaWideOffsets(t *testing.T) {
	const big = math.MaxInt32 - 10
	ps, arena := PlanArena([]Lifetime{{Name: "a", Size: big, First: 0, Last: 1}, {Name: "b", Size: 20, First: 1, Last: 2}})
	if arena != big+20 || ps[1].Offset != big {
		t.Fatalf("arena %d, b at %d; want %d, %d", arena, ps[1].Offset, int64(big)+20, int64(big))
	}
	for seed := range int64(60) {
		ts := randomLifetimes(rand.New(rand.NewSource(seed)))
		for i := range ts {
			ts[i].Size <<= 26 // a few tensors of 2^26 scale pass 2^31
		}
		ps, arena := PlanArena(ts)
		checkPlacements(t, ps, arena)
		nps, narena := naiveArena(ts)
		if narena != arena || !reflect.DeepEqual(nps, ps) {
			t.Fatalf("seed %d: planner arena %d, naive greedy %d (or layouts differ)", seed, arena, narena)
		}
	}
}

// TestMemoryUnnamedInitializer: an initializer with an empty name (not
// valid ONNX, but decoded) marks nothing static; it once marked the graph's
// first value, here the input. Hand-worked: Relu on float32[1,4] holds x
// and y at its step, 16 + 16 = 32 bytes, in both views.
func TestMemoryUnnamedInitializer(t *testing.T) {
	f32 := func(name string) *model.ValueInfo {
		return &model.ValueInfo{Name: name, Type: model.TensorType(model.Float32, model.KnownShape(1, 4))}
	}
	m := &model.Model{Format: "onnx", IRVersion: 8, Opsets: map[string]int64{"": 13}, Graph: &model.Graph{
		Nodes:        []*model.Node{{Name: "relu", Op: "Relu", Inputs: []string{"x"}, Outputs: []string{"y"}}},
		Inputs:       []*model.ValueInfo{f32("x")},
		Outputs:      []*model.ValueInfo{f32("y")},
		Initializers: []*model.Tensor{{Name: "", DType: model.Float32, Dims: []int64{4}}},
	}}
	met, err := Measure(m, 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if met.Memory.Graph.PeakLiveBytes != 32 || met.Memory.Deployed.PeakLiveBytes != 32 {
		t.Errorf("peak live %d (graph), %d (deployed); want 32 and 32", met.Memory.Graph.PeakLiveBytes, met.Memory.Deployed.PeakLiveBytes)
	}
}
