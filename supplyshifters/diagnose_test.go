package supplyshifters

import (
	"bytes"
	"encoding/json"
	"errors"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/floats/scalar"

	"priceiv/demand"
	"priceiv/ivcore"
)

// coldBrewPanel draws an invented cold-brew coffee market (generated
// truth): 40 stores × 30 weeks,
//
//	ln p = a_s + 0.30 bean + 0.15 freight + 0.01 label + 0.02 temp + v
//	ln q = b_s - 1.8 ln p + 0.08 temp + u,   u = 0.7 v + e
//
// The bean and freight indices are valid strong shifters, the label
// index is weak, the temperature moves demand directly (an invalid
// shifter), and the shelf fee is constant within each store.
func coldBrewPanel(seed uint64) *demand.Panel {
	const stores, weeks = 40, 30
	n := stores * weeks
	rng := rand.New(rand.NewPCG(seed, 42))
	p := demand.NewPanel("cold-brew test market", n)
	cols := map[string][]float64{}
	for _, s := range []string{"store", "week", "units", "price", "bean", "freight", "label", "temp", "shelf_fee", "promo"} {
		cols[s] = make([]float64, n)
	}
	fee := make([]float64, stores)
	sa, sb := make([]float64, stores), make([]float64, stores)
	for s := range fee {
		fee[s] = 1 + rng.Float64()
		sa[s] = 0.3 * rng.NormFloat64()
		sb[s] = 5 + 0.5*rng.NormFloat64()
	}
	bean := make([]float64, weeks)
	for w := range bean {
		bean[w] = 2 * rng.NormFloat64()
	}
	i := 0
	for s := 0; s < stores; s++ {
		for w := 0; w < weeks; w++ {
			freight := 2*rng.NormFloat64() + 0.1*float64(s%4)
			label := rng.NormFloat64()
			temp := 10 * rng.NormFloat64()
			v := 0.15 * rng.NormFloat64()
			u := 0.7*v + 0.2*rng.NormFloat64()
			promo := 0.0
			if rng.Float64() < 0.2 {
				promo = 1
			}
			lp := 1 + sa[s] + 0.3*(bean[w]+0.3*rng.NormFloat64()) + 0.15*freight + 0.01*label + 0.02*temp - 0.1*promo + v
			lq := sb[s] - 1.8*lp + 0.08*temp + 0.2*promo + u
			cols["store"][i], cols["week"][i] = float64(s), float64(w)
			cols["price"][i], cols["units"][i] = math.Exp(lp), math.Exp(lq)
			cols["bean"][i] = bean[w] + 0.3*rng.NormFloat64()
			cols["freight"][i], cols["label"][i], cols["temp"][i] = freight, label, temp
			cols["shelf_fee"][i], cols["promo"][i] = fee[s], promo
			i++
		}
	}
	for _, s := range []string{"store", "week", "units", "price", "bean", "freight", "label", "temp", "shelf_fee", "promo"} {
		p.AddNum(s, cols[s])
	}
	return p
}

func coldBrewDesign(t *testing.T, shifters []string, est string) (*demand.Design, *ivcore.Fit) {
	t.Helper()
	spec := &demand.Spec{Quantity: "units", Price: "price", Shifters: shifters, Controls: []string{"promo"},
		FE: []string{"store"}, Cluster: []string{"store"}, Estimator: est}
	d, err := demand.Build(coldBrewPanel(7), spec, 2)
	if err != nil {
		t.Fatal(err)
	}
	fit, _, err := d.Fit()
	if err != nil {
		t.Fatal(err)
	}
	return d, fit
}

