package supplyshifters

import (
	"fmt"
	"math"
	"slices"
	"sync"

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
// when the design absorbs fixed effects, within. The columns are read in
// chunks of rows, so a raw column the design does not hold (see
// demand.BuildLean) is recomputed a chunk at a time, and every shifter of
// a version shares each pass over the rows. The two versions are computed
// side by side, each by one goroutine, so the numbers do not depend on
// the number of cores.
func groupedAll(d *demand.Design, md ivcore.Model, vk ivcore.VcovKind, dg *Diagnostics) []Grouped {
	y, x := md.Y, md.Endog[0]
	var dims []ivcore.ClusterDim
	if vk == ivcore.Cluster {
		for _, cb := range d.Moments.Clusters {
			dims = append(dims, cb.Dim)
		}
	}
	raw := func(j int) *column {
		return newColumn(func(buf []float64, lo int) []float64 { return d.RawRows(buf, j, lo) })
	}
	within := func(j int) *column {
		col := d.Cols[j]
		return newColumn(func(buf []float64, lo int) []float64 { return col[lo : lo+len(buf)] })
	}
	var gw []Grouped
	var wg sync.WaitGroup
	if d.Absorption != nil {
		zs := make([]*column, len(md.Instr))
		for i, s := range md.Instr {
			zs[i] = within(s)
		}
		wg.Go(func() {
			gw = groupedSet(within(y), within(x), zs, d.N, vk, dims, 2+d.Absorption.DoF, true, make([]int, 1<<radixBits))
		})
	}
	zs := make([]*column, len(md.Instr))
	for i, s := range md.Instr {
		zs[i] = raw(s)
	}
	gr := groupedSet(raw(y), raw(x), zs, d.N, vk, dims, 2, false, make([]int, 1<<radixBits))
	wg.Wait()
	var out []Grouped
	for i, s := range md.Instr {
		g := gr[i]
		g.Shifter, g.Version = d.Names[s], "raw"
		finishGrouped(&g, d.Names[y], d.Names[x], dg)
		out = append(out, g)
		if gw != nil {
			g := gw[i]
			g.Shifter, g.Version = d.Names[s], "within"
			finishGrouped(&g, d.Names[y], d.Names[x], dg)
			out = append(out, g)
		}
	}
	return out
}

// groupChunk is the number of rows the grouped estimator reads at a time.
const groupChunk = 1 << 13

// column is a column of n rows read a chunk at a time: rows returns the
// values of rows lo, …, lo+len(buf)-1, computed into buf or as a view of
// the column.
type column struct {
	rows func(buf []float64, lo int) []float64
	buf  []float64
}

func newColumn(rows func(buf []float64, lo int) []float64) *column {
	return &column{rows: rows, buf: make([]float64, groupChunk)}
}

// chunk returns the values of rows [lo, hi), hi-lo ≤ groupChunk.
func (c *column) chunk(lo, hi int) []float64 { return c.rows(c.buf[:hi-lo], lo) }

// splitRule says which rows of a shifter z form the high group, given the
// cut c.
type splitRule int

const (
	splitAbove     splitRule = iota // z > c (c the median)
	splitAtOrAbove                  // z ≥ c (c the median and the largest value)
	splitNotAt                      // z ≠ c (c the lower of two values)
)

func (r splitRule) high(v, c float64) bool {
	switch r {
	case splitAbove:
		return v > c
	case splitAtOrAbove:
		return v >= c
	}
	return v != c
}

// groupState is one shifter's work in groupedSet.
type groupState struct {
	rule splitRule
	cut  float64
	on   bool // still being computed
	sum  [2][3]float64
	cnt  [2]int
	// Pass 2: the slope and means, and the sums of the influence terms.
	b, dx, xbar, ybar, ddLow, ddHigh float64
	acc                              float64
	clus                             [][]float64
}

// groupedSet splits the rows by each shifter of zs in turn and computes
// the grouped estimator of y on x with standard error of kind vk; k counts
// the parameters for the small-sample factors, and absorbed says whether k
// includes absorbed fixed-effect levels (those nested in a cluster are
// then left out of it). Each shifter's sums run over the rows in order,
// as for that shifter alone; the shifters only share the reading of y and
// x. hist is scratch for upperMedian.
func groupedSet(y, x *column, zs []*column, n int, vk ivcore.VcovKind, dims []ivcore.ClusterDim, k int, absorbed bool, hist []int) []Grouped {
	gs := make([]Grouped, len(zs))
	st := make([]groupState, len(zs))
	for s, z := range zs {
		g := &gs[s]
		*g = Grouped{Split: "median", Slope: Num(math.NaN()), StdError: Num(math.NaN()), Cut: Num(math.NaN())}
		// Binary shifter?
		v0, v1, distinct := z.chunk(0, 1)[0], math.NaN(), 1
	scan:
		for lo := 0; lo < n; lo += groupChunk {
			for _, v := range z.chunk(lo, min(lo+groupChunk, n)) {
				if v == v0 || v == v1 {
					continue
				}
				if distinct == 1 {
					v1, distinct = v, 2
					continue
				}
				distinct = 3
				break scan
			}
		}
		switch distinct {
		case 1:
			g.Reason = "The shifter takes a single value in these rows, so it does not split them into groups."
			continue
		case 2:
			g.Split = "two values"
			st[s].rule, st[s].cut = splitNotAt, math.Min(v0, v1)
		default:
			st[s].rule, st[s].cut = splitAbove, upperMedian(z, n, hist)
		}
		g.Cut = Num(st[s].cut)
		st[s].on = true
	}

	// Pass 1: group means. When no row lies above the median (it is the
	// largest value), the rows at or above it are the high group.
	groupSums(y, x, zs, n, st)
	redo := false
	for s := range st {
		if c := &st[s]; c.on && c.rule == splitAbove && c.cnt[1] == 0 {
			c.rule = splitAtOrAbove
			c.sum, c.cnt = [2][3]float64{}, [2]int{}
			redo = true
		}
	}
	if redo {
		on := make([]bool, len(st))
		for s := range st {
			on[s] = st[s].on
			st[s].on = on[s] && st[s].rule == splitAtOrAbove
		}
		groupSums(y, x, zs, n, st)
		for s := range st {
			st[s].on = on[s]
		}
	}

	nf := float64(n)
	for s := range st {
		c, g := &st[s], &gs[s]
		if !c.on {
			continue
		}
		c.on = false
		if c.cnt[0] == 0 || c.cnt[1] == 0 {
			g.Reason = "All rows fall in one group of the shifter."
			continue
		}
		mean := func(h, j int) float64 { return c.sum[h][j] / float64(c.cnt[h]) }
		g.Low = GroupMeans{N: c.cnt[0], Shifter: Num(mean(0, 0)), Endogenous: Num(mean(0, 1)), Outcome: Num(mean(0, 2))}
		g.High = GroupMeans{N: c.cnt[1], Shifter: Num(mean(1, 0)), Endogenous: Num(mean(1, 1)), Outcome: Num(mean(1, 2))}
		dx := mean(1, 1) - mean(0, 1)
		dy := mean(1, 2) - mean(0, 2)
		if dx == 0 {
			g.Reason = "The two groups have the same mean of the endogenous regressor: the slope is undefined (the shifter does not move it)."
			continue
		}
		c.b, c.dx = dy/dx, dx
		g.Slope, g.Available = Num(c.b), true
		dbar := float64(c.cnt[1]) / nf
		c.xbar = (c.sum[0][1] + c.sum[1][1]) / nf
		c.ybar = (c.sum[0][2] + c.sum[1][2]) / nf
		c.ddLow, c.ddHigh = -dbar, 1-dbar
		if n <= k {
			continue
		}
		if vk == ivcore.Cluster {
			ok := true
			for _, dim := range dims {
				kg := k
				if absorbed {
					kg -= dim.NestedDoF
				}
				ok = ok && dim.G >= 2 && n > kg
			}
			if !ok {
				continue
			}
			c.clus = make([][]float64, len(dims))
			for w, dim := range dims {
				c.clus[w] = make([]float64, dim.G)
			}
		}
		c.on = true
	}

	// Pass 2: the IV influence terms ψ_i = (d_i - d̄) u_i, u_i = (y_i - ȳ) - b (x_i - x̄).
	influence(y, x, zs, n, vk, dims, st)
	for s := range st {
		c, g := &st[s], &gs[s]
		if !c.on {
			continue
		}
		den := float64(c.cnt[0]) * float64(c.cnt[1]) / nf * c.dx // Σ (d - d̄)(x - x̄)
		var vr float64
		switch vk {
		case ivcore.IID:
			s2 := c.acc / float64(n-k)
			sdd := float64(c.cnt[0]) * float64(c.cnt[1]) / nf // Σ (d - d̄)²
			vr = s2 * sdd / (den * den)
		case ivcore.HC1:
			vr = nf / float64(n-k) * c.acc / (den * den)
		case ivcore.Cluster:
			for w, dim := range dims {
				s := 0.0
				for _, v := range c.clus[w] {
					s += v * v
				}
				kg := k
				if absorbed {
					kg -= dim.NestedDoF
				}
				cf := float64(dim.G) / float64(dim.G-1) * float64(n-1) / float64(n-kg)
				if w == 2 {
					cf = -cf
				}
				vr += cf * s / (den * den)
			}
		}
		if vr >= 0 {
			g.StdError = Num(math.Sqrt(vr))
		}
	}
	return gs
}

// groupSums adds, for each shifter still on, the count and the sums of the
// shifter, x and y of each group over the rows in order.
func groupSums(y, x *column, zs []*column, n int, st []groupState) {
	for lo := 0; lo < n; lo += groupChunk {
		hi := min(lo+groupChunk, n)
		yc, xc := y.chunk(lo, hi), x.chunk(lo, hi)
		for s, z := range zs {
			c := &st[s]
			if !c.on {
				continue
			}
			zc := z.chunk(lo, hi)
			for i, v := range zc {
				h := 0
				if c.rule.high(v, c.cut) {
					h = 1
				}
				c.cnt[h]++
				c.sum[h][0] += v
				c.sum[h][1] += xc[i]
				c.sum[h][2] += yc[i]
			}
		}
	}
}

// influence sums, for each shifter still on, the squared residuals (IID),
// the squared influence terms (HC1) or the influence terms of each cluster
// (Cluster) over the rows in order.
func influence(y, x *column, zs []*column, n int, vk ivcore.VcovKind, dims []ivcore.ClusterDim, st []groupState) {
	for lo := 0; lo < n; lo += groupChunk {
		hi := min(lo+groupChunk, n)
		yc, xc := y.chunk(lo, hi), x.chunk(lo, hi)
		for s, z := range zs {
			c := &st[s]
			if !c.on {
				continue
			}
			if vk == ivcore.IID {
				for i := range yc {
					u := (yc[i] - c.ybar) - c.b*(xc[i]-c.xbar)
					c.acc += u * u
				}
				continue
			}
			if vk != ivcore.HC1 && vk != ivcore.Cluster {
				continue
			}
			zc := z.chunk(lo, hi)
			for i, v := range zc {
				dd := c.ddLow
				if c.rule.high(v, c.cut) {
					dd = c.ddHigh
				}
				psi := dd * ((yc[i] - c.ybar) - c.b*(xc[i]-c.xbar))
				if vk == ivcore.HC1 {
					c.acc += psi * psi
					continue
				}
				for w, dim := range dims {
					c.clus[w][dim.Codes[lo+i]] += psi
				}
			}
		}
	}
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
	if se := float64(g.StdError); se > 0 && math.Abs(float64(g.Slope-g.Estimate)) > 3*se {
		g.Meaning += " The two differ by more than three standard errors: the two-point picture leaves the controls in"
		if g.Version == "raw" {
			g.Meaning += " and the fixed effects"
		}
		g.Meaning += ", and any of them that moves with the shifter (season, temperature, promotions) shifts both points, so read it as an illustration, not as a check on the estimate."
	}
}

func updown(d float64) string {
	if d < 0 {
		return "lower"
	}
	return "higher"
}

// radixBits is the number of key bits upperMedian resolves per pass, and
// radixFew the number of candidates it selects among directly.
const (
	radixBits = 16
	radixFew  = 1 << 12
)

// upperMedian returns the upper median of the n values of z: the element
// of rank ⌊n/2⌋ (counting from 0) in increasing order, the value a sort
// would leave at index n/2. It selects by radix, without copying z: each
// value maps to a 64-bit key in the same order (orderKey), and each pass
// over z counts the keys that share the bits found so far in 2^radixBits
// bins of their next bits, which fixes those bits of the median's key;
// once at most radixFew keys remain they are sorted directly. That is at
// most 64/radixBits passes, in time linear in n. hist is scratch of
// 2^radixBits counts. A median of zero is returned as +0.
func upperMedian(z *column, n int, hist []int) float64 {
	k := n / 2
	var prefix, mask uint64
	for shift := 64 - radixBits; shift >= 0; shift -= radixBits {
		clear(hist)
		for lo := 0; lo < n; lo += groupChunk {
			for _, v := range z.chunk(lo, min(lo+groupChunk, n)) {
				if key := orderKey(v); key&mask == prefix {
					hist[key>>shift&(1<<radixBits-1)]++
				}
			}
		}
		b := 0
		for ; k >= hist[b]; b++ {
			k -= hist[b]
		}
		prefix |= uint64(b) << shift
		mask |= (1<<radixBits - 1) << shift
		if c := hist[b]; shift > 0 && c <= radixFew {
			keys := make([]uint64, 0, c)
			for lo := 0; lo < n; lo += groupChunk {
				for _, v := range z.chunk(lo, min(lo+groupChunk, n)) {
					if key := orderKey(v); key&mask == prefix {
						keys = append(keys, key)
					}
				}
			}
			slices.Sort(keys)
			return fromKey(keys[k])
		}
	}
	return fromKey(prefix)
}

// orderKey maps v to a key whose unsigned order is the order of the
// values: the sign bit flipped for positive values, every bit for
// negative ones. -0 and +0, which compare equal, share the key of +0.
func orderKey(v float64) uint64 {
	b := math.Float64bits(v)
	if b == 1<<63 {
		b = 0
	}
	if b>>63 != 0 {
		return ^b
	}
	return b | 1<<63
}

// fromKey is the value of key k (the inverse of orderKey).
func fromKey(k uint64) float64 {
	if k>>63 != 0 {
		return math.Float64frombits(k &^ (1 << 63))
	}
	return math.Float64frombits(^k)
}
