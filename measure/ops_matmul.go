package measure

import (
	"fmt"
	"sort"
	"strings"

	"github.com/loadline/loadline/model"
)

// Matrix products: Gemm, MatMul and its quantized forms, Einsum, and Det
// (which reduces the trailing matrix dims like a product consumes them).

var matmulOps = map[string]opRule{
	"Gemm":          {infer: inferGemm, rankFree: true},
	"MatMul":        {infer: inferMatMul},
	"MatMulInteger": {infer: inferMatMulInteger, rankFree: true},
	"QLinearMatMul": {infer: inferQLinearMatMul, rankFree: true},
	"Einsum":        {infer: inferEinsum},
	"Det":           {infer: inferDet},
}

// inferGemm: A is [M, K] ([K, M] with transA), B is [K, N] ([N, K] with
// transB); Y is [M, N]. C only broadcasts into Y (before opset 7 only when
// the broadcast attribute allowed it), so it does not change Y's shape.
func inferGemm(c *ctx) ([]*Value, error) {
	as, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	bs, err := c.shape(1)
	if err != nil {
		return nil, err
	}
	if len(as) != 2 || len(bs) != 2 {
		return nil, fmt.Errorf("Gemm needs 2-D A and B, got A %v and B %v", as, bs)
	}
	m, ka := as[0], as[1]
	if c.attrInt("transA", 0) != 0 {
		m, ka = ka, m
	}
	kb, n := bs[0], bs[1]
	if c.attrInt("transB", 0) != 0 {
		kb, n = n, kb
	}
	if _, ok := mergeDim(ka, kb); !ok {
		return nil, fmt.Errorf("inner dims differ: A %v gives K=%d, B %v gives K=%d", as, ka.Value, bs, kb.Value)
	}
	return []*Value{tensor(c.dtype(0), model.Shape{m, n})}, nil
}

// matmulShape is numpy's matmul: 1-D operands are promoted to matrices
// ([K] → [1, K] on the left, [K, 1] on the right) and the promoted dim
// removed again; leading (batch) dims broadcast.
func matmulShape(as, bs model.Shape) (model.Shape, error) {
	if len(as) == 0 || len(bs) == 0 {
		return nil, fmt.Errorf("matrix product of a scalar: A %v, B %v", as, bs)
	}
	a, b := as, bs
	if len(a) == 1 {
		a = model.Shape{model.Known(1), a[0]}
	}
	if len(b) == 1 {
		b = model.Shape{b[0], model.Known(1)}
	}
	ka, kb := a[len(a)-1], b[len(b)-2]
	if _, ok := mergeDim(ka, kb); !ok {
		return nil, fmt.Errorf("inner dims differ: A %v has K=%d, B %v has K=%d", as, ka.Value, bs, kb.Value)
	}
	batch, err := broadcast(a[:len(a)-2], b[:len(b)-2])
	if err != nil {
		return nil, fmt.Errorf("batch dims of A %v and B %v do not broadcast", as, bs)
	}
	out := append(make(model.Shape, 0, len(batch)+2), batch...)
	if len(as) > 1 {
		out = append(out, a[len(a)-2])
	}
	if len(bs) > 1 {
		out = append(out, b[len(b)-1])
	}
	return out, nil
}

func inferMatMul(c *ctx) ([]*Value, error) {
	return matmulOf(c, 0, 1, c.dtype(0))
}

// inferMatMulInteger: products accumulate in int32.
func inferMatMulInteger(c *ctx) ([]*Value, error) {
	return matmulOf(c, 0, 1, model.Int32)
}

// inferQLinearMatMul: inputs a, a_scale, a_zero_point, b, b_scale,
// b_zero_point, y_scale, y_zero_point; the output takes y_zero_point's type.
func inferQLinearMatMul(c *ctx) ([]*Value, error) {
	dt := c.dtype(7)
	if dt == model.Undefined {
		dt = c.dtype(0)
	}
	return matmulOf(c, 0, 3, dt)
}

func matmulOf(c *ctx, ai, bi int, dt model.DType) ([]*Value, error) {
	as, err := c.shape(ai)
	if err != nil {
		return nil, err
	}
	bs, err := c.shape(bi)
	if err != nil {
		return nil, err
	}
	out, err := matmulShape(as, bs)
	if err != nil {
		return nil, err
	}
	return []*Value{tensor(dt, out)}, nil
}

// inferDet: [*, M, M] → [*].
func inferDet(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	if len(xs) < 2 {
		return nil, fmt.Errorf("Det needs [*, M, M] (rank ≥ 2), got %v", xs)
	}
	r, q := xs[len(xs)-2], xs[len(xs)-1]
	if _, ok := mergeDim(r, q); !ok {
		return nil, fmt.Errorf("Det needs square matrices, got %d×%d", r.Value, q.Value)
	}
	return []*Value{tensor(c.dtype(0), xs[:len(xs)-2].Clone())}, nil
}

