package supplyshifters

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"
)

// ncx2OneCDF is the closed form of the noncentral chi-square CDF with one
// degree of freedom: X = (Z + √λ)², so
//
//	P(X ≤ x) = Φ(√x - √λ) - Φ(-√x - √λ).
func ncx2OneCDF(x, lambda float64) float64 {
	n := distuv.UnitNormal
	return n.CDF(math.Sqrt(x)-math.Sqrt(lambda)) - n.CDF(-math.Sqrt(x)-math.Sqrt(lambda))
}

// ncx2OneQuantile inverts ncx2OneCDF by bisection to machine precision,
// independently of the mixture code under test.
func ncx2OneQuantile(p, lambda float64) float64 {
	lo, hi := 0.0, 1.0
	for ncx2OneCDF(hi, lambda) < p {
		hi *= 2
	}
	for i := 0; i < 2000; i++ {
		mid := lo + (hi-lo)/2
		if mid == lo || mid == hi {
			break
		}
		if ncx2OneCDF(mid, lambda) < p {
			lo = mid
		} else {
			hi = mid
		}
	}
	return lo + (hi-lo)/2
}

func TestNoncentralChiSquaredOneDF(t *testing.T) {
	t.Parallel()
	// Reference: the closed form for one degree of freedom (see ncx2OneCDF),
	// inverted independently; tolerance 1e-9 absolute or relative.
	for i, test := range []struct {
		p, lambda float64
	}{
		{0.05, 0.5}, {0.5, 0.5}, {0.95, 0.5},
		{0.1, 3}, {0.9, 3}, {0.95, 3}, {0.99, 3},
		{0.05, 10}, {0.5, 10}, {0.95, 10}, {0.999, 10},
		{0.5, 57.7}, {0.95, 57.7}, {0.01, 200}, {0.95, 200},
	} {
		want := ncx2OneQuantile(test.p, test.lambda)
		got := NoncentralChiSquaredQuantile(test.p, 1, test.lambda)
		if !scalar.EqualWithinAbsOrRel(got, want, 1e-9, 1e-9) {
			t.Errorf("%d: quantile(%v; 1, %v) = %.12g, want %.12g", i, test.p, test.lambda, got, want)
		}
		for _, x := range []float64{0.3 * want, want, 2 * want} {
			cdf := NoncentralChiSquaredCDF(x, 1, test.lambda)
			if ref := ncx2OneCDF(x, test.lambda); !scalar.EqualWithinAbs(cdf, ref, 1e-13) {
				t.Errorf("%d: CDF(%v; 1, %v) = %.15g, want %.15g", i, x, test.lambda, cdf, ref)
			}
		}
	}
}

func TestNoncentralChiSquared23109(t *testing.T) {
	t.Parallel()
	// Montiel Olea & Pflueger (2013): conservative critical value of the
	// effective F for a 10% worst-case bias at the 5% level, 23.109, as
	// quoted in priceiv's DESIGN.md. It is the 95% quantile of χ²_1(10).
	got := NoncentralChiSquaredQuantile(0.95, 1, 10)
	if !scalar.EqualWithinAbs(got, 23.109, 5e-4) {
		t.Errorf("quantile(0.95; 1, 10) = %.6f, want 23.109", got)
	}
}

func TestNoncentralChiSquaredCentral(t *testing.T) {
	t.Parallel()
	// lambda = 0 is the central chi-square; reference gonum distuv.ChiSquared,
	// tolerance 1e-10 relative.
	for i, test := range []struct{ p, k float64 }{
		{0.05, 1}, {0.95, 1}, {0.5, 2}, {0.95, 2}, {0.95, 2.5},
		{0.01, 3.7}, {0.99, 3.7}, {0.95, 10}, {0.95, 30}, {0.999, 30},
	} {
		want := distuv.ChiSquared{K: test.k}.Quantile(test.p)
		got := NoncentralChiSquaredQuantile(test.p, test.k, 0)
		if !scalar.EqualWithinAbsOrRel(got, want, 1e-10, 1e-10) {
			t.Errorf("%d: quantile(%v; %v, 0) = %.14g, want %.14g", i, test.p, test.k, got, want)
		}
		if cdf := NoncentralChiSquaredCDF(want, test.k, 0); !scalar.EqualWithinAbs(cdf, test.p, 1e-12) {
			t.Errorf("%d: CDF at the central quantile = %.15g, want %v", i, cdf, test.p)
		}
	}
}

