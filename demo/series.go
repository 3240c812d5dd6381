package demo

import (
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/mat"
)

// series holds the cost indices and temperatures of the market. Indices
// are rounded to two decimals and temperatures to one, as published; the
// generator uses the rounded values, so the recorded columns are exactly
// the ones that moved costs and demand.
type series struct {
	bean       []float64     // [week], national green-bean cost index
	bottle     []float64     // [week], national glass-bottle index
	label      []float64     // [week], national label-printing index
	freight    [][]float64   // [region][week], diesel freight index
	temp       [][]float64   // [region][week], °C
	ingredient [][][]float64 // [product][region][week], product's own ingredient contract index
}

// ar1 returns n draws of a stationary AR(1) process with autocorrelation
// rho and marginal standard deviation sd:
//
//	x_t = rho*x_{t-1} + sqrt(1-rho²)*sd*ε_t,  x_0 ~ N(0, sd²).
func ar1(rng *rand.Rand, n int, rho, sd float64) []float64 {
	x := make([]float64, n)
	inn := math.Sqrt(1-rho*rho) * sd
	prev := sd * rng.NormFloat64()
	for t := range x {
		if t > 0 {
			prev = rho*prev + inn*rng.NormFloat64()
		}
		x[t] = prev
	}
	return x
}

func round2(x float64) float64 { return math.Round(x*100) / 100 }
func round1(x float64) float64 { return math.Round(x*10) / 10 }

// index turns a log deviation series into an index around 100.
func index(x []float64) []float64 {
	for t, v := range x {
		x[t] = round2(100 * math.Exp(v))
	}
	return x
}

// Parameters of the index series: labelSD is the week-to-week standard
// deviation of the label index in index points; the ingredient index of
// a product in a region is a national AR(1) in logs plus a regional one.
const (
	labelSD        = 5.0
	ingRho         = 0.7
	ingNationalSD  = 0.14
	ingRegionalRho = 0.5
	ingRegionalSD  = 0.10
)

// makeSeries draws every cost index and temperature series.
func makeSeries(rng *rand.Rand, nProducts, nRegions, nWeeks int) series {
	s := series{
		bean:   index(ar1(rng, nWeeks, 0.85, 0.12)),
		bottle: index(ar1(rng, nWeeks, 0.85, 0.08)),
	}
	national := ar1(rng, nWeeks, 0.9, 0.07)
	s.freight = make([][]float64, nRegions)
	s.temp = make([][]float64, nRegions)
	for r := range s.freight {
		off := 0.03 * rng.NormFloat64()
		loc := ar1(rng, nWeeks, 0.6, 0.04)
		for t := range loc {
			loc[t] += national[t] + off
		}
		s.freight[r] = index(loc)

		mean := 10 + 7*rng.Float64() // regional mean temperature
		amp := 7 + 3*rng.Float64()   // seasonal amplitude
		noise := ar1(rng, nWeeks, 0.5, 1.8)
		tr := make([]float64, nWeeks)
		for t := range tr {
			week := float64(t + 1)
			// Week 1 is early January; the peak falls in mid-July.
			tr[t] = round1(mean + amp*math.Sin(2*math.Pi*(week-16)/52) + noise[t])
		}
		s.temp[r] = tr
	}
	s.ingredient = make([][][]float64, nProducts)
	for i := range s.ingredient {
		nat := ar1(rng, nWeeks, ingRho, ingNationalSD)
		s.ingredient[i] = make([][]float64, nRegions)
		for r := range s.ingredient[i] {
			loc := ar1(rng, nWeeks, ingRegionalRho, ingRegionalSD)
			for t := range loc {
				loc[t] += nat[t]
			}
			s.ingredient[i][r] = index(loc)
		}
	}
	s.label = makeLabel(rng, s, nWeeks)
	return s
}

// makeLabel draws the label-printing index. Its weekly movements are made
// orthogonal, over the sample weeks, to the other national and averaged
// cost series and to the national mean temperature. A weekly national
// series shares only nWeeks values with the others, so a chance
// correlation with the strong bean index would otherwise lend it a
// first stage it does not have; the orthogonal construction keeps the
// label index what the scenario says: a true but weak cost shifter.
func makeLabel(rng *rand.Rand, s series, nWeeks int) []float64 {
	z := ar1(rng, nWeeks, 0.3, 1)
	regs := [][]float64{s.bean, s.bottle, meanOver(s.freight, nWeeks), meanOver(s.temp, nWeeks)}
	for _, ing := range s.ingredient {
		regs = append(regs, meanOver(ing, nWeeks))
	}
	k := len(regs) + 1
	if nWeeks > k+2 {
		x := mat.NewDense(nWeeks, k, nil)
		for t := 0; t < nWeeks; t++ {
			x.Set(t, 0, 1)
			for j, r := range regs {
				x.Set(t, j+1, r[t])
			}
		}
		var coef mat.VecDense
		y := mat.NewVecDense(nWeeks, z)
		if err := coef.SolveVec(x, y); err == nil {
			var fit mat.VecDense
			fit.MulVec(x, &coef)
			for t := range z {
				z[t] -= fit.AtVec(t)
			}
		}
	}
	var m, ss float64
	for _, v := range z {
		m += v
	}
	m /= float64(nWeeks)
	for _, v := range z {
		ss += (v - m) * (v - m)
	}
	sd := math.Sqrt(ss / float64(nWeeks))
	if sd == 0 {
		sd = 1
	}
	out := make([]float64, nWeeks)
	for t, v := range z {
		out[t] = round2(100 + labelSD*(v-m)/sd)
	}
	return out
}

// meanOver averages rows of x week by week.
func meanOver(x [][]float64, nWeeks int) []float64 {
	m := make([]float64, nWeeks)
	for _, row := range x {
		for t, v := range row {
			m[t] += v
		}
	}
	for t := range m {
		m[t] /= float64(len(x))
	}
	return m
}
