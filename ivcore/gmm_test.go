package ivcore

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"
)

// gmmData draws an over-identified market (generated truth): one
// endogenous price, an intercept and a control, three excluded shifters,
// heteroskedastic errors and G clusters (row i in cluster i mod G).
func gmmData(seed uint64, n, G int) (cols [][]float64, names []string, md Model, codes []int32) {
	rng := rand.New(rand.NewPCG(seed, 7))
	y, x, one, w := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
	z := [3][]float64{make([]float64, n), make([]float64, n), make([]float64, n)}
	codes = make([]int32, n)
	ce := make([]float64, G)
	for g := range ce {
		ce[g] = 0.3 * rng.NormFloat64()
	}
	for i := 0; i < n; i++ {
		one[i] = 1
		w[i] = rng.NormFloat64()
		for k := range z {
			z[k][i] = rng.NormFloat64()
		}
		codes[i] = int32(i % G)
		v := rng.NormFloat64()
		u := 0.6*v + (0.5+0.5*math.Abs(z[0][i]))*rng.NormFloat64() + ce[i%G]
		x[i] = 0.8*z[0][i] + 0.5*z[1][i] + 0.3*z[2][i] + 0.2*w[i] + v
		// The third shifter also enters demand a little, so J is not tiny.
		y[i] = 1 - 1.5*x[i] + 0.4*w[i] + 0.15*z[2][i] + u
	}
	cols = [][]float64{y, x, one, w, z[0], z[1], z[2]}
	names = []string{"y", "x", "intercept", "w", "z1", "z2", "z3"}
	md = Model{Y: 0, Endog: []int{1}, Exog: []int{2, 3}, Instr: []int{4, 5, 6}}
	return
}

// explicitGMM computes two-step GMM and J with plain gonum matrix algebra on
// the explicit n×k data matrices. ways is empty for HC1 (every row its own
// unit); otherwise S sums the outer products of cluster sums of each way,
// with the third way (the intersection of two) subtracted.
func explicitGMM(cols [][]float64, md Model, ways []ClusterDim) (b []float64, j float64) {
	n := len(cols[0])
	build := func(idx []int) *mat.Dense {
		d := mat.NewDense(n, len(idx), nil)
		for c, k := range idx {
			for i := 0; i < n; i++ {
				d.Set(i, c, cols[k][i])
			}
		}
		return d
	}
	X, Z, Y := build(md.X()), build(md.Z()), build([]int{md.Y})
	// 2SLS: b1 = (XᵀPX)⁻¹XᵀPy, P = Z(ZᵀZ)⁻¹Zᵀ.
	var zz, zzi, zx, zy mat.Dense
	zz.Mul(Z.T(), Z)
	if err := zzi.Inverse(&zz); err != nil {
		panic(err)
	}
	zx.Mul(Z.T(), X)
	zy.Mul(Z.T(), Y)
	solveW := func(w *mat.Dense) *mat.Dense {
		var a, t, h, g, bb mat.Dense
		a.Mul(zx.T(), w)
		h.Mul(&a, &zx)
		t.Mul(&a, &zy)
		g.CloneFrom(&t)
		if err := bb.Solve(&h, &g); err != nil {
			panic(err)
		}
		return &bb
	}
	b1 := solveW(&zzi)
	var xb, u mat.Dense
	xb.Mul(X, b1)
	u.Sub(Y, &xb)
	kz := len(md.Z())
	S := mat.NewDense(kz, kz, nil)
	if len(ways) == 0 {
		ways = []ClusterDim{{G: n}}
	}
	for w, way := range ways {
		sums := mat.NewDense(way.G, kz, nil)
		for i := 0; i < n; i++ {
			g := i
			if way.Codes != nil {
				g = int(way.Codes[i])
			}
			for c := 0; c < kz; c++ {
				sums.Set(g, c, sums.At(g, c)+Z.At(i, c)*u.At(i, 0))
			}
		}
		var sw mat.Dense
		sw.Mul(sums.T(), sums)
		if w == 2 {
			sw.Scale(-1, &sw)
		}
		S.Add(S, &sw)
	}
	var Si mat.Dense
	if err := Si.Inverse(S); err != nil {
		panic(err)
	}
	b2 := solveW(&Si)
	xb.Mul(X, b2)
	u.Sub(Y, &xb)
	var gbar, sg mat.Dense
	gbar.Mul(Z.T(), &u)
	sg.Mul(&Si, &gbar)
	j = mat.Dot(gbar.ColView(0), sg.ColView(0))
	return mat.Col(nil, 0, b2), j
}

