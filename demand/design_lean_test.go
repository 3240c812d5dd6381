package demand

import (
	"math"
	"math/rand/v2"
	"strconv"
	"testing"
)

// leanTestPanel draws an invented cold-brew panel (generated data): stores
// × weeks rows with a store id (text), a week number, units and a price in
// levels, and bean and freight cost indices. With holes, a few cells of
// units and bean are missing, so that Build leaves those rows out.
func leanTestPanel(stores, weeks int, holes bool) *Panel {
	rng := rand.New(rand.NewPCG(3, 5))
	n := stores * weeks
	p := NewPanel("lean test market", n)
	store := &TextColumn{Codes: make([]int32, n)}
	for s := range stores {
		store.Levels = append(store.Levels, "S"+strconv.Itoa(s))
	}
	week, units, price := make([]float64, n), make([]float64, n), make([]float64, n)
	bean, freight := make([]float64, n), make([]float64, n)
	i := 0
	for w := range weeks {
		b := 90 + 10*rng.NormFloat64()
		for s := range stores {
			store.Codes[i] = int32(s)
			week[i] = float64(w + 1)
			bean[i] = b + rng.NormFloat64()
			freight[i] = 10 + 0.1*float64(s%7) + rng.NormFloat64()
			lp := 0.2 + 0.004*bean[i] + 0.01*freight[i] + 0.1*rng.NormFloat64()
			price[i] = math.Exp(lp)
			units[i] = math.Exp(3 - 1.5*lp + 0.3*rng.NormFloat64())
			if holes && rng.IntN(40) == 0 {
				units[i] = math.NaN()
			}
			if holes && rng.IntN(50) == 0 {
				bean[i] = math.NaN()
			}
			i++
		}
	}
	p.AddText("store", store)
	p.AddNum("week", week)
	p.AddNum("units", units)
	p.AddNum("price", price)
	p.AddNum("bean", bean)
	p.AddNum("freight", freight)
	return p
}

// TestBuildLeanMatchesBuild checks that a lean design holds the same
// numbers as Build's (property: the two differ only in where they keep
// them): absorbed columns, moments, rows used and price statistics
// identical bit for bit, RawRows equal to Build's Raw on any range of
// rows, and the panel reduced to the model and cluster columns. Cases:
// every row used and rows left out, with fixed effects and without, log-log
// and linear.
func TestBuildLeanMatchesBuild(t *testing.T) {
	for i, test := range []struct {
		holes bool
		form  string
		fe    []string
	}{
		{false, "log-log", []string{"store", "week"}},
		{true, "log-log", []string{"store", "week"}},
		{false, "linear", []string{"store", "week"}},
		{true, "linear", []string{"store"}},
		{false, "log-log", nil},
		{true, "semi-log", nil},
	} {
		spec := &Spec{Quantity: "units", Price: "price", Shifters: []string{"bean", "freight"}, Form: test.form,
			FE: test.fe, Cluster: []string{"store"}}
		want, err := Build(leanTestPanel(60, 150, test.holes), spec, 2)
		if err != nil {
			t.Fatal(err)
		}
		// Run twice on fresh panels, to catch state kept between builds.
		for rep := 0; rep < 2; rep++ {
			got, err := BuildLean(leanTestPanel(60, 150, test.holes), spec, 2)
			if err != nil {
				t.Fatal(err)
			}
			if got.N != want.N || got.MeanPrice != want.MeanPrice || got.MeanQuantity != want.MeanQuantity || got.PriceStats != want.PriceStats {
				t.Errorf("%d: N %d, means %v %v, stats %+v; Build %d, %v %v, %+v", i, got.N, got.MeanPrice, got.MeanQuantity, got.PriceStats,
					want.N, want.MeanPrice, want.MeanQuantity, want.PriceStats)
			}
			if len(got.Dropped) != len(want.Dropped) {
				t.Errorf("%d: dropped %v, Build %v", i, got.Dropped, want.Dropped)
			}
			switch {
			case want.N == got.Panel.N && got.Rows != nil:
				t.Errorf("%d: every row used, but Rows is not nil", i)
			case want.N < got.Panel.N && !equalInt32(got.Rows, want.Rows):
				t.Errorf("%d: rows used differ from Build's", i)
			}
			if len(got.Panel.Columns) != 5 || got.Panel.Has("week") || !got.Panel.Has("store") {
				t.Errorf("%d: lean panel holds %v, want the model columns and store", i, got.Panel.Columns)
			}
			for j := range want.Cols {
				if !sameFloats(got.Cols[j], want.Cols[j]) {
					t.Errorf("%d: absorbed column %s differs from Build's", i, want.Names[j])
				}
				// RawRows over uneven ranges, as a chunked reader asks.
				buf := make([]float64, 1000)
				for lo := 0; lo < want.N; lo += 777 {
					hi := min(lo+777, want.N)
					if !sameFloats(got.RawRows(buf[:hi-lo], j, lo), want.Raw[j][lo:hi]) {
						t.Errorf("%d: raw column %s, rows %d-%d differ from Build's", i, want.Names[j], lo, hi)
						break
					}
				}
			}
			r, c := want.Moments.Gram.Dims()
			for a := 0; a < r; a++ {
				for b := 0; b < c; b++ {
					if got.Moments.Gram.At(a, b) != want.Moments.Gram.At(a, b) {
						t.Errorf("%d: Gram[%d,%d] = %v, Build %v", i, a, b, got.Moments.Gram.At(a, b), want.Moments.Gram.At(a, b))
					}
				}
			}
			if !sameFloats(got.Moments.Scale, want.Moments.Scale) {
				t.Errorf("%d: column scales differ from Build's", i)
			}
		}
	}
}
