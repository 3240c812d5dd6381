package supplyshifters

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"

	"priceiv/demand"
	"priceiv/ivcore"
)

// TestCountCombinations checks the number of combinations against the
// binomial sums Σ_k C(n, k) (common practice: Pascal's triangle; 2^n - 1
// when every size is allowed) and against the enumeration itself.
func TestCountCombinations(t *testing.T) {
	for i, test := range []struct {
		n, maxSet, want int
		source          string
	}{
		{5, 3, 25, "5 + 10 + 10"},
		{5, 1, 5, "C(5,1)"},
		{4, 10, 15, "2^4 - 1 (maxSet above n)"},
		{12, 3, 298, "12 + 66 + 220"},
		{10, 3, 175, "10 + 45 + 120"},
		{12, 2, 78, "12 + 66"},
		{1, 3, 1, "C(1,1)"},
		{0, 3, 0, "no candidates"},
		{62, 62, 1<<62 - 1, "2^62 - 1, still an int64"},
		{64, 64, math.MaxInt64, "2^64 - 1 saturates"},
		{200, 100, math.MaxInt64, "saturates"},
	} {
		if got := CountCombinations(test.n, test.maxSet); got != test.want {
			t.Errorf("%d: CountCombinations(%d, %d) = %d, want %d (%s)", i, test.n, test.maxSet, got, test.want, test.source)
		}
		if test.want > 1000 {
			continue
		}
		combos := Combinations(test.n, test.maxSet)
		if len(combos) != test.want {
			t.Errorf("%d: Combinations(%d, %d) has %d entries, want %d", i, test.n, test.maxSet, len(combos), test.want)
		}
		seen := map[string]bool{}
		for _, c := range combos {
			if !slices.IsSorted(c) || len(slices.Compact(slices.Clone(c))) != len(c) || c[0] < 0 || c[len(c)-1] >= test.n || len(c) > test.maxSet {
				t.Errorf("%d: malformed combination %v", i, c)
			}
			key := fmt.Sprint(c)
			if seen[key] {
				t.Errorf("%d: combination %v listed twice", i, c)
			}
			seen[key] = true
		}
	}
}

// TestCheckCombinations checks the refusal of oversized screens: the
// count, and the two ways to narrow that it proposes (each itself within
// the limit, and the largest such).
func TestCheckCombinations(t *testing.T) {
	for i, test := range []struct {
		n, maxSet, limit           int
		count, fitSet, fitSetCount int
		fitCandidates              int
		words                      []string
	}{
		// 12 + 66 + 220 = 298 > 200; sets of 2: 78; 10 candidates: 175, 11: 231.
		{12, 3, 200, 298, 2, 78, 10, []string{"12 candidates", "up to 3", "298 combinations", "limit of 200", "at most 10 candidates", "to 2 (78 combinations)", "raise the limit to 298"}},
		// 30 singles alone exceed 20: only fewer candidates help.
		{30, 1, 20, 30, 0, 0, 20, []string{"30 combinations", "at most 20 candidates"}},
		// 9 + 36 + 84 + 126 = 255 > 100; sets of 2: 45; 7 candidates at 4: 98.
		{9, 4, 100, 255, 2, 45, 7, []string{"255 combinations", "at most 7 candidates", "to 2 (45 combinations)"}},
	} {
		err := CheckCombinations(test.n, test.maxSet, test.limit)
		var tm *TooManyCombinationsError
		if !errors.As(err, &tm) {
			t.Fatalf("%d: error %v, want *TooManyCombinationsError", i, err)
		}
		if tm.Count != test.count || tm.FitSet != test.fitSet || tm.FitSetCount != test.fitSetCount || tm.FitCandidates != test.fitCandidates {
			t.Errorf("%d: %+v, want count %d, fit set %d (%d), fit candidates %d", i, *tm, test.count, test.fitSet, test.fitSetCount, test.fitCandidates)
		}
		if tm.FitSet > 0 && CountCombinations(test.n, tm.FitSet) > test.limit || CountCombinations(tm.FitCandidates, test.maxSet) > test.limit {
			t.Errorf("%d: a proposed narrowing still exceeds the limit", i)
		}
		for _, w := range test.words {
			if !strings.Contains(err.Error(), w) {
				t.Errorf("%d: message lacks %q:\n%s", i, w, err)
			}
		}
	}
	if err := CheckCombinations(5, 3, 25); err != nil {
		t.Errorf("25 combinations within a limit of 25: %v", err)
	}
	if err := CheckCombinations(5, 0, 0); err != nil {
		t.Errorf("defaults (3, 200) with 5 candidates: %v", err)
	}
	for _, bad := range [][3]int{{0, 3, 200}, {5, -1, 200}, {5, 3, -2}} {
		if err := CheckCombinations(bad[0], bad[1], bad[2]); err == nil {
			t.Errorf("CheckCombinations%v: no error", bad)
		}
	}
}

