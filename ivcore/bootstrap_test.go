package ivcore

import (
	"math"
	"math/rand/v2"
	"slices"
	"sort"
	"strings"
	"testing"
)

// bootPanel draws a clustered IV dataset with G clusters of per rows:
//
//	x = 0.8 z1 + 0.4 z2 + 0.3 w + v
//	y = 1 - 2 x + 0.5 w + u
//
// where z1, w, v and u all carry a cluster component (so clustering
// matters), u and v are correlated (so x is endogenous) and u is
// heteroskedastic. Columns: y, x, intercept, w, z1, z2.
func bootPanel(G, per int, seed uint64) (*Moments, Model) {
	rng := rand.New(rand.NewPCG(seed, 3))
	n := G * per
	cols := make([][]float64, 6)
	for j := range cols {
		cols[j] = make([]float64, n)
	}
	codes := make([]int32, n)
	for g := range G {
		az, aw, av, au := rng.NormFloat64(), rng.NormFloat64(), 0.7*rng.NormFloat64(), 0.8*rng.NormFloat64()
		for r := range per {
			i := g*per + r
			z1 := az + rng.NormFloat64()
			z2 := rng.NormFloat64()
			w := aw + rng.NormFloat64()
			v := av + rng.NormFloat64()
			u := au + 0.6*v + (0.5+0.5*math.Abs(z2))*rng.NormFloat64()
			x := 0.8*z1 + 0.4*z2 + 0.3*w + v
			cols[0][i] = 1 - 2*x + 0.5*w + u
			cols[1][i] = x
			cols[2][i] = 1
			cols[3][i] = w
			cols[4][i] = z1
			cols[5][i] = z2
			codes[i] = int32(g)
		}
	}
	names := []string{"y", "x", "intercept", "w", "z1", "z2"}
	m := Accumulate(cols, names, []ClusterDim{{Name: "store", Codes: codes, G: G}}, 2)
	return m, Model{Y: 0, Endog: []int{1}, Exog: []int{2, 3}, Instr: []int{4, 5}}
}

// TestClusterBootstrapMatchesClusterRobust checks that the pairs cluster
// bootstrap standard error agrees with the analytic cluster-robust one.
// Basis: both estimate the same sampling variance when clusters are
// independent and numerous (Cameron, Gelbach & Miller 2008, REStat
// 90(3); Cameron & Miller 2015, JHR 50(2), section VI). Tolerance 10% at
// B = 999, as the specification asks: the bootstrap s.e. itself has a
// Monte Carlo error of about 1/sqrt(2B) ≈ 2%.
func TestClusterBootstrapMatchesClusterRobust(t *testing.T) {
	m, md := bootPanel(300, 30, 11)
	for _, test := range []struct {
		est Estimator
		tol float64 // relative, per the specification
	}{
		{TSLS, 0.10},
		{LIML, 0.10},
		{OLS, 0.10},
	} {
		fit, err := Estimate(m, md, test.est, Cluster)
		if err != nil {
			t.Fatal(err)
		}
		bs, err := ClusterBootstrap(m, 0, md, test.est, 999, 20240601, 2, nil)
		if err != nil {
			t.Fatalf("%v: %v", test.est, err)
		}
		if len(bs.Draws) != 999 || len(bs.Failed) != 0 {
			t.Fatalf("%v: %d draws, %d failed", test.est, len(bs.Draws), len(bs.Failed))
		}
		se := bs.SE()
		for j, name := range fit.Names {
			if bs.Names[j] != name {
				t.Fatalf("%v: name %d = %q, want %q", test.est, j, bs.Names[j], name)
			}
			if math.Abs(bs.Coef[j]-fit.Coef[j]) > 1e-12*math.Max(1, math.Abs(fit.Coef[j])) {
				t.Errorf("%v %s: bootstrap full-sample coefficient %v, fit %v", test.est, name, bs.Coef[j], fit.Coef[j])
			}
			ratio := se[j] / fit.SE(j)
			if math.Abs(ratio-1) > test.tol {
				t.Errorf("%v %s: bootstrap s.e. %.5f, cluster-robust s.e. %.5f (ratio %.3f, tolerance %.0f%%)", test.est, name, se[j], fit.SE(j), ratio, 100*test.tol)
			}
		}
	}
}

