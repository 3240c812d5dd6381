package ivcore

import (
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"strconv"
	"sync"
	"testing"
	"time"

	"gonum.org/v1/gonum/mat"
)

// fourthIndexAny returns the position of M4[a,b,c,d] for indices in any
// order (a sorting network, then fourthIndex).
func fourthIndexAny(a, b, c, d int) int {
	if a > b {
		a, b = b, a
	}
	if c > d {
		c, d = d, c
	}
	if a > c {
		a, c = c, a
	}
	if b > d {
		b, d = d, b
	}
	if b > c {
		b, c = c, b
	}
	return fourthIndex(a, b, c, d)
}

// unitCombos returns the score columns w as combinations.
func unitCombos(w []int) []combo {
	out := make([]combo, len(w))
	for a, j := range w {
		out[a] = combo{{j: j, c: 1}}
	}
	return out
}

// rowsReference returns Σ_i s_i s_iᵀ from one pass over the rows (the
// path taken before the fourth moments were cached) as a full symmetric
// matrix.
func rowsReference(cols [][]float64, w []combo, r [][]float64) *mat.SymDense {
	d := len(w) * len(r)
	out := make([]float64, d*d)
	rowScoreCov(out, cols, w, r, 2)
	s := mat.NewSymDense(d, nil)
	for i := 0; i < d; i++ {
		for j := i; j < d; j++ {
			s.SetSym(i, j, out[i*d+j])
		}
	}
	return s
}

// symClose reports the first entry of got that differs from want by more
// than tol relative to the scale of its row and column, sqrt(w_ii w_jj)
// (the scale of a covariance entry; entries near zero by chance are
// judged on it, not on themselves).
func symClose(got, want mat.Symmetric, tol float64) error {
	n := want.SymmetricDim()
	if got.SymmetricDim() != n {
		return fmt.Errorf("dimension %d, want %d", got.SymmetricDim(), n)
	}
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			g, w := got.At(i, j), want.At(i, j)
			scale := math.Sqrt(math.Abs(want.At(i, i) * want.At(j, j)))
			if !(math.Abs(g-w) <= tol*scale) {
				return fmt.Errorf("entry (%d,%d): %.17g, want %.17g (scale %.3g)", i, j, g, w, scale)
			}
		}
	}
	return nil
}

// randomCols draws k columns of n rows: an intercept, then columns with
// means away from zero and different scales (as raw prices and costs), so
// that sums of fourth powers are far from centred.
func randomCols(seed uint64, n, k int) [][]float64 {
	rng := rand.New(rand.NewPCG(seed, 11))
	cols := make([][]float64, k)
	for j := range cols {
		cols[j] = make([]float64, n)
	}
	for i := 0; i < n; i++ {
		cols[0][i] = 1
		for j := 1; j < k; j++ {
			mean, sd := float64(j%4), 0.5+float64(j%3)
			cols[j][i] = mean + sd*rng.NormFloat64() + 0.3*cols[j-1][i]
		}
	}
	return cols
}

func colNames(k int) []string {
	out := make([]string, k)
	for j := range out {
		out[j] = "c" + strconv.Itoa(j)
	}
	return out
}

// TestFourthIndex checks the index helper (property: colexicographic
// ranks are 0, 1, 2, … in loop order, end at C(K+3,4) - 1 and do not
// depend on K; every permutation of indices finds the same entry).
func TestFourthIndex(t *testing.T) {
	for k := 1; k <= fourthCap+1; k++ {
		next := 0
		for m := 0; m < k; m++ {
			for l := 0; l <= m; l++ {
				for kk := 0; kk <= l; kk++ {
					for j := 0; j <= kk; j++ {
						if got := fourthIndex(j, kk, l, m); got != next {
							t.Fatalf("K=%d: index of (%d,%d,%d,%d) = %d, want %d", k, j, kk, l, m, got, next)
						}
						next++
					}
				}
			}
		}
		if next != fourthLen(k) {
			t.Errorf("K=%d: %d entries, fourthLen %d", k, next, fourthLen(k))
		}
	}
	if fourthLen(6) != 126 || fourthLen(12) != 1365 {
		t.Errorf("C(9,4) = 126 and C(15,4) = 1365, got %d and %d", fourthLen(6), fourthLen(12))
	}
	// Every permutation of (1,4,2,4) maps to the sorted entry.
	perm := [][4]int{{1, 4, 2, 4}, {4, 4, 2, 1}, {2, 1, 4, 4}, {4, 1, 4, 2}, {4, 2, 1, 4}}
	for _, p := range perm {
		if got := fourthIndexAny(p[0], p[1], p[2], p[3]); got != fourthIndex(1, 2, 4, 4) {
			t.Errorf("%v: index %d, want %d", p, got, fourthIndex(1, 2, 4, 4))
		}
	}
}

