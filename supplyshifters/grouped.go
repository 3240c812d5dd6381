package supplyshifters

import (
	"fmt"
	"math"

	"priceiv/demand"
	"priceiv/ivcore"
)

// Grouped is the grouped (Wald 1940) estimator for one shifter: the rows
// are split into a low and a high group of the shifter, and the slope
// between the two points (mean endogenous, mean outcome) is
//
//	b = (ȳ_high - ȳ_low) / (x̄_high - x̄_low)
//
// It is the IV estimate with the group indicator as the only instrument
// and an intercept, and it is the picture an analyst draws on a
// whiteboard: two clouds of weeks, high-cost and low-cost, and the line
// through their centres. Its standard error is that of this IV estimate
// with the model's covariance kind.
type Grouped struct {
	Shifter string `json:"shifter"`
	// Version is "raw" (the model's columns as transformed, e.g. logs,
	// before fixed effects are absorbed; no controls) or "within" (fixed
	// effects absorbed from all three columns, as in the model; the other
	// controls are not partialled out).
	Version string `json:"version"`
	// Available is false when the shifter does not split the rows (a
	// single value) or the groups have the same mean of the endogenous
	// regressor; Reason says why.
	Available bool   `json:"available"`
	Reason    string `json:"reason,omitempty"`
	// Split is "median" (low: at or below Cut, high: above; when the
	// median is also the largest value, low: below, high: at or above) or
	// "two values" for a binary shifter (Cut is the lower value).
	Split    string     `json:"split"`
	Cut      Num        `json:"cut"`
	Low      GroupMeans `json:"low"`
	High     GroupMeans `json:"high"`
	Slope    Num        `json:"slope"`
	StdError Num        `json:"std_error"`
	// Estimate is the fit's coefficient, shown beside.
	Estimate Num    `json:"iv_estimate"`
	Meaning  string `json:"meaning"`
}

// GroupMeans are the means of one group of rows.
type GroupMeans struct {
	N          int `json:"n"`
	Shifter    Num `json:"mean_shifter"`
	Endogenous Num `json:"mean_endogenous"`
	Outcome    Num `json:"mean_outcome"`
}

// groupedAll computes the grouped estimator for each shifter, raw and,
// when the design absorbs fixed effects, within.
func groupedAll(d *demand.Design, md ivcore.Model, vk ivcore.VcovKind, dg *Diagnostics) []Grouped {
	var out []Grouped
	y, x := md.Y, md.Endog[0]
	var dims []ivcore.ClusterDim
	if vk == ivcore.Cluster {
		for _, cb := range d.Moments.Clusters {
			dims = append(dims, cb.Dim)
		}
	}
	for _, s := range md.Instr {
		g := groupedOne(d.Raw[y], d.Raw[x], d.Raw[s], vk, dims, 2, false)
		g.Shifter, g.Version = d.Names[s], "raw"
		finishGrouped(&g, d.Names[y], d.Names[x], dg)
		out = append(out, g)
		if d.Absorption != nil {
			g := groupedOne(d.Cols[y], d.Cols[x], d.Cols[s], vk, dims, 2+d.Absorption.DoF, true)
			g.Shifter, g.Version = d.Names[s], "within"
			finishGrouped(&g, d.Names[y], d.Names[x], dg)
			out = append(out, g)
		}
	}
	return out
}