// TestKClassSolverMatchesEstimate checks the lean replicate solver against
// Estimate on the same Gram (property check: both solve the k-class
// normal equations; tolerance 1e-10 relative, linear algebra).
func TestKClassSolverMatchesEstimate(t *testing.T) {
	m, md := bootPanel(40, 25, 5)
	md.FullerAlpha = 4
	for _, est := range []Estimator{OLS, TSLS, LIML, Fuller} {
		mdl := md
		if est == OLS {
			mdl = Model{Y: md.Y, Exog: md.X()}
		}
		fit, err := Estimate(m, mdl, est, IID)
		if err != nil {
			t.Fatal(err)
		}
		sv := newKClassSolver(m, mdl, est)
		ws := sv.workspace()
		// Every cluster drawn once: the blocks sum to the full Gram.
		packed := sv.packBlocks(m.Clusters[0])
		for g := range m.Clusters[0].Dim.G {
			addScaled(ws.gram, packed[g*sv.np:(g+1)*sv.np], 1)
		}
		b := make([]float64, len(sv.x))
		if !sv.solve(ws, m.N, b) {
			t.Fatalf("%v: solver failed on the full sample", est)
		}
		for j := range b {
			if d := math.Abs(b[j] - fit.Coef[j]); d > 1e-10*math.Max(1, math.Abs(fit.Coef[j])) {
				t.Errorf("%v: coefficient %s = %.15g, Estimate gives %.15g", est, fit.Names[j], b[j], fit.Coef[j])
			}
		}
	}
}

