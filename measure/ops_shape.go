package measure

import (
	"fmt"
	"math"

	"github.com/loadline/loadline/model"
)

// Shape and data-movement operators. They carry known contents along (a
// Shape read, gathered, concatenated and fed to Reshape resolves to numbers)
// because exporters compute shapes with exactly these operators.

var shapeOps = map[string]opRule{
	"Shape":           {infer: inferShapeOp},
	"Size":            {infer: inferSize},
	"Reshape":         {infer: inferReshape},
	"Flatten":         {infer: inferFlatten},
	"Squeeze":         {infer: inferSqueeze},
	"Unsqueeze":       {infer: inferUnsqueeze},
	"Transpose":       {infer: inferTranspose},
	"Concat":          {infer: inferConcat},
	"Split":           {infer: inferSplit},
	"Slice":           {infer: inferSlice},
	"Gather":          {infer: inferGather},
	"GatherElements":  {infer: inferGatherElements},
	"GatherND":        {infer: inferGatherND},
	"Scatter":         {infer: sameWithData},
	"ScatterElements": {infer: sameWithData},
	"ScatterND":       {infer: sameWithData},
	"Expand":          {infer: inferExpand},
	"Tile":            {infer: inferTile},
	"Range":           {infer: inferRange},
	"ConstantOfShape": {infer: inferConstantOfShape},
	"Constant":        {infer: inferConstant},
	"Pad":             {infer: inferPad},
	"DepthToSpace":    {infer: blockRearrange(true)},
	"SpaceToDepth":    {infer: blockRearrange(false)},
	"EyeLike":         {infer: inferEyeLike},
	"OneHot":          {infer: inferOneHot},
	"NonZero":         {infer: inferNonZero},
	"Compress":        {infer: inferCompress},
	"Trilu":           {infer: sameWithData},
	"Unique":          {infer: inferUnique},
	"ReverseSequence": {infer: sameWithData},
	"RandomUniform":   {infer: inferRandom},
	"RandomNormal":    {infer: inferRandom},
	"Multinomial":     {infer: inferMultinomial},
}

// coords converts a flat index to coordinates.
func coords(k int64, st []int64, out []int64) {
	for a := range st {
		out[a] = k / st[a]
		k %= st[a]
	}
}

// moveData builds output contents from an index map over the input.
func moveData(in *Value, idx []int) *Data {
	if in == nil || in.Const() == nil {
		return nil
	}
	n := in.Const().Len()
	for _, j := range idx {
		if j < 0 || j >= n {
			return nil
		}
	}
	return in.Const().take(idx)
}

func sameWithData(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	return []*Value{{Type: in.Type}}, nil
}

func inferShapeOp(c *ctx) ([]*Value, error) {
	s, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	r := int64(len(s))
	start, end := c.attrInt("start", 0), c.attrInt("end", r)
	clamp := func(x int64) int64 {
		if x < 0 {
			x += r
		}
		return min(max(x, 0), r)
	}
	start, end = clamp(start), clamp(end)
	if end < start {
		end = start
	}
	part := s[start:end]
	d := &Data{Ints: append([]model.Dim{}, part...)}
	return []*Value{tensorConst(model.Int64, model.KnownShape(int64(len(part))), d)}, nil
}

func inferSize(c *ctx) ([]*Value, error) {
	s, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	return []*Value{tensorConst(model.Int64, model.Shape{}, &Data{Ints: []model.Dim{shapeElems(s)}})}, nil
}

// reshapeTo resolves a Reshape target against the input shape: 0 copies
// the input dim (unless allowzero), -1 is inferred from the element count.
func reshapeTo(in model.Shape, target []model.Dim, allowZero bool) (model.Shape, error) {
	out := make(model.Shape, len(target))
	infer := -1
	known := model.Known(1)
	for i, d := range target {
		switch {
		case d.IsKnown() && d.Value == 0 && !allowZero:
			if i >= len(in) {
				return nil, fmt.Errorf("target dim %d is 0 (copy), but the input has rank %d", i, len(in))
			}
			out[i] = in[i]
		case d.IsKnown() && d.Value == -1:
			if infer >= 0 {
				return nil, fmt.Errorf("target shape has more than one -1")
			}
			infer = i
			continue
		case d.IsKnown() && d.Value < -1:
			return nil, fmt.Errorf("target dim %d is %d", i, d.Value)
		default:
			out[i] = d
		}
		known = dimMul(known, out[i])
	}
	if infer >= 0 {
		total := shapeElems(in)
		if total.IsKnown() && known.IsKnown() {
			if known.Value == 0 || total.Value%known.Value != 0 {
				return nil, fmt.Errorf("cannot reshape %v (%d elements) to %v", in, total.Value, model.Shape(target))
			}
			out[infer] = model.Known(total.Value / known.Value)
		} else {
			out[infer] = cancelDiv(in, out, infer)
		}
	} else if total, k := shapeElems(in), shapeElems(out); total.IsKnown() && k.IsKnown() && total.Value != k.Value {
		return nil, fmt.Errorf("cannot reshape %v (%d elements) to %v (%d elements)", in, total.Value, out, k.Value)
	}
	return out, nil
}

