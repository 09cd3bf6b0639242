package measure

import (
	"bytes"
	"cmp"
	"encoding/binary"
	"fmt"
	"slices"
	"sort"
	"unsafe"

	"github.com/loadline/loadline/model"
)

// Parameters. Definition (README "Conventions", `loadline measure --help`):
// params are the elements of every constant tensor (initializer or Constant
// output) that is used as a weight; param_bytes is their storage at their own
// dtype (int4 packs two to a byte). A constant is used as a weight when some
// node reads it at a data position and that node is computed at run time,
// or is folded statically (a Transpose, Cast or Identity of the constant)
// and its result is used as a weight in turn. Constants read only at shape or index positions
// (Reshape's shape, Slice's starts, Resize's scales, …), constants consumed
// only by shape arithmetic, and scalars (one element or fewer) are not
// parameters. Nor are BatchNormalization's running mean and variance
// (statistics, not learned weights; torchvision's published counts leave
// them out too) or quantization scales and zero points (the metadata of a
// quantized weight, not its elements). A weight the file does not store but
// that is computed from constants at load time (a ConstantOfShape, Expand,
// Tile, … read as a weight) is a parameter too, at its own elements and
// dtype: static.go defines which.

// shapeOperands lists, per operator, the input positions that carry shapes,
// indices, axes or counts rather than data, or statistics and quantization
// metadata rather than weights.
var shapeOperands = map[string][]int{
	"Reshape": {1}, "Expand": {1}, "Tile": {1}, "Slice": {1, 2, 3, 4}, "Pad": {1, 3},
	"Squeeze": {1}, "Unsqueeze": {1}, "Split": {1}, "SplitToSequence": {1},
	"Resize": {1, 2, 3}, "Upsample": {1}, "ConstantOfShape": {0}, "Range": {0, 1, 2},
	"TopK": {1}, "OneHot": {0, 1}, "CumSum": {1}, "Compress": {1}, "Trilu": {1},
	"ReduceSum": {1}, "ReduceMean": {1}, "ReduceMax": {1}, "ReduceMin": {1}, "ReduceProd": {1},
	"ReduceL1": {1}, "ReduceL2": {1}, "ReduceLogSum": {1}, "ReduceLogSumExp": {1}, "ReduceSumSquare": {1},
	"NonMaxSuppression": {2, 3, 4}, "Loop": {0, 1}, "If": {0}, "DFT": {1, 2}, "STFT": {1, 3},
	"MaxUnpool": {1, 2}, "RoiAlign": {2}, "ScatterND": {1}, "ScatterElements": {1}, "Scatter": {1},
	"GatherElements": {1}, "GatherND": {1}, "SequenceAt": {1}, "SequenceInsert": {2}, "SequenceErase": {1},
	"CenterCropPad": {1, 2}, "Col2Im": {1, 2}, "HannWindow": {0}, "HammingWindow": {0}, "BlackmanWindow": {0},
	"MelWeightMatrix": {0, 1, 2, 3, 4}, "ReverseSequence": {1}, "Multinomial": {}, "Shape": {0}, "Size": {0},
	"AffineGrid": {1},
	// Read only for their shape and type.
	"EyeLike": {0}, "CastLike": {1}, "RandomNormalLike": {0}, "RandomUniformLike": {0},
	// Statistics and quantization metadata.
	"BatchNormalization": {3, 4}, "QuantizeLinear": {1, 2}, "DequantizeLinear": {1, 2},
	"QLinearConv": {1, 2, 4, 5, 6, 7}, "QLinearMatMul": {1, 2, 4, 5, 6, 7}, "ConvInteger": {2, 3}, "MatMulInteger": {2, 3},
	"DynamicQuantizeLinear": {},
}

