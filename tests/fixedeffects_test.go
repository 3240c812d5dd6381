package tests

import (
	"math"
	"math/rand/v2"
	"strconv"
	"testing"

	"gonum.org/v1/gonum/mat"

	"priceiv/demand"
	"priceiv/ivcore"
)

// smallFEPanel generates an unbalanced panel of stores and weeks with an
// endogenous price, for generated-truth checks.
func smallFEPanel(seed uint64, stores, weeks int) *demand.Panel {
	rng := rand.New(rand.NewPCG(seed, 7))
	var st, wk []string
	var q, p, z1, z2, c []float64
	for s := 0; s < stores; s++ {
		a := rng.NormFloat64()
		for w := 0; w < weeks; w++ {
			if rng.Float64() < 0.15 {
				continue // unbalanced: some store-weeks missing
			}
			u := rng.NormFloat64() * 0.3
			zz1 := rng.NormFloat64()
			zz2 := rng.NormFloat64()
			cc := rng.NormFloat64()
			lp := 0.5*zz1 + 0.3*zz2 + 0.4*u + 0.2*a + 0.1*float64(w%5) + 0.2*rng.NormFloat64()
			lq := 3 + a - 1.5*lp + 0.2*cc + 0.05*float64(w%5) + u
			st = append(st, "S"+strconv.Itoa(s))
			wk = append(wk, strconv.Itoa(w))
			q = append(q, lq)
			p = append(p, lp)
			z1 = append(z1, zz1)
			z2 = append(z2, zz2)
			c = append(c, cc)
		}
	}
	pn := demand.NewPanel("generated", len(q))
	pn.AddText("store", text(st))
	pn.AddText("week", text(wk))
	pn.AddNum("lq", q)
	pn.AddNum("lp", p)
	pn.AddNum("z1", z1)
	pn.AddNum("z2", z2)
	pn.AddNum("c", c)
	return pn
}

func text(s []string) *demand.TextColumn {
	t := &demand.TextColumn{Codes: make([]int32, len(s))}
	idx := map[string]int32{}
	for i, v := range s {
		k, ok := idx[v]
		if !ok {
			k = int32(len(t.Levels))
			idx[v] = k
			t.Levels = append(t.Levels, v)
		}
		t.Codes[i] = k
	}
	return t
}

// TestAbsorptionEqualsDummies checks that absorbing store and week fixed
// effects gives the same 2SLS estimates as the explicit dummy-variable
// regression (Frisch-Waugh-Lovell theorem; Davidson & MacKinnon 2004,
// section 2.4) to 1e-8, and the same iid and cluster standard errors to
// 1e-6 relative once the degrees-of-freedom rule of DESIGN.md is applied
// (k counts absorbed levels; levels nested in the cluster are left out of
// the cluster factor). The dummy regression is solved independently here
// with gonum on explicit matrices.
func TestAbsorptionEqualsDummies(t *testing.T) {
	pn := smallFEPanel(1, 25, 12)
	for _, vk := range []string{"iid", "cluster"} {
		spec := &demand.Spec{Outcome: "lq", Endogenous: []string{"lp"}, Exogenous: []string{"c"}, Instruments: []string{"z1", "z2"},
			FE: []string{"store", "week"}, Vcov: vk, Cluster: []string{"store"}}
		d, err := demand.Build(pn, spec, 2)
		if err != nil {
			t.Fatal(err)
		}
		fit, _, err := d.Fit()
		if err != nil {
			t.Fatal(err)
		}
		// Explicit dummies: store dummies (all) and week dummies (all but
		// the first), on the same rows.
		sc, sl, _ := pn.IDs("store")
		wc, wl, _ := pn.IDs("week")
		n := pn.N
		var xcols, zcols [][]float64
		lq, lp, c := pn.Num["lq"], pn.Num["lp"], pn.Num["c"]
		xcols = append(xcols, lp, c)
		zcols = append(zcols, pn.Num["z1"], pn.Num["z2"], c)
		for s := range sl {
			dcol := make([]float64, n)
			for i := range dcol {
				if int(sc[i]) == s {
					dcol[i] = 1
				}
			}
			xcols = append(xcols, dcol)
			zcols = append(zcols, dcol)
		}
		for w := 1; w < len(wl); w++ {
			dcol := make([]float64, n)
			for i := range dcol {
				if int(wc[i]) == w {
					dcol[i] = 1
				}
			}
			xcols = append(xcols, dcol)
			zcols = append(zcols, dcol)
		}
		b, cov := dummy2SLS(lq, xcols, zcols, vk, sc, len(sl))
		for j, name := range []string{"lp", "c"} {
			k := fit.Index(name)
			if math.Abs(fit.Coef[k]-b[j]) > 1e-8 {
				t.Errorf("%s %s: absorbed %.12f, dummies %.12f", vk, name, fit.Coef[k], b[j])
			}
			se := math.Sqrt(cov.At(j, j))
			if math.Abs(fit.SE(k)/se-1) > 1e-6 {
				t.Errorf("%s %s: absorbed s.e. %.12f, dummies %.12f", vk, name, fit.SE(k), se)
			}
		}
	}
}