// TestDiagnoseColdBrew runs the whole diagnosis on the invented market
// (generated truth) and checks what the truth implies: the invalid
// temperature shifter is pointed at by the difference-in-J test, the valid
// strong shifters are not, every sign is as expected, and the JSON holds
// the agreed keys. It also checks the grouped estimator against ivcore
// (property: the grouped slope is the IV estimate with the group indicator
// as instrument, with the same cluster-robust standard error), raw and
// within the store effects.
func TestDiagnoseColdBrew(t *testing.T) {
	d, fit := coldBrewDesign(t, []string{"bean", "freight", "label", "temp"}, "")
	dg, err := Diagnose(d, fit, Options{Subsets: [][]string{{"label", "temp"}}})
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range dg.FirstStage[0].Shifters {
		if e.SignCheck != SignAsExpected && (e.Name == "bean" || e.Name == "freight") {
			t.Errorf("%s: sign check %q", e.Name, e.SignCheck)
		}
	}
	if !dg.Overid.Available || float64(dg.Overid.HansenJ.P) >= 0.05 {
		t.Errorf("Hansen J %g (p %g): the invalid temperature shifter should be rejected", float64(dg.Overid.HansenJ.Value), float64(dg.Overid.HansenJ.P))
	}
	for _, c := range dg.Overid.C {
		key := strings.Join(c.Shifters, ",")
		switch key {
		case "temp", "label,temp":
			if float64(c.P) >= 0.05 {
				t.Errorf("C test of {%s}: p = %g, should point at temperature", key, float64(c.P))
			}
		case "bean", "freight":
			if float64(c.P) < 0.05 {
				t.Errorf("C test of {%s}: p = %g, a valid shifter was flagged", key, float64(c.P))
			}
		}
	}
	if len(dg.Overid.C) != 5 {
		t.Errorf("%d C tests, want 4 single ones and 1 subset", len(dg.Overid.C))
	}

	// Grouped estimator against ivcore: the IV estimate of y on x with the
	// group indicator (and an intercept) as the only instrument.
	y, x := d.Model.Y, d.Model.Endog[0]
	for _, g := range dg.Grouped {
		if !g.Available {
			t.Errorf("%s %s: %s", g.Shifter, g.Version, g.Reason)
			continue
		}
		s := d.Moments.Index(g.Shifter)
		src, absorbed := d.Raw, 0
		if g.Version == "within" {
			src, absorbed = d.Cols, d.Absorption.DoF
		}
		ind := make([]float64, d.N)
		ones := make([]float64, d.N)
		for i, v := range src[s] {
			ones[i] = 1
			if v > float64(g.Cut) {
				ind[i] = 1
			}
		}
		var dims []ivcore.ClusterDim
		for _, cb := range d.Moments.Clusters {
			dim := cb.Dim
			if g.Version == "raw" {
				dim.NestedDoF = 0
			}
			dims = append(dims, dim)
		}
		m := ivcore.Accumulate([][]float64{src[y], src[x], ones, ind}, []string{"y", "x", "1", "d"}, dims, 2)
		m.AbsorbedDoF = absorbed
		iv, err := ivcore.Estimate(m, ivcore.Model{Y: 0, Endog: []int{1}, Exog: []int{2}, Instr: []int{3}}, ivcore.TSLS, ivcore.Cluster)
		if err != nil {
			t.Fatal(err)
		}
		if !scalar.EqualWithinAbsOrRel(float64(g.Slope), iv.Coef[0], 1e-9, 1e-9) || !scalar.EqualWithinAbsOrRel(float64(g.StdError), iv.SE(0), 1e-8, 1e-8) {
			t.Errorf("%s %s: grouped %g (%g), IV with indicator %g (%g)", g.Shifter, g.Version, float64(g.Slope), float64(g.StdError), iv.Coef[0], iv.SE(0))
		}
	}

	js, err := json.Marshal(dg)
	if err != nil {
		t.Fatal(err)
	}
	var back map[string]any
	if err := json.Unmarshal(js, &back); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"first_stage", "weak_iv", "overid", "endogeneity", "anderson_rubin", "grouped", "reduced_form", "warnings"} {
		if back[k] == nil {
			t.Errorf("JSON misses %q", k)
		}
	}
	ar := back["anderson_rubin"].(map[string]any)
	for _, k := range []string{"ci_low", "ci_high", "shape"} {
		if _, ok := ar[k]; !ok {
			t.Errorf("JSON anderson_rubin misses %q", k)
		}
	}
	var txt, md bytes.Buffer
	if err := WriteText(&txt, dg); err != nil {
		t.Fatal(err)
	}
	if err := WriteMarkdown(&md, dg); err != nil {
		t.Fatal(err)
	}
	for _, out := range []string{txt.String(), md.String()} {
		for _, want := range []string{"first stage", "weak instruments", "over-identification", "endogeneity", "Anderson-Rubin", "grouped estimator", "reduced form", "Stock-Yogo", "difference-in-J", "temp"} {
			if !strings.Contains(out, want) {
				t.Errorf("output misses %q", want)
			}
		}
		if strings.Contains(out, "NaN") || strings.Contains(out, "%!") {
			t.Errorf("output has a formatting slip:\n%s", out)
		}
	}
	t.Logf("cold-brew: estimate %.3f, Hansen J %.2f (p %.2g), effective F %.1f (critical %.1f), AR %s\n%s",
		float64(dg.Estimate), float64(dg.Overid.HansenJ.Value), float64(dg.Overid.HansenJ.P),
		float64(dg.WeakIV.Effective.F), float64(dg.WeakIV.Effective.Critical), fmtSet(dg.AndersonRubin.Pieces), txt.String())
}

