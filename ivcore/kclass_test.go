package ivcore

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// mrozMatrices returns the MROZ example 15.5 data (Wooldridge, Introductory
// Econometrics) as explicit matrices: y = lwage, X = [educ, 1, exper,
// expersq], Z = [1, exper, expersq, motheduc, fatheduc].
func mrozMatrices(t *testing.T) (y *mat.VecDense, X, Z, X1 *mat.Dense, cols [][]float64) {
	raw := readRef(t, "wooldridge_mroz.csv")
	get := func(name string) []float64 {
		all, inlf := num(t, raw[name]), num(t, raw["inlf"])
		var out []float64
		for i, v := range all {
			if inlf[i] == 1 {
				out = append(out, v)
			}
		}
		return out
	}
	lw, ed, ex, ex2, mo, fa := get("lwage"), get("educ"), get("exper"), get("expersq"), get("motheduc"), get("fatheduc")
	n := len(lw)
	one := make([]float64, n)
	for i := range one {
		one[i] = 1
	}
	mk := func(c ...[]float64) *mat.Dense {
		m := mat.NewDense(n, len(c), nil)
		for j, col := range c {
			m.SetCol(j, col)
		}
		return m
	}
	return mat.NewVecDense(n, lw), mk(ed, one, ex, ex2), mk(one, ex, ex2, mo, fa), mk(one, ex, ex2),
		[][]float64{lw, ed, one, ex, ex2, mo, fa}
}

// annihilator returns M = I - A(AᵀA)⁻¹Aᵀ explicitly (n×n).
func annihilator(a *mat.Dense) *mat.Dense {
	n, _ := a.Dims()
	var ata, atai, t1, p mat.Dense
	ata.Mul(a.T(), a)
	if err := atai.Inverse(&ata); err != nil {
		panic(err)
	}
	t1.Mul(a, &atai)
	p.Mul(&t1, a.T())
	m := mat.NewDense(n, n, nil)
	for i := 0; i < n; i++ {
		m.Set(i, i, 1)
	}
	m.Sub(m, &p)
	return m
}

// TestKClassAgainstExplicitMatrices checks LIML and Fuller on the MROZ
// example 15.5 model against a direct computation with gonum on explicit
// n×n annihilator matrices (a general-purpose library reference):
// κ = min eig (WᵀM_Z W)⁻¹(WᵀM_X₁ W), b = (Xᵀ(I-kM_Z)X)⁻¹ Xᵀ(I-kM_Z)y.
func TestKClassAgainstExplicitMatrices(t *testing.T) {
	y, X, Z, X1, cols := mrozMatrices(t)
	n := y.Len()
	mz, mx1 := annihilator(Z), annihilator(X1)
	W := mat.NewDense(n, 2, nil)
	W.SetCol(0, cols[0])
	W.SetCol(1, cols[1])
	quad := func(a, m, b mat.Matrix) *mat.Dense {
		var t1, out mat.Dense
		t1.Mul(a.T(), m)
		out.Mul(&t1, b)
		return &out
	}
	A, B := quad(W, mz, W), quad(W, mx1, W)
	var ai, c mat.Dense
	if err := ai.Inverse(A); err != nil {
		t.Fatal(err)
	}
	c.Mul(&ai, B)
	var eig mat.Eigen
	if !eig.Factorize(&c, mat.EigenNone) {
		t.Fatal("eigen failed")
	}
	kappa := math.Inf(1)
	for _, v := range eig.Values(nil) {
		kappa = math.Min(kappa, real(v))
	}
	kclass := func(k float64) []float64 {
		I := mat.NewDense(n, n, nil)
		for i := 0; i < n; i++ {
			I.Set(i, i, 1)
		}
		var km, w mat.Dense
		km.Scale(k, mz)
		w.Sub(I, &km)
		h := quad(X, &w, X)
		var t1 mat.Dense
		t1.Mul(X.T(), &w)
		g := mat.NewVecDense(4, nil)
		g.MulVec(&t1, y)
		var b mat.VecDense
		if err := b.SolveVec(h, g); err != nil {
			t.Fatal(err)
		}
		return b.RawVector().Data
	}
	m := Accumulate(cols, []string{"lwage", "educ", "intercept", "exper", "expersq", "motheduc", "fatheduc"}, nil, 2)
	md := Model{Y: 0, Endog: []int{1}, Exog: []int{2, 3, 4}, Instr: []int{5, 6}}
	for _, test := range []struct {
		est Estimator
		k   float64
	}{
		{LIML, kappa},
		{Fuller, kappa - 1.0/float64(n-5)},
		{TSLS, 1},
		{OLS, 0},
	} {
		f, err := Estimate(m, md, test.est, IID)
		if err != nil {
			t.Fatal(err)
		}
		want := kclass(test.k)
		for j := range want {
			if math.Abs(f.Coef[j]-want[j]) > 1e-9*math.Max(1, math.Abs(want[j])) {
				t.Errorf("%v coef %d: %.12g, explicit %.12g", test.est, j, f.Coef[j], want[j])
			}
		}
		if math.Abs(f.Kappa-test.k) > 1e-10 {
			t.Errorf("%v: k = %.12g, explicit %.12g", test.est, f.Kappa, test.k)
		}
	}
	if !(kappa >= 1) {
		t.Errorf("LIML κ = %v, must be at least 1", kappa)
	}
}