// screenDesign builds the invented cold-brew test market of
// coldBrewPanel (generated truth) with every candidate as a shifter and
// the extra columns added to the panel.
func screenDesign(t *testing.T, candidates, controls []string, cluster bool, extra map[string][]float64) *demand.Design {
	t.Helper()
	p := coldBrewPanel(7)
	for name, x := range extra {
		p.AddNum(name, x)
	}
	spec := &demand.Spec{Quantity: "units", Price: "price", Shifters: candidates, Controls: controls, FE: []string{"store"}}
	if cluster {
		spec.Cluster = []string{"store"}
	}
	d, err := demand.Build(p, spec, 2)
	if err != nil {
		t.Fatal(err)
	}
	return d
}

func rowOf(t *testing.T, res *ScreenResult, shifters ...string) *ScreenRow {
	t.Helper()
	for i := range res.Rows {
		if slices.Equal(res.Rows[i].Shifters, shifters) {
			return &res.Rows[i]
		}
	}
	t.Fatalf("no row for %v", shifters)
	return nil
}

// TestScreenColdBrew screens the invented market of coldBrewPanel
// (generated truth: bean and freight valid and strong, label valid and
// weak, temperature moving demand directly) and checks that the verdicts
// follow the truth, that the table is ranked by the documented rule and
// that progress is reported for every combination.
func TestScreenColdBrew(t *testing.T) {
	cands := []string{"bean", "freight", "label", "temp"}
	d := screenDesign(t, cands, []string{"promo"}, true, nil)
	var calls []int
	res, err := Screen(d, nil, ScreenOptions{Progress: func(done, total int) {
		if total != 14 {
			t.Errorf("progress total %d, want 14", total)
		}
		calls = append(calls, done)
	}})
	if err != nil {
		t.Fatal(err)
	}
	// 4 + 6 + 4 = 14 combinations (binomial sum).
	if res.Combinations != 14 || len(res.Rows) != 14 || len(calls) != 14 || calls[13] != 14 || !slices.IsSorted(calls) {
		t.Fatalf("%d combinations, %d rows, progress %v; want 14", res.Combinations, len(res.Rows), calls)
	}
	if res.N != d.N || !strings.Contains(res.RowsNote, fmt.Sprintf("same %d rows", d.N)) {
		t.Errorf("rows note %q for %d rows", res.RowsNote, d.N)
	}
	if res.LeftOut != "controls" || res.VcovKind != "cluster" || res.Vcov == "" {
		t.Errorf("left out %q, vcov %q (%q)", res.LeftOut, res.VcovKind, res.Vcov)
	}
	// Generated truth: the valid strong pair is solid.
	if r := rowOf(t, res, "bean", "freight"); r.Verdict != VerdictSolid || !r.Strong || !(float64(r.JP) >= 0.05) {
		t.Errorf("{bean, freight}: %s, strong %v, J p %g; reasons %v", r.Verdict, r.Strong, float64(r.JP), r.Reasons)
	}
	// Generated truth: temperature with valid shifters is rejected by J.
	for _, set := range [][]string{{"bean", "temp"}, {"freight", "temp"}, {"bean", "freight", "temp"}} {
		r := rowOf(t, res, set...)
		if r.Verdict != VerdictSuspect || !(float64(r.JP) < 0.05) {
			t.Errorf("%v: %s, J p %g; temperature should be caught", set, r.Verdict, float64(r.JP))
		}
	}
	if r := rowOf(t, res, "bean", "freight", "temp"); len(r.Suspects) == 0 || r.Suspects[0] != "temp" {
		t.Errorf("{bean, freight, temp}: difference-in-J points first at %v, want temp; C tests %+v", r.Suspects, r.C)
	}
	// Generated truth: label alone is weak (its true first-stage effect
	// is 0.01 against a noise s.d. of 0.15).
	if r := rowOf(t, res, "label"); r.Verdict != VerdictWeak || r.Strong {
		t.Errorf("{label}: %s, effective F %g vs %g", r.Verdict, float64(r.EffectiveF), float64(r.Critical))
	}
	if r := rowOf(t, res, "bean"); r.Verdict != VerdictUsable || r.JDF != 0 || !math.IsNaN(float64(r.JP)) {
		t.Errorf("{bean}: %s, J df %d, p %g; a single strong valid shifter is usable, untestable", r.Verdict, r.JDF, float64(r.JP))
	}
	// Ranking rule: verdict class, then AR width, then F relative to its
	// critical value.
	for i := 1; i < len(res.Rows); i++ {
		a, b := &res.Rows[i-1], &res.Rows[i]
		if a.Rank != i || b.Rank != i+1 {
			t.Errorf("ranks %d, %d at positions %d, %d", a.Rank, b.Rank, i, i+1)
		}
		ca, cb := verdictClass[a.Verdict], verdictClass[b.Verdict]
		if ca > cb {
			t.Errorf("rank %d (%s) above rank %d (%s)", a.Rank, a.Verdict, b.Rank, b.Verdict)
		}
		wa, wb := float64(a.ARWidth), float64(b.ARWidth)
		if ca == cb && !math.IsNaN(wa) && !math.IsNaN(wb) && wa > wb {
			t.Errorf("rank %d has a wider AR set (%g) than rank %d (%g) within %s", a.Rank, wa, b.Rank, wb, a.Verdict)
		}
	}
	if res.Rows[0].Verdict != VerdictSolid {
		t.Errorf("best row %v is %s", res.Rows[0].Shifters, res.Rows[0].Verdict)
	}
}