// TestStockYogoCellsPicked checks that the diagnostics quote the Stock &
// Yogo (2005) cells for the model's numbers of endogenous regressors and
// shifters and for its estimator: Table 5.1 (bias, from three shifters) and
// Table 5.2 (size) for 2SLS, Table 5.4 for LIML; 19.93 is the 10%
// maximal-size cell for one endogenous regressor and two shifters, 22.30
// for three (Stock & Yogo 2005, Table 5.2, checked against a second copy).
func TestStockYogoCellsPicked(t *testing.T) {
	for _, test := range []struct {
		shifters []string
		est      string
		kinds    []SYKind
		size10   float64 // 10% TSLS size cell (0: not expected)
	}{
		{[]string{"bean", "freight"}, "", []SYKind{TSLSBias, TSLSSize}, 19.93},
		{[]string{"bean", "freight", "label"}, "", []SYKind{TSLSBias, TSLSSize}, 22.30},
		{[]string{"bean", "freight", "label"}, "liml", []SYKind{LIMLSize}, 0},
	} {
		d, fit := coldBrewDesign(t, test.shifters, test.est)
		dg, err := Diagnose(d, fit, Options{Parts: PartWeakIV})
		if err != nil {
			t.Fatal(err)
		}
		var want []SYCheck
		for _, k := range test.kinds {
			for _, c := range StockYogo(k, 1, len(test.shifters)) {
				want = append(want, SYCheck{Table: k.String(), Threshold: c.Threshold, Critical: c.Value, Provenance: c.Provenance,
					Exceeded: float64(dg.WeakIV.CraggDonald.Value) > c.Value})
			}
		}
		got := dg.WeakIV.StockYogo
		if len(got) != len(want) || len(got) == 0 {
			t.Fatalf("%v %s: %d cells, want %d", test.shifters, test.est, len(got), len(want))
		}
		for i := range want {
			if got[i] != want[i] {
				t.Errorf("%v %s: cell %d = %+v, want %+v", test.shifters, test.est, i, got[i], want[i])
			}
		}
		if test.size10 > 0 {
			found := false
			for _, c := range got {
				if c.Table == TSLSSize.String() && c.Threshold == 0.10 {
					found = c.Critical == test.size10
				}
			}
			if !found {
				t.Errorf("%v: the 10%% TSLS size cell %.2f is missing", test.shifters, test.size10)
			}
		}
	}
}

