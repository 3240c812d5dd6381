package supplyshifters

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"testing"

	"priceiv/ivcore"
)

// arData draws a market with one endogenous price (generated truth):
//
//	x = Σ_j π z_j + v,   y = 1 + β x + u,   u = ρ v + √(1-ρ²) e
//
// with L standard-normal shifters; hetero scales u by (0.5 + |z_1|) when
// set. noise makes y and x independent of the shifters.
func arData(rng *rand.Rand, n, L int, pi, beta, rho float64, hetero bool) (map[string][]float64, []string) {
	cols := map[string][]float64{"y": make([]float64, n), "x": make([]float64, n)}
	var names []string
	for j := 0; j < L; j++ {
		name := string(rune('a'+j)) + "_cost"
		names = append(names, name)
		cols[name] = make([]float64, n)
	}
	for i := 0; i < n; i++ {
		x := 0.0
		for _, s := range names {
			z := rng.NormFloat64()
			cols[s][i] = z
			x += pi * z
		}
		v := rng.NormFloat64()
		u := rho*v + math.Sqrt(1-rho*rho)*rng.NormFloat64()
		if hetero {
			u *= 0.5 + math.Abs(cols[names[0]][i])
		}
		x += v
		cols["x"][i] = x
		cols["y"][i] = 1 + beta*x + u
	}
	return cols, names
}

// noiseData draws shifters unrelated to price and quantity (generated
// truth: the shifters carry no information), n = 300, two shifters.
func noiseData(seed uint64, hetero bool) (map[string][]float64, []string) {
	rng := rand.New(rand.NewPCG(seed, 1))
	cols, names := arData(rng, 300, 2, 0, -1, 0.5, hetero)
	for _, s := range names {
		for i := range cols[s] {
			cols[s][i] = rng.NormFloat64()
		}
	}
	return cols, names
}

// inSet reports whether b lies in the pieces.
func inSet(p []Interval, b float64) bool {
	for _, iv := range p {
		if (iv.Low == nil || b >= *iv.Low) && (iv.High == nil || b <= *iv.High) {
			return true
		}
	}
	return false
}

// nearEnd reports whether b is within tol of an end point of the pieces.
func nearEnd(p []Interval, b, tol float64) bool {
	for _, iv := range p {
		if iv.Low != nil && math.Abs(b-*iv.Low) <= tol {
			return true
		}
		if iv.High != nil && math.Abs(b-*iv.High) <= tol {
			return true
		}
	}
	return false
}

// TestARBandMatchesBruteForceGrid checks the Anderson-Rubin set (common
// practice: the set of b₀ the test does not reject) against a brute-force
// grid of the same statistic: every grid point is inside the reported set
// exactly when its statistic is below the critical value (points within
// 1e-5 of an end point are skipped). Cases: MROZ (Wooldridge, example
// 15.5 model) with iid errors (closed form) and HC1 (numerical inversion),
// and generated weak shifters whose iid set is unbounded.
func TestARBandMatchesBruteForceGrid(t *testing.T) {
	mroz := dgMroz(t)
	rays, rnames := noiseData(4, false)
	whole, wnames := noiseData(1, false)
	for _, test := range []struct {
		name    string
		cols    map[string][]float64
		y, x    string
		exog    []string
		instr   []string
		vk      ivcore.VcovKind
		lo, hi  float64 // brute-force grid range
		wantTop string  // expected shape (generated truth / data)
	}{
		{"mroz iid", mroz, "lwage", "educ", []string{"exper", "expersq"}, []string{"motheduc", "fatheduc"}, ivcore.IID, -1, 1, ShapeBounded},
		{"mroz hc1", mroz, "lwage", "educ", []string{"exper", "expersq"}, []string{"motheduc", "fatheduc"}, ivcore.HC1, -1, 1, ShapeBounded},
		{"noise iid, two rays", rays, "y", "x", nil, rnames, ivcore.IID, -200, 200, ShapeTwoRays},
		{"noise iid, whole line", whole, "y", "x", nil, wnames, ivcore.IID, -200, 200, ShapeWholeLine},
		{"noise hc1, two rays", rays, "y", "x", nil, rnames, ivcore.HC1, -200, 200, ShapeTwoRays},
	} {
		m, md := dgModel(test.cols, test.y, []string{test.x}, test.exog, test.instr, nil)
		ar, err := NewARStat(m, md, test.vk)
		if err != nil {
			t.Fatal(err)
		}
		dg, err := DiagnoseModel(m, md, test.vk, nil, Options{Parts: PartAndersonRubin})
		if err != nil {
			t.Fatal(err)
		}
		band := dg.AndersonRubin
		if test.wantTop != "" && band.Shape != test.wantTop {
			t.Errorf("%s: shape %q, want %q", test.name, band.Shape, test.wantTop)
		}
		crit := float64(band.Critical)
		const steps = 40000
		bad := 0
		for i := 0; i <= steps; i++ {
			b := test.lo + (test.hi-test.lo)*float64(i)/steps
			if nearEnd(band.Pieces, b, 1e-5) {
				continue
			}
			if (ar.F(b) <= crit) != inSet(band.Pieces, b) {
				bad++
				if bad < 4 {
					t.Errorf("%s: b = %g: AR = %g (critical %g) but set %s", test.name, b, ar.F(b), crit, fmtSet(band.Pieces))
				}
			}
		}
		// The closed form and the numerical inversion agree under iid errors.
		if test.vk == ivcore.IID {
			num := ar.Band(0.95, float64(dg.Estimate), float64(dg.StdError), ARSearch{Numeric: true})
			if len(num.Pieces) != len(band.Pieces) || num.Shape != band.Shape {
				t.Errorf("%s: numerical %s (%s), closed form %s (%s)", test.name, fmtSet(num.Pieces), num.Shape, fmtSet(band.Pieces), band.Shape)
			} else {
				for k := range num.Pieces {
					for _, pair := range [][2]*float64{{num.Pieces[k].Low, band.Pieces[k].Low}, {num.Pieces[k].High, band.Pieces[k].High}} {
						if (pair[0] == nil) != (pair[1] == nil) || (pair[0] != nil && math.Abs(*pair[0]-*pair[1]) > 1e-5*math.Max(1, math.Abs(*pair[1]))) {
							t.Errorf("%s: numerical %s, closed form %s", test.name, fmtSet(num.Pieces), fmtSet(band.Pieces))
						}
					}
				}
			}
		}
		t.Logf("%s: AR set %s (%s, %s); Wald [%.4f, %.4f]", test.name, fmtSet(band.Pieces), band.Shape, band.Method, float64(band.WaldLow), float64(band.WaldHigh))
	}
}