// TestClusterBootstrapReproducible checks that the draws depend on the
// seed only, not on the number of workers.
func TestClusterBootstrapReproducible(t *testing.T) {
	m, md := bootPanel(60, 10, 2)
	var ref *Bootstrap
	for _, w := range []int{1, 2, 7} {
		bs, err := ClusterBootstrap(m, 0, md, TSLS, 120, 99, w, nil)
		if err != nil {
			t.Fatal(err)
		}
		if ref == nil {
			ref = bs
			continue
		}
		for r := range ref.Draws {
			if !slices.Equal(ref.Draws[r], bs.Draws[r]) {
				t.Fatalf("workers=%d: replicate %d differs: %v vs %v", w, r, bs.Draws[r], ref.Draws[r])
			}
		}
	}
	other, err := ClusterBootstrap(m, 0, md, TSLS, 120, 100, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	if slices.Equal(other.Draws[0], ref.Draws[0]) {
		t.Error("a different seed gave the same first replicate")
	}
}

// TestBootstrapPercentile checks the percentile convention: with 999
// draws, the 95% band is the 25th and 975th smallest draws (Efron &
// Tibshirani 1993, ch. 13: the (B+1)α-th ordered replicate).
func TestBootstrapPercentile(t *testing.T) {
	m, md := bootPanel(80, 10, 8)
	bs, err := ClusterBootstrap(m, 0, md, TSLS, 999, 1, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	lo, hi := bs.Percentile(0.95)
	for j := range bs.Names {
		x := bs.Column(j)
		sort.Float64s(x)
		if lo[j] != x[24] || hi[j] != x[974] {
			t.Errorf("%s: band [%v, %v], want draws 25 and 975 [%v, %v]", bs.Names[j], lo[j], hi[j], x[24], x[974])
		}
		if !(lo[j] < bs.Coef[j] && bs.Coef[j] < hi[j]) {
			t.Errorf("%s: estimate %v outside its band [%v, %v]", bs.Names[j], bs.Coef[j], lo[j], hi[j])
		}
	}
}

func TestClusterBootstrapProgress(t *testing.T) {
	m, md := bootPanel(30, 10, 4)
	var seen []int
	_, err := ClusterBootstrap(m, 0, md, TSLS, 64, 3, 2, func(done int) { seen = append(seen, done) })
	if err != nil {
		t.Fatal(err)
	}
	if len(seen) != 64 || seen[63] != 64 || !slices.IsSorted(seen) {
		t.Errorf("progress calls %v, want 1..64 in order", seen)
	}
}

func TestClusterBootstrapRefuses(t *testing.T) {
	m, md := bootPanel(30, 10, 4)
	one := Accumulate(m.Cols, m.Names, []ClusterDim{{Name: "region", Codes: make([]int32, m.N), G: 1}}, 1)
	none := Accumulate(m.Cols, m.Names, nil, 1)

	// A control that is non-zero in one cluster only: left out of about
	// (1-1/G)^G ≈ 37% of replicates, far above the 10% allowed.
	rare := append([][]float64(nil), m.Cols...)
	d := make([]float64, m.N)
	for i := range 10 {
		d[i] = float64(i%3) + 1
	}
	rare = append(rare, d)
	codes := m.Clusters[0].Dim.Codes
	mRare := Accumulate(rare, append(append([]string(nil), m.Names...), "promo_store1"), []ClusterDim{{Name: "store", Codes: codes, G: 30}}, 1)
	mdRare := md
	mdRare.Exog = append(append([]int(nil), md.Exog...), 6)

	for _, test := range []struct {
		m    *Moments
		md   Model
		B    int
		want string
	}{
		{m, md, 49, "needs at least 50 replicates, got 49"},
		{one, md, 999, `needs at least 2 clusters to resample, but "region" has 1`},
		{none, md, 999, "no cluster column was given"},
		{mRare, mdRare, 200, "had a singular design"},
	} {
		_, err := ClusterBootstrap(test.m, 0, test.md, TSLS, test.B, 1, 2, nil)
		if err == nil || !strings.Contains(err.Error(), test.want) {
			t.Errorf("B=%d: error %v, want it to contain %q", test.B, err, test.want)
		}
	}
}

// TestClusterBootstrapJointDraws checks that bootstraps of two models on
// moments with one cluster coding resample the same clusters for the same
// seed. OLS is linear in the outcome, so in every replicate the
// coefficients for y1 + y2 equal the sum of those for y1 and y2 (property
// check, tolerance 1e-9).
func TestClusterBootstrapJointDraws(t *testing.T) {
	m0, _ := bootPanel(50, 12, 6)
	n := m0.N
	y2 := make([]float64, n)
	sum := make([]float64, n)
	for i := range n {
		y2[i] = 0.3*m0.Cols[3][i] + math.Sin(float64(i))
		sum[i] = m0.Cols[0][i] + y2[i]
	}
	cols := append(append([][]float64(nil), m0.Cols...), y2, sum)
	names := append(append([]string(nil), m0.Names...), "y2", "y1+y2")
	m := Accumulate(cols, names, []ClusterDim{m0.Clusters[0].Dim}, 2)
	x := []int{1, 2, 3}
	var res [3]*Bootstrap
	for k, y := range []int{0, 6, 7} {
		bs, err := ClusterBootstrap(m, 0, Model{Y: y, Exog: x}, OLS, 80, 42, 2, nil)
		if err != nil {
			t.Fatal(err)
		}
		res[k] = bs
	}
	for i := range res[2].Draws {
		if res[0].Index[i] != i || res[1].Index[i] != i || res[2].Index[i] != i {
			t.Fatalf("replicate %d failed in one of the models", i)
		}
		for j := range x {
			if d := res[2].Draws[i][j] - res[0].Draws[i][j] - res[1].Draws[i][j]; math.Abs(d) > 1e-9 {
				t.Fatalf("replicate %d, coefficient %d: sum model differs from the sum by %g", i, j, d)
			}
		}
	}
}

// TestBootstrapRefusesGMM: two-step GMM is not re-estimated per replicate,
// so the bootstrap must refuse it rather than band another estimator.
func TestBootstrapRefusesGMM(t *testing.T) {
	_, _, _, _, cols := mrozMatrices(t)
	n := len(cols[0])
	codes := make([]int32, n)
	for i := range codes {
		codes[i] = int32(i % 20)
	}
	m := Accumulate(cols, []string{"lwage", "educ", "intercept", "exper", "expersq", "motheduc", "fatheduc"}, []ClusterDim{{Name: "g", Codes: codes, G: 20}}, 1)
	md := Model{Y: 0, Endog: []int{1}, Exog: []int{2, 3, 4}, Instr: []int{5, 6}}
	if _, err := ClusterBootstrap(m, 0, md, GMM, 99, 1, 1, nil); err == nil || !strings.Contains(err.Error(), "2sls") {
		t.Errorf("GMM bootstrap: %v", err)
	}
}
