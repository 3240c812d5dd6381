package demand

import (
	"errors"
	"math"
	"strings"
	"testing"

	"priceiv/ivcore"
)

func crossLineSpec() *Spec {
	return &Spec{Quantity: "units", Price: "price", Product: "product", Unit: "store", Time: "week",
		Shifters: []string{"zown", "zcom"}, Controls: []string{"ctl"}, FE: []string{"store"}, Cluster: []string{"store"}}
}

var lineE = [][]float64{
	{-2.4, 0.15, 0.30},
	{0.10, -1.9, 0.05},
	{0.25, 0.20, -3.1},
}

func TestCrossExact(t *testing.T) {
	// Noise-free demand system: each equation holds exactly, so 2SLS
	// returns the generating matrix to rounding (common practice: a
	// linear estimator with a zero error reproduces the coefficients).
	p := linePanel(lineConfig{E: lineE, Stores: 10, Weeks: 15, Seed: 21, ConstZ: -1})
	c, err := EstimateCross(p, crossLineSpec(), 1)
	if err != nil {
		t.Fatal(err)
	}
	for i := range lineE {
		for j := range lineE {
			if d := math.Abs(c.Matrix[i][j] - lineE[i][j]); d > 1e-8 {
				t.Errorf("[%d][%d] = %.12g, want %g (tol 1e-8)", i, j, c.Matrix[i][j], lineE[i][j])
			}
		}
		if c.N[i] != 150 {
			t.Errorf("equation %d: %d rows, want 150", i, c.N[i])
		}
	}
	if got := strings.Join(c.Specific, ",") + "|" + strings.Join(c.Common, ","); got != "zown|zcom" {
		t.Errorf("specific|common shifters %q, want zown|zcom", got)
	}
	if c.Instruments != 3*1+1 || c.Matched.Complete != 150 || c.Matched.Keys != 150 || len(c.Fits) != 3 {
		t.Errorf("instruments %d, matched %+v, fits %d", c.Instruments, c.Matched, len(c.Fits))
	}
}

func TestCrossRecoveryWithNoise(t *testing.T) {
	// With demand shocks that also move prices, every entry lies within
	// its band at the Bonferroni level 1 - 0.05/9 (common practice for
	// nine simultaneous bands), on a seeded draw.
	p := linePanel(lineConfig{E: lineE, Stores: 40, Weeks: 30, Noise: 0.3, Seed: 22, ConstZ: -1})
	s := crossLineSpec()
	s.Level = 1 - 0.05/9
	c, err := EstimateCross(p, s, 1)
	if err != nil {
		t.Fatal(err)
	}
	for i := range lineE {
		for j := range lineE {
			if lineE[i][j] < c.CILow[i][j] || lineE[i][j] > c.CIHigh[i][j] {
				t.Errorf("[%d][%d]: truth %g outside %.4f..%.4f (estimate %.4f)", i, j, lineE[i][j], c.CILow[i][j], c.CIHigh[i][j], c.Matrix[i][j])
			}
		}
	}
}

func TestCrossLinearScale(t *testing.T) {
	// Linear form: e_ij = b_ij · p̄_j / q̄_i over the equation's rows
	// (Wooldridge, Introductory Econometrics, table 2.3).
	p := linePanel(lineConfig{E: lineE, Stores: 8, Weeks: 12, Noise: 0.2, Seed: 23, ConstZ: -1})
	s := crossLineSpec()
	s.Form = "linear"
	c, err := EstimateCross(p, s, 1)
	if err != nil {
		t.Fatal(err)
	}
	codes := p.Text["product"].Codes
	mean := func(col string, k int) float64 {
		sum, n := 0.0, 0
		for r, cd := range codes {
			if int(cd) == k {
				sum += p.Num[col][r]
				n++
			}
		}
		return sum / float64(n)
	}
	for i := range lineE {
		f := c.Fits[i].Fit
		for j := range lineE {
			b := f.Coef[f.Index("price ["+c.Products[j]+"]")]
			want := b * mean("price", j) / mean("units", i)
			if math.Abs(c.Matrix[i][j]-want) > 1e-10*math.Abs(want) {
				t.Errorf("[%d][%d] = %.14g, want %.14g", i, j, c.Matrix[i][j], want)
			}
		}
	}
}

