package demand

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// lineConfig describes an invented product line for these tests: log
// units of product i in store s, week t are
//
//	ln q_i = a_is + Σ_j E[i][j] ln p_j + 0.2 ctl + noise·(u_i + ω_st)
//	ln p_i = 1 + Pi[i]·zown_i + 0.05·zcom + 0.5·noise·(u_i + ω_st) + 0.02·v_i
//
// zown is a product-specific shifter (differs across products in a store
// and week), zcom a common one. With noise = 0 the demand equation holds
// exactly, so 2SLS must return E to rounding.
type lineConfig struct {
	E      [][]float64
	Pi     []float64 // first-stage effect of zown per product (default 0.1)
	Stores int
	Weeks  int
	Noise  float64
	Seed   uint64
	// Skip drops the row of product i in store s, week t.
	Skip func(i, s, t int) bool
	// ConstZ makes zown constant for the product index given (-1: none).
	ConstZ int
}

func linePanel(c lineConfig) *Panel {
	rng := rand.New(rand.NewPCG(c.Seed, 7))
	nP := len(c.E)
	var prod, store []int32
	var week, units, price, zown, zcom, ctl []float64
	a := make([][]float64, nP)
	for i := range a {
		a[i] = make([]float64, c.Stores)
		for s := range a[i] {
			a[i][s] = 3 + 0.3*rng.NormFloat64()
		}
	}
	lp := make([]float64, nP)
	z := make([]float64, nP)
	u := make([]float64, nP)
	for s := 0; s < c.Stores; s++ {
		for t := 0; t < c.Weeks; t++ {
			zc := 10 * rng.NormFloat64()
			om := rng.NormFloat64()
			for i := range nP {
				z[i] = 10 * rng.NormFloat64()
				if i == c.ConstZ {
					z[i] = 5
				}
				u[i] = rng.NormFloat64()
				pi := 0.1
				if c.Pi != nil {
					pi = c.Pi[i]
				}
				lp[i] = 1 + pi*z[i] + 0.05*zc + 0.5*c.Noise*(u[i]+om) + 0.02*rng.NormFloat64()
			}
			for i := range nP {
				x := rng.NormFloat64()
				lq := a[i][s] + 0.2*x + c.Noise*(u[i]+om)
				for j := range nP {
					lq += c.E[i][j] * lp[j]
				}
				if c.Skip != nil && c.Skip(i, s, t) {
					continue
				}
				prod = append(prod, int32(i))
				store = append(store, int32(s))
				week = append(week, float64(t+1))
				units = append(units, math.Exp(lq))
				price = append(price, math.Exp(lp[i]))
				zown = append(zown, z[i])
				zcom = append(zcom, zc)
				ctl = append(ctl, x)
			}
		}
	}
	p := NewPanel("line.csv", len(week))
	names := make([]string, nP)
	for i := range names {
		names[i] = string(rune('A' + i))
	}
	stores := make([]string, c.Stores)
	for s := range stores {
		stores[s] = fmt.Sprintf("S%02d", s)
	}
	p.AddText("product", &TextColumn{Codes: prod, Levels: names})
	p.AddText("store", &TextColumn{Codes: store, Levels: stores})
	p.AddNum("week", week)
	p.AddNum("units", units)
	p.AddNum("price", price)
	p.AddNum("zown", zown)
	p.AddNum("zcom", zcom)
	p.AddNum("ctl", ctl)
	return p
}

func diagE(e ...float64) [][]float64 {
	m := make([][]float64, len(e))
	for i := range m {
		m[i] = make([]float64, len(e))
		m[i][i] = e[i]
	}
	return m
}

func ownLineSpec() *Spec {
	return &Spec{Quantity: "units", Price: "price", Product: "product", Shifters: []string{"zown"},
		Controls: []string{"ctl"}, FE: []string{"store"}, Cluster: []string{"store"}}
}

func TestByProductExact(t *testing.T) {
	// Noise-free demand: the 2SLS estimate of each product's equation is
	// exactly its generating elasticity (the estimator is linear and
	// unbiased with a zero error; common practice), to rounding.
	for i, test := range []struct {
		e   []float64
		tol float64
	}{
		{[]float64{-2.4, -1.5}, 1e-9},
		{[]float64{-3, -0.8, 0.5}, 1e-9},
	} {
		p := linePanel(lineConfig{E: diagE(test.e...), Stores: 12, Weeks: 20, Seed: uint64(i + 1), ConstZ: -1})
		tb, err := EstimateByProduct(p, ownLineSpec(), 1)
		if err != nil {
			t.Fatalf("%d: %v", i, err)
		}
		if len(tb.Elasticities) != len(test.e) {
			t.Fatalf("%d: %d rows, want %d", i, len(tb.Elasticities), len(test.e))
		}
		for k, row := range tb.Elasticities {
			if math.Abs(row.OwnPrice-test.e[k]) > test.tol {
				t.Errorf("%d %s: elasticity %.12g, want %g (tol %g)", i, row.Product, row.OwnPrice, test.e[k], test.tol)
			}
			if row.N != 12*20 || row.Failed || row.Band != "wald" || tb.Fits[k] == nil {
				t.Errorf("%d %s: n %d failed %v band %q fit %v", i, row.Product, row.N, row.Failed, row.Band, tb.Fits[k])
			}
			// One shifter: the effective F is the robust first-stage F.
			if row.EffectiveF == nil || *row.EffectiveF != row.FirstStageF {
				t.Errorf("%d %s: effective F %v, first-stage F %v", i, row.Product, row.EffectiveF, row.FirstStageF)
			}
		}
		if tb.N != len(test.e)*12*20 || tb.Mode != "by product" || tb.Estimator != "2sls" || tb.Vcov != "cluster" {
			t.Errorf("%d: table n %d mode %q estimator %q vcov %q", i, tb.N, tb.Mode, tb.Estimator, tb.Vcov)
		}
	}
}