// TestScreenMatchesFreshDesign checks the moment reuse: a screened row
// equals the diagnosis of a design built afresh with only its shifters
// (the other candidates as controls, or left out with DropLeftOut), to
// 1e-8 (property; no missing values, so the rows are the same).
func TestScreenMatchesFreshDesign(t *testing.T) {
	cands := []string{"bean", "freight", "label", "temp"}
	d := screenDesign(t, cands, []string{"promo"}, true, nil)
	for _, drop := range []bool{false, true} {
		res, err := Screen(d, cands, ScreenOptions{MaxSet: 2, DropLeftOut: drop, Workers: 1})
		if err != nil {
			t.Fatal(err)
		}
		for _, set := range [][]string{{"bean", "freight"}, {"label"}, {"freight", "temp"}} {
			r := rowOf(t, res, set...)
			controls := []string{"promo"}
			if !drop {
				for _, c := range cands {
					if !slices.Contains(set, c) {
						controls = append(controls, c)
					}
				}
			}
			fresh := screenDesign(t, set, controls, true, nil)
			fit, err := ivcore.Estimate(fresh.Moments, fresh.Model, ivcore.TSLS, ivcore.Cluster)
			if err != nil {
				t.Fatal(err)
			}
			dg, err := DiagnoseModel(fresh.Moments, fresh.Model, ivcore.Cluster, fit, Options{Parts: PartWeakIV | PartOverid})
			if err != nil {
				t.Fatal(err)
			}
			for _, c := range []struct {
				name      string
				got, want float64
			}{
				{"elasticity", float64(r.Elasticity), fit.Coef[0]},
				{"std error", float64(r.StdError), fit.SE(0)},
				{"effective F", float64(r.EffectiveF), float64(dg.WeakIV.Effective.F)},
				{"critical value", float64(r.Critical), float64(dg.WeakIV.Effective.Critical)},
			} {
				if !scalar.EqualWithinAbsOrRel(c.got, c.want, 1e-8, 1e-8) {
					t.Errorf("drop %v, %v: %s %.12g, fresh design %.12g", drop, set, c.name, c.got, c.want)
				}
			}
			if dg.Overid.Available && !scalar.EqualWithinAbsOrRel(float64(r.J), float64(dg.Overid.HansenJ.Value), 1e-8, 1e-8) {
				t.Errorf("drop %v, %v: J %.12g, fresh design %.12g", drop, set, float64(r.J), float64(dg.Overid.HansenJ.Value))
			}
		}
	}
}