// indexOperands lists, per operator, the positions of shapeOperands that
// hold indices read element by element, as many as the data they pick or
// place (GatherElements' indices are as large as its output): no weight,
// but data a kernel reads in full, so per-layer traffic counts them
// (layers.go) where it leaves shapes, axes and counts out. Gather's
// indices (position 1) are among them too (isIndexOperand).
var indexOperands = map[string][]int{
	"GatherElements": {1}, "GatherND": {1}, "ScatterND": {1}, "ScatterElements": {1}, "Scatter": {1},
	"Compress": {1}, "MaxUnpool": {1}, "OneHot": {0}, "ReverseSequence": {1}, "RoiAlign": {2},
	// TFLite's rows (tfliteOps): GATHER's and GATHER_ND's indices, SCATTER_ND's
	// and ONE_HOT's indices, EMBEDDING_LOOKUP's ids.
	"tflite:GATHER": {1}, "tflite:GATHER_ND": {1}, "tflite:SCATTER_ND": {0}, "tflite:ONE_HOT": {0},
	"tflite:EMBEDDING_LOOKUP": {0},
}

// operandKey is n's row in shapeOperands and indexOperands.
func operandKey(n *model.Node) string {
	if n.Domain == "tflite" {
		return "tflite:" + n.Op // TFLite's rows, from tfliteOps
	}
	return n.Op
}

// isIndexOperand reports whether input i of n holds indices read element
// by element (indexOperands).
func isIndexOperand(n *model.Node, i int) bool {
	if n.Op == "Gather" && i == 1 {
		return true
	}
	return slices.Contains(indexOperands[operandKey(n)], i)
}

// isShapeOperand reports whether input i of n carries a shape or index.
func isShapeOperand(n *model.Node, i int) bool {
	if n.Op == "Gather" && i == 1 {
		return true
	}
	return slices.Contains(shapeOperands[operandKey(n)], i)
}

// ParamTensor is one weight with its figures.
type ParamTensor struct {
	Name     string `json:"name"`
	Elements int64  `json:"elements"`
	Bytes    int64  `json:"bytes"`
	// Zeros is the count of elements exactly zero, -1 when not scanned
	// (the tensor is declared without values, or its bytes cannot be read).
	Zeros int64       `json:"-"`
	DType model.DType `json:"-"` // beside Generated, so that the two pack
	// Generated marks a weight the file does not store: computed from
	// constants at load time (static.go).
	Generated bool `json:"-"`
}

// Sparsity. Definition (README "Conventions"): the share of parameter
// elements that are exactly zero, read from the weight bytes as stored
// (+0 and -0 alike for floating types; for quantized weights, the stored
// integer 0, which is the real zero when the zero point is 0). Tensors
// without stored values are skipped, and the overall share is over the
// tensors scanned.

// countZeros counts the elements of t that are exactly zero, or returns -1
// when t holds no values (declared only, strings). It loops over the raw
// bytes at the tensor's width, without converting elements. A weight whose
// stored values cannot be read (a missing or short external data file) is
// an error: the model cannot be deployed as it is.
func countZeros(t *model.Tensor) (int64, error) {
	return countZerosInPieces(t, nil)
}

// zeroPiece is how many bytes of a weight countZerosInPieces reads before
// it hands them on: a multiple of every element's width.
const zeroPiece = 4 << 20

// countZerosInPieces is countZeros, calling done (when set) with each
// piece of the stored bytes it has read, front to back, so that a caller
// that mapped the file can give those pages back before the rest of a
// large weight is read.
func countZerosInPieces(t *model.Tensor, done func(read []byte)) (int64, error) {
	n := t.Elements()
	if n < 0 || !t.HasData() || t.DType.Bits() == 0 {
		return -1, nil
	}
	b, err := t.RawBytes()
	if err != nil {
		return -1, fmt.Errorf("weight %q: %w", t.Name, err)
	}
	if t.DType.StorageBytes(n) != int64(len(b)) {
		return -1, nil
	}
	var zeros int64
	for lo := 0; lo < len(b); lo += zeroPiece {
		hi := min(len(b), lo+zeroPiece)
		// Elements in the piece: for 4-bit types two a byte, the last
		// byte's high nibble padding when n is odd.
		elems := min(n-2*int64(lo), 2*int64(hi-lo))
		z, ok := zerosIn(t.DType, b[lo:hi], elems)
		if !ok {
			return -1, nil
		}
		zeros += z
		if done != nil {
			done(b[lo:hi])
		}
	}
	return zeros, nil
}

