package tests

import (
	"bytes"
	"math"
	"math/rand/v2"
	"os"
	"strconv"
	"testing"

	"priceiv/demand"
)

// benchSizes are the panel sizes of the benchmarks; 10M rows only with
// PRICEIV_BENCH_LARGE=1.
func benchSizes() []int {
	s := []int{100_000, 1_000_000}
	if os.Getenv("PRICEIV_BENCH_LARGE") == "1" {
		s = append(s, 10_000_000)
	}
	return s
}

// benchCSV generates a product-store-week panel of about n rows with an
// endogenous price and two cost shifters, as CSV bytes.
func benchCSV(n int) []byte {
	rng := rand.New(rand.NewPCG(uint64(n), 3))
	const products, weeks = 20, 200
	stores := max(1, n/(products*weeks))
	var b bytes.Buffer
	b.Grow(n * 60)
	b.WriteString("product,store,week,units,price,bean,freight\n")
	rows := 0
	buf := make([]byte, 0, 128)
	for s := 0; s < stores && rows < n; s++ {
		for p := 0; p < products && rows < n; p++ {
			a := rng.NormFloat64()
			for w := 0; w < weeks && rows < n; w++ {
				bean := 1 + 0.2*math.Sin(float64(w)/9) + 0.05*rng.NormFloat64()
				fr := 1 + 0.1*rng.NormFloat64()
				u := 0.2 * rng.NormFloat64()
				lp := 0.8*math.Log(bean) + 0.5*math.Log(fr) + 0.5*u + 0.05*rng.NormFloat64() + 1
				lq := 4 + a - 2*lp + u
				buf = buf[:0]
				buf = append(buf, 'P')
				buf = strconv.AppendInt(buf, int64(p), 10)
				buf = append(buf, ",S"...)
				buf = strconv.AppendInt(buf, int64(s), 10)
				buf = append(buf, ',')
				buf = strconv.AppendInt(buf, int64(w), 10)
				buf = append(buf, ',')
				buf = strconv.AppendFloat(buf, math.Round(math.Exp(lq)*100)/100+0.01, 'f', 2, 64)
				buf = append(buf, ',')
				buf = strconv.AppendFloat(buf, math.Exp(lp), 'f', 4, 64)
				buf = append(buf, ',')
				buf = strconv.AppendFloat(buf, bean, 'f', 5, 64)
				buf = append(buf, ',')
				buf = strconv.AppendFloat(buf, fr, 'f', 5, 64)
				buf = append(buf, '\n')
				b.Write(buf)
				rows++
			}
		}
	}
	return b.Bytes()
}

// BenchmarkLoad measures reading a panel CSV into columns.
func BenchmarkLoad(b *testing.B) {
	for _, n := range benchSizes() {
		data := benchCSV(n)
		b.Run("rows="+strconv.Itoa(n), func(b *testing.B) {
			b.SetBytes(int64(len(data)))
			b.ReportAllocs()
			for b.Loop() {
				if _, err := demand.ReadCSV(data, "bench", demand.ReadOptions{}); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
		})
	}
}

// BenchmarkEstimate measures building and fitting a log-log 2SLS model with
// product×store and week fixed effects absorbed and store clusters.
func BenchmarkEstimate(b *testing.B) {
	for _, n := range benchSizes() {
		p, err := demand.ReadCSV(benchCSV(n), "bench", demand.ReadOptions{})
		if err != nil {
			b.Fatal(err)
		}
		spec := &demand.Spec{Quantity: "units", Price: "price", Shifters: []string{"bean", "freight"},
			FE: []string{"product*store", "week"}, Cluster: []string{"store"}}
		b.Run("rows="+strconv.Itoa(n), func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				d, err := demand.Build(p, spec, 0)
				if err != nil {
					b.Fatal(err)
				}
				if _, _, err := d.Fit(); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
		})
	}
}