// TestARBandStrongShiftersNearWald checks that with strong shifters the
// Anderson-Rubin set is a bounded interval close to the Wald band (common
// practice: the two agree asymptotically under strong identification):
// each end within 5% of the Wald band's width, generated data, n = 5000.
func TestARBandStrongShiftersNearWald(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 5))
	cols, names := arData(rng, 5000, 1, 1.0, -1.8, 0.6, true)
	for _, vk := range []ivcore.VcovKind{ivcore.IID, ivcore.HC1} {
		m, md := dgModel(cols, "y", []string{"x"}, nil, names, nil)
		dg, err := DiagnoseModel(m, md, vk, nil, Options{Parts: PartAndersonRubin})
		if err != nil {
			t.Fatal(err)
		}
		b := dg.AndersonRubin
		if b.Shape != ShapeBounded {
			t.Fatalf("%v: shape %q", vk, b.Shape)
		}
		w := float64(b.WaldHigh - b.WaldLow)
		if math.Abs(*b.CILow-float64(b.WaldLow)) > 0.05*w || math.Abs(*b.CIHigh-float64(b.WaldHigh)) > 0.05*w {
			t.Errorf("%v: AR [%g, %g] vs Wald [%g, %g]", vk, *b.CILow, *b.CIHigh, float64(b.WaldLow), float64(b.WaldHigh))
		}
		t.Logf("%v: AR [%.4f, %.4f], Wald [%.4f, %.4f]", vk, *b.CILow, *b.CIHigh, float64(b.WaldLow), float64(b.WaldHigh))
	}
}

// TestARMonteCarloWeakShifters is a short Monte Carlo with weak shifters
// (generated truth; concentration parameter μ² = n·L·π² = 2 with L = 3,
// strong endogeneity ρ = 0.9, normal iid errors, n = 200, 300
// replications). The 2SLS Wald band under-covers badly while the
// Anderson-Rubin set, exact under these assumptions, covers about 95%
// (Staiger & Stock 1997, Econometrica 65(3); Dufour 1997, Econometrica
// 65(6)). Checks: AR coverage in [0.91, 0.985], Wald coverage < 0.85.
func TestARMonteCarloWeakShifters(t *testing.T) {
	const n, L, reps, beta = 200, 3, 300, -1.5
	pi := math.Sqrt(2.0 / (n * L))
	rng := rand.New(rand.NewPCG(2026, 3))
	arCover, waldCover := 0, 0
	shapes := map[string]int{}
	for r := 0; r < reps; r++ {
		cols, names := arData(rng, n, L, pi, beta, 0.9, false)
		m, md := dgModel(cols, "y", []string{"x"}, nil, names, nil)
		dg, err := DiagnoseModel(m, md, ivcore.IID, nil, Options{Parts: PartAndersonRubin})
		if err != nil {
			t.Fatal(err)
		}
		b := dg.AndersonRubin
		shapes[b.Shape]++
		if inSet(b.Pieces, beta) {
			arCover++
		}
		if float64(b.WaldLow) <= beta && beta <= float64(b.WaldHigh) {
			waldCover++
		}
	}
	ca, cw := float64(arCover)/reps, float64(waldCover)/reps
	t.Logf("weak shifters (μ² = 2): Anderson-Rubin coverage %.3f, 2SLS Wald coverage %.3f over %d replications; AR shapes %v", ca, cw, reps, shapes)
	if ca < 0.91 || ca > 0.985 {
		t.Errorf("Anderson-Rubin coverage %.3f outside [0.91, 0.985]", ca)
	}
	if cw >= 0.85 {
		t.Errorf("Wald coverage %.3f, want < 0.85 under weak shifters", cw)
	}
}

