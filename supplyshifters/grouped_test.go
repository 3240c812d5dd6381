package supplyshifters

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"priceiv/demand"
	"priceiv/ivcore"
)

// sliceColumn reads x through a buffer, as a column the design recomputes.
func sliceColumn(x []float64) *column {
	return newColumn(func(buf []float64, lo int) []float64 { return buf[:copy(buf, x[lo:lo+len(buf)])] })
}

// TestUpperMedian checks the radix selection against a sort (common
// practice: the upper median is the element a sort leaves at index ⌊n/2⌋)
// on values that end the selection at each pass: few rows, ties, signs and
// zeros, a wide range, and long runs of values sharing their leading 48
// bits; lengths around the chunk size; each case run twice on one scratch.
func TestUpperMedian(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	near := func(n int) []float64 { // 1 + k ulps: the same first 48 bits
		x := make([]float64, n)
		for i := range x {
			x[i] = math.Float64frombits(math.Float64bits(1) + uint64(rng.IntN(20000)))
		}
		return x
	}
	draw := func(n int, f func() float64) []float64 {
		x := make([]float64, n)
		for i := range x {
			x[i] = f()
		}
		return x
	}
	hist := make([]int, 1<<radixBits)
	for i, x := range [][]float64{
		{3},
		{2, 1},
		{1, 2, 3},
		{5, 5, 5, 5},
		{-1, 0, 0, 1},
		{-2.5, -1e300, 7, 1e-310, -1e-310, 0, 3},
		draw(1001, rng.NormFloat64),
		draw(groupChunk-1, func() float64 { return float64(rng.IntN(7)) - 3 }),
		draw(groupChunk, func() float64 { return math.Exp(40 * rng.NormFloat64()) }),
		draw(groupChunk+1, func() float64 { return 90 + float64(rng.IntN(4000))/100 }),
		draw(3*groupChunk+17, func() float64 { return rng.NormFloat64() * math.Pow(10, float64(rng.IntN(30)-15)) }),
		near(50_000),
		append(near(30_000), draw(30_000, rng.NormFloat64)...),
	} {
		sorted := slices.Clone(x)
		slices.Sort(sorted)
		want := sorted[len(x)/2]
		for rep := 0; rep < 2; rep++ {
			for _, c := range []*column{sliceColumn(x), newColumn(func(buf []float64, lo int) []float64 { return x[lo : lo+len(buf)] })} {
				if got := upperMedian(c, len(x), hist); got != want {
					t.Errorf("%d (n=%d): median %v, sort gives %v", i, len(x), got, want)
				}
			}
		}
	}
}

