package supplyshifters

import (
	"math"

	"gonum.org/v1/gonum/mat"

	"priceiv/ivcore"
)

// gramSub returns the block of the Gram matrix with rows r and columns c.
func gramSub(m *ivcore.Moments, r, c []int) *mat.Dense {
	d := mat.NewDense(len(r), len(c), nil)
	for i, a := range r {
		for j, b := range c {
			d.Set(i, j, m.Gram.At(a, b))
		}
	}
	return d
}

// gramTimes returns Vᵀ A c for the columns v and combination c.
func gramTimes(m *ivcore.Moments, v []int, c []float64) []float64 {
	out := make([]float64, len(v))
	for a, col := range v {
		s := 0.0
		for l, w := range c {
			if w != 0 {
				s += m.Gram.At(col, l) * w
			}
		}
		out[a] = s
	}
	return out
}

// symOf returns the symmetric part (A + Aᵀ)/2 of a square matrix.
func symOf(a mat.Matrix) *mat.SymDense {
	n, _ := a.Dims()
	s := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			s.SetSym(i, j, (a.At(i, j)+a.At(j, i))/2)
		}
	}
	return s
}

// subSym returns the symmetric submatrix of s on the indices idx.
func subSym(s mat.Symmetric, idx []int) *mat.SymDense {
	out := mat.NewSymDense(len(idx), nil)
	for i, a := range idx {
		for j := i; j < len(idx); j++ {
			out.SetSym(i, j, s.At(a, idx[j]))
		}
	}
	return out
}

// scaledInverse returns the inverse of a symmetric positive definite
// matrix, factorised after scaling to unit diagonal; ok is false when the
// matrix is not positive definite.
func scaledInverse(s mat.Symmetric) (*mat.SymDense, bool) {
	n := s.SymmetricDim()
	d := make([]float64, n)
	for i := range d {
		v := s.At(i, i)
		if !(v > 0) {
			return nil, false
		}
		d[i] = math.Sqrt(v)
	}
	c := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			c.SetSym(i, j, s.At(i, j)/(d[i]*d[j]))
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(c) {
		return nil, false
	}
	var inv mat.SymDense
	if err := ch.InverseTo(&inv); err != nil {
		return nil, false
	}
	out := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			out.SetSym(i, j, inv.At(i, j)/(d[i]*d[j]))
		}
	}
	return out, true
}

// quadInv returns gᵀV⁻¹g. When V is not positive definite (a two-way
// cluster covariance can have negative eigenvalues) the negative and
// negligible eigenvalues are dropped (a pseudo-inverse on the positive
// part); the result is NaN when nothing is left.
func quadInv(v mat.Symmetric, g []float64) float64 {
	s, _ := quadInvRank(v, g)
	return s
}

// quadInvRank is quadInv that also returns the rank of the part of V
// used: len(g) when V is positive definite, fewer when eigenvalues were
// dropped.
func quadInvRank(v mat.Symmetric, g []float64) (float64, int) {
	if inv, ok := scaledInverse(v); ok {
		gv := mat.NewVecDense(len(g), append([]float64(nil), g...))
		return mat.Inner(gv, inv, gv), len(g)
	}
	var es mat.EigenSym
	if !es.Factorize(v, true) {
		return math.NaN(), 0
	}
	vals := es.Values(nil)
	var vec mat.Dense
	es.VectorsTo(&vec)
	top := 0.0
	for _, l := range vals {
		top = math.Max(top, l)
	}
	if !(top > 0) {
		return math.NaN(), 0
	}
	s, rank := 0.0, 0
	for k, l := range vals {
		if l <= 1e-12*top {
			continue
		}
		rank++
		p := 0.0
		for i, gi := range g {
			p += vec.At(i, k) * gi
		}
		s += p * p / l
	}
	return s, rank
}

// minGeneralEig returns the smallest eigenvalue of B⁻¹A for symmetric A
// and positive definite B, as the smallest eigenvalue of L⁻¹AL⁻ᵀ with
// B = LLᵀ. ok is false when B is not positive definite.
func minGeneralEig(a, b mat.Symmetric) (float64, bool) {
	var ch mat.Cholesky
	if !ch.Factorize(b) {
		return math.NaN(), false
	}
	var l, li mat.TriDense
	ch.LTo(&l)
	if err := li.InverseTri(&l); err != nil {
		return math.NaN(), false
	}
	var t, c mat.Dense
	t.Mul(&li, a)
	c.Mul(&t, li.T())
	var es mat.EigenSym
	if !es.Factorize(symOf(&c), false) {
		return math.NaN(), false
	}
	vals := es.Values(nil)
	return vals[0], true
}

// quadForm returns Σ_ij a_i b_j S_ij for a square matrix S.
func quadForm(a []float64, s mat.Matrix, b []float64) float64 {
	v := 0.0
	for i, ai := range a {
		if ai == 0 {
			continue
		}
		for j, bj := range b {
			v += ai * s.At(i, j) * bj
		}
	}
	return v
}