// TestFourthMoments checks the fourth moments against the direct sums
// Σ_i a_ij a_ik a_il a_im (definition; 1e-12 relative), and that they are
// bit-identical for any number of workers (rows span several chunks and
// a partial block).
func TestFourthMoments(t *testing.T) {
	const k = 5
	n := 3*chunkRows + fourthBlock + 37
	cols := randomCols(3, n, k)
	m4 := fourthMoments(cols, 1)
	if len(m4) != fourthLen(k) {
		t.Fatalf("%d entries, want %d", len(m4), fourthLen(k))
	}
	for m := 0; m < k; m++ {
		for l := 0; l <= m; l++ {
			for kk := 0; kk <= l; kk++ {
				for j := 0; j <= kk; j++ {
					want := 0.0
					for i := 0; i < n; i++ {
						want += cols[j][i] * cols[kk][i] * cols[l][i] * cols[m][i]
					}
					got := m4[fourthIndex(j, kk, l, m)]
					if math.Abs(got-want) > 1e-12*math.Abs(want) {
						t.Errorf("M4[%d,%d,%d,%d] = %.17g, direct sum %.17g", j, kk, l, m, got, want)
					}
				}
			}
		}
	}
	for _, w := range []int{2, 3, 8} {
		other := fourthMoments(cols, w)
		for i := range m4 {
			if other[i] != m4[i] {
				t.Fatalf("%d workers: entry %d = %.17g, 1 worker %.17g", w, i, other[i], m4[i])
			}
		}
	}
}

// TestScoreCovFourth checks that the HC1 score sums contracted from the
// cached fourth moments equal one pass over the rows (property: both are
// Σ_i s_i s_iᵀ, only the order of the sums differs; 1e-10 relative to
// the scale of each entry), on the MROZ data (Wooldridge, Introductory
// Econometrics, example 15.5: 2SLS residual and the first-stage and
// reduced-form residuals of the diagnostics, several at once) and on
// random uncentred data with K = 12 columns, the cap, with unit and
// dense score columns. Every case makes one pass over the rows in all.
func TestScoreCovFourth(t *testing.T) {
	_, _, _, _, mroz := mrozMatrices(t)
	// Columns: lwage, educ, 1, exper, expersq, motheduc, fatheduc.
	mm := Accumulate(mroz, []string{"lwage", "educ", "one", "exper", "expersq", "motheduc", "fatheduc"}, nil, 2)
	md := Model{Y: 0, Endog: []int{1}, Exog: []int{2, 3, 4}, Instr: []int{5, 6}}
	fit, err := Estimate(mm, md, TSLS, IID)
	if err != nil {
		t.Fatal(err)
	}
	_, _, vEduc, err := mm.Regress(mm.Unit(1), md.Z())
	if err != nil {
		t.Fatal(err)
	}
	_, _, vY, err := mm.Regress(mm.Unit(0), md.Z())
	if err != nil {
		t.Fatal(err)
	}

	big := randomCols(5, 2*chunkRows+101, fourthCap)
	mb := Accumulate(big, colNames(fourthCap), nil, 2)
	rb := make([]float64, fourthCap)
	rb[fourthCap-1] = 1
	_, _, rb, err = mb.Regress(rb, []int{0, 1, 2, 3, 4, 5, 6})
	if err != nil {
		t.Fatal(err)
	}
	rand2 := make([]float64, fourthCap)
	wDense := make([]float64, fourthCap)
	for j := range rand2 {
		rand2[j] = math.Sin(float64(j) + 0.5)
		wDense[j] = math.Cos(float64(3*j) + 0.2)
	}

	for i, test := range []struct {
		name string
		m    *Moments
		w    []combo
		r    [][]float64
		tol  float64
	}{
		{"MROZ 2SLS residual on X and Z", mm, unitCombos([]int{1, 2, 3, 4, 5, 6}), [][]float64{fit.Residual()}, 1e-10},
		{"MROZ first stage, reduced form and 2SLS", mm, unitCombos(md.Z()), [][]float64{vEduc, vY, fit.Residual()}, 1e-10},
		{"K=12 regression residual", mb, unitCombos([]int{0, 1, 2, 3, 4, 5, 6}), [][]float64{rb}, 1e-10},
		{"K=12 dense residuals", mb, unitCombos([]int{11, 0, 7}), [][]float64{rb, rand2}, 1e-10},
		{"K=12 dense score columns", mb, []combo{denseCombo(wDense), {{j: 3, c: 2}, {j: 9, c: -0.5}}, {{j: 0, c: 1}}}, [][]float64{rand2, rb}, 1e-10},
	} {
		got, err := test.m.scoreCov(test.w, test.r, -1)
		if err != nil {
			t.Fatal(err)
		}
		want := rowsReference(test.m.Cols, test.w, test.r)
		if err := symClose(got, want, test.tol); err != nil {
			t.Errorf("%d %s: %v", i, test.name, err)
		}
	}
	if mm.RowPasses() != 1 || mb.RowPasses() != 1 {
		t.Errorf("passes over the rows: MROZ %d, K=12 %d, want 1 each", mm.RowPasses(), mb.RowPasses())
	}
}