// TestTwoStepGMMExplicit checks two-step GMM estimates and Hansen's J
// against the textbook formulas evaluated on explicit data matrices with
// gonum (Hayashi, Econometrics, 2000, section 3.5: efficient two-step GMM
// and J = n ḡᵀŜ⁻¹ḡ), for HC1, one-way and two-way cluster weights (the
// two-way S as in Cameron, Gelbach & Miller 2011, JBES 29(2)).
func TestTwoStepGMMExplicit(t *testing.T) {
	cols, names, md, codes := gmmData(1, 600, 40)
	// A second way (row i in period i mod 15) and its intersection with
	// the first, for two-way clustering.
	n := len(codes)
	per, both := make([]int32, n), make([]int32, n)
	pair := map[[2]int32]int32{}
	for i := range per {
		per[i] = int32(i % 15)
		k := [2]int32{codes[i], per[i]}
		if _, ok := pair[k]; !ok {
			pair[k] = int32(len(pair))
		}
		both[i] = pair[k]
	}
	oneWay := []ClusterDim{{Name: "g", Codes: codes, G: 40}}
	twoWay := append(oneWay, ClusterDim{Name: "t", Codes: per, G: 15}, ClusterDim{Name: "g×t", Codes: both, G: len(pair)})
	for _, test := range []struct {
		name string
		vk   VcovKind
		dims []ClusterDim
		tol  float64
	}{
		{"hc1", HC1, nil, 1e-9},
		{"cluster", Cluster, oneWay, 1e-9},
		{"two-way cluster", Cluster, twoWay, 1e-9},
	} {
		dims := test.dims
		m := Accumulate(cols, names, dims, 2)
		for rep := 0; rep < 2; rep++ { // a second run must give the same answer
			g, err := TwoStepGMM(m, md, test.vk)
			if err != nil {
				t.Fatal(err)
			}
			b, j := explicitGMM(cols, md, dims)
			for i := range b {
				if !scalar.EqualWithinAbsOrRel(g.Fit.Coef[i], b[i], test.tol, test.tol) {
					t.Errorf("%s: coefficient %d = %.12g, explicit %.12g", test.name, i, g.Fit.Coef[i], b[i])
				}
			}
			if !scalar.EqualWithinAbsOrRel(g.J, j, test.tol, test.tol) {
				t.Errorf("%s: J = %.12g, explicit %.12g", test.name, g.J, j)
			}
			if g.DF != 2 || math.Abs(g.P-ChiSquaredSurvival(j, 2)) > 1e-9 {
				t.Errorf("%s: DF %d, P %g", test.name, g.DF, g.P)
			}
			if rep == 0 {
				t.Logf("%s: J = %.4f (p = %.4f), elasticity %.4f (%.4f)", test.name, g.J, g.P, g.Fit.Coef[0], g.Fit.SE(0))
			}
		}
	}
}