// zerosIn counts the zero elements of dt in b, whose 4-bit elements number
// elems (other widths fill b); false for a width it cannot count.
func zerosIn(dt model.DType, b []byte, elems int64) (int64, bool) {
	var zeros int64
	switch dt {
	case model.Float32:
		zeros = zeros32(b, 0x7fffffff)
	case model.Float64:
		for i := 0; i+8 <= len(b); i += 8 {
			if binary.LittleEndian.Uint64(b[i:])&0x7fffffffffffffff == 0 {
				zeros++
			}
		}
	case model.Float16, model.BFloat16:
		for i := 0; i+2 <= len(b); i += 2 {
			if binary.LittleEndian.Uint16(b[i:])&0x7fff == 0 {
				zeros++
			}
		}
	case model.Float8E4M3FN, model.Float8E5M2:
		for _, x := range b {
			if x&0x7f == 0 {
				zeros++
			}
		}
	case model.Complex64:
		for i := 0; i+8 <= len(b); i += 8 {
			if binary.LittleEndian.Uint64(b[i:])&0x7fffffff7fffffff == 0 {
				zeros++
			}
		}
	case model.Complex128:
		for i := 0; i+16 <= len(b); i += 16 {
			if (binary.LittleEndian.Uint64(b[i:])|binary.LittleEndian.Uint64(b[i+8:]))&0x7fffffffffffffff == 0 {
				zeros++
			}
		}
	case model.Int4, model.Uint4, model.Float4E2M1:
		// Two elements a byte, the first in the low nibble; float4e2m1's
		// sign is bit 3 of its nibble.
		mask := byte(0xf)
		if dt == model.Float4E2M1 {
			mask = 0x7
		}
		for i := int64(0); i < elems; i++ {
			if (b[i/2]>>(4*(i%2)))&mask == 0 {
				zeros++
			}
		}
	default:
		// Integers, bool and the float8 types without negative zero
		// (FNUZ: 0x80 is NaN): an element is zero when all its bytes are.
		switch dt.Bits() {
		case 8:
			zeros = int64(bytes.Count(b, []byte{0}))
		case 16:
			for i := 0; i+2 <= len(b); i += 2 {
				if binary.LittleEndian.Uint16(b[i:]) == 0 {
					zeros++
				}
			}
		case 32:
			zeros = zeros32(b, 0xffffffff)
		case 64:
			for i := 0; i+8 <= len(b); i += 8 {
				if binary.LittleEndian.Uint64(b[i:]) == 0 {
					zeros++
				}
			}
		default:
			return 0, false
		}
	}
	return zeros, true
}