// TestScoreCovAboveCap checks the path of more than 12 columns: each call
// makes its own pass over the rows and gives exactly the row-pass result
// (the same code).
func TestScoreCovAboveCap(t *testing.T) {
	k := fourthCap + 1
	cols := randomCols(9, 5000, k)
	m := Accumulate(cols, colNames(k), nil, 2)
	r := make([]float64, k)
	for j := range r {
		r[j] = 1 / float64(j+1)
	}
	for call := 1; call <= 2; call++ {
		got, err := m.ScoreCov([]int{1, 12, 4}, [][]float64{r}, -1)
		if err != nil {
			t.Fatal(err)
		}
		want := rowsReference(cols, unitCombos([]int{1, 12, 4}), [][]float64{r})
		if !mat.Equal(got, want) {
			t.Errorf("call %d: differs from the row pass", call)
		}
		if m.RowPasses() != call {
			t.Errorf("after %d calls: %d passes, want one per call", call, m.RowPasses())
		}
	}
}

// TestScoreCovFourthConcurrent checks that statistics asked for at once
// from several goroutines share one pass (sync.Once) and agree.
func TestScoreCovFourthConcurrent(t *testing.T) {
	cols := randomCols(13, 4000, 6)
	m := Accumulate(cols, colNames(6), nil, 2)
	r := []float64{0.5, -1, 0.25, 0, 2, -0.125}
	out := make([]*mat.SymDense, 4)
	var wg sync.WaitGroup
	for g := range out {
		wg.Add(1)
		go func() {
			defer wg.Done()
			s, err := m.ScoreCov([]int{0, 2, 4}, [][]float64{r}, -1)
			if err != nil {
				t.Error(err)
				return
			}
			out[g] = s
		}()
	}
	wg.Wait()
	for g := 1; g < len(out); g++ {
		if out[g] == nil || !mat.Equal(out[g], out[0]) {
			t.Errorf("goroutine %d: result differs", g)
		}
	}
	if m.RowPasses() != 1 {
		t.Errorf("%d passes over the rows, want 1", m.RowPasses())
	}
	// A Moments literal holding rows gets its cache on first use.
	lit := &Moments{Names: m.Names, N: m.N, Gram: m.Gram, Cols: cols}
	s, err := lit.ScoreCov([]int{0, 2, 4}, [][]float64{r}, -1)
	if err != nil {
		t.Fatal(err)
	}
	if !mat.Equal(s, out[0]) || lit.RowPasses() != 1 {
		t.Errorf("literal moments: equal %v, %d passes", mat.Equal(s, out[0]), lit.RowPasses())
	}
	if _, err := (&Moments{Names: m.Names, N: m.N, Gram: m.Gram}).ScoreCov([]int{0}, [][]float64{r}, -1); err != ErrNoRows {
		t.Errorf("moments without rows: error %v, want ErrNoRows", err)
	}
}

