package demand

import (
	"errors"
	"math"
	"strings"
	"testing"
)

func TestInteractEqualsByProduct(t *testing.T) {
	// With product × store effects and no shared control every column of
	// the pooled model is zero outside its own product's rows, so the
	// moment matrices are block diagonal and the pooled 2SLS coefficients
	// equal the per-product ones (algebra of block-diagonal systems,
	// common practice), to rounding.
	p := linePanel(lineConfig{E: diagE(-2.2, -1.4, -3.1), Stores: 9, Weeks: 25, Noise: 0.4, Seed: 11, ConstZ: -1})
	s := ownLineSpec()
	s.Controls = nil
	s.FE = []string{"product*store"}
	s.Vcov = "hc1"
	s.Cluster = nil
	by, err := EstimateByProduct(p, s, 1)
	if err != nil {
		t.Fatal(err)
	}
	in, err := EstimateInteracted(p, s, 1)
	if err != nil {
		t.Fatal(err)
	}
	for k := range by.Elasticities {
		a, b := by.Elasticities[k], in.Elasticities[k]
		if a.Product != b.Product || math.Abs(a.OwnPrice-b.OwnPrice) > 1e-10 {
			t.Errorf("%s: per-product %.14g, pooled %s %.14g (tol 1e-10)", a.Product, a.OwnPrice, b.Product, b.OwnPrice)
		}
		if b.N != 9*25 || b.FirstStageF <= 0 {
			t.Errorf("%s: n %d, first-stage F %g", b.Product, b.N, b.FirstStageF)
		}
	}
	if in.Mode != "interact product" || in.Equal == nil || in.Equal.Q != 2 {
		t.Fatalf("mode %q, equality test %+v", in.Mode, in.Equal)
	}
	// Far apart elasticities: one shared value is rejected.
	if in.Equal.P > 1e-6 {
		t.Errorf("equality of -2.2, -1.4, -3.1 not rejected: p = %g", in.Equal.P)
	}
}

func TestInteractEqualityWald(t *testing.T) {
	// Two products: the Wald statistic of e1 = e2 is
	// (e1 - e2)² / (V11 + V22 - 2 V12) (Greene, Econometric Analysis,
	// 7th ed., eq. 5-17 with one restriction), computed here by hand from
	// the fit's covariance.
	p := linePanel(lineConfig{E: diagE(-2, -2), Stores: 30, Weeks: 20, Noise: 0.5, Seed: 12, ConstZ: -1})
	s := ownLineSpec()
	s.FE = []string{"product*store"}
	in, err := EstimateInteracted(p, s, 1)
	if err != nil {
		t.Fatal(err)
	}
	f := in.Fits[0].Fit
	i, j := in.Fits[0].Index, in.Fits[1].Index
	d := f.Coef[i] - f.Coef[j]
	want := d * d / (f.Cov.At(i, i) + f.Cov.At(j, j) - 2*f.Cov.At(i, j))
	if math.Abs(in.Equal.Chi2-want) > 1e-10*want || in.Equal.Q != 1 || in.Equal.DF != 29 {
		t.Errorf("Wald %.14g (Q %d, df %d), by hand %.14g (tol 1e-10 relative), want Q 1 and df G-1 = 29", in.Equal.Chi2, in.Equal.Q, in.Equal.DF, want)
	}
	// Both generated at -2: the test does not reject at 1% (seeded draw).
	if in.Equal.P < 0.01 {
		t.Errorf("equal elasticities rejected: p = %g", in.Equal.P)
	}
}

func TestInteractSemiLogScale(t *testing.T) {
	// Semi-log form: e_k = b_k · mean price of product k over its rows
	// (Wooldridge, Introductory Econometrics, table 2.3).
	p := linePanel(lineConfig{E: diagE(-2, -3), Stores: 8, Weeks: 12, Noise: 0.2, Seed: 13, ConstZ: -1})
	s := ownLineSpec()
	s.Form = "semi-log"
	s.FE = []string{"product*store"}
	in, err := EstimateInteracted(p, s, 1)
	if err != nil {
		t.Fatal(err)
	}
	codes := p.Text["product"].Codes
	for k, pf := range in.Fits {
		sum, n := 0.0, 0
		for r, c := range codes {
			if int(c) == k {
				sum += p.Num["price"][r]
				n++
			}
		}
		mean := sum / float64(n)
		e := in.Elasticities[k]
		if math.Abs(pf.Scale-mean) > 1e-12*mean || math.Abs(e.OwnPrice-mean*pf.Fit.Coef[pf.Index]) > 1e-12 {
			t.Errorf("%s: scale %.14g, mean price %.14g; elasticity %g", e.Product, pf.Scale, mean, e.OwnPrice)
		}
		if !strings.HasPrefix(e.At, "product mean price") {
			t.Errorf("%s: at %q", e.Product, e.At)
		}
	}
}

func TestInteractMissingAndErrors(t *testing.T) {
	p := linePanel(lineConfig{E: diagE(-2, -3), Stores: 8, Weeks: 12, Noise: 0.2, Seed: 14, ConstZ: -1})
	for _, r := range []int{0, 5, 50} {
		p.Num["units"][r] = math.NaN()
	}
	p.Num["zown"][7] = math.NaN()
	s := ownLineSpec()
	s.FE = []string{"product*store"}
	in, err := EstimateInteracted(p, s, 1)
	if err != nil {
		t.Fatal(err)
	}
	want := map[string]int{"units": 3, "zown": 1}
	for _, d := range in.Dropped {
		if d.Reason == "missing value" && want[d.Column] != d.Rows {
			t.Errorf("dropped %d rows for %s, want %d", d.Rows, d.Column, want[d.Column])
		}
		delete(want, d.Column)
	}
	if len(want) > 0 || in.N != p.N-4 {
		t.Errorf("missing drops not reported: %v; n %d of %d", want, in.N, p.N)
	}

	one := p.Subset(func() []bool {
		k := make([]bool, p.N)
		for r, c := range p.Text["product"].Codes {
			k[r] = c == 0
		}
		return k
	}())
	if _, err := EstimateInteracted(one, s, 1); err == nil || !errors.Is(err, ErrSpec) || !strings.Contains(err.Error(), "at least two products") {
		t.Errorf("one product: error %v", err)
	}
	s.FE = []string{"store"}
	in, err = EstimateInteracted(p, s, 1)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(strings.Join(in.Notes, " "), "share one demand level") {
		t.Errorf("no note about product levels without a product effect: %q", in.Notes)
	}
}