// TestTwoStepGMMIIDIs2SLS checks two properties (common practice, e.g.
// Hayashi 2000, section 3.8): with an iid weight S ∝ ZᵀZ two-step GMM is
// 2SLS, with the same iid covariance, and Hansen's J equals Sargan's
//
//	n·R² = n · ûᵀP_Zû / ûᵀû
//
// of the 2SLS residual û on all instruments.
func TestTwoStepGMMIIDIs2SLS(t *testing.T) {
	cols, names, md, _ := gmmData(2, 500, 10)
	m := Accumulate(cols, names, nil, 2)
	g, err := TwoStepGMM(m, md, IID)
	if err != nil {
		t.Fatal(err)
	}
	tsls, err := Estimate(m, md, TSLS, IID)
	if err != nil {
		t.Fatal(err)
	}
	for i := range tsls.Coef {
		if !scalar.EqualWithinAbsOrRel(g.Fit.Coef[i], tsls.Coef[i], 1e-10, 1e-10) {
			t.Errorf("coefficient %d: GMM %.12g, 2SLS %.12g", i, g.Fit.Coef[i], tsls.Coef[i])
		}
		if !scalar.EqualWithinAbsOrRel(g.Fit.SE(i), tsls.SE(i), 1e-10, 1e-10) {
			t.Errorf("s.e. %d: GMM %.12g, 2SLS %.12g", i, g.Fit.SE(i), tsls.SE(i))
		}
	}
	// Sargan from explicit matrices.
	n := len(cols[0])
	u := make([]float64, n)
	r := tsls.Residual()
	for i := range u {
		for l, c := range cols {
			u[i] += r[l] * c[i]
		}
	}
	zi := md.Z()
	Z := mat.NewDense(n, len(zi), nil)
	for c, k := range zi {
		for i := 0; i < n; i++ {
			Z.Set(i, c, cols[k][i])
		}
	}
	var qr mat.QR
	qr.Factorize(Z)
	var q mat.Dense
	qr.QTo(&q)
	uv := mat.NewVecDense(n, u)
	var qtu mat.VecDense
	qtu.MulVec(q.Slice(0, n, 0, len(zi)).T(), uv)
	sargan := float64(n) * mat.Dot(&qtu, &qtu) / mat.Dot(uv, uv)
	if !scalar.EqualWithinAbsOrRel(g.J, sargan, 1e-9, 1e-9) {
		t.Errorf("iid J = %.12g, Sargan n·R² = %.12g", g.J, sargan)
	}
}

// TestHansenJRestricted checks the difference-in-J construction (Hayashi
// 2000, section 3.6): with the restricted model weighted by the submatrix
// of the full model's S, C = J(full) - J(restricted) is not negative, and
// the restricted criterion at the full S is the full J when nothing is
// dropped. Dropping all but one shifter leaves a just-identified model
// with J = 0.
func TestHansenJRestricted(t *testing.T) {
	cols, names, md, _ := gmmData(3, 400, 10)
	m := Accumulate(cols, names, nil, 2)
	g, err := TwoStepGMM(m, md, HC1)
	if err != nil {
		t.Fatal(err)
	}
	j, _, err := HansenJ(m, md, g.S)
	if err != nil {
		t.Fatal(err)
	}
	if !scalar.EqualWithinAbsOrRel(j, g.J, 1e-10, 1e-10) {
		t.Errorf("HansenJ with the full S = %g, TwoStepGMM J = %g", j, g.J)
	}
	zi := md.Z()
	for drop := range md.Instr {
		var keep []int
		var instr []int
		for a := range zi {
			if a < len(md.Exog) || a-len(md.Exog) != drop {
				keep = append(keep, a)
			}
		}
		for i, c := range md.Instr {
			if i != drop {
				instr = append(instr, c)
			}
		}
		sub := mat.NewSymDense(len(keep), nil)
		for a, p := range keep {
			for b := a; b < len(keep); b++ {
				sub.SetSym(a, b, g.S.At(p, keep[b]))
			}
		}
		rmd := Model{Y: md.Y, Endog: md.Endog, Exog: md.Exog, Instr: instr}
		jr, _, err := HansenJ(m, rmd, sub)
		if err != nil {
			t.Fatal(err)
		}
		if c := g.J - jr; c < -1e-10 {
			t.Errorf("drop %s: C = %g < 0", names[md.Instr[drop]], c)
		}
	}
	one := Model{Y: md.Y, Endog: md.Endog, Exog: md.Exog, Instr: md.Instr[:1]}
	gj, err := TwoStepGMM(m, one, HC1)
	if err != nil {
		t.Fatal(err)
	}
	tsls, _ := Estimate(m, one, TSLS, HC1)
	if gj.DF != 0 || gj.J != 0 || gj.P != 1 || math.Abs(gj.Fit.Coef[0]-tsls.Coef[0]) > 1e-10 {
		t.Errorf("just identified: DF %d J %g P %g, coef %g vs IV %g", gj.DF, gj.J, gj.P, gj.Fit.Coef[0], tsls.Coef[0])
	}
}