// weights finds the constants of the model (main graph and subgraphs) used
// as weights, in the order their first consumer appears. When read is set,
// it is called with the weights' stored bytes as their zeros are counted,
// piece by piece, in the order those bytes lie in memory (storedAt), so
// that a caller that mapped the model file can give back the pages read
// (check.MeasureFile).
func weights(inf *Inference, read func(stored []byte)) ([]ParamTensor, error) {
	g := inf.Model.Graph
	x := inf.index(g, inf.Values)
	// The constants: initializers and Constant outputs of the main graph,
	// by number, and of every subgraph (a branch or loop body may hold its
	// own), by name. A subgraph's constant hides a main-graph one of the
	// same name wherever the name is read, and a later one an earlier one.
	mainConsts := make([]*model.Tensor, len(x.names))
	byName := map[string]*model.Tensor{}
	nConsts := 0 // at most, for sizing the list of weights
	addConsts := func(g *model.Graph, main bool) {
		set := func(name string, t *model.Tensor) {
			nConsts++
			if id := x.lookup(name); main && id >= 0 {
				mainConsts[id] = t
			} else {
				byName[name] = t
			}
		}
		for _, t := range g.Initializers {
			set(t.Name, t)
		}
		for _, n := range g.Nodes {
			if n.Op == "Constant" && len(n.Outputs) == 1 {
				if a := n.Attr("value"); a != nil && a.Tensor != nil {
					t := *a.Tensor
					t.Name = n.Outputs[0]
					set(n.Outputs[0], &t)
				}
			}
		}
	}
	addConsts(g, true)
	// The nodes of the main graph and of its subgraphs, each subgraph's
	// after the node that holds it, with the values they see.
	type step struct {
		n      *model.Node
		main   int32 // the node's number in the main graph, -1 in a subgraph
		folded bool  // inference knows every output's values
	}
	steps := make([]step, 0, len(g.Nodes))
	// A subgraph sees its own values, then its enclosing graphs' (a chain
	// of scopes, not a copy per subgraph, which would cost the outer
	// graph's size once per subgraph).
	// In the main graph (x set) values are read by number rather than
	// looked up by name.
	var walk func(nodes []*model.Node, sc scopes, x *graphIndex)
	walk = func(nodes []*model.Node, sc scopes, x *graphIndex) {
		if len(sc) > maxGraphDepth+1 {
			return
		}
		for i, n := range nodes {
			folded := len(n.Outputs) > 0
			for j, o := range n.Outputs {
				var v *Value
				if x != nil {
					v = x.value(x.outs(i)[j])
				} else {
					v = sc.lookup(o)
				}
				if o != "" && (v == nil || v.Const() == nil) {
					folded = false
				}
			}
			main := int32(-1)
			if x != nil {
				main = int32(i)
			}
			steps = append(steps, step{n, main, folded})
			// Subgraph bodies read outer constants too.
			for _, a := range n.Attrs {
				for _, sg := range append([]*model.Graph{a.Graph}, a.Graphs...) {
					if sg != nil {
						addConsts(sg, false)
						walk(sg.Nodes, append(sc[:len(sc):len(sc)], inf.Subgraphs[sg]), nil)
					}
				}
			}
		}
	}
	walk(g.Nodes, scopes{inf.Values}, x)

	// A node's data inputs feed a weight when the node is computed at run
	// time, or when it is folded (a Transpose, Cast or Identity of a
	// constant) and one of its outputs feeds a weight in turn; consumers
	// come after producers, so one backward pass settles it. Constants
	// that only feed shape arithmetic stay out.
	// used is asked only of folded nodes' outputs, so only those are
	// recorded: a large graph has few, and a map of every name read
	// would cost more than the rest of this pass.
	folded := map[string]bool{}
	for _, st := range steps {
		if st.folded {
			for _, o := range st.n.Outputs {
				folded[o] = true
			}
		}
	}
	feeds := make([]bool, len(steps))
	used := map[string]bool{}
	for k := len(steps) - 1; k >= 0; k-- {
		st := steps[k]
		feeds[k] = !st.folded
		for _, o := range st.n.Outputs {
			feeds[k] = feeds[k] || (o != "" && used[o])
		}
		if !feeds[k] || len(folded) == 0 {
			continue
		}
		for i, name := range st.n.Inputs {
			if name != "" && !isShapeOperand(st.n, i) && folded[name] {
				used[name] = true
			}
		}
	}

	// Each weight once, by name: a name the main graph numbers is marked
	// by its number, any other in seenName.
	seen := make([]bool, len(x.names))
	seenName := map[string]bool{}
	firstSight := func(id int32, name string) bool {
		if id >= 0 {
			was := seen[id]
			seen[id] = true
			return !was
		}
		was := seenName[name]
		seenName[name] = true
		return !was
	}
	out := make([]ParamTensor, 0, nConsts)
	stored := make([]*model.Tensor, 0, nConsts) // out's tensors, in turn
	for k, st := range steps {
		if !feeds[k] {
			continue
		}
		var ids []int32
		if st.main >= 0 {
			ids = x.ins(int(st.main))
		}
		for i, name := range st.n.Inputs {
			id := int32(-1)
			if ids != nil {
				id = ids[i]
			} else if name != "" {
				id = x.lookup(name)
			}
			t, ok := byName[name]
			if !ok && id >= 0 {
				t, ok = mainConsts[id], mainConsts[id] != nil
			}
			if !ok || isShapeOperand(st.n, i) || t.Elements() <= 1 || !firstSight(id, name) {
				continue
			}
			out = append(out, ParamTensor{Name: name, DType: t.DType, Elements: t.Elements(), Bytes: t.StorageBytes()})
			stored = append(stored, t)
		}
	}
	// Zeros are counted in the order the stored bytes lie, front to back.
	order := make([]int32, len(stored))
	for i := range order {
		order[i] = int32(i)
	}
	slices.SortStableFunc(order, func(a, b int32) int { return cmp.Compare(storedAt(stored[a]), storedAt(stored[b])) })
	// The error reported is that of the first weight in turn.
	var readErr error
	errAt := int32(len(stored))
	for _, i := range order {
		t := stored[i]
		zeros, err := countZerosInPieces(t, read)
		if err != nil && i < errAt {
			readErr, errAt = err, i
		}
		out[i].Zeros = zeros
	}
	// Weights computed from constants at load time count too (static.go).
	out = append(out, generatedWeights(inf)...)
	return out, readErr
}