// TestScreenARUnbounded screens a shifter that is pure noise (invented
// data) under HC1 errors, where the Anderson-Rubin set is found by
// numerical search: the search never crosses the critical value on one
// side at least, so the set is reported unbounded with its shape, the
// verdict is weak, and the screen ends.
func TestScreenARUnbounded(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 9))
	noise := make([]float64, 40*30)
	for i := range noise {
		noise[i] = rng.NormFloat64()
	}
	d := screenDesign(t, []string{"bean", "noise"}, []string{"promo"}, false, map[string][]float64{"noise": noise})
	res, err := Screen(d, nil, ScreenOptions{})
	if err != nil {
		t.Fatal(err)
	}
	r := rowOf(t, res, "noise")
	switch r.ARShape {
	case ShapeWholeLine, ShapeTwoRays, ShapeRay:
	default:
		t.Fatalf("{noise}: AR shape %q, want an unbounded shape; pieces %v", r.ARShape, r.ARPieces)
	}
	if r.ARLow != nil && r.ARHigh != nil {
		t.Errorf("{noise}: AR ends %v, %v; an unbounded set has an open end", *r.ARLow, *r.ARHigh)
	}
	if !math.IsInf(float64(r.ARWidth), 1) {
		t.Errorf("{noise}: AR width %g, want +Inf", float64(r.ARWidth))
	}
	if r.Verdict != VerdictWeak || !strings.Contains(strings.Join(r.Reasons, "; "), "Anderson-Rubin set is unbounded") {
		t.Errorf("{noise}: %s, %v", r.Verdict, r.Reasons)
	}
	if a := r.Diagnostics.AndersonRubin; a.Method != "numerical inversion" {
		t.Errorf("method %q under HC1", a.Method)
	}
	if res.Rows[len(res.Rows)-1].Shifters[0] != "noise" {
		t.Errorf("the noise shifter should rank last: %v", res.Rows[len(res.Rows)-1].Shifters)
	}
}

// TestScreenSigns checks the sign rule on invented data: a rebate column
// (minus the freight index) lowers price, so it is flagged wrong-sign
// unless declared, and declared it behaves like freight.
func TestScreenSigns(t *testing.T) {
	p := coldBrewPanel(7)
	fr, _ := p.Float("freight")
	rebate := make([]float64, len(fr))
	for i, x := range fr {
		rebate[i] = -x
	}
	d := screenDesign(t, []string{"bean", "rebate"}, []string{"promo"}, true, map[string][]float64{"rebate": rebate})
	res, err := Screen(d, nil, ScreenOptions{})
	if err != nil {
		t.Fatal(err)
	}
	for _, set := range [][]string{{"rebate"}, {"bean", "rebate"}} {
		r := rowOf(t, res, set...)
		if r.Verdict != VerdictWrongSign || !slices.Equal(r.SignificantWrong, []string{"rebate"}) || !strings.HasPrefix(r.Sign, "wrong: rebate") {
			t.Errorf("%v: %s, sign %q, significant %v", set, r.Verdict, r.Sign, r.SignificantWrong)
		}
	}
	res, err = Screen(d, nil, ScreenOptions{ExpectSign: map[string]int{"rebate": -1}})
	if err != nil {
		t.Fatal(err)
	}
	if r := rowOf(t, res, "bean", "rebate"); r.Verdict != VerdictSolid || r.Sign != SignAsExpected {
		t.Errorf("declared rebate: %s, sign %q, reasons %v", r.Verdict, r.Sign, r.Reasons)
	}
	if res.Rows[len(res.Rows)-1].Verdict == VerdictWrongSign {
		t.Errorf("a declared sign is still flagged")
	}
}