// TestTransformMoments checks Transform against moments accumulated from
// explicitly transformed columns (property: Gram' = TᵀGram T and the same
// for every cluster block), that formed rows match, that unit columns
// share storage, and Cross and Regress against explicit sums.
func TestTransformMoments(t *testing.T) {
	cols, names, _, codes := gmmData(4, 300, 12)
	dims := []ClusterDim{{Name: "g", Codes: codes, G: 12}}
	m := Accumulate(cols, names, dims, 2)
	k := len(cols)
	T := mat.NewDense(k, k+2, nil)
	for i := 0; i < k; i++ {
		T.Set(i, i, 1)
	}
	for l := 0; l < k; l++ {
		T.Set(l, k, float64(l)-2.5)
	}
	T.Set(0, k+1, 1)
	T.Set(1, k+1, 0.7)
	newNames := append(append([]string(nil), names...), "c1", "c2")
	for _, withCols := range []bool{false, true} {
		mt := m.Transform(T, newNames, withCols)
		explicit := make([][]float64, k+2)
		for j := 0; j < k+2; j++ {
			explicit[j] = make([]float64, len(cols[0]))
			for l := 0; l < k; l++ {
				if w := T.At(l, j); w != 0 {
					for i, v := range cols[l] {
						explicit[j][i] += w * v
					}
				}
			}
		}
		me := Accumulate(explicit, newNames, dims, 2)
		if !mat.EqualApprox(mt.Gram, me.Gram, 1e-9) {
			t.Errorf("Gram differs from the explicit one")
		}
		for g := 0; g < 12; g++ {
			a, b := mt.Clusters[0].Block(g), me.Clusters[0].Block(g)
			for i := range a {
				if !scalar.EqualWithinAbsOrRel(a[i], b[i], 1e-9, 1e-9) {
					t.Fatalf("cluster %d block entry %d: %g vs %g", g, i, a[i], b[i])
				}
			}
		}
		if !withCols {
			if mt.Cols != nil {
				t.Errorf("rows formed without being asked for")
			}
			continue
		}
		for j := range explicit {
			for i := range explicit[j] {
				if !scalar.EqualWithinAbsOrRel(mt.Cols[j][i], explicit[j][i], 1e-12, 1e-12) {
					t.Fatalf("column %d row %d: %g vs %g", j, i, mt.Cols[j][i], explicit[j][i])
				}
			}
		}
		if &mt.Cols[3][0] != &cols[3][0] {
			t.Errorf("unit column does not share the original storage")
		}
		// HC1 score covariance on the transformed moments equals the explicit one.
		r := make([]float64, k+2)
		r[0], r[k] = 1, -0.3
		s1, err := mt.ScoreCov([]int{2, k + 1}, [][]float64{r}, -1)
		if err != nil {
			t.Fatal(err)
		}
		s2, _ := me.ScoreCov([]int{2, k + 1}, [][]float64{r}, -1)
		if !mat.EqualApprox(s1, s2, 1e-9) {
			t.Errorf("HC1 score covariance differs")
		}
	}

	// Cross and Regress against explicit sums.
	a := make([]float64, k)
	b := make([]float64, k)
	a[0], a[1] = 1, -2
	b[3], b[4] = 0.5, 1
	want := 0.0
	for i := range cols[0] {
		want += (cols[0][i] - 2*cols[1][i]) * (0.5*cols[3][i] + cols[4][i])
	}
	if got := m.Cross(a, b); !scalar.EqualWithinAbsOrRel(got, want, 1e-10, 1e-10) {
		t.Errorf("Cross = %g, explicit %g", got, want)
	}
	coef, _, resid, err := m.Regress(a, []int{2, 3, 4})
	if err != nil {
		t.Fatal(err)
	}
	// Normal equations: the residual is orthogonal to the regressors.
	for _, c := range []int{2, 3, 4} {
		if v := m.Cross(resid, m.Unit(c)); math.Abs(v) > 1e-8 {
			t.Errorf("residual not orthogonal to %s: %g (coef %v)", names[c], v, coef)
		}
	}
}