// cancelDiv computes the -1 dim of a reshape symbolically: the product of
// the input dims divided by the product of the other target dims, with
// common factors (same symbol, same number) cancelled first so that
// [batch,3,4] → [batch,-1] gives 12, not "batch*12/batch".
func cancelDiv(in, out model.Shape, skip int) model.Dim {
	num := append(model.Shape{}, in...)
	var den model.Shape
	for i, d := range out {
		if i != skip {
			den = append(den, d)
		}
	}
	for i := 0; i < len(den); i++ {
		for j := range num {
			if num[j] == den[i] {
				num = append(num[:j], num[j+1:]...)
				den = append(den[:i], den[i+1:]...)
				i--
				break
			}
		}
	}
	n, d := shapeElems(num), shapeElems(den)
	if n.IsKnown() && d.IsKnown() && d.Value != 0 {
		return model.Known(n.Value / d.Value)
	}
	return dimDiv(n, d)
}

func inferReshape(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	var target []model.Dim
	if c.opset < 5 {
		s, ok := c.attrInts("shape")
		if !ok {
			return nil, fmt.Errorf("Reshape-%d has no shape attribute", c.opset)
		}
		target = model.KnownShape(s...)
	} else {
		if !c.has(1) {
			return nil, fmt.Errorf("shape input is missing")
		}
		sv := c.in[1]
		if sv.Const() == nil || sv.Const().Ints == nil {
			if r, ok := sv.rank(); ok && r == 1 && sv.Type.Shape[0].IsKnown() {
				n := sv.Type.Shape[0].Value
				if err := checkRuntimeRank(n); err != nil {
					return nil, err
				}
				return []*Value{unknownRankN(in.Type.DType, int(n), c.outName(0))}, nil
			}
			return nil, fmt.Errorf("shape input (%q) is computed at run time and its length is unknown", c.node.Inputs[1])
		}
		target = sv.Const().Ints
	}
	out, err := reshapeTo(in.Type.Shape, target, c.attrInt("allowzero", 0) == 1)
	if err != nil {
		return nil, err
	}
	v := tensor(in.Type.DType, out)
	v.shareContents(in)
	return []*Value{v}, nil
}

// maxRuntimeRank bounds the rank unknownRankN gives a tensor whose shape is
// computed at run time from a shape input of known length; no model needs
// more, and a hostile length must not reach make.
const maxRuntimeRank = 64

// checkRuntimeRank refuses a shape input length that cannot be a rank.
func checkRuntimeRank(n int64) error {
	if n < 0 || n > maxRuntimeRank {
		return fmt.Errorf("shape input has %d elements; a rank is 0 to %d", n, maxRuntimeRank)
	}
	return nil
}

// unknownRankN is a tensor of known rank whose dims are fresh symbols.
func unknownRankN(dt model.DType, rank int, name string) *Value {
	s := make(model.Shape, rank)
	for i := range s {
		s[i] = symbolic(fmt.Sprintf("%s_d%d", name, i))
	}
	return tensor(dt, s)
}

func inferFlatten(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	s := in.Type.Shape
	axis := c.attrInt("axis", 1)
	if axis < 0 {
		axis += int64(len(s))
	}
	if axis < 0 || axis > int64(len(s)) {
		return nil, fmt.Errorf("axis %d is out of range for rank %d", c.attrInt("axis", 1), len(s))
	}
	out := model.Shape{shapeElems(s[:axis]), shapeElems(s[axis:])}
	v := tensor(in.Type.DType, out)
	v.shareContents(in)
	return []*Value{v}, nil
}

// axesArg reads axes from the attribute (older opsets) or input 1 (newer).
func axesArg(c *ctx, inputSince int64) ([]int64, bool, error) {
	if c.opset >= inputSince {
		if !c.has(1) {
			return nil, false, nil
		}
		a, err := c.needInts(1, "axes")
		return a, true, err
	}
	a, ok := c.attrInts("axes")
	return a, ok, nil
}

