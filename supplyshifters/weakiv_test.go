package supplyshifters

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"
	"gonum.org/v1/gonum/mat"

	"priceiv/ivcore"
)

// twoPriceData draws a market with two endogenous prices (own and a
// sibling's), a control and four cost shifters (generated truth), with
// heteroskedastic errors and 30 clusters.
func twoPriceData(seed uint64, n int) (map[string][]float64, []int32) {
	rng := rand.New(rand.NewPCG(seed, 9))
	names := []string{"y", "p1", "p2", "w", "bean", "freight", "glass", "label"}
	cols := map[string][]float64{}
	for _, s := range names {
		cols[s] = make([]float64, n)
	}
	codes := make([]int32, n)
	for i := 0; i < n; i++ {
		codes[i] = int32(i % 30)
		w := rng.NormFloat64()
		z := [4]float64{rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()}
		v1, v2 := rng.NormFloat64(), rng.NormFloat64()
		u := (0.5*v1 + 0.3*v2 + rng.NormFloat64()) * (0.6 + 0.4*math.Abs(z[0]))
		p1 := 0.6*z[0] + 0.4*z[1] + 0.1*z[3] + 0.2*w + v1
		p2 := 0.3*z[0] + 0.5*z[2] + 0.2*z[1] + 0.5*v1 + v2
		cols["w"][i] = w
		cols["bean"][i], cols["freight"][i], cols["glass"][i], cols["label"][i] = z[0], z[1], z[2], z[3]
		cols["p1"][i], cols["p2"][i] = p1, p2
		cols["y"][i] = 2 - 1.6*p1 + 0.4*p2 + 0.3*w + u
	}
	return cols, codes
}

// explicitMats returns the data matrices with an intercept in W.
func explicitMats(cols map[string][]float64, y string, endog, exog, instr []string) (Y, X, W, Ze *mat.Dense) {
	n := len(cols[y])
	build := func(list []string, intercept bool) *mat.Dense {
		k := len(list)
		if intercept {
			k++
		}
		d := mat.NewDense(n, k, nil)
		for i := 0; i < n; i++ {
			c := 0
			if intercept {
				d.Set(i, 0, 1)
				c = 1
			}
			for j, s := range list {
				d.Set(i, c+j, cols[s][i])
			}
		}
		return d
	}
	return build([]string{y}, false), build(endog, false), build(exog, true), build(instr, false)
}

// resid returns M_B A by explicit normal equations.
func resid(a, b *mat.Dense) *mat.Dense {
	var bb, ba, c, fit, out mat.Dense
	bb.Mul(b.T(), b)
	ba.Mul(b.T(), a)
	if err := c.Solve(&bb, &ba); err != nil {
		panic(err)
	}
	fit.Mul(b, &c)
	out.Sub(a, &fit)
	return &out
}

// minEigOf returns the smallest real eigenvalue of A⁻¹B (general).
func minEigOf(a, b *mat.Dense) float64 {
	var ai, m mat.Dense
	if err := ai.Inverse(a); err != nil {
		panic(err)
	}
	m.Mul(&ai, b)
	var e mat.Eigen
	if !e.Factorize(&m, mat.EigenNone) {
		panic("eigen")
	}
	best := math.Inf(1)
	for _, v := range e.Values(nil) {
		best = math.Min(best, real(v))
		_ = cmplx.Abs(v)
	}
	return best
}