func TestCrossOrderCondition(t *testing.T) {
	// Only common shifters: 2 instruments for 3 prices.
	p := linePanel(lineConfig{E: lineE, Stores: 6, Weeks: 8, Noise: 0.2, Seed: 24, ConstZ: -1})
	s := crossLineSpec()
	s.Shifters = []string{"zcom", "week"}
	_, err := EstimateCross(p, s, 1)
	var oe *CrossOrderError
	if !errors.As(err, &oe) || !errors.Is(err, ivcore.ErrOrderCondition) {
		t.Fatalf("error %v, want a CrossOrderError", err)
	}
	for _, want := range []string{"3 prices to instrument", "only 2 instrument(s)", "zcom (common: 1)", "week (common: 1)", "A, B, C"} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("message %q lacks %q", err, want)
		}
	}
}

func TestCrossNoSharedKeys(t *testing.T) {
	// A is sold in weeks 1-10 only, B in weeks 11-20 only, C always:
	// no store-week holds all three.
	skip := func(i, s, t int) bool { return (i == 0 && t >= 10) || (i == 1 && t < 10) }
	p := linePanel(lineConfig{E: lineE, Stores: 5, Weeks: 20, Noise: 0.2, Seed: 25, ConstZ: -1, Skip: skip})
	_, err := EstimateCross(p, crossLineSpec(), 1)
	var ne *NoSharedKeysError
	if !errors.As(err, &ne) || !errors.Is(err, ErrNoSharedKeys) {
		t.Fatalf("error %v, want a NoSharedKeysError", err)
	}
	for _, want := range []string{"store × week", "only 0 of the 100 keys", "A & B: 0", "A & C: 50", "B & C: 50"} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("message %q lacks %q", err, want)
		}
	}
}

func TestCrossMatchedCounts(t *testing.T) {
	// Rows dropped by a fixed pattern; the counts are checked against a
	// brute-force count over the generating grid.
	const nS, nW = 7, 30
	skip := func(i, s, t int) bool { return (i*7+s*3+t*5)%11 == 0 }
	p := linePanel(lineConfig{E: lineE, Stores: nS, Weeks: nW, Noise: 0.2, Seed: 26, ConstZ: -1, Skip: skip})
	c, err := EstimateCross(p, crossLineSpec(), 1)
	if err != nil {
		t.Fatal(err)
	}
	var keys, complete int
	pairs := [3][3]int{}
	for s := 0; s < nS; s++ {
		for t := 0; t < nW; t++ {
			n := 0
			for i := range 3 {
				if !skip(i, s, t) {
					n++
					for j := range 3 {
						if !skip(j, s, t) {
							pairs[i][j]++
						}
					}
				}
			}
			if n > 0 {
				keys++
			}
			if n == 3 {
				complete++
			}
		}
	}
	if c.Matched.Keys != keys || c.Matched.Complete != complete {
		t.Errorf("matched %d of %d keys, want %d of %d", c.Matched.Complete, c.Matched.Keys, complete, keys)
	}
	for i := range 3 {
		for j := range 3 {
			if c.Matched.Pairs[i][j] != pairs[i][j] {
				t.Errorf("pairs[%d][%d] = %d, want %d", i, j, c.Matched.Pairs[i][j], pairs[i][j])
			}
		}
		if c.N[i] != complete {
			t.Errorf("equation %d: %d rows, want %d", i, c.N[i], complete)
		}
	}
}

func TestCrossErrors(t *testing.T) {
	p := linePanel(lineConfig{E: lineE, Stores: 6, Weeks: 8, Noise: 0.2, Seed: 27, ConstZ: -1})
	dup := linePanel(lineConfig{E: lineE, Stores: 6, Weeks: 8, Noise: 0.2, Seed: 27, ConstZ: -1})
	dup.Num["week"][3] = 1 // product A, store 0: week 2 relabelled as week 1
	neg := linePanel(lineConfig{E: lineE, Stores: 6, Weeks: 8, Noise: 0.2, Seed: 27, ConstZ: -1})
	neg.Num["price"][4] = -1
	for i, test := range []struct {
		p    *Panel
		edit func(s *Spec)
		want string
		is   error
	}{
		{p, func(s *Spec) { s.Unit = "" }, "set --unit", ErrSpec},
		{p, func(s *Spec) { s.Product = "" }, "needs the product column", ErrSpec},
		{dup, func(s *Spec) {}, "product \"A\" has two rows for store \"S00\" and week \"1\" (lines 2 and 5)", ErrDuplicateKey},
		{neg, func(s *Spec) {}, "line 6", ErrNonPositiveLog},
		{p, func(s *Spec) { s.Time = "wek" }, `no column named "wek"`, ErrUnknownColumn},
	} {
		s := crossLineSpec()
		test.edit(s)
		_, err := EstimateCross(test.p, s, 1)
		if err == nil || !strings.Contains(err.Error(), test.want) || !errors.Is(err, test.is) {
			t.Errorf("%d: error %v, want one containing %q (is %v)", i, err, test.want, test.is)
		}
	}
}