func inferSqueeze(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	s := in.Type.Shape
	axes, given, err := axesArg(c, 13)
	if err != nil {
		return nil, err
	}
	drop := map[int]bool{}
	if given {
		ax, err := normAxes(axes, len(s))
		if err != nil {
			return nil, err
		}
		for _, a := range ax {
			if s[a].IsKnown() && s[a].Value != 1 {
				return nil, fmt.Errorf("cannot squeeze axis %d of size %d", a, s[a].Value)
			}
			drop[a] = true
		}
	} else {
		for i, d := range s {
			if d.IsKnown() && d.Value == 1 {
				drop[i] = true
			} else if !d.IsKnown() {
				return nil, fmt.Errorf("no axes given and dim %d (%s) is symbolic: cannot tell whether it is squeezed", i, d)
			}
		}
	}
	var out model.Shape
	for i, d := range s {
		if !drop[i] {
			out = append(out, d)
		}
	}
	if out == nil {
		out = model.Shape{}
	}
	v := tensor(in.Type.DType, out)
	v.shareContents(in)
	return []*Value{v}, nil
}

func inferUnsqueeze(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	axes, given, err := axesArg(c, 13)
	if err != nil {
		return nil, err
	}
	if !given {
		return nil, fmt.Errorf("Unsqueeze needs axes")
	}
	r := len(in.Type.Shape) + len(axes)
	ax, err := normAxes(axes, r)
	if err != nil {
		return nil, err
	}
	ins := map[int]bool{}
	for _, a := range ax {
		ins[a] = true
	}
	out := make(model.Shape, 0, r)
	j := 0
	for i := 0; i < r; i++ {
		if ins[i] {
			out = append(out, model.Known(1))
		} else {
			out = append(out, in.Type.Shape[j])
			j++
		}
	}
	v := tensor(in.Type.DType, out)
	v.shareContents(in)
	return []*Value{v}, nil
}

func inferTranspose(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	s := in.Type.Shape
	perm, ok := c.attrInts("perm")
	if !ok {
		perm = make([]int64, len(s))
		for i := range perm {
			perm[i] = int64(len(s) - 1 - i)
		}
	}
	if len(perm) != len(s) {
		return nil, fmt.Errorf("perm %v has %d entries for rank %d", perm, len(perm), len(s))
	}
	p, err := normAxes(perm, len(s))
	if err != nil {
		return nil, fmt.Errorf("perm %v: %w", perm, err)
	}
	out := make(model.Shape, len(s))
	for i, a := range p {
		out[i] = s[a]
	}
	v := tensor(in.Type.DType, out)
	if dims, ok := s.Ints(); ok && in.Const() != nil {
		od, _ := out.Ints()
		n := in.Const().Len()
		idx := make([]int, n)
		ist, ost := strides(dims), strides(od)
		co := make([]int64, len(od))
		for k := int64(0); k < int64(n); k++ {
			coords(k, ost, co)
			src := int64(0)
			for i, a := range p {
				src += co[i] * ist[a]
			}
			idx[k] = int(src)
		}
		v.setHeld(moveData(in, idx))
	}
	return []*Value{v}, nil
}

func inferConcat(c *ctx) ([]*Value, error) {
	if len(c.in) == 0 {
		return nil, fmt.Errorf("Concat has no inputs")
	}
	first, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	r := len(first)
	axis, err := normAxis(c.attrInt("axis", 1), r)
	if err != nil {
		return nil, err
	}
	out := first.Clone()
	out[axis] = model.Known(0)
	foldable := true
	var parts []*Data
	for i := range c.in {
		s, err := c.shape(i)
		if err != nil {
			return nil, err
		}
		if len(s) != r {
			return nil, fmt.Errorf("input %d has rank %d, input 0 has rank %d", i, len(s), r)
		}
		for a := range s {
			if a == axis {
				out[a] = dimAdd(out[a], s[a])
				continue
			}
			m, ok := mergeDim(out[a], s[a])
			if !ok {
				return nil, fmt.Errorf("input %d has dim %d of size %s, input 0 has %s", i, a, s[a], out[a])
			}
			out[a] = m
		}
		if c.in[i].Const() == nil {
			foldable = false
		} else {
			parts = append(parts, c.in[i].Const())
		}
	}
	v := tensor(c.dtype(0), out)
	// Each part is within the folding limit, the whole need not be (a
	// chain of Concats of a tensor with itself doubles it every node).
	if _, fits := knownElems(out); !fits {
		foldable = false
	}
	if foldable && r == 1 {
		v.setHeld(concatData(parts))
	} else if foldable {
		v.setHeld(concatAxis(c, axis, out))
	}
	return []*Value{v}, nil
}

// concatAxis folds a concatenation along an inner axis.
func concatAxis(c *ctx, axis int, out model.Shape) *Data {
	od, ok := out.Ints()
	if !ok {
		return nil
	}
	outer, ok := model.KnownShape(od[:axis]...).Elements()
	if !ok || outer > maxFoldElements {
		// Many empty slices (a zero dim further in) fold to nothing worth
		// the loop.
		return nil
	}
	var parts []*Data
	for o := int64(0); o < outer; o++ {
		for _, in := range c.in {
			dims, ok := in.Type.Shape.Ints()
			if !ok {
				return nil
			}
			inner := int64(1)
			for _, d := range dims[axis:] {
				inner *= d
			}
			idx := make([]int, inner)
			for k := range idx {
				idx[k] = int(o*inner) + k
			}
			d := moveData(in, idx)
			if d == nil {
				return nil
			}
			parts = append(parts, d)
		}
	}
	return concatData(parts)
}