// evenDFCDF is the noncentral chi-square CDF for even k written with the
// elementary form of the central pieces, independent of the incomplete gamma
// function used by the code under test:
//
//	P(k/2 + j, x/2) = 1 - e^{-x/2} Σ_{i < k/2+j} (x/2)^i / i!.
func evenDFCDF(x float64, k int, lambda float64) float64 {
	h, y := lambda/2, x/2
	// tail = e^{-y} Σ_{i < k/2+j} y^i/i!, grown term by term with j.
	var tail, term float64
	term = math.Exp(-y)
	for i := 0; i < k/2; i++ {
		tail += term
		term *= y / float64(i+1)
	}
	w := math.Exp(-h)
	var sum float64
	for j := 0; j < 100000; j++ {
		sum += w * (1 - tail)
		tail += term
		term *= y / float64(k/2+j+1)
		w *= h / float64(j+1)
		if float64(j) > h && w < 1e-20 {
			break
		}
	}
	return sum
}

func TestNoncentralChiSquaredEvenDF(t *testing.T) {
	t.Parallel()
	// Reference: the elementary finite-sum form of the central pieces
	// (evenDFCDF); tolerance 1e-12 absolute.
	for i, test := range []struct {
		x      float64
		k      int
		lambda float64
	}{
		{1, 2, 1}, {5, 2, 1}, {12, 2, 4}, {3, 4, 2}, {20, 4, 10}, {40, 4, 20}, {8, 6, 0.5},
	} {
		want := evenDFCDF(test.x, test.k, test.lambda)
		got := NoncentralChiSquaredCDF(test.x, float64(test.k), test.lambda)
		if !scalar.EqualWithinAbs(got, want, 1e-12) {
			t.Errorf("%d: CDF(%v; %d, %v) = %.15g, want %.15g", i, test.x, test.k, test.lambda, got, want)
		}
		s := NoncentralChiSquaredSurvival(test.x, float64(test.k), test.lambda)
		if !scalar.EqualWithinAbs(s, 1-want, 1e-12) {
			t.Errorf("%d: survival = %.15g, want %.15g", i, s, 1-want)
		}
	}
}

func TestNoncentralChiSquaredMonteCarlo(t *testing.T) {
	t.Parallel()
	// Non-integer degrees of freedom: X = (Z + √λ)² + χ²_{k-1}. Seeded Monte
	// Carlo with 2e5 draws; tolerance 5e-3 on the CDF (about 4 standard errors).
	src := rand.New(rand.NewPCG(1, 1))
	for i, test := range []struct{ k, lambda float64 }{{2.5, 3}, {4.3, 12}, {1.7, 0.8}} {
		z := distuv.Normal{Mu: math.Sqrt(test.lambda), Sigma: 1, Src: src}
		c := distuv.ChiSquared{K: test.k - 1, Src: src}
		const n = 200000
		draws := make([]float64, n)
		for j := range draws {
			v := z.Rand()
			draws[j] = v*v + c.Rand()
		}
		for _, p := range []float64{0.1, 0.5, 0.95} {
			q := NoncentralChiSquaredQuantile(p, test.k, test.lambda)
			var below int
			for _, d := range draws {
				if d <= q {
					below++
				}
			}
			if emp := float64(below) / n; math.Abs(emp-p) > 5e-3 {
				t.Errorf("%d: k=%v λ=%v: empirical P(X ≤ q_%v) = %.4f", i, test.k, test.lambda, p, emp)
			}
		}
	}
}