// groupedOne splits the rows by z and computes the grouped estimator of
// y on x with standard error of kind vk; k counts the parameters for the
// small-sample factors, and absorbed says whether k includes absorbed
// fixed-effect levels (those nested in a cluster are then left out of it).
func groupedOne(y, x, z []float64, vk ivcore.VcovKind, dims []ivcore.ClusterDim, k int, absorbed bool) Grouped {
	g := Grouped{Split: "median", Slope: Num(math.NaN()), StdError: Num(math.NaN()), Cut: Num(math.NaN())}
	n := len(z)
	// Binary shifter?
	v0, v1, distinct := z[0], math.NaN(), 1
	for _, v := range z {
		if v == v0 || v == v1 {
			continue
		}
		if distinct == 1 {
			v1, distinct = v, 2
			continue
		}
		distinct = 3
		break
	}
	high := make([]bool, n)
	if distinct == 1 {
		g.Reason = "The shifter takes a single value in these rows, so it does not split them into groups."
		return g
	}
	if distinct == 2 {
		g.Split = "two values"
		lo := math.Min(v0, v1)
		g.Cut = Num(lo)
		for i, v := range z {
			high[i] = v != lo
		}
	} else {
		med := median(z)
		g.Cut = Num(med)
		nh := 0
		for i, v := range z {
			high[i] = v > med
			if high[i] {
				nh++
			}
		}
		if nh == 0 {
			for i, v := range z {
				high[i] = v >= med
			}
		}
	}
	// Pass 1: group means.
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
		g.Reason = "All rows fall in one group of the shifter."
		return g
	}
	mean := func(h, j int) float64 { return sum[h][j] / float64(cnt[h]) }
	g.Low = GroupMeans{N: cnt[0], Shifter: Num(mean(0, 0)), Endogenous: Num(mean(0, 1)), Outcome: Num(mean(0, 2))}
	g.High = GroupMeans{N: cnt[1], Shifter: Num(mean(1, 0)), Endogenous: Num(mean(1, 1)), Outcome: Num(mean(1, 2))}
	dx := mean(1, 1) - mean(0, 1)
	dy := mean(1, 2) - mean(0, 2)
	if dx == 0 {
		g.Reason = "The two groups have the same mean of the endogenous regressor: the slope is undefined (the shifter does not move it)."
		return g
	}
	b := dy / dx
	g.Slope, g.Available = Num(b), true

	// Pass 2: the IV influence terms ψ_i = (d_i - d̄) u_i, u_i = (y_i - ȳ) - b (x_i - x̄).
	nf := float64(n)
	dbar := float64(cnt[1]) / nf
	xbar := (sum[0][1] + sum[1][1]) / nf
	ybar := (sum[0][2] + sum[1][2]) / nf
	den := float64(cnt[0]) * float64(cnt[1]) / nf * dx // Σ (d - d̄)(x - x̄)
	if n <= k {
		return g
	}
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
		s2 := uu / float64(n-k)
		sdd := float64(cnt[0]) * float64(cnt[1]) / nf // Σ (d - d̄)²
		vr = s2 * sdd / (den * den)
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
			if dim.G < 2 || n <= kg {
				return g
			}
			c := float64(dim.G) / float64(dim.G-1) * float64(n-1) / float64(n-kg)
			if w == 2 {
				c = -c
			}
			vr += c * s / (den * den)
		}
	}
	if vr >= 0 {
		g.StdError = Num(math.Sqrt(vr))
	}
	return g
}

// finishGrouped adds the estimate beside and the sentence.
func finishGrouped(g *Grouped, yName, xName string, dg *Diagnostics) {
	g.Estimate = dg.Estimate
	if !g.Available {
		g.Meaning = g.Reason
		return
	}
	split := fmt.Sprintf("above its median %s", fmtG(float64(g.Cut)))
	below := "at or below it"
	if g.Split == "two values" {
		split = fmt.Sprintf("at its higher value %s", fmtG(float64(g.High.Shifter)))
		below = fmt.Sprintf("at %s", fmtG(float64(g.Cut)))
	}
	where := ""
	if g.Version == "within" {
		where = " (within the fixed effects)"
	}
	dx := float64(g.High.Endogenous - g.Low.Endogenous)
	dy := float64(g.High.Outcome - g.Low.Outcome)
	g.Meaning = fmt.Sprintf("Rows with %s %s%s have mean %s %s by %s and mean %s %s by %s than rows %s: the slope between the two points is %s (s.e. %s), beside the %s estimate %s.",
		g.Shifter, split, where, xName, updown(dx), fmtG(math.Abs(dx)), yName, updown(dy), fmtG(math.Abs(dy)), below,
		fmtG(float64(g.Slope)), fmtG(float64(g.StdError)), dg.Estimator, fmtG(float64(g.Estimate)))
}

func updown(d float64) string {
	if d < 0 {
		return "lower"
	}
	return "higher"
}

// median returns the upper median of x (the element of rank ⌊n/2⌋) by
// selection on a copy, in expected linear time.
func median(x []float64) float64 {
	a := append([]float64(nil), x...)
	k := len(a) / 2
	lo, hi := 0, len(a)-1
	for lo < hi {
		// Median-of-three pivot.
		mid := lo + (hi-lo)/2
		if a[mid] < a[lo] {
			a[mid], a[lo] = a[lo], a[mid]
		}
		if a[hi] < a[lo] {
			a[hi], a[lo] = a[lo], a[hi]
		}
		if a[hi] < a[mid] {
			a[hi], a[mid] = a[mid], a[hi]
		}
		p := a[mid]
		i, j := lo, hi
		for i <= j {
			for a[i] < p {
				i++
			}
			for a[j] > p {
				j--
			}
			if i <= j {
				a[i], a[j] = a[j], a[i]
				i++
				j--
			}
		}
		switch {
		case k <= j:
			hi = j
		case k >= i:
			lo = i
		default:
			return a[k]
		}
	}
	return a[k]
}