func inferSplit(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	s := in.Type.Shape
	axis, err := normAxis(c.attrInt("axis", 0), len(s))
	if err != nil {
		return nil, err
	}
	n := len(c.node.Outputs)
	if n == 0 {
		return nil, fmt.Errorf("Split has no outputs")
	}
	var sizes []int64
	switch {
	case c.opset >= 13 && c.has(1):
		if sizes, err = c.needInts(1, "split"); err != nil {
			return nil, err
		}
	case c.opset < 13 && c.attr("split") != nil:
		sizes = c.attr("split").Ints
	case c.opset == 2 && c.has(1):
		if sizes, err = c.needInts(1, "split"); err != nil {
			return nil, err
		}
	}
	outs := make([]*Value, n)
	if sizes != nil {
		if len(sizes) != n {
			return nil, fmt.Errorf("split has %d sizes for %d outputs", len(sizes), n)
		}
		for i, sz := range sizes {
			o := s.Clone()
			o[axis] = model.Known(sz)
			outs[i] = tensor(in.Type.DType, o)
		}
		return outs, nil
	}
	if c.opset >= 18 {
		if num := c.attrInt("num_outputs", 0); num > 0 {
			n = int(num)
		}
	}
	d := s[axis]
	if !d.IsKnown() {
		for i := range outs {
			o := s.Clone()
			o[axis] = dimCeilDiv(d, model.Known(int64(n)))
			outs[i] = tensor(in.Type.DType, o)
		}
		return outs, nil
	}
	// Equal parts; from opset 18 the last part may be smaller.
	chunk := -floorDiv(-d.Value, int64(n))
	rest := d.Value
	for i := range outs {
		sz := min(chunk, rest)
		rest -= sz
		if c.opset < 18 && d.Value%int64(n) != 0 {
			return nil, fmt.Errorf("cannot split dim of %d into %d equal parts", d.Value, n)
		}
		o := s.Clone()
		o[axis] = model.Known(sz)
		outs[i] = tensor(in.Type.DType, o)
	}
	return outs[:len(c.node.Outputs)], nil
}

func clampSlice(start, end, step, dim int64) (int64, int64) {
	if start < 0 {
		start += dim
	}
	if end < 0 {
		end += dim
	}
	if step > 0 {
		start = min(max(start, 0), dim)
		end = min(max(end, 0), dim)
	} else {
		start = min(max(start, -1), dim-1)
		end = min(max(end, -1), dim-1)
	}
	return start, end
}

func sliceLen(start, end, step int64) int64 {
	if step > 0 {
		if end <= start {
			return 0
		}
		return (end - start + step - 1) / step
	}
	if start <= end {
		return 0
	}
	return (start - end - step - 1) / -step
}

func inferSlice(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	s := in.Type.Shape
	var starts, ends, axes, steps []int64
	if c.opset < 10 {
		starts, _ = c.attrInts("starts")
		ends, _ = c.attrInts("ends")
		axes, _ = c.attrInts("axes")
	} else {
		if starts, err = c.needInts(1, "starts"); err != nil {
			return nil, err
		}
		if ends, err = c.needInts(2, "ends"); err != nil {
			return nil, err
		}
		if c.has(3) {
			if axes, err = c.needInts(3, "axes"); err != nil {
				return nil, err
			}
		}
		if c.has(4) {
			if steps, err = c.needInts(4, "steps"); err != nil {
				return nil, err
			}
		}
	}
	if len(starts) != len(ends) {
		return nil, fmt.Errorf("starts has %d entries, ends %d", len(starts), len(ends))
	}
	if axes == nil {
		for i := range starts {
			axes = append(axes, int64(i))
		}
	}
	if steps == nil {
		steps = make([]int64, len(starts))
		for i := range steps {
			steps[i] = 1
		}
	}
	if len(axes) != len(starts) || len(steps) != len(starts) {
		return nil, fmt.Errorf("starts, ends, axes and steps differ in length")
	}
	ax, err := normAxes(axes, len(s))
	if err != nil {
		return nil, err
	}
	out := s.Clone()
	rstart := make([]int64, len(s))
	rstep := make([]int64, len(s))
	for i := range rstep {
		rstep[i] = 1
	}
	for i, a := range ax {
		if steps[i] == 0 {
			return nil, fmt.Errorf("step on axis %d is 0", a)
		}
		d := s[a]
		if !d.IsKnown() {
			if starts[i] == 0 && steps[i] == 1 && ends[i] >= math.MaxInt32 {
				continue // the whole axis
			}
			if starts[i] >= 0 && ends[i] >= 0 && ends[i] < math.MaxInt32 && steps[i] > 0 {
				// [a:b] of a symbolic dim: at most b-a, exactly so when d ≥ b.
				out[a] = dimMin(d, model.Known(ends[i]))
				if starts[i] > 0 {
					out[a] = dimSub(out[a], model.Known(starts[i]))
				}
				continue
			}
			out[a] = symbolic(fmt.Sprintf("slice(%s)", d))
			continue
		}
		st, en := clampSlice(starts[i], ends[i], steps[i], d.Value)
		out[a] = model.Known(sliceLen(st, en, steps[i]))
		rstart[a], rstep[a] = st, steps[i]
	}
	v := tensor(in.Type.DType, out)
	if dims, ok := s.Ints(); ok && in.Const() != nil {
		od, _ := out.Ints()
		n, _ := out.Elements()
		idx := make([]int, n)
		ist, ost := strides(dims), strides(od)
		co := make([]int64, len(od))
		for k := int64(0); k < n; k++ {
			coords(k, ost, co)
			src := int64(0)
			for a := range co {
				src += (rstart[a] + co[a]*rstep[a]) * ist[a]
			}
			idx[k] = int(src)
		}
		v.setHeld(moveData(in, idx))
	}
	return []*Value{v}, nil
}

