package demand

import (
	"math/rand/v2"
	"strconv"
	"sync"
	"testing"
)

// benchPanelData caches generated files by number of rows.
var benchPanelData sync.Map

// benchPanelCSV returns a generated weekly store panel with the columns
// product,store,week,price,units,cost1,cost2 (text, text, integer and four
// decimal numbers), the shape of the files priceiv reads. It is built once
// per size.
func benchPanelCSV(rows int) []byte {
	if b, ok := benchPanelData.Load(rows); ok {
		return b.([]byte)
	}
	rng := rand.New(rand.NewPCG(1, 1))
	products := []string{"cold brew 330ml", "cold brew 1l", "oat latte can", "nitro can", "mocha bottle", "decaf bottle"}
	b := make([]byte, 0, rows*64)
	b = append(b, "product,store,week,price,units,cost1,cost2\n"...)
	for i := range rows {
		b = append(b, products[i%len(products)]...)
		b = append(b, ",S"...)
		b = strconv.AppendInt(b, int64(rng.IntN(100)), 10)
		b = append(b, ',')
		b = strconv.AppendInt(b, int64(i/600%156+1), 10)
		b = append(b, ',')
		b = strconv.AppendFloat(b, 1.5+2*rng.Float64(), 'f', 2, 64)
		b = append(b, ',')
		b = strconv.AppendInt(b, int64(rng.IntN(400)), 10)
		b = append(b, ',')
		b = strconv.AppendFloat(b, 100*rng.Float64(), 'f', 4, 64)
		b = append(b, ',')
		b = strconv.AppendFloat(b, rng.NormFloat64(), 'g', -1, 64)
		b = append(b, '\n')
	}
	benchPanelData.Store(rows, b)
	return b
}

// BenchmarkReadCSV reads generated panels of 100,000 and 1,000,000 rows
// with the default number of workers (runtime.NumCPU()) and with one.
func BenchmarkReadCSV(b *testing.B) {
	for _, rows := range []int{100_000, 1_000_000} {
		data := benchPanelCSV(rows)
		for _, workers := range []int{0, 1} {
			name := "rows=" + strconv.Itoa(rows)
			if workers == 1 {
				name += "/workers=1"
			}
			b.Run(name, func(b *testing.B) {
				b.SetBytes(int64(len(data)))
				b.ReportAllocs()
				for b.Loop() {
					p, err := ReadCSV(data, "bench.csv", ReadOptions{Workers: workers})
					if err != nil {
						b.Fatal(err)
					}
					if p.N != rows {
						b.Fatalf("N = %d, want %d", p.N, rows)
					}
				}
				b.ReportMetric(float64(rows)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
			})
		}
	}
}
