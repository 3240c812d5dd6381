package tests

import (
	"bufio"
	"io"
	"math"
	"math/rand/v2"
	"strconv"
)

// Unbalanced describes the invented store panel of the benchmarks and of
// the side-by-side comparison (tests/bench/compare.sh): Products ×
// Stores pairs, each sold for a random stretch of MinWeeks to MaxWeeks
// consecutive weeks out of Weeks, with an endogenous price and two cost
// shifters. The true own-price elasticity is -1.8.
//
// For pair ps (product p, store s in freight region s mod Regions) and
// week t:
//
//	ln q = 3 + a_ps + s_t - 1.8 ln p + u
//	ln p = 0.5 + 0.6 ln bean_pt + 0.4 ln freight_rt + 0.2 a_ps + 0.5 u + v
//
// where a_ps ~ N(0, 0.5²), s_t = 0.15 sin(2πt/52), u ~ N(0, 0.3²) is the
// demand shock that makes price endogenous, v ~ N(0, 0.2²), and the log cost
// indices are random walks: per product (bean, steps N(0, 0.04²)) and per
// region (freight, steps N(0, 0.03²)). A stretch of L weeks, L uniform on
// [MinWeeks, MaxWeeks], starts at a uniform week.
type Unbalanced struct {
	Products, Stores, Weeks int
	MinWeeks, MaxWeeks      int
	Regions                 int
	Seed                    uint64
}

// DefaultUnbalanced is the comparison panel: 20 products × 800 stores,
// stretches of 50-200 of 200 weeks, about 2M rows.
func DefaultUnbalanced() Unbalanced {
	return Unbalanced{Products: 20, Stores: 800, Weeks: 200, MinWeeks: 50, MaxWeeks: 200, Regions: 25, Seed: 1}
}

// UnbalancedRows returns the default panel resized to about n rows by its
// number of stores (a pair is active for 125 weeks on average).
func UnbalancedRows(n int) Unbalanced {
	c := DefaultUnbalanced()
	c.Stores = max(2, (n+c.Products*125/2)/(c.Products*125))
	return c
}

// UnbalancedHeader is the header line WriteUnbalanced writes.
const UnbalancedHeader = "product,store,week,units,price,bean,freight"

// WriteUnbalanced writes the panel as CSV with the header
// UnbalancedHeader, rows week by week (as a weekly export appends them),
// and returns the number of rows. product is "P01"…, store "S0001"…, week
// 1…Weeks; units has 3 decimals, price 4, the cost indices 5. The same
// configuration gives the same bytes. WriteUnbalanced panics if the sizes
// are not positive or MinWeeks ≤ MaxWeeks ≤ Weeks does not hold.
func WriteUnbalanced(out io.Writer, c Unbalanced) (rows int, err error) {
	if c.Products < 1 || c.Stores < 1 || c.Weeks < 1 || c.Regions < 1 || c.MinWeeks < 1 || c.MaxWeeks < c.MinWeeks || c.MaxWeeks > c.Weeks {
		panic("tests: bad unbalanced panel sizes")
	}
	rng := rand.New(rand.NewPCG(c.Seed, 0x9e3779b97f4a7c15))
	bean := randomWalks(rng, c.Products, c.Weeks, 0.04)
	freight := randomWalks(rng, c.Regions, c.Weeks, 0.03)
	npairs := c.Products * c.Stores
	first := make([]int32, npairs)
	last := make([]int32, npairs)
	effect := make([]float64, npairs)
	for ps := range npairs {
		l := c.MinWeeks + rng.IntN(c.MaxWeeks-c.MinWeeks+1)
		f := rng.IntN(c.Weeks - l + 1)
		first[ps], last[ps] = int32(f), int32(f+l)
		effect[ps] = 0.5 * rng.NormFloat64()
	}
	w := bufio.NewWriterSize(out, 1<<20)
	w.WriteString(UnbalancedHeader + "\n")
	buf := make([]byte, 0, 128)
	for t := range int32(c.Weeks) {
		season := 0.15 * math.Sin(2*math.Pi*float64(t)/52)
		for ps := range npairs {
			if t < first[ps] || t >= last[ps] {
				continue
			}
			p, s := ps%c.Products, ps/c.Products
			lb, lf := bean[p][t], freight[s%c.Regions][t]
			u := 0.3 * rng.NormFloat64()
			lp := 0.5 + 0.6*lb + 0.4*lf + 0.2*effect[ps] + 0.5*u + 0.2*rng.NormFloat64()
			lq := 3 + effect[ps] + season - 1.8*lp + u
			buf = append(buf[:0], 'P')
			buf = appendPadded(buf, p+1, 2)
			buf = append(buf, ",S"...)
			buf = appendPadded(buf, s+1, 4)
			buf = append(buf, ',')
			buf = strconv.AppendInt(buf, int64(t+1), 10)
			buf = append(buf, ',')
			buf = strconv.AppendFloat(buf, math.Max(math.Exp(lq), 0.001), 'f', 3, 64)
			buf = append(buf, ',')
			buf = strconv.AppendFloat(buf, math.Exp(lp), 'f', 4, 64)
			buf = append(buf, ',')
			buf = strconv.AppendFloat(buf, 100*math.Exp(lb), 'f', 5, 64)
			buf = append(buf, ',')
			buf = strconv.AppendFloat(buf, 10*math.Exp(lf), 'f', 5, 64)
			buf = append(buf, '\n')
			if _, err := w.Write(buf); err != nil {
				return rows, err
			}
			rows++
		}
	}
	return rows, w.Flush()
}

// randomWalks returns k random walks of length t with steps N(0, sd²).
func randomWalks(rng *rand.Rand, k, t int, sd float64) [][]float64 {
	out := make([][]float64, k)
	for i := range out {
		out[i] = make([]float64, t)
		x := 0.0
		for j := range out[i] {
			x += sd * rng.NormFloat64()
			out[i][j] = x
		}
	}
	return out
}

// appendPadded appends v in decimal, padded with zeros to width digits.
func appendPadded(b []byte, v, width int) []byte {
	s := strconv.Itoa(v)
	for i := len(s); i < width; i++ {
		b = append(b, '0')
	}
	return append(b, s...)
}