// groupedDirect is the grouped estimator for one shifter computed directly
// on whole columns: the median by sorting a copy, the groups as a mask,
// the sums in row order. It is the reference for groupedSet, which must
// give the same numbers bit for bit.
func groupedDirect(y, x, z []float64, vk ivcore.VcovKind, dims []ivcore.ClusterDim, k int, absorbed bool) Grouped {
	g := Grouped{Split: "median", Slope: Num(math.NaN()), StdError: Num(math.NaN()), Cut: Num(math.NaN())}
	n := len(z)
	sorted := slices.Clone(z)
	slices.Sort(sorted)
	values := slices.Compact(slices.Clone(sorted))
	high := make([]bool, n)
	switch {
	case len(values) == 1:
		g.Reason = "single"
		return g
	case len(values) == 2:
		g.Split, g.Cut = "two values", Num(values[0])
		for i, v := range z {
			high[i] = v != values[0]
		}
	default:
		med := sorted[n/2]
		g.Cut = Num(med)
		for i, v := range z {
			high[i] = v > med
		}
		if !slices.Contains(high, true) {
			for i, v := range z {
				high[i] = v >= med
			}
		}
	}
	var sum [2][3]float64
	var cnt [2]int
	for i := range z {
		h := 0
		if high[i] {
			h = 1
		}
		cnt[h]++
		sum[h][0] += z[i]
		sum[h][1] += x[i]
		sum[h][2] += y[i]
	}
	if cnt[0] == 0 || cnt[1] == 0 {
		g.Reason = "one group"
		return g
	}
	mean := func(h, j int) float64 { return sum[h][j] / float64(cnt[h]) }
	g.Low = GroupMeans{N: cnt[0], Shifter: Num(mean(0, 0)), Endogenous: Num(mean(0, 1)), Outcome: Num(mean(0, 2))}
	g.High = GroupMeans{N: cnt[1], Shifter: Num(mean(1, 0)), Endogenous: Num(mean(1, 1)), Outcome: Num(mean(1, 2))}
	dx, dy := mean(1, 1)-mean(0, 1), mean(1, 2)-mean(0, 2)
	b := dy / dx
	g.Slope, g.Available = Num(b), true
	nf := float64(n)
	dbar := float64(cnt[1]) / nf
	xbar := (sum[0][1] + sum[1][1]) / nf
	ybar := (sum[0][2] + sum[1][2]) / nf
	den := float64(cnt[0]) * float64(cnt[1]) / nf * dx
	dd := func(i int) float64 {
		if high[i] {
			return 1 - dbar
		}
		return -dbar
	}
	var vr float64
	switch vk {
	case ivcore.IID:
		var uu float64
		for i := range z {
			u := (y[i] - ybar) - b*(x[i]-xbar)
			uu += u * u
		}
		vr = uu / float64(n-k) * (float64(cnt[0]) * float64(cnt[1]) / nf) / (den * den)
	case ivcore.HC1:
		var s float64
		for i := range z {
			psi := dd(i) * ((y[i] - ybar) - b*(x[i]-xbar))
			s += psi * psi
		}
		vr = nf / float64(n-k) * s / (den * den)
	case ivcore.Cluster:
		for w, dim := range dims {
			sums := make([]float64, dim.G)
			for i := range z {
				sums[dim.Codes[i]] += dd(i) * ((y[i] - ybar) - b*(x[i]-xbar))
			}
			s := 0.0
			for _, v := range sums {
				s += v * v
			}
			kg := k
			if absorbed {
				kg -= dim.NestedDoF
			}
			c := float64(dim.G) / float64(dim.G-1) * float64(n-1) / float64(n-kg)
			if w == 2 {
				c = -c
			}
			vr += c * s / (den * den)
		}
	}
	g.StdError = Num(math.Sqrt(vr))
	return g
}