// TestLIMLJustIdentified: with as many instruments as endogenous
// regressors, κ = 1 and LIML equals 2SLS (common practice; Davidson &
// MacKinnon 2004, section 12.5).
func TestLIMLJustIdentified(t *testing.T) {
	_, _, _, _, cols := mrozMatrices(t)
	m := Accumulate(cols, []string{"lwage", "educ", "intercept", "exper", "expersq", "motheduc", "fatheduc"}, nil, 1)
	md := Model{Y: 0, Endog: []int{1}, Exog: []int{2, 3, 4}, Instr: []int{6}}
	l, err := Estimate(m, md, LIML, IID)
	if err != nil {
		t.Fatal(err)
	}
	s, _ := Estimate(m, md, TSLS, IID)
	if math.Abs(l.Kappa-1) > 1e-10 || math.Abs(l.Coef[0]-s.Coef[0]) > 1e-10 {
		t.Errorf("LIML κ %.12f coef %.12f; 2SLS coef %.12f", l.Kappa, l.Coef[0], s.Coef[0])
	}
}

// TestAccumulateWorkers: the moment blocks do not depend on the number of
// goroutines (bit for bit), and per-cluster blocks add up to the Gram.
func TestAccumulateWorkers(t *testing.T) {
	_, _, _, _, cols := mrozMatrices(t)
	n := len(cols[0])
	codes := make([]int32, n)
	for i := range codes {
		codes[i] = int32(i % 17)
	}
	names := []string{"a", "b", "c", "d", "e", "f", "g"}
	dim := []ClusterDim{{Name: "g", Codes: codes, G: 17}}
	m1 := Accumulate(cols, names, dim, 1)
	for _, w := range []int{2, 3, 8} {
		m2 := Accumulate(cols, names, dim, w)
		if !mat.Equal(m1.Gram, m2.Gram) {
			t.Errorf("workers %d: Gram differs", w)
		}
		for g := 0; g < 17; g++ {
			a, b := m1.Clusters[0].Block(g), m2.Clusters[0].Block(g)
			for i := range a {
				if a[i] != b[i] {
					t.Fatalf("workers %d: block %d differs", w, g)
				}
			}
		}
	}
	k := len(cols)
	sum := make([]float64, k*k)
	for g := 0; g < 17; g++ {
		for i, v := range m1.Clusters[0].Block(g) {
			sum[i] += v
		}
	}
	for a := 0; a < k; a++ {
		for b := 0; b < k; b++ {
			if math.Abs(sum[a*k+b]-m1.Gram.At(a, b)) > 1e-9*math.Abs(m1.Gram.At(a, b)) {
				t.Errorf("blocks do not add to the Gram at (%d,%d)", a, b)
			}
		}
	}
}
