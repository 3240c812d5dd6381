package ivcore

import (
	"math/rand/v2"
	"os"
	"strconv"
	"testing"
)

// feBenchPanel draws an unbalanced panel of n rows with a product×store
// effect (20 products × 800 stores = 16000 levels) and a week effect (200
// levels), sorted by product×store as a file usually is. Each
// product×store is sold over its own span of weeks and its rows fall on
// random weeks of that span (rows may share a week when n exceeds the
// number of cells). It returns the effects and four columns that load on
// both effects plus noise.
func feBenchPanel(n int) ([]Effect, [][]float64) {
	const (
		products = 20
		stores   = 800
		weeks    = 200
	)
	rng := rand.New(rand.NewPCG(2024, 1))
	ps := products * stores
	start := make([]int, ps)
	span := make([]int, ps)
	for l := range ps {
		start[l] = rng.IntN(weeks - 20)
		span[l] = 20 + rng.IntN(weeks-start[l]-19)
	}
	psCodes := make([]int32, n)
	wkCodes := make([]int32, n)
	for i := range n {
		l := int(int64(i) * int64(ps) / int64(n))
		psCodes[i] = int32(l)
		wkCodes[i] = int32(start[l] + rng.IntN(span[l]))
	}
	effects := []Effect{
		{Name: "product×store", Codes: psCodes, Levels: ps},
		{Name: "week", Codes: wkCodes, Levels: weeks},
	}
	cols := make([][]float64, 4)
	for j := range cols {
		a := make([]float64, ps)
		for l := range a {
			a[l] = rng.NormFloat64()
		}
		g := make([]float64, weeks)
		for l := range g {
			g[l] = 0.5 * rng.NormFloat64()
		}
		c := make([]float64, n)
		for i := range c {
			c[i] = 3 + a[psCodes[i]] + g[wkCodes[i]] + 0.3*rng.NormFloat64()
		}
		cols[j] = c
	}
	return effects, cols
}

// BenchmarkAbsorb absorbs a product×store and a week effect from four
// columns. Set PRICEIV_BENCH_LARGE=1 to add 10 million rows.
func BenchmarkAbsorb(b *testing.B) {
	sizes := []int{100_000, 1_000_000}
	if os.Getenv("PRICEIV_BENCH_LARGE") == "1" {
		sizes = append(sizes, 10_000_000)
	}
	for _, n := range sizes {
		b.Run("rows="+strconv.Itoa(n), func(b *testing.B) {
			effects, cols := feBenchPanel(n)
			dst := make([][]float64, len(cols))
			for j := range dst {
				dst[j] = make([]float64, n)
			}
			var sweeps, iters int
			b.ReportAllocs()
			for b.Loop() {
				iters++
				abs, err := Absorb(dst, cols, effects, AbsorbOptions{})
				if err != nil {
					b.Fatal(err)
				}
				sweeps = abs.Iterations
			}
			b.ReportMetric(float64(n)*float64(iters)/b.Elapsed().Seconds(), "rows/s")
			b.ReportMetric(float64(sweeps), "sweeps")
		})
	}
}