// TestWeakIVExplicitIID checks, with two endogenous prices and iid errors,
// the moment-based statistics against explicit matrix formulas on the
// data (gonum):
//   - Cragg-Donald F = mineig(Σ̂_VV⁻¹ X̃ᵀP_Z̃X̃)/L, Σ̂_VV = V̂ᵀV̂/(n - k)
//     (Stock & Yogo 2005, eq. 3.5; Cragg & Donald 1993);
//   - under iid errors the Kleibergen-Paap rk Wald F equals Cragg-Donald
//     and the rk LM equals Anderson's n·mineig((X̃ᵀX̃)⁻¹X̃ᵀP_Z̃X̃)
//     (Kleibergen & Paap 2006, section 3);
//   - Shea's partial R² as the squared correlation of x̃_j (net of the
//     other regressors) with its fitted part net of the other fitted
//     regressors (Shea 1997, Review of Economics and Statistics 79(2));
//   - the Sanderson-Windmeijer F from the explicit 2SLS residual of x_j
//     on the other price (Sanderson & Windmeijer 2016, eq. 16).
func TestWeakIVExplicitIID(t *testing.T) {
	cols, _ := twoPriceData(1, 800)
	endog := []string{"p1", "p2"}
	instr := []string{"bean", "freight", "glass", "label"}
	m, md := dgModel(cols, "y", endog, []string{"w"}, instr, nil)
	dg, err := DiagnoseModel(m, md, ivcore.IID, nil, Options{Parts: PartFirstStage | PartWeakIV})
	if err != nil {
		t.Fatal(err)
	}
	_, X, W, Ze := explicitMats(cols, "y", endog, []string{"w"}, instr)
	n, L, p := 800.0, 4, 2
	var Z mat.Dense
	Z.Augment(W, Ze)
	Xt, Zt := resid(X, W), resid(Ze, W)
	V := resid(X, &Z)
	var svv, xpx, xx, zx mat.Dense
	svv.Mul(V.T(), V)
	svv.Scale(1/(n-float64(6)), &svv)
	pz := resid(Xt, Zt) // M_Z̃ X̃
	xx.Mul(Xt.T(), Xt)
	var mx mat.Dense
	mx.Mul(Xt.T(), pz)
	xpx.Sub(&xx, &mx) // X̃ᵀP_Z̃X̃
	cd := minEigOf(&svv, &xpx) / float64(L)
	anderson := n * minEigOf(&xx, &xpx)
	_ = zx
	w := dg.WeakIV
	for _, test := range []struct {
		what      string
		got, want float64
	}{
		{"Cragg-Donald F", float64(w.CraggDonald.Value), cd},
		{"KP rk Wald F (iid) = Cragg-Donald", float64(w.KPWald.Value), cd},
		{"KP rk LM (iid) = Anderson LM", float64(w.KPLM.Value), anderson},
	} {
		if !scalar.EqualWithinAbsOrRel(test.got, test.want, 1e-8, 1e-8) {
			t.Errorf("%s = %.10g, explicit %.10g", test.what, test.got, test.want)
		}
	}
	if w.KPLM.DF1 != L-p+1 {
		t.Errorf("rk LM df %d, want %d", w.KPLM.DF1, L-p+1)
	}

	// Shea and Sanderson-Windmeijer for each price.
	var zz, zzi, pzx mat.Dense
	zz.Mul(Z.T(), &Z)
	if err := zzi.Inverse(&zz); err != nil {
		t.Fatal(err)
	}
	var zxm, coef mat.Dense
	zxm.Mul(Z.T(), X)
	coef.Mul(&zzi, &zxm)
	pzx.Mul(&Z, &coef) // fitted prices
	for j := 0; j < p; j++ {
		o := 1 - j
		xj := mat.DenseCopyOf(X.Slice(0, 800, j, j+1))
		var others, fitOthers mat.Dense
		others.Augment(X.Slice(0, 800, o, o+1), W)
		fitOthers.Augment(pzx.Slice(0, 800, o, o+1), W)
		a := resid(xj, &others)
		b := resid(mat.DenseCopyOf(pzx.Slice(0, 800, j, j+1)), &fitOthers)
		ab := mat.Dot(a.ColView(0), b.ColView(0))
		shea := ab * ab / (mat.Dot(a.ColView(0), a.ColView(0)) * mat.Dot(b.ColView(0), b.ColView(0)))
		got := float64(*dg.FirstStage[j].SheaPartialR2)
		if !scalar.EqualWithinAbsOrRel(got, shea, 1e-8, 1e-8) {
			t.Errorf("%s: Shea partial R² %.10g, explicit %.10g", endog[j], got, shea)
		}
		// SW: ε̂ = x_j - 2SLS fit on [x_o, W] with instruments Z.
		var ho, hw, d, gx, fit, eps mat.Dense
		var xo mat.Dense
		xo.Augment(X.Slice(0, 800, o, o+1), W)
		var xoz, pxo mat.Dense
		xoz.Mul(Z.T(), &xo)
		pxo.Mul(&zzi, &xoz)
		ho.Mul(xoz.T(), &pxo) // X_oᵀP_Z X_o
		var zxj mat.Dense
		zxj.Mul(Z.T(), xj)
		hw.Mul(pxo.T(), &zxj)
		if err := d.Solve(&ho, &hw); err != nil {
			t.Fatal(err)
		}
		gx.Mul(&xo, &d)
		fit.CloneFrom(&gx)
		eps.Sub(xj, &fit)
		ssrR := mat.Dot(eps.ColView(0), eps.ColView(0)) // ε̂ is orthogonal to W
		u := resid(&eps, &Z)
		ssrU := mat.Dot(u.ColView(0), u.ColView(0))
		sw := (ssrR - ssrU) / float64(L-p+1) / (ssrU / (n - 6))
		got = float64(dg.FirstStage[j].ConditionalF.Value)
		if !scalar.EqualWithinAbsOrRel(got, sw, 1e-8, 1e-8) {
			t.Errorf("%s: Sanderson-Windmeijer F %.10g, explicit %.10g", endog[j], got, sw)
		}
		t.Logf("%s: F %.2f, partial R² %.3f, Shea %.3f, SW F %.2f", endog[j], float64(dg.FirstStage[j].F.Value), float64(dg.FirstStage[j].PartialR2), shea, sw)
	}
	t.Logf("CD %.3f, KP Wald F %.3f, KP LM %.3f (Anderson %.3f)", cd, float64(w.KPWald.Value), float64(w.KPLM.Value), anderson)
}

