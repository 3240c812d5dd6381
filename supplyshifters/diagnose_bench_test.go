package supplyshifters

import (
	"math/rand/v2"
	"strconv"
	"testing"

	"priceiv/ivcore"
)

// BenchmarkDiagnoseModel times the moment-based diagnostics (everything
// except the grouped estimator) for one price and three shifters, after the
// moments are accumulated: HC1 makes two passes over the rows (the shared
// score pass and the control-function test), cluster-robust none.
func BenchmarkDiagnoseModel(b *testing.B) {
	for _, n := range []int{10_000, 200_000} {
		rng := rand.New(rand.NewPCG(1, 1))
		cols, names := arData(rng, n, 3, 0.3, -1.5, 0.5, true)
		codes := make([]int32, n)
		for i := range codes {
			codes[i] = int32(i % 500)
		}
		dims := []ivcore.ClusterDim{{Name: "store", Codes: codes, G: 500}}
		m, md := dgModel(cols, "y", []string{"x"}, nil, names, dims)
		for _, vk := range []ivcore.VcovKind{ivcore.HC1, ivcore.Cluster} {
			fit, err := ivcore.Estimate(m, md, ivcore.TSLS, vk)
			if err != nil {
				b.Fatal(err)
			}
			b.Run("n="+strconv.Itoa(n)+"/"+vk.String(), func(b *testing.B) {
				for i := 0; i < b.N; i++ {
					if _, err := DiagnoseModel(m, md, vk, fit, Options{}); err != nil {
						b.Fatal(err)
					}
				}
			})
		}
	}
}