// dummy2SLS computes 2SLS on explicit matrices: b = (X'PzX)^-1 X'Pz y with
// iid covariance s² (X'PzX)^-1, s² = e'e/(n-k), or the one-way cluster
// covariance with G/(G-1)(n-1)/(n-k'), where k' leaves out the store
// dummies (nested in the store clusters).
func dummy2SLS(y []float64, xc, zc [][]float64, vk string, cl []int32, G int) ([]float64, *mat.Dense) {
	n := len(y)
	X := colsMat(xc)
	Z := colsMat(zc)
	var zz, zzi, zx, pzx, xpx, xpxi mat.Dense
	zz.Mul(Z.T(), Z)
	if err := zzi.Inverse(&zz); err != nil {
		panic(err)
	}
	zx.Mul(Z.T(), X)
	var tmp mat.Dense
	tmp.Mul(&zzi, &zx)
	pzx.Mul(Z, &tmp) // Xhat
	xpx.Mul(pzx.T(), X)
	if err := xpxi.Inverse(&xpx); err != nil {
		panic(err)
	}
	yv := mat.NewVecDense(n, y)
	var xy, b mat.VecDense
	xy.MulVec(pzx.T(), yv)
	b.MulVec(&xpxi, &xy)
	var e mat.VecDense
	e.MulVec(X, &b)
	e.SubVec(yv, &e)
	_, k := X.Dims()
	var cov mat.Dense
	if vk == "iid" {
		s2 := mat.Dot(&e, &e) / float64(n-k)
		cov.Scale(s2, &xpxi)
	} else {
		meat := mat.NewDense(k, k, nil)
		for g := 0; g < G; g++ {
			s := make([]float64, k)
			for i := 0; i < n; i++ {
				if int(cl[i]) != g {
					continue
				}
				for j := 0; j < k; j++ {
					s[j] += pzx.At(i, j) * e.AtVec(i)
				}
			}
			for a := 0; a < k; a++ {
				for c := 0; c < k; c++ {
					meat.Set(a, c, meat.At(a, c)+s[a]*s[c])
				}
			}
		}
		kNotNested := k - G // store dummies are nested in store clusters
		f := float64(G) / float64(G-1) * float64(n-1) / float64(n-kNotNested)
		var t1 mat.Dense
		t1.Mul(&xpxi, meat)
		cov.Mul(&t1, &xpxi)
		cov.Scale(f, &cov)
	}
	return b.RawVector().Data, &cov
}

func colsMat(c [][]float64) *mat.Dense {
	n := len(c[0])
	m := mat.NewDense(n, len(c), nil)
	for j, col := range c {
		for i, v := range col {
			m.Set(i, j, v)
		}
	}
	return m
}

// TestCriticalValues checks the reference distributions against a printed
// table: Student's t 0.975 quantile with 30 df = 2.042 and chi-square 0.95
// quantile with 1 df = 3.841 (any statistics handbook table, e.g.
// Stock & Watson, Introduction to Econometrics, appendix tables 2 and 3).
func TestCriticalValues(t *testing.T) {
	for _, test := range []struct {
		what   string
		got    float64
		want   float64
		tol    float64
		source string
	}{
		{"t(30) 0.975", ivcore.Critical(0.95, 30), 2.042, 5e-4, "t table (e.g. Stock & Watson appendix table 2), from memory"},
		{"normal 0.975", ivcore.Critical(0.95, 0), 1.960, 5e-4, "standard normal table, common practice"},
		{"t(10) 0.995", ivcore.Critical(0.99, 10), 3.169, 5e-4, "t table, from memory"},
		{"chi-square(1) survival at 3.841", ivcore.ChiSquaredSurvival(3.841, 1), 0.05, 5e-5, "chi-square table (e.g. Stock & Watson appendix table 3), from memory"},
		{"chi-square(2) survival at 5.991", ivcore.ChiSquaredSurvival(5.991, 2), 0.05, 5e-5, "chi-square table, from memory"},
		{"F(2,30) survival at 3.32", ivcore.FSurvival(3.32, 2, 30), 0.05, 5e-4, "F table, 5% point, from memory"},
	} {
		if math.Abs(test.got-test.want) > test.tol {
			t.Errorf("%s = %.5f, want %.3f (%s)", test.what, test.got, test.want, test.source)
		}
	}
}

// TestFixedEffectOrder: the estimates and the cluster-robust standard
// errors do not depend on the order in which fixed effects are listed
// (the degrees-of-freedom rule of DESIGN.md counts the levels of effects
// nested in the cluster as a set; common practice).
func TestFixedEffectOrder(t *testing.T) {
	pn := smallFEPanel(5, 20, 10)
	var se []float64
	for _, fe := range [][]string{{"store", "week"}, {"week", "store"}} {
		spec := &demand.Spec{Outcome: "lq", Endogenous: []string{"lp"}, Instruments: []string{"z1", "z2"},
			FE: fe, Cluster: []string{"store"}, Vcov: "cluster"}
		d, err := demand.Build(pn, spec, 1)
		if err != nil {
			t.Fatal(err)
		}
		fit, _, err := d.Fit()
		if err != nil {
			t.Fatal(err)
		}
		se = append(se, fit.SE(0))
	}
	if math.Abs(se[0]/se[1]-1) > 1e-9 {
		t.Errorf("s.e. %.12f with store,week but %.12f with week,store", se[0], se[1])
	}
}