func inferGather(c *ctx) ([]*Value, error) {
	data, err := c.need(0)
	if err != nil {
		return nil, err
	}
	idxV, err := c.need(1)
	if err != nil {
		return nil, err
	}
	s := data.Type.Shape
	if len(s) == 0 {
		return nil, fmt.Errorf("cannot gather from a scalar")
	}
	axis, err := normAxis(c.attrInt("axis", 0), len(s))
	if err != nil {
		return nil, err
	}
	out := append(append(s[:axis:axis].Clone(), idxV.Type.Shape...), s[axis+1:]...)
	if out == nil {
		out = model.Shape{}
	}
	v := tensor(data.Type.DType, out)
	dims, ok1 := s.Ints()
	od, ok2 := out.Ints()
	ind, ok3 := idxV.Const().KnownInts()
	// Small data and small indices can still make a large output (data
	// [1, 65536] gathered by 65536 indices): fold within the limit only.
	n, fits := knownElems(out)
	if ok1 && ok2 && ok3 && fits && data.Const() != nil {
		idx := make([]int, n)
		ist, ost := strides(dims), strides(od)
		co := make([]int64, len(od))
		ir := len(idxV.Type.Shape)
		idst := strides(mustInts(idxV.Type.Shape))
		for k := int64(0); k < n; k++ {
			coords(k, ost, co)
			src := int64(0)
			for a := 0; a < axis; a++ {
				src += co[a] * ist[a]
			}
			flat := int64(0)
			for a := 0; a < ir; a++ {
				flat += co[axis+a] * idst[a]
			}
			j := ind[flat]
			if j < 0 {
				j += dims[axis]
			}
			if j < 0 || j >= dims[axis] {
				return nil, fmt.Errorf("index %d is out of range for axis of size %d", ind[flat], dims[axis])
			}
			src += j * ist[axis]
			for a := axis + 1; a < len(dims); a++ {
				src += co[a-1+ir] * ist[a]
			}
			idx[k] = int(src)
		}
		v.setHeld(moveData(data, idx))
	}
	return []*Value{v}, nil
}

func mustInts(s model.Shape) []int64 {
	d, _ := s.Ints()
	return d
}

func inferGatherElements(c *ctx) ([]*Value, error) {
	idx, err := c.shape(1)
	if err != nil {
		return nil, err
	}
	return []*Value{tensor(c.dtype(0), idx.Clone())}, nil
}

func inferGatherND(c *ctx) ([]*Value, error) {
	ds, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	is, err := c.shape(1)
	if err != nil {
		return nil, err
	}
	b64 := c.attrInt("batch_dims", 0)
	if b64 < 0 || b64 > int64(len(is)) {
		return nil, fmt.Errorf("batch_dims %d is out of range for indices of rank %d", b64, len(is))
	}
	b := int(b64)
	if len(is) == 0 || !is[len(is)-1].IsKnown() {
		return nil, fmt.Errorf("the last dim of indices must be known")
	}
	k64 := is[len(is)-1].Value
	if k64 < 0 || k64 > int64(len(ds)) {
		return nil, fmt.Errorf("indices tuples of %d exceed data rank %d", k64, len(ds))
	}
	k := int(k64)
	if b+k > len(ds) || b > len(is)-1 {
		return nil, fmt.Errorf("indices tuples of %d with batch_dims %d exceed data rank %d", k, b, len(ds))
	}
	out := append(is[:len(is)-1].Clone(), ds[b+k:]...)
	return []*Value{tensor(c.dtype(0), out)}, nil
}