func TestNoncentralChiSquaredProperties(t *testing.T) {
	t.Parallel()
	for _, k := range []float64{1, 2, 3.5, 8} {
		prevL := -1.0
		for _, lambda := range []float64{0, 0.5, 2, 10, 40} {
			// Quantiles rise with p, and CDF(quantile(p)) = p.
			prevP := -1.0
			for _, p := range []float64{0.01, 0.1, 0.5, 0.9, 0.95, 0.999} {
				q := NoncentralChiSquaredQuantile(p, k, lambda)
				if !(q > prevP) {
					t.Errorf("k=%v λ=%v: quantile(%v)=%v not above %v", k, lambda, p, q, prevP)
				}
				prevP = q
				if c := NoncentralChiSquaredCDF(q, k, lambda); !scalar.EqualWithinAbs(c, p, 1e-12) {
					t.Errorf("k=%v λ=%v: CDF(quantile(%v)) = %.15g", k, lambda, p, c)
				}
				if s := NoncentralChiSquaredSurvival(q, k, lambda); !scalar.EqualWithinAbs(s, 1-p, 1e-12) {
					t.Errorf("k=%v λ=%v: survival(quantile(%v)) = %.15g", k, lambda, p, s)
				}
			}
			// The 95% quantile rises with the noncentrality.
			q := NoncentralChiSquaredQuantile(0.95, k, lambda)
			if !(q > prevL) {
				t.Errorf("k=%v: 95%% quantile %v at λ=%v not above %v", k, q, lambda, prevL)
			}
			prevL = q
		}
	}
	if NoncentralChiSquaredQuantile(0, 2, 1) != 0 || !math.IsInf(NoncentralChiSquaredQuantile(1, 2, 1), 1) {
		t.Error("quantile at p = 0 or 1")
	}
	if NoncentralChiSquaredCDF(-1, 2, 1) != 0 || NoncentralChiSquaredSurvival(0, 2, 1) != 1 {
		t.Error("CDF or survival at x ≤ 0")
	}
	for i, f := range []func(){
		func() { NoncentralChiSquaredQuantile(1.5, 1, 1) },
		func() { NoncentralChiSquaredQuantile(0.5, 0, 1) },
		func() { NoncentralChiSquaredCDF(1, 1, -1) },
	} {
		if !panics(f) {
			t.Errorf("%d: bad parameters did not panic", i)
		}
	}
}

func panics(f func()) (p bool) {
	defer func() { p = recover() != nil }()
	f()
	return false
}

// firstStage simulates Y = Z π + v with K instruments (mean zero, correlated)
// and returns π̂, Q_ZZ = ZᵀZ/n, the homoskedastic V̂ar(π̂) = s²(ZᵀZ)⁻¹ and a
// heteroskedasticity-robust (HC0) V̂ar(π̂). Generated truth: invented data.
func firstStage(n, k int, pi []float64, seed uint64) (pihat []float64, qzz, vHom, vHC *mat.SymDense) {
	src := rand.New(rand.NewPCG(seed, 2))
	z := mat.NewDense(n, k, nil)
	y := mat.NewVecDense(n, nil)
	for i := 0; i < n; i++ {
		var common = src.NormFloat64()
		var yi float64
		for j := 0; j < k; j++ {
			v := src.NormFloat64() + 0.5*common
			z.Set(i, j, v)
			yi += v * pi[j]
		}
		// Error scale depends on the first instrument: heteroskedastic.
		yi += src.NormFloat64() * (1 + 0.8*math.Abs(z.At(i, 0)))
		y.SetVec(i, yi)
	}
	var ztz mat.SymDense
	ztz.SymOuterK(1, z.T())
	var chol mat.Cholesky
	if !chol.Factorize(&ztz) {
		panic("test: ZᵀZ not positive definite")
	}
	var inv mat.SymDense
	if err := chol.InverseTo(&inv); err != nil {
		panic(err)
	}
	var zty, b mat.VecDense
	zty.MulVec(z.T(), y)
	b.MulVec(&inv, &zty)
	var fit, res mat.VecDense
	fit.MulVec(z, &b)
	res.SubVec(y, &fit)
	s2 := mat.Dot(&res, &res) / float64(n-k)

	vHom = mat.NewSymDense(k, nil)
	vHom.ScaleSym(s2, &inv)

	// HC0 meat Σ e_i² z_i z_iᵀ, sandwich (ZᵀZ)⁻¹ meat (ZᵀZ)⁻¹.
	meat := mat.NewSymDense(k, nil)
	for i := 0; i < n; i++ {
		e := res.AtVec(i)
		meat.SymRankOne(meat, e*e, z.RowView(i))
	}
	var tmp, sw mat.Dense
	tmp.Mul(&inv, meat)
	sw.Mul(&tmp, &inv)
	vHC = mat.NewSymDense(k, nil)
	for i := 0; i < k; i++ {
		for j := i; j < k; j++ {
			vHC.SetSym(i, j, (sw.At(i, j)+sw.At(j, i))/2)
		}
	}
	qzz = mat.NewSymDense(k, nil)
	qzz.ScaleSym(1/float64(n), &ztz)
	return b.RawVector().Data, qzz, vHom, vHC
}