// storedAt is the address of the first stored byte of t (0 when it stores
// none in memory): the order of weights in their model file when it is
// mapped, or a decoder's buffer of it.
func storedAt(t *model.Tensor) uintptr {
	if len(t.Data.Segments) == 0 {
		return 0
	}
	return uintptr(unsafe.Pointer(unsafe.SliceData(t.Data.Segments[0])))
}

// ParamsByDType sums parameter bytes per dtype, for reports.
func ParamsByDType(ps []ParamTensor) []DTypeBytes {
	by := map[model.DType]*DTypeBytes{}
	for _, p := range ps {
		d := by[p.DType]
		if d == nil {
			d = &DTypeBytes{DType: p.DType.String()}
			by[p.DType] = d
		}
		d.Params += p.Elements
		d.Bytes += p.Bytes
	}
	out := make([]DTypeBytes, 0, len(by))
	for _, d := range by {
		out = append(out, *d)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Bytes > out[j].Bytes })
	return out
}

// DTypeBytes is the parameter count and storage of one dtype.
type DTypeBytes struct {
	DType  string `json:"dtype"`
	Params int64  `json:"params"`
	Bytes  int64  `json:"bytes"`
}

// zeros32 counts the 32-bit little-endian elements of b whose bits under
// mask are all zero. The weights of a large model are scanned once per
// measure, so it skips 32 bytes at a time when none of their elements can
// be zero: within a 64-bit word of two masked lanes, (v − 1 per lane) &^ v
// has a lane's top bit set when that lane is zero (and, through the borrow,
// possibly the lane above it), so a clear result proves both lanes non-zero.
func zeros32(b []byte, mask uint32) int64 {
	const lanes1, high = 0x0000000100000001, 0x8000000080000000
	m := uint64(mask) * lanes1
	// With a mask keeping the sign bit (integers), a lane's own top bit
	// would defeat the test: fall back to the simple loop.
	var z int64
	i := 0
	if mask&(1<<31) == 0 {
		for rest := b; len(rest) >= 32; rest = rest[32:] {
			w := rest[:32:32]
			w0 := binary.LittleEndian.Uint64(w[0:8]) & m
			w1 := binary.LittleEndian.Uint64(w[8:16]) & m
			w2 := binary.LittleEndian.Uint64(w[16:24]) & m
			w3 := binary.LittleEndian.Uint64(w[24:32]) & m
			i += 32
			if ((w0-lanes1)&^w0|(w1-lanes1)&^w1|(w2-lanes1)&^w2|(w3-lanes1)&^w3)&high == 0 {
				continue
			}
			for _, v := range [4]uint64{w0, w1, w2, w3} {
				if uint32(v) == 0 {
					z++
				}
				if v>>32 == 0 {
					z++
				}
			}
		}
	}
	for ; i+4 <= len(b); i += 4 {
		if binary.LittleEndian.Uint32(b[i:])&mask == 0 {
			z++
		}
	}
	return z
}
