package measure

import (
	"testing"

	"github.com/loadline/loadline/model"
)

func TestMatMulShapes(t *testing.T) {
	eq := func(s string) []*model.Attr { return []*model.Attr{atS("equation", s)} }
	f64 := model.Float64
	runNNCases(t, []nnCase{
		// corpus test_gemm_all_attributes: A [4,3]ᵀ × B [5,4]ᵀ → [3,5]
		{name: "Gemm trans", op: "Gemm", opset: 13, in: []nnIn{nnRT("a", f32, 4, 3), nnRT("b", f32, 5, 4), nnRT("c", f32, 1, 5)},
			attrs: []*model.Attr{atF("alpha", 0.25), atF("beta", 0.35), atI("transA", 1), atI("transB", 1)}, want: []string{"float32[3,5]"}},
		// corpus test_gemm_default_no_bias
		{name: "Gemm no bias", op: "Gemm", opset: 13, in: []nnIn{nnRT("a", f32, 2, 10), nnRT("b", f32, 10, 3)}, want: []string{"float32[2,3]"}},
		// corpus pytorch-converted test_Linear (opset 6, broadcast attribute; its weight and bias
		// are initializers, here graph inputs of the same shapes)
		{name: "Gemm opset 6 broadcast", op: "Gemm", opset: 6, in: []nnIn{nnRT("a", f32, 4, 10), nnRT("w", f32, 8, 10), nnRT("c", f32, 8)},
			attrs: []*model.Attr{atF("alpha", 1), atF("beta", 1), atI("broadcast", 1), atI("transB", 1)}, want: []string{"float32[4,8]"}},
		// hand-worked: a classifier on a symbolic batch
		{name: "Gemm symbolic", op: "Gemm", in: []nnIn{nnRT("a", f32, "N", 1280), nnRT("w", f32, 1000, 1280), nnRT("c", f32, 1000)}, attrs: []*model.Attr{atI("transB", 1)}, want: []string{"float32[N,1000]"}},
		{name: "Gemm K mismatch", op: "Gemm", in: []nnIn{nnRT("a", f32, 2, 3), nnRT("b", f32, 4, 5)}, err: "inner dims differ"},
		{name: "Gemm rank", op: "Gemm", in: []nnIn{nnRT("a", f32, 2, 3, 4), nnRT("b", f32, 4, 5)}, err: "2-D A and B"},

		// corpus test_matmul_3d
		{name: "MatMul 3-D", op: "MatMul", opset: 13, in: []nnIn{nnRT("a", f32, 2, 3, 4), nnRT("b", f32, 2, 4, 3)}, want: []string{"float32[2,3,3]"}},
		// numpy matmul semantics (ONNX MatMul spec): 1-D operands are promoted and the promoted dim dropped
		{name: "MatMul vector left", op: "MatMul", in: []nnIn{nnRT("a", f32, 4), nnRT("b", f32, 2, 4, 5)}, want: []string{"float32[2,5]"}},
		{name: "MatMul vector right", op: "MatMul", in: []nnIn{nnRT("a", f32, 2, 3, 4), nnRT("b", f32, 4)}, want: []string{"float32[2,3]"}},
		{name: "MatMul dot", op: "MatMul", in: []nnIn{nnRT("a", f32, 4), nnRT("b", f32, 4)}, want: []string{"float32[]"}},
		// numpy matmul semantics: batch dims broadcast
		{name: "MatMul broadcast", op: "MatMul", in: []nnIn{nnRT("a", f32, 2, 1, 3, 4), nnRT("b", f32, 5, 4, 6)}, want: []string{"float32[2,5,3,6]"}},
		// hand-worked: a transformer MLP on symbolic batch and sequence
		{name: "MatMul symbolic", op: "MatMul", in: []nnIn{nnRT("a", f32, "B", "S", 768), nnRT("b", f32, 768, 3072)}, want: []string{"float32[B,S,3072]"}},
		{name: "MatMul K mismatch", op: "MatMul", in: []nnIn{nnRT("a", f32, 2, 3), nnRT("b", f32, 4, 5)}, err: "inner dims differ: A [2,3] has K=3, B [4,5] has K=4"},
		{name: "MatMul batch mismatch", op: "MatMul", in: []nnIn{nnRT("a", f32, 2, 3, 4), nnRT("b", f32, 3, 4, 5)}, err: "do not broadcast"},
		{name: "MatMul scalar", op: "MatMul", in: []nnIn{nnRT("a", f32), nnRT("b", f32, 3)}, err: "scalar"},
		// corpus test_matmulinteger: int32 accumulator
		{name: "MatMulInteger", op: "MatMulInteger", opset: 10, in: []nnIn{nnRT("a", model.Uint8, 4, 3), nnRT("b", model.Uint8, 3, 2), nnRT("az", model.Uint8, 1), nnRT("bz", model.Uint8, 1)}, want: []string{"int32[4,2]"}},
		// corpus test_qlinearmatmul_3D: output type from y_zero_point
		{name: "QLinearMatMul", op: "QLinearMatMul", opset: 10, in: []nnIn{
			nnRT("a", model.Uint8, 2, 2, 4), nnRT("as", f32, 1), nnRT("az", model.Uint8, 1),
			nnRT("b", model.Uint8, 2, 4, 3), nnRT("bs", f32, 1), nnRT("bz", model.Uint8, 1),
			nnRT("ys", f32, 1), nnRT("yz", model.Uint8, 1)}, want: []string{"uint8[2,2,3]"}},

		// corpus test_einsum_batch_matmul (float64, as are the other einsum cases)
		{name: "Einsum batch matmul", op: "Einsum", opset: 12, in: []nnIn{nnRT("x", f64, 5, 2, 3), nnRT("y", f64, 5, 3, 4)}, attrs: eq("bij, bjk -> bik"), want: []string{"float64[5,2,4]"}},
		// corpus test_einsum_transpose
		{name: "Einsum transpose", op: "Einsum", opset: 12, in: []nnIn{nnRT("x", f64, 3, 4)}, attrs: eq("ij->ji"), want: []string{"float64[4,3]"}},
		// corpus test_einsum_sum
		{name: "Einsum sum", op: "Einsum", opset: 12, in: []nnIn{nnRT("x", f64, 3, 4)}, attrs: eq("ij->i"), want: []string{"float64[3]"}},
		// corpus test_einsum_inner_prod
		{name: "Einsum inner", op: "Einsum", opset: 12, in: []nnIn{nnRT("x", f64, 5), nnRT("y", f64, 5)}, attrs: eq("i,i"), want: []string{"float64[]"}},
		// corpus test_einsum_batch_diagonal
		{name: "Einsum ellipsis diagonal", op: "Einsum", opset: 12, in: []nnIn{nnRT("x", f64, 3, 5, 5)}, attrs: eq("...ii ->...i"), want: []string{"float64[3,5]"}},
		// numpy einsum implicit mode: letters used once, alphabetically, so "ba" transposes
		{name: "Einsum implicit order", op: "Einsum", in: []nnIn{nnRT("x", f32, 2, 3)}, attrs: eq("ba"), want: []string{"float32[3,2]"}},
		{name: "Einsum implicit matmul", op: "Einsum", in: []nnIn{nnRT("x", f32, 2, 3), nnRT("y", f32, 3, 4)}, attrs: eq("ij,jk"), want: []string{"float32[2,4]"}},
		// numpy einsum implicit mode: uppercase sorts before lowercase
		{name: "Einsum implicit case", op: "Einsum", in: []nnIn{nnRT("x", f32, 2, 3)}, attrs: eq("aB"), want: []string{"float32[3,2]"}},
		// numpy einsum: the dims under "..." broadcast and lead the implicit output
		{name: "Einsum ellipsis broadcast", op: "Einsum", in: []nnIn{nnRT("x", f32, 2, 1, 3, 4), nnRT("y", f32, 5, 4, 6)}, attrs: eq("...ij,...jk"), want: []string{"float32[2,5,3,6]"}},
		// hand-worked: attention scores with symbols
		{name: "Einsum symbolic", op: "Einsum", in: []nnIn{nnRT("q", f32, "B", "H", "S", 64), nnRT("k", f32, "B", "H", "T", 64)}, attrs: eq("bhsd,bhtd->bhst"), want: []string{"float32[B,H,S,T]"}},
		// hand-worked: ellipsis in the middle of a term
		{name: "Einsum ellipsis middle", op: "Einsum", in: []nnIn{nnRT("x", f32, 2, 7, 8, 3)}, attrs: eq("a...b->ba..."), want: []string{"float32[3,2,7,8]"}},
		{name: "Einsum operand count", op: "Einsum", in: []nnIn{nnRT("x", f32, 2, 3)}, attrs: eq("ij,jk->ik"), err: "names 2 operands, the node has 1 inputs"},
		{name: "Einsum dims disagree", op: "Einsum", in: []nnIn{nnRT("x", f32, 2, 3), nnRT("y", f32, 4, 5)}, attrs: eq("ij,jk->ik"), err: `subscript 'j' is 3 in one place and 4 in another`},
		{name: "Einsum rank", op: "Einsum", in: []nnIn{nnRT("x", f32, 2, 3, 4)}, attrs: eq("ij->i"), err: "rank 3 but subscripts"},
		{name: "Einsum unknown output letter", op: "Einsum", in: []nnIn{nnRT("x", f32, 2, 3)}, attrs: eq("ij->k"), err: "appears in no operand"},
		{name: "Einsum bad char", op: "Einsum", in: []nnIn{nnRT("x", f32, 2, 3)}, attrs: eq("i1->i"), err: "not a subscript letter"},
		{name: "Einsum dropped ellipsis", op: "Einsum", in: []nnIn{nnRT("x", f32, 2, 3, 4)}, attrs: eq("...ij->ij"), err: "must then contain"},

		// corpus test_det_nd
		{name: "Det batch", op: "Det", opset: 11, in: []nnIn{nnRT("x", f32, 3, 2, 2)}, want: []string{"float32[3]"}},
		// corpus test_det_2d
		{name: "Det", op: "Det", opset: 11, in: []nnIn{nnRT("x", f32, 2, 2)}, want: []string{"float32[]"}},
		// hand-worked, after test_det_2d: any square matrix gives a scalar
		{name: "Det 4x4", op: "Det", in: []nnIn{nnRT("x", f32, 4, 4)}, want: []string{"float32[]"}},
		{name: "Det not square", op: "Det", in: []nnIn{nnRT("x", f32, 4, 3)}, err: "square"},
	})
}