func TestEffectiveFHomoskedastic(t *testing.T) {
	t.Parallel()
	// With V̂ar(π̂) = s²(ZᵀZ)⁻¹ the effective F is the usual first-stage F,
	// π̂ᵀ V̂⁻¹ π̂ / K (one instrument: π̂² / V̂). Montiel Olea & Pflueger (2013),
	// section 2; generated data, tolerance 1e-10 relative.
	for i, test := range []struct {
		k  int
		pi []float64
	}{
		{1, []float64{0.3}},
		{3, []float64{0.2, 0.05, -0.1}},
	} {
		pihat, qzz, vHom, _ := firstStage(500, test.k, test.pi, uint64(i+1))
		var chol mat.Cholesky
		if !chol.Factorize(vHom) {
			t.Fatalf("%d: V not positive definite", i)
		}
		p := mat.NewVecDense(test.k, pihat)
		var w mat.VecDense
		if err := chol.SolveVecTo(&w, p); err != nil {
			t.Fatal(err)
		}
		want := mat.Dot(p, &w) / float64(test.k)
		if test.k == 1 {
			want = pihat[0] * pihat[0] / vHom.At(0, 0)
		}
		got := EffectiveF(pihat, qzz, vHom, 500)
		if !scalar.EqualWithinRel(got, want, 1e-10) {
			t.Errorf("%d: F_eff = %.12g, usual F = %.12g", i, got, want)
		}
	}
}

func TestEffectiveFInvariance(t *testing.T) {
	t.Parallel()
	// F_eff = π̂ᵀQπ̂ / tr(V̂ Q): unchanged by rescaling Q_ZZ or by n, and the
	// inputs are left unmodified. Generated data, tolerance 1e-12 relative.
	pihat, qzz, _, vHC := firstStage(400, 3, []float64{0.2, 0.1, 0.05}, 7)
	base := EffectiveF(pihat, qzz, vHC, 400)
	if !(base > 0) {
		t.Fatalf("F_eff = %v", base)
	}
	// Direct evaluation of the formula.
	var vq mat.Dense
	vq.Mul(vHC, qzz)
	p := mat.NewVecDense(3, append([]float64(nil), pihat...))
	direct := mat.Inner(p, qzz, p) / mat.Trace(&vq)
	if !scalar.EqualWithinRel(base, direct, 1e-12) {
		t.Errorf("F_eff %v, formula %v", base, direct)
	}
	var q2 mat.SymDense
	q2.ScaleSym(400, qzz)
	if got := EffectiveF(pihat, &q2, vHC, 1); !scalar.EqualWithinRel(got, base, 1e-12) {
		t.Errorf("rescaled Q and n: %v, want %v", got, base)
	}
	pcopy := append([]float64(nil), pihat...)
	qcopy := mat.NewSymDense(3, nil)
	qcopy.CopySym(qzz)
	EffectiveF(pihat, qzz, vHC, 400)
	if !mat.Equal(qcopy, qzz) || pcopy[0] != pihat[0] || pcopy[2] != pihat[2] {
		t.Error("inputs modified")
	}
	if !panics(func() { EffectiveF(pihat[:2], qzz, vHC, 400) }) {
		t.Error("dimension mismatch did not panic")
	}
	if !math.IsNaN(EffectiveF([]float64{1}, mat.NewSymDense(1, []float64{1}), mat.NewSymDense(1, []float64{0}), 10)) {
		t.Error("zero variance should give NaN")
	}
}

