package tests

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"

	"priceiv/demand"
	"priceiv/demo"
	"priceiv/ivcore"
	"priceiv/supplyshifters"
)

// hcDemoDesign builds the demo market's suggested model
// (Truth.SuggestedModel) with heteroskedasticity-robust errors, as
// `priceiv estimate --demo --vcov hc1` does.
func hcDemoDesign(t *testing.T) *demand.Design {
	t.Helper()
	m, err := demo.Generate(demo.DefaultConfig())
	if err != nil {
		t.Fatal(err)
	}
	sm := m.Truth.SuggestedModel
	spec := &demand.Spec{Quantity: sm.Quantity, Price: sm.Price, Form: sm.Form, Controls: sm.Controls,
		Shifters: sm.Shifters, Cluster: sm.Cluster, Vcov: "hc1"}
	for _, fe := range sm.FixedEffects {
		spec.FE = append(spec.FE, strings.Join(fe, "*"))
	}
	d, err := demand.Build(m.Panel, spec, 0)
	if err != nil {
		t.Fatal(err)
	}
	return d
}

// TestHC1OnePass checks the design rule "HC1-type statistics in one
// extra pass at most" on the demo market: the fit with --vcov hc1, its
// first stage and every part of the shifter diagnostics (first-stage
// details, weak-instrument statistics, over-identification, the
// control-function endogeneity test on transformed moments,
// Anderson-Rubin, reduced form) make exactly one pass over the rows of
// the design's moments between them. Before the fourth-order moments
// were cached, the same run made five (fit, first stage, the diagnostics'
// shared pass, forming the transformed rows, the control-function fit).
func TestHC1OnePass(t *testing.T) {
	d := hcDemoDesign(t)
	if k := len(d.Moments.Names); k > 12 {
		t.Fatalf("the demo design has %d columns; the one-pass path covers up to 12", k)
	}
	if got := d.Moments.RowPasses(); got != 0 {
		t.Fatalf("%d passes over the rows before any HC1 statistic, want 0", got)
	}
	fit, fs, err := d.Fit()
	if err != nil {
		t.Fatal(err)
	}
	if fit.Vcov.Kind != ivcore.HC1 || len(fs) != 1 {
		t.Fatalf("fit with %v covariance and %d first stages, want hc1 and 1", fit.Vcov.Kind, len(fs))
	}
	if got := d.Moments.RowPasses(); got != 1 {
		t.Errorf("fit and first stage: %d passes over the rows, want 1", got)
	}
	dg, err := supplyshifters.Diagnose(d, fit, supplyshifters.Options{Level: d.Level})
	if err != nil {
		t.Fatal(err)
	}
	if dg.Endogeneity == nil || dg.WeakIV == nil || dg.Overid == nil || dg.AndersonRubin == nil || dg.ReducedForm == nil || len(dg.FirstStage) == 0 {
		t.Fatalf("diagnostics incomplete: %+v", dg)
	}
	if !strings.Contains(dg.Vcov, "HC1") {
		t.Errorf("diagnostics use %q, want the HC1 covariance", dg.Vcov)
	}
	if got := d.Moments.RowPasses(); got != 1 {
		t.Errorf("fit, first stage and diagnostics: %d passes over the rows, want 1", got)
	}
}

