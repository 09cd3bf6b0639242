package target

import (
	"errors"
	"math"
)

// NNLS solves min ‖A·x − b‖₂ subject to x ≥ 0 by the active-set method of
// Lawson and Hanson ("Solving Least Squares Problems", 1974, ch. 23).
// A is m rows of n columns. It returns x and the rank of the columns the
// solution uses; rank < the number of positive entries cannot happen, but
// a rank of A below n means other x fit equally well (under-determined).
func NNLS(A [][]float64, b []float64) ([]float64, error) {
	m := len(A)
	if m == 0 || len(b) != m {
		return nil, errors.New("nnls: need as many right-hand sides as rows, and at least one row")
	}
	n := len(A[0])
	for _, r := range A {
		if len(r) != n {
			return nil, errors.New("nnls: rows of unequal length")
		}
		for _, v := range r {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, errors.New("nnls: matrix entry not finite")
			}
		}
	}
	for _, v := range b {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, errors.New("nnls: right-hand side not finite")
		}
	}
	x := make([]float64, n)
	passive := make([]bool, n)
	tol := 1e-12 * (1 + frobenius(A)) * (1 + norm(b))
	gradient := func() []float64 {
		r := residual(A, x, b)
		w := make([]float64, n)
		for j := 0; j < n; j++ {
			for i := 0; i < m; i++ {
				w[j] += A[i][j] * r[i]
			}
		}
		return w
	}
	for iter := 0; iter < 3*n+3; iter++ {
		w := gradient()
		t, best := -1, tol
		for j := 0; j < n; j++ {
			if !passive[j] && w[j] > best {
				t, best = j, w[j]
			}
		}
		if t < 0 {
			break
		}
		passive[t] = true
		for inner := 0; inner < 3*n+3; inner++ {
			s := lsq(A, b, passive)
			if s[t] <= 0 && inner == 0 {
				// The column just added cannot help (numerically
				// dependent on the others): leave it out.
				passive[t] = false
				break
			}
			allPos := true
			for j := 0; j < n; j++ {
				if passive[j] && s[j] <= 0 {
					allPos = false
				}
			}
			if allPos {
				copy(x, s)
				break
			}
			alpha := math.Inf(1)
			for j := 0; j < n; j++ {
				if passive[j] && s[j] <= 0 {
					if a := x[j] / (x[j] - s[j]); a < alpha {
						alpha = a
					}
				}
			}
			for j := 0; j < n; j++ {
				x[j] += alpha * (s[j] - x[j])
				if passive[j] && x[j] <= 1e-15*math.Max(1, math.Abs(s[j])) {
					passive[j], x[j] = false, 0
				}
			}
		}
	}
	for j := range x {
		if x[j] < 0 {
			x[j] = 0
		}
	}
	return x, nil
}

// Rank is the numerical rank of A's columns (Householder QR with column
// pivoting).
func Rank(A [][]float64) int {
	m := len(A)
	if m == 0 {
		return 0
	}
	n := len(A[0])
	R := make([][]float64, m)
	for i := range A {
		R[i] = append([]float64{}, A[i]...)
	}
	scale := frobenius(A)
	if scale == 0 {
		return 0
	}
	rank := 0
	for k := 0; k < min(m, n); k++ {
		// pivot: the remaining column of largest norm
		p, pn := -1, 0.0
		for j := k; j < n; j++ {
			s := 0.0
			for i := k; i < m; i++ {
				s += R[i][j] * R[i][j]
			}
			if s > pn {
				p, pn = j, s
			}
		}
		if p < 0 || math.Sqrt(pn) <= 1e-9*scale {
			break
		}
		for i := range R {
			R[i][k], R[i][p] = R[i][p], R[i][k]
		}
		householder(R, k, k)
		rank++
	}
	return rank
}

// lsq solves the unconstrained least squares over the passive columns by
// Householder QR; the other entries are 0. A passive column that is
// numerically dependent on earlier ones gets 0.
func lsq(A [][]float64, b []float64, passive []bool) []float64 {
	n := len(passive)
	var cols []int
	for j, p := range passive {
		if p {
			cols = append(cols, j)
		}
	}
	m, k := len(A), len(cols)
	R := make([][]float64, m)
	for i := range R {
		R[i] = make([]float64, k+1)
		for c, j := range cols {
			R[i][c] = A[i][j]
		}
		R[i][k] = b[i]
	}
	scale := frobenius(A)
	use := make([]bool, k)
	row := 0
	for c := 0; c < k && row < m; c++ {
		householder(R, row, c)
		if math.Abs(R[row][c]) <= 1e-12*scale {
			continue
		}
		use[c] = true
		row++
	}
	// back substitution over the used columns, rows 0..row-1
	sol := make([]float64, k)
	r := row - 1
	for c := k - 1; c >= 0; c-- {
		if !use[c] {
			continue
		}
		s := R[r][k]
		for c2 := c + 1; c2 < k; c2++ {
			if use[c2] {
				s -= R[r][c2] * sol[c2]
			}
		}
		sol[c] = s / R[r][c]
		r--
	}
	out := make([]float64, n)
	for c, j := range cols {
		out[j] = sol[c]
	}
	return out
}

// householder zeroes column c of R below row r with a reflection applied
// to every column from c on.
func householder(R [][]float64, r, c int) {
	m := len(R)
	norm := 0.0
	for i := r; i < m; i++ {
		norm += R[i][c] * R[i][c]
	}
	norm = math.Sqrt(norm)
	if norm == 0 {
		return
	}
	alpha := -norm
	if R[r][c] < 0 {
		alpha = norm
	}
	v := make([]float64, m)
	v[r] = R[r][c] - alpha
	for i := r + 1; i < m; i++ {
		v[i] = R[i][c]
	}
	vv := 0.0
	for i := r; i < m; i++ {
		vv += v[i] * v[i]
	}
	if vv == 0 {
		return
	}
	for j := c; j < len(R[0]); j++ {
		d := 0.0
		for i := r; i < m; i++ {
			d += v[i] * R[i][j]
		}
		f := 2 * d / vv
		for i := r; i < m; i++ {
			R[i][j] -= f * v[i]
		}
	}
}

func residual(A [][]float64, x, b []float64) []float64 {
	r := make([]float64, len(b))
	for i := range A {
		s := b[i]
		for j, v := range A[i] {
			s -= v * x[j]
		}
		r[i] = s
	}
	return r
}

func frobenius(A [][]float64) float64 {
	s := 0.0
	for _, r := range A {
		for _, v := range r {
			s += v * v
		}
	}
	return math.Sqrt(s)
}

func norm(v []float64) float64 {
	s := 0.0
	for _, x := range v {
		s += x * x
	}
	return math.Sqrt(s)
}