func TestMOPCritical(t *testing.T) {
	t.Parallel()
	// Montiel Olea & Pflueger (2013), simplified procedure, x = 1/τ.
	// Rank-one S gives K_eff = 1 and the conservative 23.109 (5%, τ = 10%,
	// quoted in priceiv's DESIGN.md); S ∝ I_K gives K_eff = K (homoskedastic
	// case), with crit = χ²_K(10K) 95% quantile / K.
	rank1 := mat.NewDense(3, 3, nil)
	u := []float64{1, 2, -0.5}
	for i := range 3 {
		for j := range 3 {
			rank1.Set(i, j, 0.7*u[i]*u[j])
		}
	}
	crit, keff := MOPCritical(0.05, 0.10, rank1)
	if !scalar.EqualWithinAbs(keff, 1, 1e-12) || !scalar.EqualWithinAbs(crit, 23.109, 5e-4) {
		t.Errorf("rank one: crit %.6f K_eff %.15g, want 23.109 and 1", crit, keff)
	}
	for _, k := range []int{1, 2, 5} {
		id := mat.NewDense(k, k, nil)
		for i := range k {
			id.Set(i, i, 2.5)
		}
		crit, keff := MOPCritical(0.05, 0.10, id)
		want := NoncentralChiSquaredQuantile(0.95, float64(k), 10*float64(k)) / float64(k)
		if !scalar.EqualWithinAbs(keff, float64(k), 1e-12) || !scalar.EqualWithinRel(crit, want, 1e-12) {
			t.Errorf("S ∝ I_%d: crit %v K_eff %v, want %v and %d", k, crit, keff, want, k)
		}
	}
}

func TestMOPCriticalData(t *testing.T) {
	t.Parallel()
	// S built from generated heteroskedastic data: S = Σ_ππ Q (not symmetric)
	// and its symmetric form Q^½ Σ_ππ Q^½ give the same K_eff and crit;
	// 1 ≤ K_eff ≤ K; crit ≤ 23.109 (the K_eff = 1 bound) and falls as τ rises.
	const n = 600
	_, qzz, _, vHC := firstStage(n, 4, []float64{0.1, 0.1, 0.1, 0.1}, 11)
	var sigma mat.SymDense
	sigma.ScaleSym(n, vHC)
	var s mat.Dense
	s.Mul(&sigma, qzz)

	var es mat.EigenSym
	if !es.Factorize(qzz, true) {
		t.Fatal("eigen of Q failed")
	}
	var vecs mat.Dense
	es.VectorsTo(&vecs)
	vals := es.Values(nil)
	half := mat.NewDense(4, 4, nil)
	for i := range 4 {
		for j := range 4 {
			var v float64
			for l := range 4 {
				v += vecs.At(i, l) * math.Sqrt(vals[l]) * vecs.At(j, l)
			}
			half.Set(i, j, v)
		}
	}
	var tmp, sym mat.Dense
	tmp.Mul(half, &sigma)
	sym.Mul(&tmp, half)

	c1, k1 := MOPCritical(0.05, 0.10, &s)
	c2, k2 := MOPCritical(0.05, 0.10, &sym)
	if !scalar.EqualWithinRel(k1, k2, 1e-10) || !scalar.EqualWithinRel(c1, c2, 1e-9) {
		t.Errorf("ΣQ gives (%v, %v), symmetric form (%v, %v)", c1, k1, c2, k2)
	}
	if !(k1 >= 1 && k1 <= 4) {
		t.Errorf("K_eff = %v outside [1, 4]", k1)
	}
	if !(c1 <= 23.109+1e-3) {
		t.Errorf("crit %v above the conservative 23.109", c1)
	}
	var scaled mat.Dense
	scaled.Scale(1e-3, &s)
	if c3, k3 := MOPCritical(0.05, 0.10, &scaled); !scalar.EqualWithinRel(k3, k1, 1e-10) || !scalar.EqualWithinRel(c3, c1, 1e-9) {
		t.Errorf("scaled S: (%v, %v), want (%v, %v)", c3, k3, c1, k1)
	}
	prev := math.Inf(1)
	for _, tau := range []float64{0.05, 0.10, 0.20, 0.30} {
		c, _ := MOPCritical(0.05, tau, &s)
		if !(c < prev) {
			t.Errorf("τ=%v: crit %v not below %v", tau, c, prev)
		}
		prev = c
	}
	if !panics(func() { MOPCritical(0.05, 0.10, mat.NewDense(2, 3, nil)) }) {
		t.Error("non-square S did not panic")
	}
	if !panics(func() { MOPCritical(1.2, 0.10, &s) }) {
		t.Error("alpha outside (0, 1) did not panic")
	}
}
