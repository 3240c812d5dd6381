package ivcore

import (
	"math/rand/v2"
	"strconv"
	"testing"
)

// bootBenchPanel generates n rows in G clusters directly as columns:
// y, price, intercept, two controls, two cost shifters (k = 6 columns
// beside y, 2SLS with one endogenous regressor and two instruments).
func bootBenchPanel(n, G int) (*Moments, Model) {
	rng := rand.New(rand.NewPCG(7, 7))
	cols := make([][]float64, 7)
	for j := range cols {
		cols[j] = make([]float64, n)
	}
	codes := make([]int32, n)
	shock := make([]float64, G)
	for g := range shock {
		shock[g] = 0.5 * rng.NormFloat64()
	}
	for i := range n {
		g := int32(int64(i) * int64(G) / int64(n))
		codes[i] = g
		w1, w2 := rng.NormFloat64(), rng.NormFloat64()
		z1, z2 := rng.NormFloat64(), rng.NormFloat64()
		v := rng.NormFloat64()
		u := shock[g] + 0.5*v + rng.NormFloat64()
		p := 0.7*z1 + 0.3*z2 + 0.2*w1 + v
		cols[0][i] = 2 - 1.8*p + 0.3*w1 - 0.2*w2 + u
		cols[1][i], cols[2][i], cols[3][i], cols[4][i] = p, 1, w1, w2
		cols[5][i], cols[6][i] = z1, z2
	}
	names := []string{"ln_units", "ln_price", "intercept", "temp", "promo", "bean_index", "freight_index"}
	m := Accumulate(cols, names, []ClusterDim{{Name: "store", Codes: codes, G: G}}, 0)
	return m, Model{Y: 0, Endog: []int{1}, Exog: []int{2, 3, 4}, Instr: []int{5, 6}}
}

// BenchmarkClusterBootstrap times 999 replicates of 2SLS with 500
// clusters. One op is the whole bootstrap. The moment blocks are
// accumulated before the timer starts; a replicate costs O(G·u²) and never
// reads the rows, so ns/op should not change between 100k and 1M rows.
func BenchmarkClusterBootstrap(b *testing.B) {
	const (
		G = 500
		B = 999
	)
	for _, n := range []int{100_000, 1_000_000} {
		b.Run("rows="+strconv.Itoa(n), func(b *testing.B) {
			m, md := bootBenchPanel(n, G)
			b.ReportAllocs()
			for b.Loop() {
				if _, err := ClusterBootstrap(m, 0, md, TSLS, B, 1, 0, nil); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*B), "ns/replicate")
		})
	}
}