// TestBadInput checks the errors and reasons for bad requests.
func TestBadInput(t *testing.T) {
	// A shifter constant within the fixed effects: the error comes from
	// ivcore's variation check and names the column.
	spec := &demand.Spec{Quantity: "units", Price: "price", Shifters: []string{"bean", "shelf_fee"}, FE: []string{"store"}, Cluster: []string{"store"}}
	d, err := demand.Build(coldBrewPanel(7), spec, 2)
	if err != nil {
		t.Fatal(err)
	}
	_, err = DiagnoseModel(d.Moments, d.Model, ivcore.Cluster, nil, Options{})
	var nv *ivcore.NoVariationError
	if !errors.As(err, &nv) || nv.Column != "shelf_fee" || !strings.Contains(err.Error(), "shelf_fee") {
		t.Errorf("constant shifter: got %v, want a no-variation error naming shelf_fee", err)
	}

	// A just-identified model asked for a J test of a subset.
	d, fit := coldBrewDesign(t, []string{"bean"}, "")
	dg, err := Diagnose(d, fit, Options{Subsets: [][]string{{"bean"}}, Parts: PartOverid})
	if err != nil {
		t.Fatal(err)
	}
	o := dg.Overid
	if o.Available || !strings.Contains(o.Reason, "exactly identified") || o.Sargan != nil || o.HansenJ != nil {
		t.Errorf("just identified: available %v, reason %q", o.Available, o.Reason)
	}
	if len(o.C) != 1 || o.C[0].Available || o.C[0].Reason == "" {
		t.Errorf("just identified: C tests %+v", o.C)
	}
	if _, err := json.Marshal(dg); err != nil {
		t.Errorf("JSON of a just-identified model: %v", err)
	}

	// Unknown names in the options, and models without shifters or
	// without an endogenous regressor.
	d, fit = coldBrewDesign(t, []string{"bean", "freight"}, "")
	for _, test := range []struct {
		opts Options
		want string
	}{
		{Options{Subsets: [][]string{{"bean", "diesel"}}}, `"diesel", which is not a shifter`},
		{Options{ExpectSign: map[string]int{"glass": -1}}, `"glass", which is not a column`},
		{Options{ExpectSign: map[string]int{"bean@volume": 1}}, `"volume", which is not a column`},
		{Options{ExpectSign: map[string]int{"bean": 2}}, "use +1"},
		{Options{Subsets: [][]string{{}}}, "empty subset"},
		{Options{Level: 1.5}, "outside (0, 1)"},
	} {
		if _, err := Diagnose(d, fit, test.opts); err == nil || !strings.Contains(err.Error(), test.want) {
			t.Errorf("options %+v: error %v, want it to mention %q", test.opts, err, test.want)
		}
	}
	// A sign for a column that is not a shifter here is ignored (one map
	// serves every subset of a screen).
	if _, err := Diagnose(d, fit, Options{ExpectSign: map[string]int{"promo": -1}, Parts: PartFirstStage}); err != nil {
		t.Errorf("sign for a non-shifter column: %v", err)
	}
	md := d.Model
	md.Instr = nil
	if _, err := DiagnoseModel(d.Moments, md, ivcore.HC1, nil, Options{}); err == nil || !strings.Contains(err.Error(), "no shifters") {
		t.Errorf("no shifters: %v", err)
	}
	md = d.Model
	md.Endog = nil
	if _, err := DiagnoseModel(d.Moments, md, ivcore.HC1, nil, Options{}); err == nil || !strings.Contains(err.Error(), "no endogenous") {
		t.Errorf("no endogenous regressor: %v", err)
	}
}

