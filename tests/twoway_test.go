package tests

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/mat"

	"priceiv/demand"
)

// TestTwoWayCluster checks the two-way cluster-robust covariance against a
// direct computation on explicit matrices with gonum, following Cameron,
// Gelbach & Miller (2011), "Robust inference with multiway clustering",
// JBES 29(2), eq. (2.7)-(2.11): V = V_store + V_week - V_store∩week, each
// term with its own factor G/(G-1)·(n-1)/(n-k).
func TestTwoWayCluster(t *testing.T) {
	pn := smallFEPanel(3, 30, 15)
	spec := &demand.Spec{Outcome: "lq", Endogenous: []string{"lp"}, Exogenous: []string{"c"}, Instruments: []string{"z1", "z2"},
		Cluster: []string{"store", "week"}, Vcov: "cluster"}
	d, err := demand.Build(pn, spec, 2)
	if err != nil {
		t.Fatal(err)
	}
	fit, _, err := d.Fit()
	if err != nil {
		t.Fatal(err)
	}
	n := pn.N
	one := make([]float64, n)
	for i := range one {
		one[i] = 1
	}
	X := colsMat([][]float64{pn.Num["lp"], one, pn.Num["c"]})
	Z := colsMat([][]float64{one, pn.Num["c"], pn.Num["z1"], pn.Num["z2"]})
	y := pn.Num["lq"]
	// Xhat, residuals and bread, explicitly.
	var zz, zzi, zx, t1, xhat, h, hi mat.Dense
	zz.Mul(Z.T(), Z)
	zzi.Inverse(&zz)
	zx.Mul(Z.T(), X)
	t1.Mul(&zzi, &zx)
	xhat.Mul(Z, &t1)
	h.Mul(xhat.T(), X)
	hi.Inverse(&h)
	var xy, b, e mat.VecDense
	yv := mat.NewVecDense(n, y)
	xy.MulVec(xhat.T(), yv)
	b.MulVec(&hi, &xy)
	e.MulVec(X, &b)
	e.SubVec(yv, &e)
	sc, _, _ := pn.IDs("store")
	wc, _, _ := pn.IDs("week")
	k := 3
	term := func(key func(i int) int) *mat.Dense {
		sums := map[int][]float64{}
		for i := 0; i < n; i++ {
			s := sums[key(i)]
			if s == nil {
				s = make([]float64, k)
				sums[key(i)] = s
			}
			for j := 0; j < k; j++ {
				s[j] += xhat.At(i, j) * e.AtVec(i)
			}
		}
		G := len(sums)
		meat := mat.NewDense(k, k, nil)
		for _, s := range sums {
			for a := 0; a < k; a++ {
				for c := 0; c < k; c++ {
					meat.Set(a, c, meat.At(a, c)+s[a]*s[c])
				}
			}
		}
		var t2, v mat.Dense
		t2.Mul(&hi, meat)
		v.Mul(&t2, &hi)
		v.Scale(float64(G)/float64(G-1)*float64(n-1)/float64(n-k), &v)
		return &v
	}
	vs := term(func(i int) int { return int(sc[i]) })
	vw := term(func(i int) int { return int(wc[i]) })
	vsw := term(func(i int) int { return int(sc[i])*1000 + int(wc[i]) })
	var v mat.Dense
	v.Add(vs, vw)
	v.Sub(&v, vsw)
	for j, name := range []string{"lp", "intercept", "c"} {
		f := fit.Index(name)
		if math.Abs(fit.Coef[f]-b.AtVec(j)) > 1e-10 {
			t.Errorf("%s: coefficient %.12f, explicit %.12f", name, fit.Coef[f], b.AtVec(j))
		}
		want := math.Sqrt(v.At(j, j))
		if math.Abs(fit.SE(f)/want-1) > 1e-8 {
			t.Errorf("%s: two-way s.e. %.12f, explicit %.12f", name, fit.SE(f), want)
		}
	}
	if fit.Vcov.DF != 14 {
		t.Errorf("degrees of freedom %d, want min(G)-1 = 14", fit.Vcov.DF)
	}
}