// TestScreenRefusals checks the errors for candidates that are not
// shifters of the design, oversized screens, and several endogenous
// regressors.
func TestScreenRefusals(t *testing.T) {
	d := screenDesign(t, []string{"bean", "freight", "label", "temp"}, []string{"promo"}, true, nil)
	_, err := Screen(d, []string{"bean", "fraight", "tmp"}, ScreenOptions{})
	for _, w := range []string{`"fraight" (closest: freight)`, `"tmp" (closest: temp)`, "shifters: bean, freight, label, temp"} {
		if err == nil || !strings.Contains(err.Error(), w) {
			t.Errorf("unknown candidates: error %v lacks %q", err, w)
		}
	}
	if _, err := Screen(d, []string{"bean", "bean"}, ScreenOptions{}); err == nil || !strings.Contains(err.Error(), `"bean" is named twice`) {
		t.Errorf("repeated candidate: %v", err)
	}
	_, err = Screen(d, nil, ScreenOptions{MaxCombinations: 10})
	var tm *TooManyCombinationsError
	if !errors.As(err, &tm) || tm.Count != 14 || tm.FitSet != 2 || tm.FitSetCount != 10 {
		t.Errorf("14 combinations over a limit of 10: %v (%+v)", err, tm)
	}

	spec := &demand.Spec{Outcome: "units", Endogenous: []string{"price", "label"}, Instruments: []string{"bean", "freight", "temp"}, FE: []string{"store"}}
	d2, err := demand.Build(coldBrewPanel(7), spec, 2)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := Screen(d2, nil, ScreenOptions{}); err == nil || !strings.Contains(err.Error(), "this model has 2") {
		t.Errorf("two endogenous regressors: %v", err)
	}
}

// TestScreenMissingRows checks that the rows note counts the rows left out
// for a missing candidate value (invented data: every tenth label missing).
func TestScreenMissingRows(t *testing.T) {
	p := coldBrewPanel(7)
	lab, _ := p.Float("label")
	holes := slices.Clone(lab)
	for i := 0; i < len(holes); i += 10 {
		holes[i] = math.NaN()
	}
	d := screenDesign(t, []string{"bean", "freight", "label_holes"}, []string{"promo"}, true, map[string][]float64{"label_holes": holes})
	res, err := Screen(d, nil, ScreenOptions{MaxSet: 1})
	if err != nil {
		t.Fatal(err)
	}
	if res.N != 1080 || !strings.Contains(res.RowsNote, "same 1080 rows") || !strings.Contains(res.RowsNote, "120 row(s) were left out for a missing candidate value") {
		t.Errorf("n %d, note %q; want 1080 rows and 120 left out", res.N, res.RowsNote)
	}
	if len(res.Rows) != 3 || res.MaxSet != 1 {
		t.Errorf("%d rows, max set %d", len(res.Rows), res.MaxSet)
	}
}

// TestScreenConstantCandidate checks that a candidate constant within the
// fixed effects (the shelf fee of coldBrewPanel, fixed per store) stops the
// screen with a message naming it, before any combination is fitted.
func TestScreenConstantCandidate(t *testing.T) {
	d := screenDesign(t, []string{"bean", "shelf_fee"}, []string{"promo"}, true, nil)
	_, err := Screen(d, nil, ScreenOptions{})
	if err == nil || !strings.Contains(err.Error(), "the candidates cannot be screened together") || !strings.Contains(err.Error(), `"shelf_fee" has no variation left after the fixed effects`) {
		t.Errorf("constant candidate: %v", err)
	}
	if !errors.Is(err, ivcore.ErrNoVariation) {
		t.Errorf("error %v does not unwrap to ivcore.ErrNoVariation", err)
	}
}