// TestGroupedSetMatchesDirect checks groupedSet, which reads its columns in
// chunks and shares the passes among shifters, against the direct
// computation (property: the same numbers bit for bit) for a continuous,
// a binary and a mostly constant shifter whose median is its largest
// value, under each covariance kind with one- and two-way clusters, on
// columns read as views and through buffers.
func TestGroupedSetMatchesDirect(t *testing.T) {
	rng := rand.New(rand.NewPCG(4, 2))
	n := 3*groupChunk + 123
	y, x := make([]float64, n), make([]float64, n)
	zs := [][]float64{make([]float64, n), make([]float64, n), make([]float64, n)}
	a, b := make([]int32, n), make([]int32, n)
	for i := range n {
		zs[0][i] = 90 + 5*rng.NormFloat64()
		zs[1][i] = float64(rng.IntN(2))
		if rng.IntN(10) == 0 {
			zs[2][i] = -1 - float64(rng.IntN(2))
		}
		x[i] = 0.01*zs[0][i] + 0.2*zs[1][i] + 0.3*zs[2][i] + rng.NormFloat64()
		y[i] = 2 - 1.4*x[i] + rng.NormFloat64()
		a[i], b[i] = int32(rng.IntN(50)), int32(rng.IntN(30))
	}
	ab := make([]int32, n)
	for i := range ab {
		ab[i] = a[i]*30 + b[i]
	}
	oneWay := []ivcore.ClusterDim{{Name: "a", Codes: a, G: 50, NestedDoF: 3}}
	twoWay := append(oneWay, ivcore.ClusterDim{Name: "b", Codes: b, G: 30}, ivcore.ClusterDim{Name: "a×b", Codes: ab, G: 1500})
	hist := make([]int, 1<<radixBits)
	for _, test := range []struct {
		vk       ivcore.VcovKind
		dims     []ivcore.ClusterDim
		absorbed bool
	}{
		{ivcore.IID, nil, false},
		{ivcore.HC1, nil, false},
		{ivcore.Cluster, oneWay, false},
		{ivcore.Cluster, oneWay, true},
		{ivcore.Cluster, twoWay, false},
	} {
		for _, buffered := range []bool{false, true} {
			col := func(v []float64) *column {
				if buffered {
					return sliceColumn(v)
				}
				return newColumn(func(buf []float64, lo int) []float64 { return v[lo : lo+len(buf)] })
			}
			var cz []*column
			for _, z := range zs {
				cz = append(cz, col(z))
			}
			got := groupedSet(col(y), col(x), cz, n, test.vk, test.dims, 9, test.absorbed, hist)
			for s, z := range zs {
				want := groupedDirect(y, x, z, test.vk, test.dims, 9, test.absorbed)
				g := got[s]
				same := g.Split == want.Split && g.Available == want.Available &&
					g.Cut == want.Cut && g.Low == want.Low && g.High == want.High &&
					g.Slope == want.Slope && g.StdError == want.StdError
				if !same {
					t.Errorf("%v dims %d absorbed %v buffered %v, shifter %d:\n got %+v\nwant %+v", test.vk, len(test.dims), test.absorbed, buffered, s, g, want)
				}
				if s == 2 && (g.Split != "median" || g.High.N < n/2) {
					t.Errorf("shifter 2 should split at or above its median, its largest value: %+v", g)
				}
			}
		}
	}
	if got := groupedSet(sliceColumn(y), sliceColumn(x), []*column{sliceColumn(make([]float64, n))}, n, ivcore.HC1, nil, 2, false, hist); got[0].Available {
		t.Errorf("a constant shifter gave a slope: %+v", got[0])
	}
}

// TestGroupedLeanDesign checks that the grouped estimator of a lean design,
// whose raw log columns are recomputed, equals that of Build's design
// (property: the same rows and values), with every row used and with rows
// left out.
func TestGroupedLeanDesign(t *testing.T) {
	for _, holes := range []bool{false, true} {
		var out [2][]Grouped
		for k, build := range []func(*demand.Panel, *demand.Spec, int) (*demand.Design, error){demand.Build, demand.BuildLean} {
			p := coldBrewPanel(7)
			if holes {
				units, _ := p.Float("units")
				for i := 0; i < len(units); i += 37 {
					units[i] = math.NaN()
				}
			}
			spec := &demand.Spec{Quantity: "units", Price: "price", Shifters: []string{"bean", "freight", "label"},
				Controls: []string{"promo"}, FE: []string{"store"}, Cluster: []string{"store"}}
			d, err := build(p, spec, 2)
			if err != nil {
				t.Fatal(err)
			}
			fit, _, err := d.Fit()
			if err != nil {
				t.Fatal(err)
			}
			dg, err := Diagnose(d, fit, Options{})
			if err != nil {
				t.Fatal(err)
			}
			out[k] = dg.Grouped
		}
		if len(out[0]) != 6 || len(out[1]) != len(out[0]) {
			t.Fatalf("holes %v: %d and %d grouped rows, want 6", holes, len(out[0]), len(out[1]))
		}
		for i := range out[0] {
			if out[0][i] != out[1][i] {
				t.Errorf("holes %v: lean %+v\nBuild %+v", holes, out[1][i], out[0][i])
			}
		}
	}
}