// TestHC1CachedMatchesRowPass checks that the statistics from the cached
// fourth-order moments equal those of a pass over the rows per statistic
// (property: both compute Σ_i s_i s_iᵀ; only the order of the sums
// differs, so they agree to rounding, 1e-10 relative). The rows path is
// reached by giving the same columns plus one more than the one-pass cap
// of 12 columns that no model uses. Compared are the fit's coefficients
// and covariance, the first stage's F and every number of the
// diagnostics computed from the moments.
func TestHC1CachedMatchesRowPass(t *testing.T) {
	d := hcDemoDesign(t)
	m := d.Moments
	k := len(m.Names)
	rng := rand.New(rand.NewPCG(6, 4))
	cols := append([][]float64(nil), m.Cols...)
	names := append([]string(nil), m.Names...)
	for j := k; j < 13; j++ {
		c := make([]float64, m.N)
		for i := range c {
			c[i] = rng.NormFloat64()
		}
		cols = append(cols, c)
		names = append(names, fmt.Sprintf("unused%d", j))
	}
	wide := ivcore.Accumulate(cols, names, nil, 0)
	wide.AbsorbedDoF, wide.Scale = m.AbsorbedDoF, append(append([]float64(nil), m.Scale...), make([]float64, 13-k)...)

	const tol = 1e-10
	fitA, err := ivcore.Estimate(m, d.Model, ivcore.TSLS, ivcore.HC1)
	if err != nil {
		t.Fatal(err)
	}
	fitB, err := ivcore.Estimate(wide, d.Model, ivcore.TSLS, ivcore.HC1)
	if err != nil {
		t.Fatal(err)
	}
	for i := range fitA.Coef {
		for j := range fitA.Coef {
			a, b := fitA.Cov.At(i, j), fitB.Cov.At(i, j)
			scale := math.Sqrt(fitA.Cov.At(i, i) * fitA.Cov.At(j, j))
			if math.Abs(a-b) > tol*scale {
				t.Errorf("covariance (%d,%d): cached %.17g, rows %.17g", i, j, a, b)
			}
		}
	}
	fsA, err := ivcore.FirstStages(m, d.Model, ivcore.HC1)
	if err != nil {
		t.Fatal(err)
	}
	fsB, err := ivcore.FirstStages(wide, d.Model, ivcore.HC1)
	if err != nil {
		t.Fatal(err)
	}
	if !scalar.EqualWithinRel(fsA[0].F.F, fsB[0].F.F, tol) {
		t.Errorf("first-stage F: cached %.17g, rows %.17g", fsA[0].F.F, fsB[0].F.F)
	}
	dgA, err := supplyshifters.DiagnoseModel(m, d.Model, ivcore.HC1, fitA, supplyshifters.Options{Level: d.Level})
	if err != nil {
		t.Fatal(err)
	}
	dgB, err := supplyshifters.DiagnoseModel(wide, d.Model, ivcore.HC1, fitB, supplyshifters.Options{Level: d.Level})
	if err != nil {
		t.Fatal(err)
	}
	var ja, jb any
	for _, x := range []struct {
		dg  *supplyshifters.Diagnostics
		dst *any
	}{{dgA, &ja}, {dgB, &jb}} {
		raw, err := json.Marshal(x.dg)
		if err != nil {
			t.Fatal(err)
		}
		if err := json.Unmarshal(raw, x.dst); err != nil {
			t.Fatal(err)
		}
	}
	nums := 0
	maxRel := 0.0
	var walk func(path string, a, b any)
	walk = func(path string, a, b any) {
		switch av := a.(type) {
		case map[string]any:
			bv, ok := b.(map[string]any)
			if !ok || len(av) != len(bv) {
				t.Errorf("%s: structure differs", path)
				return
			}
			for key, v := range av {
				walk(path+"."+key, v, bv[key])
			}
		case []any:
			bv, ok := b.([]any)
			if !ok || len(av) != len(bv) {
				t.Errorf("%s: structure differs", path)
				return
			}
			for i, v := range av {
				walk(fmt.Sprintf("%s[%d]", path, i), v, bv[i])
			}
		case float64:
			bv, ok := b.(float64)
			nums++
			if ok && av != 0 {
				maxRel = math.Max(maxRel, math.Abs(av-bv)/math.Abs(av))
			}
			if !ok || !scalar.EqualWithinAbsOrRel(av, bv, 1e-300, tol) {
				t.Errorf("%s: cached %v, rows %v", path, a, b)
			}
		}
	}
	walk("diagnostics", ja, jb)
	if nums < 50 {
		t.Errorf("only %d numbers compared", nums)
	}
	if m.RowPasses() != 1 {
		t.Errorf("cached path: %d passes over the rows, want 1", m.RowPasses())
	}
	t.Logf("%d numbers agree (largest relative difference %.2g); passes over the rows: cached %d, one per statistic %d", nums, maxRel, m.RowPasses(), wide.RowPasses())
	if wide.RowPasses() < 4 {
		t.Errorf("the wide moments made %d passes; each HC1 statistic should make its own", wide.RowPasses())
	}
}