// TestFirstStageMatchesIvcore checks (property) that the first-stage
// coefficients, standard errors, F and partial R² computed from the score
// bank equal ivcore.FirstStages, for iid, HC1 and cluster-robust
// covariances, with one and with two endogenous prices.
func TestFirstStageMatchesIvcore(t *testing.T) {
	cols, codes := twoPriceData(2, 600)
	for _, endog := range [][]string{{"p1"}, {"p1", "p2"}} {
		for _, vk := range []ivcore.VcovKind{ivcore.IID, ivcore.HC1, ivcore.Cluster} {
			var dims []ivcore.ClusterDim
			if vk == ivcore.Cluster {
				dims = []ivcore.ClusterDim{{Name: "store", Codes: codes[:600], G: 30}}
			}
			m, md := dgModel(cols, "y", endog, []string{"w"}, []string{"bean", "freight", "glass", "label"}, dims)
			dg, err := DiagnoseModel(m, md, vk, nil, Options{Parts: PartFirstStage | PartWeakIV})
			if err != nil {
				t.Fatal(err)
			}
			fs, err := ivcore.FirstStages(m, md, vk)
			if err != nil {
				t.Fatal(err)
			}
			for j, f := range fs {
				got := dg.FirstStage[j]
				if !scalar.EqualWithinAbsOrRel(float64(got.F.Value), f.F.F, 1e-9, 1e-9) || got.F.DF2 != f.F.DF {
					t.Errorf("%v %v %s: F %.10g (df %d), ivcore %.10g (df %d)", endog, vk, f.Endogenous, float64(got.F.Value), got.F.DF2, f.F.F, f.F.DF)
				}
				if !scalar.EqualWithinAbsOrRel(float64(got.PartialR2), f.PartialR2, 1e-9, 1e-9) {
					t.Errorf("%v %v: partial R² %g, ivcore %g", endog, vk, float64(got.PartialR2), f.PartialR2)
				}
				for a, e := range got.Shifters {
					k := f.Excluded[a]
					if !scalar.EqualWithinAbsOrRel(float64(e.Estimate), f.Fit.Coef[k], 1e-10, 1e-10) ||
						!scalar.EqualWithinAbsOrRel(float64(e.StdError), f.Fit.SE(k), 1e-9, 1e-9) {
						t.Errorf("%v %v %s: %g (%g), ivcore %g (%g)", endog, vk, e.Name, float64(e.Estimate), float64(e.StdError), f.Fit.Coef[k], f.Fit.SE(k))
					}
				}
			}
			if len(endog) == 1 {
				// One endogenous regressor: KP rk Wald F is the first-stage F;
				// under iid Cragg-Donald and the effective F are too
				// (Montiel Olea & Pflueger 2013, section 2).
				if !scalar.EqualWithinAbsOrRel(float64(dg.WeakIV.KPWald.Value), fs[0].F.F, 1e-8, 1e-8) {
					t.Errorf("%v: KP Wald F %g, first-stage F %g", vk, float64(dg.WeakIV.KPWald.Value), fs[0].F.F)
				}
				if vk == ivcore.IID {
					if !scalar.EqualWithinAbsOrRel(float64(dg.WeakIV.CraggDonald.Value), fs[0].F.F, 1e-8, 1e-8) ||
						!scalar.EqualWithinAbsOrRel(float64(dg.WeakIV.Effective.F), fs[0].F.F, 1e-8, 1e-8) {
						t.Errorf("iid: CD %g, effective F %g, first-stage F %g", float64(dg.WeakIV.CraggDonald.Value), float64(dg.WeakIV.Effective.F), fs[0].F.F)
					}
				}
			}
		}
	}
}

