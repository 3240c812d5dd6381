package ivcore

import (
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// fePanel is a generated unbalanced panel: units observed in periods with
// random gaps, plus a third categorical variable drawn per row.
type fePanel struct {
	unit, period, extra Effect
	n                   int
}

// feMakePanel draws a units×periods panel in which each cell is present
// with probability pKeep (every unit keeps at least two periods), and a
// third effect with extraLevels levels drawn at random for each row.
func feMakePanel(seed uint64, units, periods int, pKeep float64, extraLevels int) fePanel {
	rng := rand.New(rand.NewPCG(seed, 7))
	var u, t, x []int32
	for i := 0; i < units; i++ {
		first := len(u)
		for p := 0; p < periods; p++ {
			if rng.Float64() < pKeep || (p >= periods-2 && len(u)-first < 2) {
				u = append(u, int32(i))
				t = append(t, int32(p))
				x = append(x, int32(rng.IntN(extraLevels)))
			}
		}
	}
	return fePanel{
		unit:   Effect{Name: "unit", Codes: u, Levels: units},
		period: Effect{Name: "period", Codes: t, Levels: periods},
		extra:  Effect{Name: "extra", Codes: x, Levels: extraLevels},
		n:      len(u),
	}
}

// feMakeColumns draws k columns that load on every effect plus noise, with
// an offset so that the mean is far from zero.
func feMakeColumns(seed uint64, n, k int, effects []Effect) [][]float64 {
	rng := rand.New(rand.NewPCG(seed, 11))
	cols := make([][]float64, k)
	for j := range cols {
		fx := make([][]float64, len(effects))
		for e, eff := range effects {
			fx[e] = make([]float64, eff.Levels)
			for l := range fx[e] {
				fx[e][l] = 3 * rng.NormFloat64()
			}
		}
		c := make([]float64, n)
		for i := range c {
			c[i] = 50 + rng.NormFloat64()
			for e, eff := range effects {
				c[i] += fx[e][eff.Codes[i]]
			}
		}
		cols[j] = c
	}
	return cols
}

// feDummyMatrix builds the N×ΣL indicator matrix of the effects.
func feDummyMatrix(effects []Effect, n int) *mat.Dense {
	p := 0
	for _, e := range effects {
		p += e.Levels
	}
	d := mat.NewDense(n, p, nil)
	off := 0
	for _, e := range effects {
		for i, c := range e.Codes {
			d.Set(i, off+int(c), 1)
		}
		off += e.Levels
	}
	return d
}

// feSVDProjector returns the left singular vectors of the dummy matrix
// that belong to non-zero singular values (relative tolerance 1e-10), so
// that the least-squares residual of y is y - U Uᵀ y and the rank of the
// dummy matrix is U's column count. This is the general-purpose reference
// (gonum's SVD), independent of the sweeps.
func feSVDProjector(t *testing.T, effects []Effect, n int) *mat.Dense {
	t.Helper()
	var svd mat.SVD
	if !svd.Factorize(feDummyMatrix(effects, n), mat.SVDThin) {
		t.Fatal("SVD of the dummy matrix failed")
	}
	vals := svd.Values(nil)
	r := 0
	for _, v := range vals {
		if v > 1e-10*vals[0] {
			r++
		}
	}
	var u mat.Dense
	svd.UTo(&u)
	return mat.DenseCopyOf(u.Slice(0, n, 0, r))
}

func feDummyResidual(u *mat.Dense, y []float64) []float64 {
	yv := mat.NewVecDense(len(y), slices.Clone(y))
	var uty, fit mat.VecDense
	uty.MulVec(u.T(), yv)
	fit.MulVec(u, &uty)
	r := make([]float64, len(y))
	for i := range r {
		r[i] = y[i] - fit.AtVec(i)
	}
	return r
}

// feParity returns the codes 0, 1, 0, 1, … for n rows.
func feParity(n int) []int32 {
	c := make([]int32, n)
	for i := range c {
		c[i] = int32(i % 2)
	}
	return c
}

func feMaxAbsDiff(a, b []float64) float64 {
	m := 0.0
	for i := range a {
		m = max(m, math.Abs(a[i]-b[i]))
	}
	return m
}

func feStd(y []float64) float64 {
	var s float64
	for _, v := range y {
		s += v
	}
	mean := s / float64(len(y))
	var ss float64
	for _, v := range y {
		ss += (v - mean) * (v - mean)
	}
	return math.Sqrt(ss / float64(len(y)))
}

func TestAbsorbOneEffect(t *testing.T) {
	// Reference: the within transformation for one effect is the
	// subtraction of each level's mean (definition; common practice).
	// Tolerance 1e-12 absolute on values of order 50.
	for i, test := range []struct {
		name   string
		codes  []int32
		levels int
		y      []float64
	}{
		{"balanced", []int32{0, 0, 1, 1, 2, 2}, 3, []float64{1, 3, 10, 14, -2, 2}},
		{"unbalanced with a singleton", []int32{2, 0, 0, 1, 0, 2}, 3, []float64{5, 1, 2, 7, 6, 9}},
		{"empty level", []int32{0, 2, 0, 2}, 4, []float64{1.5, 2.5, 3.5, -4.5}},
		{"one level", []int32{0, 0, 0}, 1, []float64{1, 2, 6}},
	} {
		sum := make([]float64, test.levels)
		cnt := make([]float64, test.levels)
		for r, c := range test.codes {
			sum[c] += test.y[r]
			cnt[c]++
		}
		want := make([]float64, len(test.y))
		for r, c := range test.codes {
			want[r] = test.y[r] - sum[c]/cnt[c]
		}
		dst := [][]float64{nil}
		abs, err := Absorb(dst, [][]float64{test.y}, []Effect{{Name: "g", Codes: test.codes, Levels: test.levels}}, AbsorbOptions{})
		if err != nil {
			t.Fatalf("%d %s: unexpected error: %v", i, test.name, err)
		}
		if d := feMaxAbsDiff(dst[0], want); d > 1e-12 {
			t.Errorf("%d %s: residual differs from level-mean subtraction by %g", i, test.name, d)
		}
		// One effect: DoF is the number of levels that occur (common practice).
		occ := 0
		for _, c := range cnt {
			if c > 0 {
				occ++
			}
		}
		if abs.DoF != occ || abs.Iterations != 1 || !abs.Converged {
			t.Errorf("%d %s: got DoF %d, iterations %d, converged %v; want %d, 1, true", i, test.name, abs.DoF, abs.Iterations, abs.Converged, occ)
		}
	}

	// A generated panel, unit effect only.
	p := feMakePanel(3, 30, 12, 0.7, 4)
	cols := feMakeColumns(4, p.n, 2, []Effect{p.unit})
	dst := make([][]float64, 2)
	if _, err := Absorb(dst, cols, []Effect{p.unit}, AbsorbOptions{}); err != nil {
		t.Fatal(err)
	}
	for j := range cols {
		sum := make([]float64, 30)
		cnt := make([]float64, 30)
		for r, c := range p.unit.Codes {
			sum[c] += cols[j][r]
			cnt[c]++
		}
		for r, c := range p.unit.Codes {
			if d := math.Abs(dst[j][r] - (cols[j][r] - sum[c]/cnt[c])); d > 1e-12 {
				t.Fatalf("panel column %d row %d: differs from level-mean subtraction by %g", j, r, d)
			}
		}
	}
}

func TestAbsorbMatchesDummyRegression(t *testing.T) {
	// Reference: the residuals of the least-squares regression on all
	// dummy variables, computed with gonum's SVD (y - U Uᵀ y); the
	// projection theorem says alternating projections converge to it
	// (Gaure 2013). Tolerance: 1e-8 absolute on columns with standard
	// deviation of about 5.
	p := feMakePanel(1, 30, 12, 0.75, 5)
	pDis := feMakePanel(2, 30, 12, 0.75, 5)
	// Disconnect the panel: units 0-14 only in periods 0-5, units 15-29
	// only in periods 6-11.
	var du, dt []int32
	for r := range pDis.n {
		u, tt := pDis.unit.Codes[r], pDis.period.Codes[r]
		if (u < 15) == (tt < 6) {
			du = append(du, u)
			dt = append(dt, tt)
		}
	}
	dis := []Effect{{Name: "unit", Codes: du, Levels: 30}, {Name: "period", Codes: dt, Levels: 12}}

	// A weakly connected design: two blocks of units and periods joined
	// by a single row, which makes plain alternating projections slow.
	var wu, wt []int32
	for u := int32(0); u < 20; u++ {
		for tt := int32(0); tt < 10; tt++ {
			if (u < 10) == (tt < 5) && (u+tt)%3 != 0 {
				wu = append(wu, u)
				wt = append(wt, tt)
			}
		}
	}
	wu = append(wu, 2)
	wt = append(wt, 7)
	weak := []Effect{{Name: "unit", Codes: wu, Levels: 20}, {Name: "period", Codes: wt, Levels: 10}}

	// Repeated cells: the first 120 rows of the panel appear twice.
	rep := []Effect{
		{Name: "unit", Codes: append(slices.Clone(p.unit.Codes), p.unit.Codes[:120]...), Levels: 30},
		{Name: "period", Codes: append(slices.Clone(p.period.Codes), p.period.Codes[:120]...), Levels: 12},
	}

	for i, test := range []struct {
		name    string
		effects []Effect
		opts    AbsorbOptions
		tol     float64
	}{
		{"two effects", []Effect{p.unit, p.period}, AbsorbOptions{}, 1e-8},
		{"two effects, reversed order", []Effect{p.period, p.unit}, AbsorbOptions{}, 1e-8},
		{"three effects", []Effect{p.unit, p.period, p.extra}, AbsorbOptions{}, 1e-8},
		{"two effects, two disconnected groups", dis, AbsorbOptions{}, 1e-8},
		{"two effects, weakly connected", weak, AbsorbOptions{}, 1e-8},
		{"two effects, repeated cells", rep, AbsorbOptions{}, 1e-8},
		{"three effects, repeated cells", []Effect{rep[0], rep[1], {Name: "parity", Codes: feParity(len(rep[0].Codes)), Levels: 2}}, AbsorbOptions{}, 1e-8},
		{"two effects, tight tolerance", []Effect{p.unit, p.period}, AbsorbOptions{Tol: 1e-14}, 1e-11},
	} {
		n := len(test.effects[0].Codes)
		cols := feMakeColumns(uint64(10+i), n, 3, test.effects)
		u := feSVDProjector(t, test.effects, n)
		dst := make([][]float64, len(cols))
		abs, err := Absorb(dst, cols, test.effects, test.opts)
		if err != nil {
			t.Fatalf("%d %s: unexpected error: %v", i, test.name, err)
		}
		for j := range cols {
			want := feDummyResidual(u, cols[j])
			if d := feMaxAbsDiff(dst[j], want); d > test.tol {
				t.Errorf("%d %s column %d: residual differs from the dummy regression by %g (tolerance %g, %d sweeps)",
					i, test.name, j, d, test.tol, abs.Iterations)
			}
			// Normal equations hold: Dᵀ r = 0, i.e. every level sum of the
			// residual vanishes (property of least squares; tolerance
			// relative to the column's spread and the level size).
			sd := feStd(cols[j])
			for _, e := range test.effects {
				sums := make([]float64, e.Levels)
				for r, c := range e.Codes {
					sums[c] += dst[j][r]
				}
				for l, s := range sums {
					if math.Abs(s) > 1e-8*sd*float64(n) {
						t.Errorf("%d %s column %d: effect %s level %d: residual sums to %g", i, test.name, j, e.Name, l, s)
					}
				}
			}
		}
		if !abs.Converged || abs.MaxChange > abs.Tol {
			t.Errorf("%d %s: converged %v with final change %g above tolerance %g", i, test.name, abs.Converged, abs.MaxChange, abs.Tol)
		}
		t.Logf("%s: %d sweeps, final relative change %.2g", test.name, abs.Iterations, abs.MaxChange)
	}
}

func TestAbsorbDoF(t *testing.T) {
	// Reference for fixed cases: L1 + L2 - (number of connected
	// components) for two effects (Abowd, Creecy & Kramarz 2002).
	for i, test := range []struct {
		name    string
		effects []Effect
		dof     int
		red     []int
	}{
		{
			"one effect", []Effect{{Codes: []int32{0, 1, 1, 2}, Levels: 3}},
			3, []int{0},
		},
		{
			"one effect, unused level", []Effect{{Codes: []int32{0, 3, 3, 0}, Levels: 4}},
			2, []int{0},
		},
		{
			// Units {0,1} only in periods {0,1}, units {2,3} only in
			// periods {2,3}: two components, DoF = 4 + 4 - 2.
			"two effects, two disconnected groups",
			[]Effect{
				{Codes: []int32{0, 0, 1, 1, 2, 2, 3, 3}, Levels: 4},
				{Codes: []int32{0, 1, 0, 1, 2, 3, 3, 2}, Levels: 4},
			},
			6, []int{0, 2},
		},
		{
			"two effects, connected", []Effect{
				{Codes: []int32{0, 0, 1, 1, 2}, Levels: 3},
				{Codes: []int32{0, 1, 1, 2, 2}, Levels: 3},
			},
			5, []int{0, 1},
		},
		{
			// Third effect: one level redundant, further collinearity not
			// sought (documented as conservative; common practice).
			"three effects", []Effect{
				{Codes: []int32{0, 0, 1, 1, 2}, Levels: 3},
				{Codes: []int32{0, 1, 1, 2, 2}, Levels: 3},
				{Codes: []int32{0, 1, 0, 1, 1}, Levels: 2},
			},
			6, []int{0, 1, 1},
		},
	} {
		n := len(test.effects[0].Codes)
		info, dof := feDoF(test.effects, n)
		if dof != test.dof {
			t.Errorf("%d %s: DoF %d, want %d", i, test.name, dof, test.dof)
		}
		for k, e := range info {
			if e.Redundant != test.red[k] {
				t.Errorf("%d %s: effect %d redundant %d, want %d", i, test.name, k, e.Redundant, test.red[k])
			}
		}
	}

	// Random designs against the rank of the dummy matrix from gonum's
	// SVD (general-purpose reference): exact for two effects, an upper
	// bound for three.
	rng := rand.New(rand.NewPCG(5, 5))
	for trial := range 20 {
		l1, l2, l3 := 3+rng.IntN(10), 2+rng.IntN(8), 2+rng.IntN(4)
		n := 5 + rng.IntN(40)
		e := []Effect{{Codes: make([]int32, n), Levels: l1}, {Codes: make([]int32, n), Levels: l2}, {Codes: make([]int32, n), Levels: l3}}
		for r := range n {
			for k := range e {
				e[k].Codes[r] = int32(rng.IntN(e[k].Levels))
			}
		}
		_, dof2 := feDoF(e[:2], n)
		rank2 := feSVDProjector(t, feCompactAll(e[:2]), n).RawMatrix().Cols
		if dof2 != rank2 {
			t.Errorf("trial %d: two-effect DoF %d, SVD rank %d", trial, dof2, rank2)
		}
		_, dof3 := feDoF(e, n)
		rank3 := feSVDProjector(t, feCompactAll(e), n).RawMatrix().Cols
		if dof3 < rank3 {
			t.Errorf("trial %d: three-effect DoF %d below SVD rank %d", trial, dof3, rank3)
		}
	}

	// Absorb reports the same DoF and EffectInfo.
	abs, err := Absorb(nil, nil, []Effect{{Name: "a", Codes: []int32{0, 0, 1, 1}, Levels: 2}, {Name: "b", Codes: []int32{0, 1, 0, 1}, Levels: 2}}, AbsorbOptions{})
	if err != nil {
		t.Fatal(err)
	}
	want := []EffectInfo{{Name: "a", Levels: 2}, {Name: "b", Levels: 2, Redundant: 1}}
	if abs.DoF != 3 || !slices.Equal(abs.Effects, want) {
		t.Errorf("Absorb with no columns: DoF %d, effects %+v; want 3, %+v", abs.DoF, abs.Effects, want)
	}
}

// feCompactAll drops unused levels, so that the dummy matrix has no zero
// columns (which do not change its rank anyway).
func feCompactAll(e []Effect) []Effect {
	keep := make([]bool, len(e[0].Codes))
	for i := range keep {
		keep[i] = true
	}
	out, _ := Compact(e, keep)
	return out
}

func TestDropSingletons(t *testing.T) {
	// Reference: worked by hand from the definition (a row alone in its
	// level in any effect is dropped, repeatedly).
	for i, test := range []struct {
		name    string
		effects []Effect
		keep    []bool
		want    []bool
		dropped int
	}{
		{
			// Chain: row 4 is alone in unit 3; dropping it leaves row 3
			// alone in period 2; dropping that leaves row 2 alone in unit
			// 1 ... until only the 2×2 block of rows 0,1,5,6 remains.
			name: "chain",
			effects: []Effect{
				{Codes: []int32{0, 0, 1, 2, 3, 4, 4}, Levels: 5},
				{Codes: []int32{0, 1, 1, 2, 3, 0, 1}, Levels: 4},
			},
			keep:    []bool{true, true, true, true, true, true, true},
			want:    []bool{true, true, false, false, false, true, true},
			dropped: 3,
		},
		{
			name: "long chain where each drop makes the next singleton",
			effects: []Effect{
				// rows: (u0,t0) (u0,t1) (u1,t1) (u1,t2) (u2,t2) (u2,t3)
				{Codes: []int32{0, 0, 1, 1, 2, 2}, Levels: 3},
				{Codes: []int32{0, 1, 1, 2, 2, 3}, Levels: 4},
			},
			keep:    []bool{true, true, true, true, true, true},
			want:    []bool{false, false, false, false, false, false},
			dropped: 6,
		},
		{
			name: "dropped on entry stay dropped and are not counted",
			effects: []Effect{
				{Codes: []int32{0, 0, 1, 1, 2}, Levels: 3},
			},
			keep:    []bool{true, true, false, true, true},
			want:    []bool{true, true, false, false, false},
			dropped: 2,
		},
		{
			name:    "no singletons",
			effects: []Effect{{Codes: []int32{0, 0, 1, 1}, Levels: 2}, {Codes: []int32{0, 1, 0, 1}, Levels: 2}},
			keep:    []bool{true, true, true, true},
			want:    []bool{true, true, true, true},
			dropped: 0,
		},
	} {
		keep := slices.Clone(test.keep)
		got := DropSingletons(test.effects, keep)
		if got != test.dropped || !slices.Equal(keep, test.want) {
			t.Errorf("%d %s: dropped %d keep %v; want %d %v", i, test.name, got, keep, test.dropped, test.want)
		}
	}

	// Property on a generated sparse panel: afterwards no kept level has
	// exactly one kept row, and a second call drops nothing.
	rng := rand.New(rand.NewPCG(9, 9))
	const rows = 150
	eff := []Effect{{Name: "unit", Codes: make([]int32, rows), Levels: 100}, {Name: "period", Codes: make([]int32, rows), Levels: 12}}
	for r := range rows {
		eff[0].Codes[r] = int32(rng.IntN(100))
		eff[1].Codes[r] = int32(rng.IntN(12))
	}
	keep := make([]bool, rows)
	for i := range keep {
		keep[i] = true
	}
	if DropSingletons(eff, keep) == 0 {
		t.Fatal("generated sparse panel: expected some singletons")
	}
	for _, e := range eff {
		cnt := make([]int, e.Levels)
		for r, c := range e.Codes {
			if keep[r] {
				cnt[c]++
			}
		}
		if slices.Contains(cnt, 1) {
			t.Errorf("effect %s: a singleton level is left", e.Name)
		}
	}
	if d := DropSingletons(eff, keep); d != 0 {
		t.Errorf("second call dropped %d rows, want 0", d)
	}
}

func TestCompact(t *testing.T) {
	// Reference: worked by hand (renumbering in order of first appearance
	// among the kept rows).
	effects := []Effect{
		{Name: "u", Codes: []int32{4, 2, 4, 0, 2}, Levels: 5},
		{Name: "t", Codes: []int32{1, 1, 0, 2, 2}, Levels: 3},
	}
	orig := slices.Clone(effects[0].Codes)
	keep := []bool{false, true, true, false, true}
	out, rows := Compact(effects, keep)
	if !slices.Equal(rows, []int{1, 2, 4}) {
		t.Errorf("rows %v, want [1 2 4]", rows)
	}
	for i, test := range []struct {
		codes  []int32
		levels int
	}{
		{[]int32{0, 1, 0}, 2},
		{[]int32{0, 1, 2}, 3},
	} {
		if !slices.Equal(out[i].Codes, test.codes) || out[i].Levels != test.levels || out[i].Name != effects[i].Name {
			t.Errorf("effect %d: got %+v, want codes %v levels %d", i, out[i], test.codes, test.levels)
		}
	}
	if !slices.Equal(effects[0].Codes, orig) {
		t.Error("Compact modified its input codes")
	}
}

func TestAbsorbNotConverged(t *testing.T) {
	// Reference: the documented contract (MaxIter sweeps, then a
	// *NotConvergedError naming the column).
	p := feMakePanel(1, 30, 12, 0.75, 5)
	eff := []Effect{p.unit, p.period}
	cols := feMakeColumns(21, p.n, 2, eff)
	dst := make([][]float64, 2)
	abs, err := Absorb(dst, cols, eff, AbsorbOptions{MaxIter: 1, Workers: 1})
	var nc *NotConvergedError
	if !errors.As(err, &nc) {
		t.Fatalf("got error %v, want *NotConvergedError", err)
	}
	if nc.Column != 0 || nc.Iterations != 1 || nc.Tol != 1e-10 || !(nc.MaxChange > nc.Tol) {
		t.Errorf("got %+v", *nc)
	}
	if abs == nil || abs.Converged || abs.Iterations != 1 {
		t.Errorf("got absorption %+v, want Converged false after 1 sweep", abs)
	}
	msg := err.Error()
	for _, want := range []string{"did not converge", "column 0", "after 1 sweep:", "--max-sweeps", "tolerance"} {
		if !strings.Contains(msg, want) {
			t.Errorf("message %q lacks %q", msg, want)
		}
	}
	// An even limit stops after a full pair of sweeps.
	if _, err := Absorb(dst, cols, eff, AbsorbOptions{MaxIter: 2}); !errors.As(err, &nc) || nc.Iterations != 2 {
		t.Errorf("MaxIter 2: got %v", err)
	}
}

func TestAbsorbInvariants(t *testing.T) {
	// Reference: the documented contract (inputs unchanged, repeatable,
	// independent of the number of workers, in-place allowed).
	p := feMakePanel(6, 30, 12, 0.75, 5)
	for i, eff := range [][]Effect{
		{p.unit},
		{p.unit, p.period},
		{p.unit, p.period, p.extra},
	} {
		cols := feMakeColumns(uint64(30+i), p.n, 5, eff)
		origCols := make([][]float64, len(cols))
		for j := range cols {
			origCols[j] = slices.Clone(cols[j])
		}
		origCodes := make([][]int32, len(eff))
		for k := range eff {
			origCodes[k] = slices.Clone(eff[k].Codes)
		}
		var runs [][][]float64
		for _, w := range []int{1, 2, 1, 3} {
			dst := make([][]float64, len(cols))
			if _, err := Absorb(dst, cols, eff, AbsorbOptions{Workers: w}); err != nil {
				t.Fatalf("%d workers %d: %v", i, w, err)
			}
			runs = append(runs, dst)
		}
		for j := range cols {
			if !slices.Equal(cols[j], origCols[j]) {
				t.Errorf("%d: column %d was modified", i, j)
			}
		}
		for k := range eff {
			if !slices.Equal(eff[k].Codes, origCodes[k]) {
				t.Errorf("%d: codes of effect %d were modified", i, k)
			}
		}
		for r := 1; r < len(runs); r++ {
			for j := range cols {
				if !slices.Equal(runs[r][j], runs[0][j]) {
					t.Errorf("%d: run %d column %d differs bit for bit from run 0", i, r, j)
				}
			}
		}
		// Reusing destinations and absorbing in place give the same bits.
		dst := runs[1]
		if _, err := Absorb(dst, cols, eff, AbsorbOptions{}); err != nil {
			t.Fatal(err)
		}
		inPlace := make([][]float64, len(cols))
		for j := range cols {
			inPlace[j] = slices.Clone(cols[j])
		}
		if _, err := Absorb(inPlace, inPlace, eff, AbsorbOptions{}); err != nil {
			t.Fatal(err)
		}
		for j := range cols {
			if !slices.Equal(dst[j], runs[0][j]) || !slices.Equal(inPlace[j], runs[0][j]) {
				t.Errorf("%d column %d: reused or in-place destination gives different bits", i, j)
			}
		}
	}
}

func TestAbsorbSpecialColumns(t *testing.T) {
	// Reference: a constant, or a column that is a sum of effect
	// coefficients, lies in the span of the dummies: its residual is zero
	// (projection theorem). A column with no effects is copied.
	p := feMakePanel(8, 30, 12, 0.75, 5)
	eff := []Effect{p.unit, p.period}
	constant := make([]float64, p.n)
	spanned := make([]float64, p.n)
	for r := range p.n {
		constant[r] = 0.1
		spanned[r] = 1e3*float64(p.unit.Codes[r]) - 7*float64(p.period.Codes[r]*p.period.Codes[r])
	}
	dst := make([][]float64, 2)
	if _, err := Absorb(dst, [][]float64{constant, spanned}, eff, AbsorbOptions{}); err != nil {
		t.Fatal(err)
	}
	for i, test := range []struct {
		name string
		got  []float64
		tol  float64
	}{
		{"constant", dst[0], 0},
		{"spanned by the effects", dst[1], 1e-8 * feStd(spanned)},
	} {
		for r, v := range test.got {
			if math.Abs(v) > test.tol {
				t.Errorf("%d %s: row %d residual %g, want 0 within %g", i, test.name, r, v, test.tol)
				break
			}
		}
	}

	none := [][]float64{nil}
	abs, err := Absorb(none, [][]float64{{1, 2, 3}}, nil, AbsorbOptions{})
	if err != nil || !slices.Equal(none[0], []float64{1, 2, 3}) || abs.DoF != 0 {
		t.Errorf("no effects: got %v, %v, %+v", none[0], err, abs)
	}
}

func TestAbsorbErrors(t *testing.T) {
	// Reference: the documented contract (errors for bad data and
	// options, panics for programmer errors).
	eff := []Effect{{Name: "g", Codes: []int32{0, 0, 1, 1}, Levels: 2}, {Name: "h", Codes: []int32{0, 1, 0, 1}, Levels: 2}}
	good := []float64{1, 2, 3, 5}
	for i, test := range []struct {
		name string
		cols [][]float64
		opts AbsorbOptions
		want string
	}{
		{"NaN", [][]float64{good, {1, math.NaN(), 3, 4}}, AbsorbOptions{}, "column 1, row 1 is NaN"},
		{"Inf", [][]float64{{1, 2, math.Inf(-1), 4}}, AbsorbOptions{}, "row 2 is -Inf"},
		{"negative tolerance", [][]float64{good}, AbsorbOptions{Tol: -1}, "tolerance"},
		{"negative sweeps", [][]float64{good}, AbsorbOptions{MaxIter: -3}, "sweep limit"},
		{"negative workers", [][]float64{good}, AbsorbOptions{Workers: -1}, "worker"},
	} {
		_, err := Absorb(make([][]float64, len(test.cols)), test.cols, eff, test.opts)
		if err == nil || !strings.Contains(err.Error(), test.want) {
			t.Errorf("%d %s: got error %v, want one containing %q", i, test.name, err, test.want)
		}
	}

	for i, test := range []struct {
		name string
		f    func()
	}{
		{"dst count", func() { Absorb(nil, [][]float64{good}, eff, AbsorbOptions{}) }},
		{"column length", func() { Absorb(make([][]float64, 2), [][]float64{good, {1}}, eff, AbsorbOptions{}) }},
		{"dst length", func() { Absorb([][]float64{{0}}, [][]float64{good}, eff, AbsorbOptions{}) }},
		{"codes length", func() {
			Absorb([][]float64{nil}, [][]float64{{1, 2, 3}}, eff, AbsorbOptions{})
		}},
		{"code out of range", func() {
			Absorb([][]float64{nil}, [][]float64{good}, []Effect{{Codes: []int32{0, 2, 1, 0}, Levels: 2}}, AbsorbOptions{})
		}},
		{"negative code", func() {
			DropSingletons([]Effect{{Codes: []int32{0, -1}, Levels: 2}}, []bool{true, true})
		}},
		{"keep length", func() { Compact(eff, []bool{true}) }},
		{"NestedIn length", func() { NestedIn(eff[0], []int32{0}) }},
	} {
		if !fePanics(test.f) {
			t.Errorf("%d %s: did not panic", i, test.name)
		}
	}
}

func fePanics(f func()) (panicked bool) {
	defer func() {
		if r := recover(); r != nil {
			panicked = true
			if s, ok := r.(string); ok && !strings.HasPrefix(s, "ivcore: ") {
				panicked = false
			}
		}
	}()
	f()
	return false
}

func TestNestedIn(t *testing.T) {
	// Reference: worked by hand from the definition.
	store := Effect{Name: "store", Codes: []int32{0, 0, 1, 1, 2, 2}, Levels: 3}
	for i, test := range []struct {
		name    string
		e       Effect
		cluster []int32
		want    bool
	}{
		{"store in region", store, []int32{7, 7, 7, 7, 3, 3}, true},
		{"store is its own cluster", store, []int32{0, 0, 1, 1, 2, 2}, true},
		{"store split across two clusters", store, []int32{0, 0, 1, 2, 2, 2}, false},
		{"week not in store", Effect{Name: "week", Codes: []int32{0, 1, 0, 1, 0, 1}, Levels: 2}, store.Codes, false},
		{"negative cluster codes", store, []int32{-5, -5, -1, -1, 0, 0}, true},
		{"no rows", Effect{Levels: 4}, nil, true},
	} {
		if got := NestedIn(test.e, test.cluster); got != test.want {
			t.Errorf("%d %s: got %v, want %v", i, test.name, got, test.want)
		}
	}
}
