package measure

import (
	"sort"

	"github.com/loadline/loadline/model"
)

// Parameters. Definition (README "Conventions", `loadline measure --help`):
// params are the elements of every constant tensor (initializer or Constant
// output) that is used as a weight; param_bytes is their storage at their own
// dtype (int4 packs two to a byte). A constant is used as a weight when some
// node reads it at a data position and that node's result is not itself
// folded statically. Constants read only at shape or index positions
// (Reshape's shape, Slice's starts, Resize's scales, …), constants consumed
// only by shape arithmetic, and scalars (one element or fewer) are not
// parameters. Nor are BatchNormalization's running mean and variance
// (statistics, not learned weights; torchvision's published counts leave
// them out too) or quantization scales and zero points (the metadata of a
// quantized weight, not its elements).

// shapeOperands lists, per operator, the input positions that carry shapes,
// indices, axes or counts rather than data, or statistics and quantization
// metadata rather than weights.
var shapeOperands = map[string][]int{
	"Reshape": {1}, "Expand": {1}, "Tile": {1}, "Slice": {1, 2, 3, 4}, "Pad": {1, 3},
	"Squeeze": {1}, "Unsqueeze": {1}, "Split": {1}, "SplitToSequence": {1},
	"Resize": {1, 2, 3}, "Upsample": {1}, "ConstantOfShape": {0}, "Range": {0, 1, 2},
	"TopK": {1}, "OneHot": {1}, "CumSum": {1}, "Compress": {1}, "Trilu": {1},
	"ReduceSum": {1}, "ReduceMean": {1}, "ReduceMax": {1}, "ReduceMin": {1}, "ReduceProd": {1},
	"ReduceL1": {1}, "ReduceL2": {1}, "ReduceLogSum": {1}, "ReduceLogSumExp": {1}, "ReduceSumSquare": {1},
	"NonMaxSuppression": {2, 3, 4}, "Loop": {0, 1}, "If": {0}, "DFT": {1, 2}, "STFT": {1, 3},
	"MaxUnpool": {2}, "RoiAlign": {2}, "ScatterND": {1}, "ScatterElements": {1}, "Scatter": {1},
	"GatherElements": {1}, "GatherND": {1}, "SequenceAt": {1}, "SequenceInsert": {2}, "SequenceErase": {1},
	"CenterCropPad": {1, 2}, "Col2Im": {1, 2}, "HannWindow": {0}, "HammingWindow": {0}, "BlackmanWindow": {0},
	"MelWeightMatrix": {0, 1, 2, 3, 4}, "ReverseSequence": {1}, "Multinomial": {}, "Shape": {0}, "Size": {0},
	// Statistics and quantization metadata.
	"BatchNormalization": {3, 4}, "QuantizeLinear": {1, 2}, "DequantizeLinear": {1, 2},
	"QLinearConv": {1, 2, 4, 5, 6, 7}, "QLinearMatMul": {1, 2, 4, 5, 6, 7}, "ConvInteger": {2, 3}, "MatMulInteger": {2, 3},
	"DynamicQuantizeLinear": {},
}

// isShapeOperand reports whether input i of n carries a shape or index.
func isShapeOperand(n *model.Node, i int) bool {
	if n.Op == "Gather" && i == 1 {
		return true
	}
	for _, j := range shapeOperands[n.Op] {
		if j == i {
			return true
		}
	}
	return false
}

// ParamTensor is one weight with its figures.
type ParamTensor struct {
	Name     string      `json:"name"`
	DType    model.DType `json:"-"`
	Elements int64       `json:"elements"`
	Bytes    int64       `json:"bytes"`
	// Zeros is the count of elements exactly zero, -1 when not scanned.
	Zeros int64 `json:"-"`
}

// weights finds the constants of the main graph used as weights, in the
// order their first consumer appears.
func weights(inf *Inference) []ParamTensor {
	g := inf.Model.Graph
	consts := map[string]*model.Tensor{}
	for _, t := range g.Initializers {
		consts[t.Name] = t
	}
	for _, n := range g.Nodes {
		if n.Op == "Constant" && len(n.Outputs) == 1 {
			if a := n.Attr("value"); a != nil && a.Tensor != nil {
				t := *a.Tensor
				t.Name = n.Outputs[0]
				consts[n.Outputs[0]] = &t
			}
		}
	}
	seen := map[string]bool{}
	var out []ParamTensor
	var visit func(nodes []*model.Node, vals map[string]*Value)
	visit = func(nodes []*model.Node, vals map[string]*Value) {
		for _, n := range nodes {
			folded := len(n.Outputs) > 0
			for _, o := range n.Outputs {
				if v := vals[o]; o != "" && (v == nil || v.Const == nil) {
					folded = false
				}
			}
			for i, name := range n.Inputs {
				t, ok := consts[name]
				if !ok || seen[name] || folded || isShapeOperand(n, i) {
					continue
				}
				if t.Elements() <= 1 {
					continue
				}
				seen[name] = true
				out = append(out, ParamTensor{Name: name, DType: t.DType, Elements: t.Elements(), Bytes: t.StorageBytes(), Zeros: -1})
			}
			// Subgraph bodies read outer constants too.
			for _, a := range n.Attrs {
				for _, sg := range append([]*model.Graph{a.Graph}, a.Graphs...) {
					if sg != nil {
						visit(sg.Nodes, mergedVals(vals, inf.Subgraphs[sg]))
					}
				}
			}
		}
	}
	visit(g.Nodes, inf.Values)
	return out
}

func mergedVals(outer, inner map[string]*Value) map[string]*Value {
	m := make(map[string]*Value, len(outer)+len(inner))
	for k, v := range outer {
		m[k] = v
	}
	for k, v := range inner {
		m[k] = v
	}
	return m
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
