package ivcore

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"
)

// Moments rebuilt from sums (FromSums, AddClusterBlocks, SetFourth) give
// the estimates and every covariance kind of the moments accumulated from
// the rows. Generated-truth data; the reference is Accumulate itself, so
// agreement to rounding (1e-10 relative) is the check.
func TestFromSumsMatchesRows(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 11))
	n := 3000
	names := []string{"y", "x", "intercept", "w", "z1", "z2"}
	cols := make([][]float64, len(names))
	for j := range cols {
		cols[j] = make([]float64, n)
	}
	codes := make([]int32, n)
	for i := 0; i < n; i++ {
		z1, z2, w, u := rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64(), rng.NormFloat64()
		x := 2 + 0.8*z1 + 0.5*z2 + 0.3*w + 0.6*u + 0.4*rng.NormFloat64()
		cols[0][i] = 5 - 1.5*x + 0.2*w + u*(1+0.5*math.Abs(z1))
		cols[1][i], cols[2][i], cols[3][i], cols[4][i], cols[5][i] = x, 1, w, z1, z2
		codes[i] = int32(i % 40)
	}
	dim := ClusterDim{Name: "store", Codes: codes, G: 40}
	rows := Accumulate(cols, names, []ClusterDim{dim}, 2)

	k := len(names)
	gram := make([]float64, k*k)
	for a := 0; a < k; a++ {
		for b := 0; b < k; b++ {
			gram[a*k+b] = rows.Gram.At(a, b)
		}
	}
	sums := FromSums(names, n, gram)
	var blocks []float64
	sizes := make([]int, 40)
	for g := 0; g < 40; g++ {
		blocks = append(blocks, rows.Clusters[0].Block(g)...)
	}
	for _, c := range codes {
		sizes[c]++
	}
	sums.AddClusterBlocks(ClusterDim{Name: "store", G: 40}, blocks, sizes)
	shift, scale := fourthCentre(cols)
	sums.SetFourth(shift, scale, fourthMomentsAffine(cols, shift, scale, 2))

	md := Model{Y: 0, Endog: []int{1}, Exog: []int{2, 3}, Instr: []int{4, 5}}
	for _, vk := range []VcovKind{IID, HC1, Cluster} {
		a, err := Estimate(rows, md, TSLS, vk)
		if err != nil {
			t.Fatal(err)
		}
		b, err := Estimate(sums, md, TSLS, vk)
		if err != nil {
			t.Fatal(err)
		}
		for j := range a.Coef {
			if d := math.Abs(a.Coef[j]-b.Coef[j]) / math.Abs(a.Coef[j]); d > 1e-10 {
				t.Errorf("%v coef %d: rows %g, sums %g", vk, j, a.Coef[j], b.Coef[j])
			}
			if d := math.Abs(a.SE(j)-b.SE(j)) / a.SE(j); d > 1e-10 {
				t.Errorf("%v s.e. %d: rows %g, sums %g", vk, j, a.SE(j), b.SE(j))
			}
		}
	}
	// First stages under HC1 go through Transform: the supplied fourth
	// moments serve the derived value too.
	fa, err := FirstStages(rows, md, HC1)
	if err != nil {
		t.Fatal(err)
	}
	fb, err := FirstStages(sums, md, HC1)
	if err != nil {
		t.Fatal(err)
	}
	if d := math.Abs(fa[0].F.F-fb[0].F.F) / fa[0].F.F; d > 1e-10 {
		t.Errorf("HC1 first-stage F: rows %g, sums %g", fa[0].F.F, fb[0].F.F)
	}
	// A fit that is nearly exact leaves residuals the fourth-order sums
	// cannot resolve: HC1 from sums says so instead of printing noise.
	exact := make([][]float64, len(cols))
	copy(exact, cols)
	exact[0] = make([]float64, n)
	for i := range exact[0] {
		exact[0][i] = 5 - 1.5*cols[1][i] + 0.2*cols[3][i] + 1e-9*float64(i%7)
	}
	ex := Accumulate(exact, names, nil, 2)
	es := FromSums(names, n, func() []float64 {
		g := make([]float64, k*k)
		for a := 0; a < k; a++ {
			for b := 0; b < k; b++ {
				g[a*k+b] = ex.Gram.At(a, b)
			}
		}
		return g
	}())
	sh, sc := fourthCentre(exact)
	es.SetFourth(sh, sc, fourthMomentsAffine(exact, sh, sc, 2))
	if _, err := Estimate(es, md, TSLS, HC1); !errors.Is(err, ErrPrecision) {
		t.Errorf("HC1 of a nearly exact fit from sums: %v, want ErrPrecision", err)
	}
	// Without fourth moments HC1 is refused, not guessed.
	bare := FromSums(names, n, gram)
	if _, err := Estimate(bare, md, TSLS, HC1); err == nil {
		t.Error("HC1 from sums without fourth moments: no error")
	}
}