func TestByProductFailedRow(t *testing.T) {
	// Product B's shifter is constant: its regression cannot be fitted,
	// but A and C still are, and B's row says why.
	p := linePanel(lineConfig{E: diagE(-2, -2.5, -3), Stores: 10, Weeks: 15, Noise: 0.1, Seed: 3, ConstZ: 1})
	tb, err := EstimateByProduct(p, ownLineSpec(), 1)
	if err != nil {
		t.Fatal(err)
	}
	for k, row := range tb.Elasticities {
		if (k == 1) != row.Failed {
			t.Errorf("%s: failed = %v", row.Product, row.Failed)
		}
	}
	b := tb.Elasticities[1]
	if len(b.Warnings) != 1 || !strings.Contains(b.Warnings[0], `"zown"`) || !strings.Contains(b.Warnings[0], "no variation") {
		t.Errorf("failed row warnings %q, want the no-variation reason naming zown", b.Warnings)
	}
	if tb.Fits[1] != nil || tb.N != 2*10*15 {
		t.Errorf("fit of failed row %v, table n %d", tb.Fits[1], tb.N)
	}
}

func TestByProductErrors(t *testing.T) {
	p := linePanel(lineConfig{E: diagE(-2, -2.5), Stores: 6, Weeks: 8, Noise: 0.1, Seed: 4, ConstZ: -1})
	for i, test := range []struct {
		edit func(s *Spec)
		want string
		is   error
	}{
		{func(s *Spec) { s.Product = "" }, "needs the product column", ErrSpec},
		{func(s *Spec) { s.Product = "prodct" }, `no column named "prodct"`, ErrUnknownColumn},
		{func(s *Spec) { s.Cluster = []string{"product"} }, "one cluster per product", ErrSpec},
		{func(s *Spec) { s.Shifters = []string{"zowm"} }, `no column named "zowm"`, ErrUnknownColumn},
		{func(s *Spec) { s.Shifters = nil }, "excluded instrument", nil},
		{func(s *Spec) { s.Shifters = []string{"week"}; s.FE = []string{"week"} }, "no product could be estimated", nil},
		{func(s *Spec) {
			*s = Spec{Outcome: "units", Endogenous: []string{"price"}, Instruments: []string{"zown"}, Product: "product"}
		}, "needs the demand form", ErrSpec},
	} {
		s := ownLineSpec()
		test.edit(s)
		_, err := EstimateByProduct(p, s, 1)
		if err == nil || !strings.Contains(err.Error(), test.want) || (test.is != nil && !errors.Is(err, test.is)) {
			t.Errorf("%d: error %v, want one containing %q (is %v)", i, err, test.want, test.is)
		}
	}
}

func TestByProductWarnings(t *testing.T) {
	// Product A: a shifter with a tiny first stage (weak); B: demand
	// sloping up (positive elasticity); C: a shifter that lowers price.
	// Eight stores are too few clusters. Thresholds: F < 10 (Staiger &
	// Stock 1997) and fewer than 30 clusters (Cameron & Miller 2015).
	p := linePanel(lineConfig{E: diagE(-2, 0.8, -0.5), Pi: []float64{0.0004, 0.1, -0.1}, Stores: 8, Weeks: 30, Noise: 0.3, Seed: 5, ConstZ: -1})
	tb, err := EstimateByProduct(p, ownLineSpec(), 1)
	if err != nil {
		t.Fatal(err)
	}
	for k, want := range [][]string{
		{"weak first stage", "only 8 clusters"},
		{"positive own-price elasticity", "only 8 clusters"},
		{`shifter "zown" lowers this price`, "inelastic estimate", "only 8 clusters"},
	} {
		row := tb.Elasticities[k]
		all := strings.Join(row.Warnings, " | ")
		for _, w := range want {
			if !strings.Contains(all, w) {
				t.Errorf("%s (e %.3f, F %.2f): warnings %q lack %q", row.Product, row.OwnPrice, row.FirstStageF, all, w)
			}
		}
	}
}
