package measure

import (
	"fmt"
	"hash/fnv"
	"math"
	"strings"

	"github.com/loadline/loadline/model"
)

// Arithmetic on dimensions. Known sizes compute; symbols build a readable
// expression ("batch*3", "(n+1)/2"); an expression grown too long for a
// reader is replaced by a short stable name derived from it, so equal
// expressions still compare equal.

const maxExprLen = 32

func symbolic(expr string) model.Dim {
	if len(expr) <= maxExprLen {
		return model.Sym(expr)
	}
	h := fnv.New32a()
	h.Write([]byte(expr))
	return model.Sym(fmt.Sprintf("?%08x", h.Sum32()))
}

// operand prints a dim for use inside a larger expression.
func operand(d model.Dim) string {
	s := d.String()
	if strings.ContainsAny(s, "+-*/%") && !(strings.HasPrefix(s, "-") && !strings.ContainsAny(s[1:], "+-*/%")) {
		return "(" + s + ")"
	}
	return s
}

func checkedMul(a, b int64) (int64, bool) {
	if a == 0 || b == 0 {
		return 0, true
	}
	c := a * b
	if c/b != a || (a == -1 && b == math.MinInt64) || (b == -1 && a == math.MinInt64) {
		return 0, false
	}
	return c, true
}

func dimMul(a, b model.Dim) model.Dim {
	if a.IsKnown() && b.IsKnown() {
		if c, ok := checkedMul(a.Value, b.Value); ok {
			return model.Known(c)
		}
		return symbolic(a.String() + "*" + b.String())
	}
	if a.IsKnown() && a.Value == 1 {
		return b
	}
	if b.IsKnown() && b.Value == 1 {
		return a
	}
	if (a.IsKnown() && a.Value == 0) || (b.IsKnown() && b.Value == 0) {
		return model.Known(0)
	}
	return symbolic(operand(a) + "*" + operand(b))
}

func dimAdd(a, b model.Dim) model.Dim {
	if a.IsKnown() && b.IsKnown() {
		return model.Known(a.Value + b.Value)
	}
	if a.IsKnown() && a.Value == 0 {
		return b
	}
	if b.IsKnown() && b.Value == 0 {
		return a
	}
	if b.IsKnown() && b.Value < 0 {
		return symbolic(operand(a) + "-" + fmt.Sprint(-b.Value))
	}
	return symbolic(operand(a) + "+" + operand(b))
}

func dimSub(a, b model.Dim) model.Dim {
	if a.IsKnown() && b.IsKnown() {
		return model.Known(a.Value - b.Value)
	}
	if b.IsKnown() && b.Value == 0 {
		return a
	}
	if a == b {
		return model.Known(0)
	}
	if b.IsKnown() && b.Value < 0 {
		return symbolic(operand(a) + "+" + fmt.Sprint(-b.Value))
	}
	return symbolic(operand(a) + "-" + operand(b))
}

// floorDiv divides rounding toward negative infinity, as shape arithmetic
// (and ONNX's integer Div on non-negative sizes) needs.
func floorDiv(a, b int64) int64 {
	q := a / b
	if (a%b != 0) && ((a < 0) != (b < 0)) {
		q--
	}
	return q
}

// dimDiv is integer division truncating toward zero, as ONNX's Div on
// integer tensors computes it.
func dimDiv(a, b model.Dim) model.Dim {
	if a.IsKnown() && b.IsKnown() {
		if b.Value == 0 {
			return symbolic(a.String() + "/0")
		}
		return model.Known(a.Value / b.Value)
	}
	if b.IsKnown() && b.Value == 1 {
		return a
	}
	return symbolic(operand(a) + "/" + operand(b))
}

func dimMod(a, b model.Dim) model.Dim {
	if a.IsKnown() && b.IsKnown() {
		if b.Value == 0 {
			return symbolic(a.String() + "%0")
		}
		return model.Known(a.Value % b.Value)
	}
	return symbolic(operand(a) + "%" + operand(b))
}

// dimCeilDiv is ⌈a/b⌉ for sizes.
func dimCeilDiv(a, b model.Dim) model.Dim {
	if a.IsKnown() && b.IsKnown() && b.Value != 0 {
		return model.Known(-floorDiv(-a.Value, b.Value))
	}
	if b.IsKnown() && b.Value == 1 {
		return a
	}
	return symbolic("ceil(" + operand(a) + "/" + operand(b) + ")")
}

// dimFloorDiv is ⌊a/b⌋ for sizes.
func dimFloorDiv(a, b model.Dim) model.Dim {
	if a.IsKnown() && b.IsKnown() && b.Value != 0 {
		return model.Known(floorDiv(a.Value, b.Value))
	}
	return dimDiv(a, b)
}

func dimMax(a, b model.Dim) model.Dim {
	if a.IsKnown() && b.IsKnown() {
		return model.Known(max(a.Value, b.Value))
	}
	if a == b {
		return a
	}
	return symbolic("max(" + a.String() + "," + b.String() + ")")
}

func dimMin(a, b model.Dim) model.Dim {
	if a.IsKnown() && b.IsKnown() {
		return model.Known(min(a.Value, b.Value))
	}
	if a == b {
		return a
	}
	return symbolic("min(" + a.String() + "," + b.String() + ")")
}

// shapeElems multiplies the dims of a shape, symbolic or not.
func shapeElems(s model.Shape) model.Dim {
	n := model.Known(1)
	for _, d := range s {
		n = dimMul(n, d)
	}
	return n
}

// mergeDim combines what two sources say about one dimension: a known size
// wins over a symbol; two different known sizes disagree.
func mergeDim(a, b model.Dim) (model.Dim, bool) {
	switch {
	case a == b:
		return a, true
	case a.IsKnown() && b.IsKnown():
		return a, false
	case a.IsKnown():
		return a, true
	default:
		return b, true
	}
}