func inferExpand(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	sv, err := c.need(1)
	if err != nil {
		return nil, err
	}
	if sv.Const() == nil || sv.Const().Ints == nil {
		return nil, fmt.Errorf("target shape (%q) is computed at run time", c.node.Inputs[1])
	}
	out, err := broadcast(in.Type.Shape, model.Shape(sv.Const().Ints))
	if err != nil {
		return nil, err
	}
	v := tensor(in.Type.DType, out)
	if od, ok := out.Ints(); ok && in.Const() != nil {
		if id, ok := in.Type.Shape.Ints(); ok {
			if _, fits := knownElems(out); fits {
				v.setHeld(moveData(in, broadcastIndex(od, id)))
			}
		}
	}
	return []*Value{v}, nil
}

func inferTile(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	reps, err := c.needInts(1, "repeats")
	if err != nil {
		return nil, err
	}
	s := in.Type.Shape
	if len(reps) != len(s) {
		return nil, fmt.Errorf("repeats has %d entries for rank %d", len(reps), len(s))
	}
	out := make(model.Shape, len(s))
	for i, d := range s {
		out[i] = dimMul(d, model.Known(reps[i]))
	}
	v := tensor(in.Type.DType, out)
	if dims, ok := s.Ints(); ok && in.Const() != nil {
		if n, fits := knownElems(out); fits {
			od, _ := out.Ints()
			idx := make([]int, n)
			ist, ost := strides(dims), strides(od)
			co := make([]int64, len(od))
			for k := int64(0); k < n; k++ {
				coords(k, ost, co)
				src := int64(0)
				for a := range co {
					src += (co[a] % dims[a]) * ist[a]
				}
				idx[k] = int(src)
			}
			v.setHeld(moveData(in, idx))
		}
	}
	return []*Value{v}, nil
}

func inferRange(c *ctx) ([]*Value, error) {
	dt := c.dtype(0)
	start, ok1 := c.consts(0).AsFloats()
	limit, ok2 := c.consts(1).AsFloats()
	delta, ok3 := c.consts(2).AsFloats()
	if !ok1 || !ok2 || !ok3 || len(start) != 1 || len(limit) != 1 || len(delta) != 1 {
		if c.consts(0) != nil && c.consts(1) != nil && c.consts(2) != nil {
			// Integer range over symbolic bounds: limit-start for unit steps.
			a, b, d := c.consts(0).Ints, c.consts(1).Ints, c.consts(2).Ints
			if len(a) == 1 && len(b) == 1 && len(d) == 1 && d[0] == model.Known(1) {
				return []*Value{tensor(dt, model.Shape{dimMax(dimSub(b[0], a[0]), model.Known(0))})}, nil
			}
		}
		return []*Value{tensor(dt, model.Shape{symbolic("range_" + c.outName(0))})}, nil
	}
	if delta[0] == 0 {
		return nil, fmt.Errorf("delta is 0")
	}
	n := int64(math.Max(math.Ceil((limit[0]-start[0])/delta[0]), 0))
	v := tensor(dt, model.KnownShape(n))
	if n <= maxFoldElements {
		if dt.IsFloat() {
			f := make([]float64, n)
			for i := range f {
				f[i] = start[0] + float64(i)*delta[0]
			}
			v.setHeld(&Data{Floats: f})
		} else {
			r := make([]int64, n)
			for i := range r {
				r[i] = int64(start[0]) + int64(i)*int64(delta[0])
			}
			v.setHeld(intData(r...))
		}
	}
	return []*Value{v}, nil
}

func inferConstantOfShape(c *ctx) ([]*Value, error) {
	sv, err := c.need(0)
	if err != nil {
		return nil, err
	}
	dt := model.Float32
	var fill *Data
	if a := c.attr("value"); a != nil && a.Tensor != nil {
		dt = a.Tensor.DType
		fill = dataFromTensor(a.Tensor)
	}
	if sv.Const() == nil || sv.Const().Ints == nil {
		if r, ok := sv.rank(); ok && r == 1 && sv.Type.Shape[0].IsKnown() {
			if err := checkRuntimeRank(sv.Type.Shape[0].Value); err != nil {
				return nil, err
			}
			return []*Value{unknownRankN(dt, int(sv.Type.Shape[0].Value), c.outName(0))}, nil
		}
		return nil, fmt.Errorf("shape input (%q) is computed at run time", c.node.Inputs[0])
	}
	out := model.Shape(append([]model.Dim{}, sv.Const().Ints...))
	for i, d := range out {
		if d.IsKnown() && d.Value < 0 {
			return nil, fmt.Errorf("dim %d is negative (%d)", i, d.Value)
		}
	}
	v := tensor(dt, out)
	if n, ok := knownElems(out); ok {
		if fill == nil || fill.Len() == 0 {
			fill = &Data{Floats: []float64{0}}
			if !dt.IsFloat() {
				fill = intData(0)
			}
		}
		v.setHeld(fill.take(make([]int, n)))
	}
	return []*Value{v}, nil
}