// TestTransformHC1 checks the HC1 statistics of transformed moments
// against moments accumulated from explicitly formed columns A·T
// (property: the statistics depend on the columns only; 1e-10 relative):
// the score sums for unit and new columns and several residuals, and the
// HC1 covariance of an OLS fit on them (the control-function regression
// of the diagnostics). This holds with and without formed rows, for a
// transform of a transform, and above the 12-column cap (mapped row
// passes). With at most 12 columns the original value and all derived
// ones make one pass over the rows between them.
func TestTransformHC1(t *testing.T) {
	explicit := func(cols [][]float64, T *mat.Dense) [][]float64 {
		k, kp := T.Dims()
		out := make([][]float64, kp)
		for j := range out {
			out[j] = make([]float64, len(cols[0]))
			for l := 0; l < k; l++ {
				if w := T.At(l, j); w != 0 {
					for i, v := range cols[l] {
						out[j][i] += w * v
					}
				}
			}
		}
		return out
	}
	// addCombos returns T = [I | t₁ t₂]: every column kept, two
	// combinations appended.
	addCombos := func(k int, seed float64) *mat.Dense {
		T := mat.NewDense(k, k+2, nil)
		for i := 0; i < k; i++ {
			T.Set(i, i, 1)
			T.Set(i, k, math.Sin(seed+float64(i)))
		}
		T.Set(1, k+1, 1)
		T.Set(k-1, k+1, -0.7)
		return T
	}
	check := func(name string, mt *Moments, cols [][]float64) {
		t.Helper()
		kp := len(mt.Names)
		r1 := make([]float64, kp)
		r2 := make([]float64, kp)
		r1[0], r1[kp-2], r1[2] = 1, -0.3, 0.2
		for j := range r2 {
			r2[j] = math.Cos(float64(j))
		}
		w := []int{1, kp - 2, kp - 1, 2}
		got, err := mt.ScoreCov(w, [][]float64{r1, r2}, -1)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		want := rowsReference(cols, unitCombos(w), [][]float64{r1, r2})
		if err := symClose(got, want, 1e-10); err != nil {
			t.Errorf("%s: score sums: %v", name, err)
		}
		me := Accumulate(cols, mt.Names, nil, 2)
		md := Model{Y: 0, Exog: []int{2, 3, kp - 2, kp - 1}}
		f1, err := Estimate(mt, md, OLS, HC1)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		f2, err := Estimate(me, md, OLS, HC1)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if err := symClose(f1.Cov, f2.Cov, 1e-10); err != nil {
			t.Errorf("%s: HC1 covariance: %v", name, err)
		}
	}

	cols, names, _, _ := gmmData(4, 3000, 12)
	k := len(cols)
	m := Accumulate(cols, names, nil, 2)
	T1 := addCombos(k, 0.3)
	names1 := append(append([]string(nil), names...), "t1", "t2")
	ex1 := explicit(cols, T1)
	for _, withCols := range []bool{false, true} {
		check(fmt.Sprintf("K=%d, rows formed %v", k, withCols), m.Transform(T1, names1, withCols), ex1)
	}
	m1 := m.Transform(T1, names1, false)
	T2 := addCombos(k+2, 1.1)
	names2 := append(append([]string(nil), names1...), "u1", "u2")
	check("transform of a transform", m1.Transform(T2, names2, false), explicit(ex1, T2))
	// One pass for m itself and the rows formed once (withCols true).
	if m.RowPasses() != 2 {
		t.Errorf("K=%d: %d passes over the rows, want 1 for every HC1 statistic and 1 to form rows", k, m.RowPasses())
	}

	kw := fourthCap + 1
	wide := randomCols(21, 3000, kw)
	mw := Accumulate(wide, colNames(kw), nil, 2)
	Tw := addCombos(kw, 0.7)
	check(fmt.Sprintf("K=%d above the cap, no rows formed", kw), mw.Transform(Tw, append(colNames(kw), "t1", "t2"), false), explicit(wide, Tw))
}