// TestARNeverCrosses checks bad input: shifters unrelated to price and
// quantity under robust errors, so the statistic stays below the critical
// value over the whole search. The search must end, the set must be
// reported as unbounded (ci_low and ci_high null in JSON, shape in words),
// and json.Marshal must not fail. The limit of the statistic as |b| → ∞
// is the first-stage F (property of the quadratic ratio).
func TestARNeverCrosses(t *testing.T) {
	cols, names := noiseData(1, true)
	m, md := dgModel(cols, "y", []string{"x"}, nil, names, nil)
	dg, err := DiagnoseModel(m, md, ivcore.HC1, nil, Options{Parts: PartAndersonRubin | PartFirstStage})
	if err != nil {
		t.Fatal(err)
	}
	b := dg.AndersonRubin
	if b.CILow != nil || b.CIHigh != nil {
		t.Errorf("unbounded set expected, got %s (%s)", fmtSet(b.Pieces), b.Shape)
	}
	if b.Shape != ShapeWholeLine || len(b.Pieces) != 1 {
		t.Errorf("shape %q, want the whole line", b.Shape)
	}
	js, err := json.Marshal(dg)
	if err != nil {
		t.Fatalf("json.Marshal failed: %v", err)
	}
	var back map[string]any
	if err := json.Unmarshal(js, &back); err != nil {
		t.Fatal(err)
	}
	ar := back["anderson_rubin"].(map[string]any)
	if ar["ci_low"] != nil || ar["ci_high"] != nil || ar["shape"] != b.Shape {
		t.Errorf("JSON anderson_rubin: ci_low %v ci_high %v shape %v", ar["ci_low"], ar["ci_high"], ar["shape"])
	}
	st, _ := NewARStat(m, md, ivcore.HC1)
	if lim, f := st.Limit(), float64(dg.FirstStage[0].F.Value); math.Abs(lim-f) > 1e-9*f || math.Abs(st.F(1e9)-f) > 1e-6*f {
		t.Errorf("AR limit %g, AR(1e9) %g, first-stage F %g", lim, st.F(1e9), f)
	}
	t.Logf("noise shifters: AR set %s (%s); searched [%g, %g]; %s", fmtSet(b.Pieces), b.Shape, *b.SearchLow, *b.SearchHigh, b.Meaning)
}

// TestARAtZeroIsReducedForm checks the identity (common practice) that
// the Anderson-Rubin test of a zero coefficient is the joint test of the
// shifters in the reduced form, for HC1 and cluster-robust covariances.
func TestARAtZeroIsReducedForm(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 2))
	cols, names := arData(rng, 400, 3, 0.3, -1.2, 0.5, true)
	codes := make([]int32, 400)
	for i := range codes {
		codes[i] = int32(i % 25)
	}
	for _, vk := range []ivcore.VcovKind{ivcore.IID, ivcore.HC1, ivcore.Cluster} {
		var dims []ivcore.ClusterDim
		if vk == ivcore.Cluster {
			dims = []ivcore.ClusterDim{{Name: "market", Codes: codes, G: 25}}
		}
		m, md := dgModel(cols, "y", []string{"x"}, nil, names, dims)
		dg, err := DiagnoseModel(m, md, vk, nil, Options{Parts: PartAndersonRubin | PartReducedForm, ARNulls: []float64{0}})
		if err != nil {
			t.Fatal(err)
		}
		ar, rf := dg.AndersonRubin.Tests[0], dg.ReducedForm.Joint
		if math.Abs(float64(ar.Value-rf.Value)) > 1e-9*float64(rf.Value) || ar.DF2 != rf.DF2 {
			t.Errorf("%v: AR(0) = %g on %s, reduced-form F = %g on %s", vk, float64(ar.Value), ar.Dist, float64(rf.Value), rf.Dist)
		}
		// And the reduced form equals ivcore's OLS of y on all instruments.
		ols, err := ivcore.Estimate(m, ivcore.Model{Y: md.Y, Exog: md.Z()}, ivcore.OLS, vk)
		if err != nil {
			t.Fatal(err)
		}
		for a, c := range dg.ReducedForm.Shifters {
			j := len(md.Exog) + a
			if math.Abs(float64(c.Estimate)-ols.Coef[j]) > 1e-10 || math.Abs(float64(c.StdError)-ols.SE(j)) > 1e-10*ols.SE(j) {
				t.Errorf("%v: %s %g (%g), ivcore %g (%g)", vk, c.Name, float64(c.Estimate), float64(c.StdError), ols.Coef[j], ols.SE(j))
			}
		}
	}
}