func inferConstant(c *ctx) ([]*Value, error) {
	for _, a := range c.node.Attrs {
		switch a.Name {
		case "value":
			if a.Tensor == nil {
				return nil, fmt.Errorf("value attribute holds no tensor")
			}
			return []*Value{tensorValue(a.Tensor)}, nil
		case "sparse_value":
			if a.Sparse == nil || a.Sparse.Values == nil {
				return nil, fmt.Errorf("sparse_value holds no tensor")
			}
			return []*Value{{Type: model.TensorType(a.Sparse.Values.DType, model.KnownShape(a.Sparse.Dims...)), Weight: true}}, nil
		case "value_float":
			return []*Value{{Type: model.TensorType(model.Float32, model.Shape{}), contents: heldContents(&Data{Floats: []float64{float64(a.Float)}}), Weight: true}}, nil
		case "value_floats":
			f := make([]float64, len(a.Floats))
			for i, x := range a.Floats {
				f[i] = float64(x)
			}
			return []*Value{{Type: model.TensorType(model.Float32, model.KnownShape(int64(len(f)))), contents: heldContents(&Data{Floats: f}), Weight: true}}, nil
		case "value_int":
			return []*Value{{Type: model.TensorType(model.Int64, model.Shape{}), contents: heldContents(intData(a.Int)), Weight: true}}, nil
		case "value_ints":
			return []*Value{{Type: model.TensorType(model.Int64, model.KnownShape(int64(len(a.Ints)))), contents: heldContents(intData(a.Ints...)), Weight: true}}, nil
		case "value_string":
			return []*Value{{Type: model.TensorType(model.String, model.Shape{}), contents: heldContents(&Data{Strings: []string{a.String}}), Weight: true}}, nil
		case "value_strings":
			return []*Value{{Type: model.TensorType(model.String, model.KnownShape(int64(len(a.Strings)))), contents: heldContents(&Data{Strings: append([]string{}, a.Strings...)}), Weight: true}}, nil
		}
	}
	return nil, fmt.Errorf("Constant has no value attribute")
}

func inferPad(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	s := in.Type.Shape
	var pads, axes []int64
	if c.opset < 11 {
		p, ok := c.attrInts("pads")
		if !ok {
			p, _ = c.attrInts("paddings")
		}
		pads = p
	} else {
		if pads, err = c.needInts(1, "pads"); err != nil {
			return nil, err
		}
		if c.opset >= 18 && c.has(3) {
			if axes, err = c.needInts(3, "axes"); err != nil {
				return nil, err
			}
		}
	}
	if axes == nil {
		for i := range s {
			axes = append(axes, int64(i))
		}
	}
	ax, err := normAxes(axes, len(s))
	if err != nil {
		return nil, err
	}
	if len(pads) != 2*len(ax) {
		return nil, fmt.Errorf("pads has %d entries, need %d for %d axes", len(pads), 2*len(ax), len(ax))
	}
	out := s.Clone()
	for i, a := range ax {
		out[a] = dimAdd(dimAdd(s[a], model.Known(pads[i])), model.Known(pads[i+len(ax)]))
	}
	return []*Value{tensor(in.Type.DType, out)}, nil
}

// blockRearrange is DepthToSpace (toSpace) and SpaceToDepth: channels
// divided or multiplied by blocksize², height and width the other way.
func blockRearrange(toSpace bool) func(c *ctx) ([]*Value, error) {
	return func(c *ctx) ([]*Value, error) {
		s, err := c.shape(0)
		if err != nil {
			return nil, err
		}
		if len(s) != 4 {
			return nil, fmt.Errorf("input must be 4-D, has rank %d", len(s))
		}
		b := model.Known(c.attrInt("blocksize", 0))
		if b.Value <= 0 {
			return nil, fmt.Errorf("blocksize must be positive")
		}
		if toSpace {
			return []*Value{tensor(c.dtype(0), model.Shape{s[0], dimDiv(s[1], dimMul(b, b)), dimMul(s[2], b), dimMul(s[3], b)})}, nil
		}
		return []*Value{tensor(c.dtype(0), model.Shape{s[0], dimMul(s[1], dimMul(b, b)), dimDiv(s[2], b), dimDiv(s[3], b)})}, nil
	}
}

func inferEyeLike(c *ctx) ([]*Value, error) {
	s, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	dt := c.dtype(0)
	if a := c.attr("dtype"); a != nil {
		dt = model.DType(a.Int)
	}
	return []*Value{tensor(dt, s.Clone())}, nil
}