// BenchmarkScoreCovHC1 compares, at 1M rows and K = 6 and 10 columns, one
// HC1 score sum from a pass over the rows (rows: the path of more than 12
// columns, and of every call before the fourth moments were cached) with
// the fourth-moment path: the first call (fourth-pass: the pass summing
// M4 plus the contraction) and every later one (fourth-cached: the
// contraction alone). The scores are K-1 columns times one residual (a
// fit's meat) or four (the diagnostics' shared bank).
func BenchmarkScoreCovHC1(b *testing.B) {
	const n = 1_000_000
	for _, k := range []int{6, 10} {
		cols := randomCols(17, n, k)
		w := make([]int, k-1)
		for a := range w {
			w[a] = a + 1
		}
		var rs [][]float64
		for p := 0; p < 4; p++ {
			r := make([]float64, k)
			for j := range r {
				r[j] = math.Sin(float64(j + 3*p))
			}
			rs = append(rs, r)
		}
		for _, nr := range []int{1, 4} {
			r := rs[:nr]
			d := len(w) * nr
			name := fmt.Sprintf("K=%d/residuals=%d", k, nr)
			b.Run(name+"/rows", func(b *testing.B) {
				out := make([]float64, d*d)
				start := time.Now()
				for b.Loop() {
					clear(out)
					rowScoreCov(out, cols, unitCombos(w), r, runtime.NumCPU())
				}
				b.ReportMetric(float64(n)*float64(b.N)/time.Since(start).Seconds(), "rows/s")
			})
			b.Run(name+"/fourth-pass", func(b *testing.B) {
				out := make([]float64, d*d)
				start := time.Now()
				for b.Loop() {
					clear(out)
					m4 := fourthMoments(cols, runtime.NumCPU())
					fourthScoreCov(out, m4, k, unitCombos(w), r)
				}
				b.ReportMetric(float64(n)*float64(b.N)/time.Since(start).Seconds(), "rows/s")
			})
			b.Run(name+"/fourth-cached", func(b *testing.B) {
				out := make([]float64, d*d)
				m4 := fourthMoments(cols, runtime.NumCPU())
				for b.Loop() {
					clear(out)
					fourthScoreCov(out, m4, k, unitCombos(w), r)
				}
			})
		}
	}
}

// TestScoreCovLargeMeans: level data with large means and comparatively
// small residuals (units around 1e6, prices around 300, an intercept)
// must give the same HC1 score covariance from the cached moments as from
// a direct pass over the rows; raw fourth moments would lose the
// residual's digits to cancellation (generated data, property check).
func TestScoreCovLargeMeans(t *testing.T) {
	for _, noise := range []float64{3000, 10, 1} {
		rng := rand.New(rand.NewPCG(41, 42))
		n := 8000
		y, x, one, z := make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)
		for i := range y {
			z[i] = 50 + rng.NormFloat64()
			x[i] = 300 + 2*z[i] + rng.NormFloat64()
			y[i] = 2e6 - 1500*x[i] + noise*rng.NormFloat64()
			one[i] = 1
		}
		cols := [][]float64{y, x, one, z}
		m := Accumulate(cols, []string{"units", "price", "intercept", "cost"}, nil, 2)
		md := Model{Y: 0, Endog: []int{1}, Exog: []int{2}, Instr: []int{3}}
		f, err := Estimate(m, md, TSLS, HC1)
		if err != nil {
			t.Fatal(err)
		}
		w := []int{1, 2, 3}
		r := [][]float64{f.Residual()}
		got, err := m.ScoreCov(w, r, -1)
		if err != nil {
			t.Fatal(err)
		}
		d := len(w)
		want := make([]float64, d*d)
		wc := make([]combo, d)
		for a, j := range w {
			wc[a] = combo{{j, 1}}
		}
		rowScoreCov(want, cols, wc, r, 1)
		for a := 0; a < d; a++ {
			for b := a; b < d; b++ {
				g, wv := got.At(a, b), want[a*d+b]
				if math.Abs(g-wv) > 1e-9*math.Sqrt(want[a*d+a]*want[b*d+b]) {
					t.Errorf("noise %g: S[%d,%d] = %.12g from cached moments, %.12g from the rows", noise, a, b, g, wv)
				}
			}
		}
	}
}