// TestExpectedSign checks the sign check: a shifter that lowers price is
// flagged with a warning unless it is declared to lower price (generated
// truth: the freight index is entered with its sign flipped).
func TestExpectedSign(t *testing.T) {
	p := coldBrewPanel(7)
	fr, _ := p.Float("freight")
	neg := make([]float64, len(fr))
	for i, v := range fr {
		neg[i] = -v
	}
	p.AddNum("freight_rebate", neg)
	spec := &demand.Spec{Quantity: "units", Price: "price", Shifters: []string{"bean", "freight_rebate"}, FE: []string{"store"}, Cluster: []string{"store"}}
	d, err := demand.Build(p, spec, 2)
	if err != nil {
		t.Fatal(err)
	}
	fit, _, err := d.Fit()
	if err != nil {
		t.Fatal(err)
	}
	for _, test := range []struct {
		sign  map[string]int
		check string
		warn  bool
	}{
		{nil, SignWrong, true},
		{map[string]int{"freight_rebate": -1}, SignAsExpected, false},
		{map[string]int{"freight_rebate@price": -1, "freight_rebate": 1}, SignAsExpected, false},
		{map[string]int{"freight_rebate": 0}, SignNotChecked, false},
	} {
		dg, err := Diagnose(d, fit, Options{ExpectSign: test.sign, Parts: PartFirstStage})
		if err != nil {
			t.Fatal(err)
		}
		e := dg.FirstStage[0].Shifters[1]
		warned := false
		for _, w := range dg.Warnings {
			if strings.Contains(w, "freight_rebate") && strings.Contains(w, "expected to raise") {
				warned = true
			}
		}
		if e.SignCheck != test.check || warned != test.warn {
			t.Errorf("signs %v: check %q (want %q), warned %v (want %v); %s", test.sign, e.SignCheck, test.check, warned, test.warn, e.Meaning)
		}
	}
}

// TestNumJSON checks that undefined numbers encode as null and decode back
// as NaN, so that json.Marshal of diagnostics never fails.
func TestNumJSON(t *testing.T) {
	in := struct {
		A, B, C Num
		D       *float64
	}{Num(math.NaN()), Num(math.Inf(-1)), Num(1.25), ptr(math.Inf(1))}
	b, err := json.Marshal(in)
	if err != nil {
		t.Fatal(err)
	}
	if string(b) != `{"A":null,"B":null,"C":1.25,"D":null}` {
		t.Errorf("got %s", b)
	}
	var out struct{ A, B, C Num }
	if err := json.Unmarshal(b, &out); err != nil {
		t.Fatal(err)
	}
	if !math.IsNaN(float64(out.A)) || out.C != 1.25 {
		t.Errorf("decoded %+v", out)
	}
}

// TestTwoWayCluster runs the diagnosis with two-way clustering by store
// and week (Cameron, Gelbach & Miller 2011): the first-stage F equals
// ivcore's, every part is computed, and the JSON encodes.
func TestTwoWayCluster(t *testing.T) {
	spec := &demand.Spec{Quantity: "units", Price: "price", Shifters: []string{"bean", "freight", "label"}, Controls: []string{"promo"},
		FE: []string{"store"}, Cluster: []string{"store", "week"}}
	d, err := demand.Build(coldBrewPanel(9), spec, 2)
	if err != nil {
		t.Fatal(err)
	}
	fit, fs, err := d.Fit()
	if err != nil {
		t.Fatal(err)
	}
	dg, err := Diagnose(d, fit, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if got := float64(dg.FirstStage[0].F.Value); !scalar.EqualWithinAbsOrRel(got, fs[0].F.F, 1e-9, 1e-9) {
		t.Errorf("two-way first-stage F %g, ivcore %g", got, fs[0].F.F)
	}
	if !dg.Overid.HansenJ.Value.Finite() || dg.AndersonRubin.Shape == "" || dg.Endogeneity == nil || len(dg.Grouped) != 6 {
		t.Errorf("two-way: J %v, AR %q, grouped %d", dg.Overid.HansenJ.Value, dg.AndersonRubin.Shape, len(dg.Grouped))
	}
	if _, err := json.Marshal(dg); err != nil {
		t.Fatal(err)
	}
	t.Logf("two-way: %s; F %.1f, Hansen J %.3f (p %.3f), AR %s (%s)", dg.Vcov, float64(dg.FirstStage[0].F.Value),
		float64(dg.Overid.HansenJ.Value), float64(dg.Overid.HansenJ.P), fmtSet(dg.AndersonRubin.Pieces), dg.AndersonRubin.Shape)
}