func inferOneHot(c *ctx) ([]*Value, error) {
	s, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	depth, ok := c.consts(1).AsFloats()
	if !ok || len(depth) != 1 {
		return nil, fmt.Errorf("depth (input 1) is computed at run time")
	}
	r := len(s) + 1
	axis, err := normAxis(c.attrInt("axis", -1), r)
	if err != nil {
		return nil, err
	}
	out := append(append(s[:axis:axis].Clone(), model.Known(int64(depth[0]))), s[axis:]...)
	return []*Value{tensor(c.dtype(2), out)}, nil
}

func inferNonZero(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	r := int64(len(in.Type.Shape))
	vals, ok := in.Const().AsFloats()
	dims, ok2 := in.Type.Shape.Ints()
	if !ok || !ok2 {
		return []*Value{tensor(model.Int64, model.Shape{model.Known(r), symbolic("nonzero_" + c.outName(0))})}, nil
	}
	st := strides(dims)
	var hits [][]int64
	for k, x := range vals {
		if x != 0 {
			co := make([]int64, r)
			coords(int64(k), st, co)
			hits = append(hits, co)
		}
	}
	n := int64(len(hits))
	res := make([]int64, 0, r*n)
	for a := int64(0); a < r; a++ {
		for _, h := range hits {
			res = append(res, h[a])
		}
	}
	return []*Value{tensorConst(model.Int64, model.KnownShape(r, n), intData(res...))}, nil
}

func inferCompress(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	s := in.Type.Shape
	cond, ok := c.consts(1).KnownInts()
	count := model.Dim{}
	if ok {
		n := int64(0)
		for _, x := range cond {
			if x != 0 {
				n++
			}
		}
		count = model.Known(n)
	} else {
		count = symbolic("compress_" + c.outName(0))
	}
	a := c.attr("axis")
	if a == nil {
		return []*Value{tensor(in.Type.DType, model.Shape{count})}, nil
	}
	axis, err := normAxis(a.Int, len(s))
	if err != nil {
		return nil, err
	}
	if ok && s[axis].IsKnown() && int64(len(cond)) > s[axis].Value {
		return nil, fmt.Errorf("condition has %d entries for an axis of %d", len(cond), s[axis].Value)
	}
	out := s.Clone()
	out[axis] = count
	return []*Value{tensor(in.Type.DType, out)}, nil
}

func inferUnique(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	s := in.Type.Shape
	a := c.attr("axis")
	// Count distinct elements (or slices along axis) when the contents are known.
	var count model.Dim
	var total model.Dim
	if a == nil {
		total = shapeElems(s)
		if in.Const() != nil {
			seen := map[string]bool{}
			for i := 0; i < in.Const().Len(); i++ {
				seen[fmt.Sprint(in.Const().take([]int{i}))] = true
			}
			count = model.Known(int64(len(seen)))
		}
	} else {
		axis, err := normAxis(a.Int, len(s))
		if err != nil {
			return nil, err
		}
		total = s[axis]
		if dims, ok := s.Ints(); ok && in.Const() != nil {
			st := strides(dims)
			seen := map[string]bool{}
			co := make([]int64, len(dims))
			groups := map[int64][]int{}
			for k := int64(0); k < int64(in.Const().Len()); k++ {
				coords(k, st, co)
				groups[co[axis]] = append(groups[co[axis]], int(k))
			}
			if dims[axis] > int64(in.Const().Len()) {
				// The other dims hold a zero: every slice is empty, so all
				// are one value (none when the axis is empty too).
				count = model.Known(min(1, dims[axis]))
			} else {
				for i := int64(0); i < dims[axis]; i++ {
					seen[fmt.Sprint(in.Const().take(groups[i]))] = true
				}
				count = model.Known(int64(len(seen)))
			}
		}
	}
	if count == (model.Dim{}) {
		count = symbolic("unique_" + c.outName(0))
	}
	var y model.Shape
	if a == nil {
		y = model.Shape{count}
	} else {
		axis, _ := normAxis(a.Int, len(s))
		y = s.Clone()
		y[axis] = count
	}
	return []*Value{
		tensor(in.Type.DType, y),
		tensor(model.Int64, model.Shape{count}),
		tensor(model.Int64, model.Shape{total}),
		tensor(model.Int64, model.Shape{count}),
	}, nil
}

func inferRandom(c *ctx) ([]*Value, error) {
	s, ok := c.attrInts("shape")
	if !ok {
		return nil, fmt.Errorf("shape attribute is missing")
	}
	return []*Value{tensor(model.DType(c.attrInt("dtype", int64(model.Float32))), model.KnownShape(s...))}, nil
}

func inferMultinomial(c *ctx) ([]*Value, error) {
	s, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	if len(s) != 2 {
		return nil, fmt.Errorf("input must be 2-D")
	}
	return []*Value{tensor(model.DType(c.attrInt("dtype", int64(model.Int32))), model.Shape{s[0], model.Known(c.attrInt("sample_size", 1))})}, nil
}