// einsumTerm is one operand's subscripts: letters in order, with the
// position of "..." (or -1).
type einsumTerm struct {
	labels []byte
	ell    int // index in labels before which the ellipsis stands; -1 if none
}

// parseEinsumTerm reads subscripts such as "b...ij".
func parseEinsumTerm(s string) (einsumTerm, error) {
	t := einsumTerm{ell: -1}
	for i := 0; i < len(s); i++ {
		ch := s[i]
		switch {
		case ch == '.':
			if !strings.HasPrefix(s[i:], "...") {
				return t, fmt.Errorf("a lone '.' in %q; an ellipsis is written \"...\"", s)
			}
			if t.ell >= 0 {
				return t, fmt.Errorf("more than one ellipsis in %q", s)
			}
			t.ell = len(t.labels)
			i += 2
		case ch >= 'a' && ch <= 'z' || ch >= 'A' && ch <= 'Z':
			t.labels = append(t.labels, ch)
		default:
			return t, fmt.Errorf("character %q in %q is not a subscript letter", ch, s)
		}
	}
	return t, nil
}

// inferEinsum parses the equation, binds each letter to a dim (checking
// that repeated letters agree), broadcasts the dims the ellipses stand for,
// and builds the output: the explicit right-hand side, or (implicit mode)
// the ellipsis dims followed by the letters used exactly once, in
// alphabetical (ASCII) order, as numpy does.
func inferEinsum(c *ctx) ([]*Value, error) {
	eq := strings.ReplaceAll(c.attrString("equation", ""), " ", "")
	if eq == "" {
		return nil, fmt.Errorf("Einsum has no equation attribute")
	}
	lhs, rhs, explicit := strings.Cut(eq, "->")
	if strings.Contains(rhs, "->") {
		return nil, fmt.Errorf("equation %q has more than one \"->\"", eq)
	}
	parts := strings.Split(lhs, ",")
	if len(parts) != len(c.in) {
		return nil, fmt.Errorf("equation %q names %d operands, the node has %d inputs", eq, len(parts), len(c.in))
	}
	dims := map[byte]model.Dim{}
	count := map[byte]int{}
	var ellShapes []model.Shape
	for i, p := range parts {
		t, err := parseEinsumTerm(p)
		if err != nil {
			return nil, err
		}
		s, err := c.shape(i)
		if err != nil {
			return nil, err
		}
		ellRank := len(s) - len(t.labels)
		if t.ell < 0 && ellRank != 0 {
			return nil, fmt.Errorf("operand %d has rank %d but subscripts %q name %d dims", i, len(s), p, len(t.labels))
		}
		if ellRank < 0 {
			return nil, fmt.Errorf("operand %d has rank %d, fewer than the %d letters of %q", i, len(s), len(t.labels), p)
		}
		pos := 0
		for j, l := range t.labels {
			if j == t.ell {
				ellShapes = append(ellShapes, s[pos:pos+ellRank])
				pos += ellRank
			}
			d := s[pos]
			pos++
			count[l]++
			prev, seen := dims[l]
			switch {
			case !seen:
				dims[l] = d
			case prev.IsKnown() && prev.Value == 1:
				// A size-1 dim broadcasts against the same letter elsewhere.
				dims[l] = d
			case d.IsKnown() && d.Value == 1:
			default:
				m, ok := mergeDim(prev, d)
				if !ok {
					return nil, fmt.Errorf("subscript %q is %d in one place and %d in another", l, prev.Value, d.Value)
				}
				dims[l] = m
			}
		}
		if t.ell == len(t.labels) {
			ellShapes = append(ellShapes, s[pos:pos+ellRank])
		}
	}
	ellDims, err := broadcast(ellShapes...)
	if err != nil {
		return nil, fmt.Errorf("dims under \"...\" do not broadcast: %v", err)
	}
	var out model.Shape
	if explicit {
		t, err := parseEinsumTerm(rhs)
		if err != nil {
			return nil, err
		}
		if t.ell < 0 && len(ellDims) > 0 {
			return nil, fmt.Errorf("equation %q drops the dims under \"...\" from its output, which must then contain \"...\"", eq)
		}
		seen := map[byte]bool{}
		for j, l := range t.labels {
			if j == t.ell {
				out = append(out, ellDims...)
			}
			if seen[l] {
				return nil, fmt.Errorf("output subscript %q is repeated in %q", l, eq)
			}
			seen[l] = true
			d, ok := dims[l]
			if !ok {
				return nil, fmt.Errorf("output subscript %q appears in no operand of %q", l, eq)
			}
			out = append(out, d)
		}
		if t.ell == len(t.labels) {
			out = append(out, ellDims...)
		}
	} else {
		out = append(out, ellDims...)
		var once []byte
		for l, n := range count {
			if n == 1 {
				once = append(once, l)
			}
		}
		sort.Slice(once, func(i, j int) bool { return once[i] < once[j] })
		for _, l := range once {
			out = append(out, dims[l])
		}
	}
	if out == nil {
		out = model.Shape{}
	}
	return []*Value{tensor(c.dtype(0), out)}, nil
}