// TestShifterRotationInvariance checks (property) that statistics about
// the shifters as a group do not depend on how they are combined: replacing
// the shifters by an invertible linear combination of them leaves
// Cragg-Donald, the Kleibergen-Paap statistics, Sargan, Hansen J, the
// control-function test and the Anderson-Rubin set unchanged (HC1 and
// cluster; the rk statistics are invariant by construction, Kleibergen &
// Paap 2006, section 2).
func TestShifterRotationInvariance(t *testing.T) {
	cols, codes := twoPriceData(3, 500)
	rot := map[string][]float64{}
	for k, v := range cols {
		rot[k] = v
	}
	n := 500
	mix := [][]float64{{1, 0.5, 0, 0}, {0, 2, 0.3, 0}, {0.2, 0, 1, -1}, {0, 0, 0.4, 3}}
	src := []string{"bean", "freight", "glass", "label"}
	dst := []string{"m1", "m2", "m3", "m4"}
	for a, name := range dst {
		rot[name] = make([]float64, n)
		for b, s := range src {
			for i := 0; i < n; i++ {
				rot[name][i] += mix[a][b] * cols[s][i]
			}
		}
	}
	for _, vk := range []ivcore.VcovKind{ivcore.HC1, ivcore.Cluster} {
		var dims []ivcore.ClusterDim
		if vk == ivcore.Cluster {
			dims = []ivcore.ClusterDim{{Name: "store", Codes: codes[:n], G: 30}}
		}
		for _, endog := range [][]string{{"p1"}, {"p1", "p2"}} {
			m1, md1 := dgModel(cols, "y", endog, []string{"w"}, src, dims)
			m2, md2 := dgModel(rot, "y", endog, []string{"w"}, dst, dims)
			a, err := DiagnoseModel(m1, md1, vk, nil, Options{})
			if err != nil {
				t.Fatal(err)
			}
			b, err := DiagnoseModel(m2, md2, vk, nil, Options{})
			if err != nil {
				t.Fatal(err)
			}
			pairs := [][3]any{
				{"Cragg-Donald", a.WeakIV.CraggDonald.Value, b.WeakIV.CraggDonald.Value},
				{"KP Wald F", a.WeakIV.KPWald.Value, b.WeakIV.KPWald.Value},
				{"KP LM", a.WeakIV.KPLM.Value, b.WeakIV.KPLM.Value},
				{"Sargan", a.Overid.Sargan.Value, b.Overid.Sargan.Value},
				{"Hansen J", a.Overid.HansenJ.Value, b.Overid.HansenJ.Value},
				{"control function", a.Endogeneity.Test.Value, b.Endogeneity.Test.Value},
			}
			for j := range endog {
				pairs = append(pairs, [3]any{"first-stage F", a.FirstStage[j].F.Value, b.FirstStage[j].F.Value})
			}
			if len(endog) == 1 {
				pairs = append(pairs, [3]any{"effective F", a.WeakIV.Effective.F, b.WeakIV.Effective.F})
				ra, rb := a.AndersonRubin, b.AndersonRubin
				if ra.Shape != rb.Shape || len(ra.Pieces) != len(rb.Pieces) {
					t.Errorf("%v: AR set %s vs rotated %s", vk, fmtSet(ra.Pieces), fmtSet(rb.Pieces))
				}
				for k := range ra.Pieces {
					for _, e := range [][2]*float64{{ra.Pieces[k].Low, rb.Pieces[k].Low}, {ra.Pieces[k].High, rb.Pieces[k].High}} {
						if (e[0] == nil) != (e[1] == nil) || (e[0] != nil && !scalar.EqualWithinAbsOrRel(*e[0], *e[1], 1e-5, 1e-5)) {
							t.Errorf("%v: AR set %s vs rotated %s", vk, fmtSet(ra.Pieces), fmtSet(rb.Pieces))
						}
					}
				}
				t.Logf("%v price alone (sibling price omitted, a misspecified demand): AR set %s (%s), Hansen J %.2f", vk, fmtSet(ra.Pieces), ra.Shape, float64(a.Overid.HansenJ.Value))
			}
			for _, pr := range pairs {
				x, y := float64(pr[1].(Num)), float64(pr[2].(Num))
				if !scalar.EqualWithinAbsOrRel(x, y, 1e-6, 1e-6) {
					t.Errorf("%v %v %s: %.10g vs rotated %.10g", vk, endog, pr[0], x, y)
				}
			}
			if len(endog) == 2 {
				t.Logf("%v two prices: CD %.3f, KP Wald F %.3f, KP LM %.3f (p %.3g), Hansen J %.3f", vk,
					float64(a.WeakIV.CraggDonald.Value), float64(a.WeakIV.KPWald.Value), float64(a.WeakIV.KPLM.Value), float64(a.WeakIV.KPLM.P), float64(a.Overid.HansenJ.Value))
			}
		}
	}
}
